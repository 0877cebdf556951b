"""Export: one row per actuation with identifiers from the sidecars, QC, timings, statistics, flags, verdicts;
the quarantine list; the flag summary; and the same results from SQLite and PostgreSQL."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from analysis.store import Store
from analysis.worker import run_worker
from tests.analysis.conftest import run_cli
from tests.conftest import sidecar_dict

IDENTIFIERS = ["actuation_id", "file", "site", "rig", "lot", "unit", "actuation", "recorded_at"]


@pytest.fixture(scope="module")
def truth(small_scenario):
    return pd.read_csv(small_scenario / "ground_truth.csv", dtype={"unit": str, "lot": str})


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_export_actuations_has_one_row_per_actuation_with_the_generators_identifiers(small_store, truth, tmp_path,
                                                                                      fmt):
    url, _ = small_store
    out = tmp_path / f"acts.{fmt}"
    code, stdout, err = run_cli("export", "actuations", "--store", url, "--format", fmt, "--out", out)
    assert code == 0, err
    assert stdout.strip() == f"120 rows -> {out}"
    df = pd.read_csv(out, dtype={"unit": str, "lot": str}) if fmt == "csv" else pd.read_parquet(out)
    assert list(df.columns[:8]) == IDENTIFIERS
    assert df["actuation_id"].is_unique and len(df) == len(truth) == 120
    # The generator's ground truth names every file and its identifiers independently of the store.
    merged = truth.merge(df, on="file", suffixes=("_truth", ""), validate="one_to_one")
    assert len(merged) == 120
    for col in ("site", "rig", "lot", "unit", "actuation", "recorded_at"):
        assert (merged[col].astype(str) == merged[f"{col}_truth"].astype(str)).all(), col
    assert df["flagged"].dtype == bool
    for col in ("qc_failed", "reasons", "verdicts", "dose_release.onset_s", "dose_release.t2_max",
                "metering_click.spe_ratio", "qc.snr"):
        assert col in df.columns, col
    # A failed quality check flags the actuation with that check named in its reasons.
    failed = df[df["qc_failed"].fillna("") != ""]
    assert len(failed) > 0 and failed["flagged"].all()
    for _, row in failed.iterrows():
        for check in row["qc_failed"].split(","):
            assert f"recording failed its {check} check" in row["reasons"]
    assert (df.loc[~df["flagged"], "reasons"].fillna("") == "").all()
    assert (df.loc[df["flagged"], "reasons"].fillna("") != "").all()


def test_the_flag_summary_counts_what_the_export_flags(small_store):
    url, files = small_store
    with Store.open(url, files_dir=files) as store:
        summary = store.flag_summary()
        by_site = store.flag_summary(by=("site",))
        df = store.export_actuations()
    expect = df.groupby(["rig", "lot"]).agg(actuations=("flagged", "size"), flagged=("flagged", "sum")).reset_index()
    pd.testing.assert_frame_equal(summary[["rig", "lot", "actuations", "flagged"]], expect, check_dtype=False)
    assert summary["flagged_fraction"].between(0, 1).all()
    assert by_site["actuations"].sum() == 120 and list(by_site["site"]) == ["Lakeside", "Northfield"]


def test_export_quarantine_lists_files_and_reasons(sqlite_url, tmp_path):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    (inbox / "empty.flac").write_bytes(b"")
    (inbox / "empty.json").write_text(json.dumps(sidecar_dict()))
    run_worker(inbox, sqlite_url, once=True, jobs=1)
    code, out, _ = run_cli("export", "quarantine", "--store", sqlite_url)
    assert code == 0
    lines = out.strip().splitlines()
    assert lines[0].split() == ["file", "reason"] and lines[1].startswith("empty.flac")
    assert "file is empty (0 bytes)" in lines[1]
    out_csv = tmp_path / "q.csv"
    assert run_cli("export", "quarantine", "--store", sqlite_url, "--out", out_csv)[0] == 0
    q = pd.read_csv(out_csv)
    assert list(q["file"]) == ["empty.flac"] and q["reason"].str.contains("file is empty").all()


def test_sqlite_and_postgresql_give_identical_results(small_stores):
    """The small scenario through both backends: the same exported table (ids aside: pool order differs)."""
    frames = {}
    for backend in ("sqlite", "postgresql"):
        url, files = small_stores(backend)
        with Store.open(url, files_dir=files) as store:
            df = store.export_actuations()
            models = store.models()
        frames[backend] = df.drop(columns=["actuation_id"]).sort_values("file").reset_index(drop=True)
        frames[backend + "-models"] = models[["profile", "event", "version", "status", "n_recordings",
                                             "n_components", "t2_limit", "spe_limit"]]
    pd.testing.assert_frame_equal(frames["sqlite"], frames["postgresql"], check_exact=False, rtol=1e-12)
    pd.testing.assert_frame_equal(frames["sqlite-models"], frames["postgresql-models"], check_exact=False, rtol=1e-12)
