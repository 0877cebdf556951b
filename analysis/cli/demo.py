"""`harken demo` (what `make demo` runs): generate the demo scenario, ingest it with the worker, build the
reference models, and summarise what the store holds against the generator's ground truth: flags per condition,
rig and lot, the lot-by-lot charts with their suggested causes, the units beyond their limit, and a PLS1
calibration of the carrier size from the release sound."""

from __future__ import annotations

import json
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from ..io import read_sidecar
from ..monitor import LotChart, lot_chart
from ..triage import cell_causes

__all__ = ["register", "run", "run_demo", "lot_chart_lines", "unit_summary", "carrier_calibration"]


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
    from ..store import Filters, Store, queries
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
        event_names = list(dict.fromkeys(store.models()["event"]))
        charts = {}
        with store.read() as conn:  # the Lots view's chart: the store's lot points and the one lot-chart rule
            for event in event_names:
                points = queries.lot_points(conn, "event_spe_ratio", event, Filters(profile=profiles[0]))
                charts[event] = lot_chart(points, reference_lots=queries.reference_lots(conn, profiles[0], event),
                                          log=True, rules="we")

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
    for event in event_names:
        for line in lot_chart_lines(charts[event], event):
            echo(line)
    echo("")
    for line in unit_summary(table, event_names):
        echo(line)
    if calibration is not None:
        echo("")
        echo(f"carrier size from the dose-release sound (PLS1 on the event's mean band levels, "
             f"{calibration['n_components']} components, leave-one-lot-out): RMSECV "
             f"{calibration['rmsecv']:.2f} µm over lots of {calibration['y_min']:.1f}–{calibration['y_max']:.1f} µm")
        for lot, pred, true in calibration["by_lot"]:
            echo(f"  lot {lot}: predicted {pred:6.2f} µm, measured {true:6.2f} µm")
    echo("")
    echo(f"store: {store_url}; results per actuation: {out / 'results.csv'}")
    echo(f"demo finished in {time.perf_counter() - t0:.1f} s")
    return table


def lot_chart_lines(chart: LotChart, event: str) -> list[str]:
    """The demo's words for one event's lot-by-lot chart of the event residual and what its signals suggest.

    Each point is the mean log event residual (the residual of the event's mean spectrum over its reference
    median) of a lot's actuations on one rig: a lasting change that single actuations cannot show moves the mean
    of a lot. Limits and run rules are analysis.monitor.lot_chart's (the Lots view's); the causes are
    analysis.triage.cell_causes' (lot, then rig, then the cell's units).
    """
    pts = chart.points
    ref = pts[pts["reference"] & np.isfinite(pts["y"].astype(float))] if len(pts) else pts
    if not np.isfinite(chart.ucl) or not len(ref):
        return [f"{event}: too few reference points ({len(ref)}) for lot-by-lot limits"]
    lines = [f"lot-by-lot chart, {event} (mean log event residual per lot and rig; UCL {chart.ucl:.2f} from "
             f"{len(ref)} reference points; Western Electric rules per rig):"]
    new = pts[~pts["reference"]]
    for c in cell_causes(new):
        if c.cause == "lot":
            lines.append(f"  lot {c.lot}: signals on {len(c.cells)} of {(new['lot'] == c.lot).sum()} rigs "
                         "-> suggests the lot")
        elif c.cause == "rig":
            lines.append(f"  rig {c.rig}: signals on lots {', '.join(lot for lot, _ in c.cells)} -> suggests the rig")
        else:
            row = new[(new["lot"] == c.lot) & (new["rig"] == c.rig)].iloc[0]
            why = "beyond the limit" if row["beyond"] else f"run rule {row['rules']}"
            lines.append(f"  rig {c.rig}, lot {c.lot}: {why} -> look at its units")
    if len(lines) == 1:
        lines.append("  no lot or rig beyond the limits")
    return lines


def unit_points(table: pd.DataFrame, event: str) -> pd.DataFrame:
    """Per unit: mean log event residual of one event over its actuations that passed QC, with its labels."""
    col = f"{event}.event_spe_ratio"
    data = table[table["qc_failed"].fillna("").eq("") & table[col].notna() & (table[col] > 0)].copy()
    data["log_ratio"] = np.log(data[col].astype(float))
    return (data.groupby("unit", sort=False)
            .agg(value=("log_ratio", "mean"), n=("log_ratio", "size"), reference=("reference", "all"),
                 lot=("lot", "first"), rig=("rig", "first"),
                 condition=("condition", lambda c: ",".join(sorted(set(c)))))
            .reset_index())


def unit_summary(table: pd.DataFrame, events) -> list[str]:
    """Units whose mean event residual is beyond an individuals-chart limit from the reference units.

    A damaged unit changes every one of its actuations a little; the mean over its actuations shows what single
    actuations hide. Limits: centre ± 3·MR̄/d2 of the reference units' points (NIST e-Handbook 6.3.2.2).
    """
    from ..monitor import fit_individuals_limits

    lines = ["units beyond their limit (mean log event residual per unit; limits from the reference units):"]
    caught: dict[str, set] = {}
    totals: dict[str, int] = {}
    for event in events:
        if f"{event}.event_spe_ratio" not in table:
            continue
        pts = unit_points(table, event)
        ref = pts[pts["reference"]]
        if len(ref) < 3:
            continue
        limits = fit_individuals_limits(ref["value"].to_numpy())
        new = pts[~pts["reference"]]
        for cond, grp in new.groupby("condition"):
            totals[cond] = len(grp)
        hit = new[new["value"] > limits.ucl]
        for row in hit.itertuples():
            caught.setdefault(row.condition, set()).add(row.unit)
        if len(hit):
            lines.append(f"  {event}: " + ", ".join(f"{u} ({r}, {lot})" for u, r, lot in
                                                  zip(hit["unit"], hit["rig"], hit["lot"])))
    lines.append("  units caught by condition (ground truth; a unit is labelled by its actuations' conditions): " +
                 ", ".join(f"{c} {len(caught.get(c, ()))} of {n}" for c, n in sorted(totals.items())))
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
