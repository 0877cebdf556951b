"""Fill a results store from a folder of recordings for the tests: the worker's ``ingest_paths``, then the
reference models from the scenario's reference lots (analysis.references.build_reference)."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd


def fill_store(inbox: Path, store_url: str, *, jobs: int = 1) -> dict:
    from analysis.references import build_reference
    from analysis.store import Store
    from analysis.worker import ingest_paths

    inbox = Path(inbox)
    truth = pd.read_csv(inbox / "ground_truth.csv")
    files = [inbox / f for f in truth["file"]]
    ref_lots = sorted(set(truth.loc[truth["reference"].astype(str).str.lower().isin(["true", "1"]), "lot"]))
    profile = json.loads(files[0].with_suffix(".json").read_text())["profile"]
    ingest_paths(files, store_url, jobs=jobs)
    with Store.open(store_url) as store:
        build_reference(store, profile, None, ref_lots, created_by="test-fixture")
    return {"profile": profile, "reference_lots": ref_lots, "truth": truth}
