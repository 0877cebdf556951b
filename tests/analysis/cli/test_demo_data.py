"""`harken demo-data generate` makes a tree that `harken analyse` reads file by file (issue: demo scenario)."""

from __future__ import annotations

import csv
import json

from analysis.cli import main


def test_generate_then_analyse_every_file(tmp_path, capsys):
    out = tmp_path / "inbox"
    assert main(["demo-data", "generate", "--out", str(out), "--scenario", "small", "--jobs", "2"]) == 0
    printed = capsys.readouterr().out
    assert "wrote 120 recordings of scenario 'small'" in printed and "generated in" in printed
    with open(out / "ground_truth.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(list(out.rglob("*.flac"))) == 120
    found = {}
    for row in rows:
        assert main(["analyse", str(out / row["file"]), "--json"]) == 0
        result = json.loads(capsys.readouterr().out)
        assert result["recording"]["metadata"]["lot"] == row["lot"]
        found[row["condition"]] = found.get(row["condition"], 0) + all(e["found"] for e in result["events"])
    # every event of every recording is found, faults included (a missing marker falls back to onsets)
    assert sum(found.values()) == 120


def test_generate_into_a_used_folder_is_one_clear_line(tmp_path, capsys):
    (tmp_path / "keep.txt").write_text("mine")
    assert main(["demo-data", "generate", "--out", str(tmp_path), "--scenario", "small"]) == 1
    err = capsys.readouterr().err
    assert err.strip() == f"harken: {tmp_path}: the output folder must be new or empty (remove it or choose another)"
