"""Flag wording."""

from __future__ import annotations

from dashboard.words import describe_flag


def test_flag_words_name_event_statistic_and_amount():
    text = describe_flag("spe", "dose_release", "SPE 5.2× its limit at slice 7 (0.08 s)", 17.0, 3.3)
    assert text.startswith("dose release — SPE: SPE 5.2×")
    assert "Quality check 'dropout' failed" in describe_flag("qc:dropout", None, "zeros for 45 ms")
    assert "(value 4.2, limit 2)" in describe_flag("trajectory", "metering_click", "outside", 4.2, 2.0)
