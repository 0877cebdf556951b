"""What the server answers to crafted requests, and how names from the store are made safe to draw: the security
headers on every response, 404 for ids the store has not, escaped and shortened names, and callbacks that answer
with a message when they fail."""

from __future__ import annotations

import logging

import pytest
from dash.exceptions import PreventUpdate

from analysis.errors import ParameterError
from dashboard.labels import HOVER_CHARS, LABEL_CHARS, full, label, plain, short
from dashboard.safety import MAX_ID, guarded, record_id
from dashboard.views.common import OPTION_VALUE_CHARS, name_option, name_options

LINK = '<a href="https://evil.example/">R9</a>'


def test_names_lose_their_html_meaning_and_keep_their_characters():
    import html

    assert "<" not in plain(LINK) and ">" not in plain(LINK)
    assert html.unescape(plain(LINK)) == LINK  # the standard library's unescape gives the name back, whole
    assert plain("a & b") == "a &amp; b"


def test_long_names_are_shortened_for_labels_and_capped_for_hover():
    name = "R" * 100_000
    assert len(short(name)) == LABEL_CHARS and short(name).endswith("…")
    assert short("LS-R1") == "LS-R1"
    assert len(label(name)) == LABEL_CHARS
    hover = full(name)
    assert len(hover) < HOVER_CHARS + 40 and "100,000 characters" in hover
    assert full("LS-R1") == "LS-R1"
    assert "<" not in label(LINK * 3) and "<" not in full(LINK * 10)


def test_dropdown_options_leave_out_values_the_browser_cannot_hold():
    assert name_option("LS-R1") == {"label": "LS-R1", "value": "LS-R1"}
    assert name_option("R" * (OPTION_VALUE_CHARS + 1)) is None
    kept = name_options(["a", "R" * 100_000, ("b label", "b")])
    assert kept == [{"label": "a", "value": "a"}, {"label": "b label", "value": "b"}]
    assert len(name_option("x" * 500)["label"]) == 2 * LABEL_CHARS  # shown shortened, chosen by its whole name


@pytest.mark.parametrize("value", ["12", 12, " 7 ", str(MAX_ID)])
def test_record_ids_in_range_are_taken(value):
    assert record_id(value) == int(str(value).strip())


@pytest.mark.parametrize("value", [None, "", "abc", "-1", "0", "1e9", "1.5", True, str(MAX_ID + 1), "9" * 23,
                                   "<b>1</b>"])
def test_record_ids_out_of_range_or_not_numbers_are_refused_with_the_value(value):
    with pytest.raises(ParameterError, match="whole number from 1 to"):
        record_id(value)


def test_a_guarded_callback_answers_with_a_message_of_each_output_kind(caplog):
    @guarded("figure", "children", "text", "options")
    def refuses(x):
        raise ParameterError(f"statistic must be one of a, b; got {x!r}")

    fig, children, text, options = refuses("nope")
    assert "statistic must be one of" in fig.layout.annotations[0].text
    assert "got 'nope'" in children.children and children.className == "problem"
    assert text.startswith("This cannot be shown") and options == []
    assert not caplog.records  # a refused value is the user's, not the server's problem: nothing logged


def test_an_internal_failure_is_logged_and_its_details_kept_from_the_page(caplog):
    @guarded("children")
    def breaks():
        return {}["secret /srv/path"]

    with caplog.at_level(logging.ERROR, logger="harken.dashboard"):
        out = breaks()
    assert "internal problem (KeyError)" in out.children and "/srv/path" not in out.children
    assert caplog.records and caplog.records[0].exc_info is not None  # the traceback is in the server's log


def test_prevent_update_still_means_no_change():
    @guarded("figure")
    def nothing():
        raise PreventUpdate

    with pytest.raises(PreventUpdate):
        nothing()


def test_every_response_carries_the_security_headers(app):
    client = app.server.test_client()
    for path in ("/", "/health", "/lots", "/assets/harken.css", "/audio/999999.wav", "/actuation/999999"):
        h = client.get(path).headers
        policy = h["Content-Security-Policy"]
        assert "frame-ancestors 'none'" in policy and "object-src 'none'" in policy, path
        assert "script-src 'self' 'unsafe-eval' 'sha256-" in policy  # Dash's inline scripts by hash, no 'unsafe-inline'
        assert "'unsafe-inline'" not in policy.split("script-src", 1)[1].split(";", 1)[0]
        assert h["X-Content-Type-Options"] == "nosniff" and h["Referrer-Policy"] == "same-origin", path
        assert h["X-Frame-Options"] == "DENY", path


def test_the_inline_script_hashes_are_those_of_the_page_served(app):
    import base64
    import hashlib
    import re

    client = app.server.test_client()
    page = client.get("/").get_data(as_text=True)
    policy = client.get("/").headers["Content-Security-Policy"]
    page = re.sub(r"<!--.*?-->", "", page, flags=re.S)  # the old-browser notice sits in a comment: never run
    inline = [m.group(2) for m in re.finditer(r"<script(?![^>]*\bsrc=)([^>]*)>(.*?)</script>", page, flags=re.S)
              if "application/json" not in m.group(1)]  # data, not script
    assert len(inline) >= 2  # Dash's clientside callbacks and the renderer's start
    for body in inline:  # CSP level 3: the base64 SHA-256 of the script's text (hashlib as the outside check)
        digest = base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()
        assert f"'sha256-{digest}'" in policy


@pytest.mark.parametrize("path", ["/actuation/999999", "/actuation/" + "9" * 23, "/audio/999999.wav",
                                  "/audio/" + "9" * 23 + ".wav"])
def test_ids_the_store_has_not_answer_404_without_server_paths(app, path):
    r = app.server.test_client().get(path)
    assert r.status_code == 404
    assert "/tmp" not in r.get_data(as_text=True) and "Traceback" not in r.get_data(as_text=True)


def test_a_known_actuation_page_is_served(app, ctx):
    from sqlalchemy import text

    with ctx.store.read() as conn:
        first = conn.execute(text("SELECT min(id) FROM actuations")).scalar_one()
    assert app.server.test_client().get(f"/actuation/{first}").status_code == 200


@pytest.mark.parametrize("profile,lots,events,person,words", [
    ("/etc/passwd", ["L2601"], ["dose_release"], "Ann", "chosen by its name"),
    ("demo_data/profiles/demo-dpi.toml", ["L2601"], ["dose_release"], "Ann", "chosen by its name"),
    ("../demo-dpi", ["L2601"], ["dose_release"], "Ann", "chosen by its name"),
    ({"$ne": 1}, ["L2601"], ["dose_release"], "Ann", "chosen by its name"),
    ("demo-dpi", "L2601", ["dose_release"], "Ann", "reference lots from the list"),
    ("demo-dpi", [["L2601"]], ["dose_release"], "Ann", "reference lots from the list"),
    ("demo-dpi", ["L2601"], [1], "Ann", "events from the list"),
    ("demo-dpi", ["L2601"], ["dose_release"], "A" * 201, "not a user name"),
    ("demo-dpi", ["L2601"], ["dose_release"], "Ann\x1b[31m", "not a user name"),
    ("demo-dpi", ["L2601"], ["dose_release"], ["Ann"], "Sign in as a method owner first"),
    ("demo-dpi", ["L2601"], ["dose_release"], None, "Sign in as a method owner first"),
])
def test_a_reference_build_request_takes_a_profile_by_name_only(profile, lots, events, person, words):
    from dashboard.views.references import check_build

    assert words in check_build(profile, lots, events, person)


def test_a_well_formed_reference_build_request_is_let_through():
    from dashboard.views.references import check_build

    assert check_build("demo-dpi", ["L2601", "L2602"], ["dose_release"], "Ann Example") is None
