"""``harken model fit``: reference model files from recordings of a reference set."""

from __future__ import annotations

from ._common import add_profile, log

__all__ = ["register", "fit"]


def register(sub) -> None:
    p = sub.add_parser("model", help="reference models")
    msub = p.add_subparsers(dest="model_command", required=True, metavar="ACTION")
    f = msub.add_parser("fit", help="fit a reference model from recordings of the reference set")
    add_profile(f, required=True)
    f.add_argument("--event", action="append", default=[], metavar="EVENT",
                   help="event to model (repeatable; default: every event of the profile)")
    f.add_argument("--out", required=True, metavar="MODEL",
                   help="folder for one model per event (<event>.json + <event>.npz), or NAME.json for one --event")
    f.add_argument("--components", type=int, default=None, help="fix the number of components (default: by CV)")
    f.add_argument("--scaling", choices=("centre", "unit", "pareto"), default="unit")
    f.add_argument("--alpha", type=float, default=0.01, help="actuation-level false-alarm rate (default 0.01)")
    f.add_argument("--jobs", type=int, default=None)
    f.add_argument("paths", nargs="+", metavar="PATH", help="recordings or folders of recordings")
    f.set_defaults(func=fit)


def fit(args) -> int:
    from .. import scoring

    written = scoring.fit_models_from_paths(
        args.paths, profile=args.profile, profile_dirs=args.profiles, events=args.event or None, out=args.out,
        n_components=args.components, scaling=args.scaling, alpha=args.alpha, jobs=args.jobs, log=log,
    )
    for event, path, model in written:
        print(f"{event}: {model.n_components_} components, {model.n_actuations_} reference actuations -> {path}")
    return 0
