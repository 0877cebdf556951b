"""`harken demo` (what `make demo` runs): generate the demo scenario, ingest it with the worker, build the
reference models, and summarise what the store holds against the generator's ground truth: flags per condition,
rig and lot, the stored lot, rig, cell and unit signals with their suggested causes, the validation report
(`harken validate` on the ground truth), and a PLS1 calibration of the carrier size from the release sound."""

from __future__ import annotations

import json
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from ..io import read_sidecar
from ..triage import subject_words
from ..validation import report_lines, validate

#: The demo's people: a technician, a method owner and an admin (all invented).
DEMO_USERS = (("demo-tech", "technician", "Demo Technician"), ("demo-owner", "method_owner", "Demo Method Owner"),
              ("demo-admin", "admin", "Demo Admin"))

__all__ = ["register", "run", "run_demo", "signal_lines", "carrier_calibration"]


def register(sub) -> None:
    p = sub.add_parser("demo", help="generate the demo scenario, fit the reference, analyse and summarise")
    p.add_argument("--out", default="demo_out", metavar="DIR")
    p.add_argument("--scenario", default="default")
    p.add_argument("--seed", type=int, default=None)
    p.add_argument("--jobs", type=int, default=None)
    p.set_defaults(func=run)


def run(args) -> int:
    run_demo(args.out, scenario=args.scenario, seed=args.seed, jobs=args.jobs)
    return 0


def _generated_already(inbox: Path, key: dict) -> bool:
    stamp = inbox / ".harken-demo.json"
    return stamp.exists() and (inbox / "ground_truth.csv").exists() and json.loads(stamp.read_text()) == key


def run_demo(out, *, scenario: str = "default", seed: int | None = None, jobs: int | None = None, echo=print):
    """Run the whole demo into the folder ``out``; returns the per-actuation results table.

    Generate the scenario into ``out/inbox`` (reused when already there), ingest it with the worker into the
    store ``out/harken.db`` (archive and quarantine beside it), build the reference models from the scenario's
    reference lots (which scores every stored actuation), and summarise what the store holds against the
    generator's ground truth.
    """
    from ..demo import generate
    from ..references import build_reference
    from ..store import Store
    from ..worker import ingest_paths

    out = Path(out)
    inbox = out / "inbox"
    key = {"scenario": scenario, "seed": seed}
    t0 = time.perf_counter()
    if _generated_already(inbox, key):
        echo(f"using the recordings already generated in {inbox}")
    else:
        if inbox.exists() and any(inbox.iterdir()):
            if not (inbox / "ground_truth.csv").exists():
                raise AnalysisError(f"{inbox}: exists and was not made by the demo; choose another --out")
            shutil.rmtree(inbox)  # an earlier demo of another scenario or seed: make it anew
        echo(f"generating the {scenario!r} demo scenario into {inbox} ...")
        summary = generate(inbox, scenario=scenario, seed=seed, jobs=jobs)
        (inbox / ".harken-demo.json").write_text(json.dumps(key))
        echo(f"  {summary.describe()} in {time.perf_counter() - t0:.1f} s")

    truth = pd.read_csv(inbox / "ground_truth.csv")
    truth["reference"] = truth["reference"].astype(str).str.lower().isin(["true", "1"])
    if "cause" not in truth:  # recordings generated before the truth table named causes
        from ..demo.generator import FAULT_CAUSES

        truth["cause"] = truth["condition"].map(FAULT_CAUSES).fillna("")
    truth["cause"] = truth["cause"].fillna("")
    profiles = sorted(set(read_sidecar(inbox / f).profile for f in truth["file"].head(20)))
    if len(profiles) != 1:
        raise AnalysisError(f"{inbox}: the demo expects one device profile, found {profiles}")

    # A fresh store each run, so the summary is this run's.
    db = out / "harken.db"
    for leftover in (db, out / "harken.db-wal", out / "harken.db-shm", out / "harken-archive",
                     out / "harken-quarantine"):
        if leftover.is_dir():
            shutil.rmtree(leftover)
        elif leftover.exists():
            leftover.unlink()
    store_url = f"sqlite:///{db.resolve()}"
    t1 = time.perf_counter()
    ingested = ingest_paths([inbox], store_url, jobs=jobs, progress=False)
    echo(f"ingested {ingested.analysed} recordings into {db} ({ingested.quarantined} quarantined) in "
         f"{time.perf_counter() - t1:.1f} s")

    ref_lots = sorted(set(truth.loc[truth["reference"], "lot"]))
    with Store.open(store_url) as store:
        for info in build_reference(store, profiles[0], None, ref_lots, created_by="harken demo"):
            echo(f"reference model {info.event}: version {info.version}, {info.n_components} components, "
                 f"from lots {', '.join(ref_lots)}")
        exported = store.export_actuations()
        levels = store.band_levels(profiles[0], "dose_release")
        signals = store.signals(profile=profiles[0])
    report = validate(truth, exported, signals, reference_lots=ref_lots, where=str(inbox / "ground_truth.csv"))

    # The store keeps each file's name relative to the folder it was ingested from: the ground truth's `file`.
    table = exported.merge(truth[["file", "condition", "reference"]], on="file", how="inner", validate="one_to_one")
    if len(table) != len(truth):
        raise AnalysisError(f"{db}: the store holds {len(table)} of the scenario's {len(truth)} recordings")
    calibration = carrier_calibration(levels, truth, event="dose_release")
    if calibration is not None:
        table = table.merge(calibration.pop("predictions"), on="file", how="left")
    table.to_csv(out / "results.csv", index=False)

    echo("")
    echo("detection by condition (ground truth from the generator; reference lots excluded):")
    monitored = table[~table["reference"]]
    by_cond = monitored.groupby("condition")["flagged"].agg(["count", "sum"])
    by_cond["rate"] = by_cond["sum"] / by_cond["count"]
    for cond, r in by_cond.iterrows():
        label = "false alarms" if cond == "normal" else "flagged"
        echo(f"  {cond:<16} {int(r['sum']):>5} of {int(r['count']):>5} {label} ({100 * r['rate']:.1f} %)")
    ref = table[table["reference"]]
    echo(f"  {'(reference lots)':<16} {int(ref['flagged'].sum()):>5} of {len(ref):>5} flagged "
         f"({100 * ref['flagged'].mean():.1f} %; in-sample)")
    if ingested.quarantined:
        echo(f"  quarantined: {ingested.quarantined} (harken export quarantine --store {store_url})")
    echo("")
    echo("flagged actuations per rig (rows) and lot (columns), from the store:")
    pivot = table.pivot_table(index="rig", columns="lot", values="flagged", aggfunc="sum", fill_value=0)
    echo(pivot.astype(int).to_string())
    echo("")
    for line in signal_lines(signals):
        echo(line)
    echo("")
    echo("validation against the ground truth (harken validate --truth ground_truth.csv):")
    for line in report_lines(report):
        echo("  " + line)
    if calibration is not None:
        echo("")
        echo(f"carrier size from the dose-release sound (PLS1 on the event's mean band levels, "
             f"{calibration['n_components']} components, leave-one-lot-out): RMSECV "
             f"{calibration['rmsecv']:.2f} µm over lots of {calibration['y_min']:.1f}–{calibration['y_max']:.1f} µm")
        for lot, pred, true in calibration["by_lot"]:
            echo(f"  lot {lot}: predicted {pred:6.2f} µm, measured {true:6.2f} µm")
    echo("")
    # People for the dashboard's sign-in, made after the demo's own build (which is recorded as the demo's);
    # their passwords are random and shown only here.
    import secrets

    from ..store.users import add_user

    made = []
    with Store.open(store_url) as store, store.write() as conn:
        for name, role, full in DEMO_USERS:
            password = secrets.token_urlsafe(12)
            add_user(conn, name, role=role, full_name=full, password=password, by="harken demo")
            made.append((name, role, password))
    echo("sign-in for the dashboard (random passwords, shown once; `harken user set-password` changes them):")
    for name, role, password in made:
        echo(f"  {name:<12} {role:<13} {password}")
    echo("")
    echo(f"store: {store_url}; results per actuation: {out / 'results.csv'}")
    echo(f"demo finished in {time.perf_counter() - t0:.1f} s")
    return table


def signal_lines(signals: pd.DataFrame) -> list[str]:
    """The demo's words for the stored signals above the actuation level: lots and rigs in full, cells and units
    counted by cause (every one of them is in `harken export signals`)."""
    wide = signals[signals["level"].isin(["lot", "rig"])]
    lines = ["signals in the store (lots and rigs; suggested cause and evidence):"]
    for r in wide.itertuples(index=False):
        where = f"lot {r.lot}" if r.level == "lot" else f"rig {r.rig}"
        lines.append(f"  {where}, {subject_words(r.event)} -> {r.cause}: {r.evidence}")
    if not len(wide):
        lines.append("  no lot or rig signals")
    for level in ("cell", "unit"):
        part = signals[signals["level"] == level]
        counts = part["cause"].value_counts()
        lines.append(f"  {level} signals: {len(part)}" + (" (" + ", ".join(f"{c} {n}" for c, n in counts.items())
                                                        + ")" if len(part) else ""))
    return lines


def carrier_calibration(levels: pd.DataFrame, truth: pd.DataFrame, *, event: str, max_components: int = 6):
    """PLS1 from an event's mean band levels (``levels``: the store's band_levels table) to the carrier
    particle size of each actuation's lot.

    In a lab the size would come from the lot's certificate (laser diffraction); here from the generator's ground
    truth (``carrier_d50_um``). Components are chosen by the leave-one-lot-out RMSE (folds by whole lots, so no
    lot predicts itself). Returns None when the column or the levels are missing; else a dict with the held-out
    ``predictions`` (a table: file, <event>.predicted_carrier_d50_um), ``rmsecv``, ``n_components`` and
    ``by_lot`` (lot, mean held-out prediction, measured size).
    """
    from ..monitor import PLS1, cross_validate

    if "carrier_d50_um" not in truth or levels is None or not len(levels):
        return None
    names = truth.set_index("file")
    rows = levels[levels["levels"].notna() & levels["file"].isin(names.index)]
    if len(rows) < 10 or rows["lot"].nunique() < 3:
        return None
    x = np.stack([np.asarray(v, dtype=float).mean(axis=0) for v in rows["levels"]])
    y = names.loc[rows["file"], "carrier_d50_um"].to_numpy(dtype=float)
    lots = rows["lot"].to_numpy()
    best = None
    for a in range(1, min(max_components, x.shape[1] - 1) + 1):
        cv = cross_validate(PLS1(n_components=a), x, y, groups=lots)
        if best is None or cv.rmse < best[1].rmse * 0.98:  # a component must earn 2 % to be kept
            best = (a, cv)
    a, cv = best
    predictions = pd.DataFrame({"file": rows["file"].to_numpy(), f"{event}.predicted_carrier_d50_um": cv.predictions})
    frame = pd.DataFrame({"lot": lots, "pred": cv.predictions, "true": y})
    by_lot = [(lot, float(g["pred"].mean()), float(g["true"].mean())) for lot, g in frame.groupby("lot", sort=False)]
    return {"predictions": predictions, "rmsecv": cv.rmse, "n_components": a, "y_min": float(y.min()),
            "y_max": float(y.max()), "by_lot": by_lot}
