"""``harken reference build|list|activate`` and ``harken rescore``: reference models in the store."""

from __future__ import annotations

from ..errors import AnalysisError
from ._common import add_profiles, add_store

__all__ = ["register", "build", "list_models", "activate", "rescore"]


def register(sub) -> None:
    p = sub.add_parser("reference", help="reference models in the store")
    rsub = p.add_subparsers(dest="reference_command", required=True, metavar="ACTION")
    b = rsub.add_parser("build", help="fit reference models from stored lots, make them active, score history")
    b.add_argument("--profile", required=True)
    b.add_argument("--event", action="append", default=[], metavar="EVENT",
                   help="event to model (repeatable; default: every event of the profile)")
    b.add_argument("--lots", required=True, metavar="L1,L2,...", help="reference lots, comma-separated")
    b.add_argument("--by", default=None, metavar="NAME", help="who builds it (default: the login name)")
    b.add_argument("--components", type=int, default=None, help="fix the number of components (default: by CV)")
    b.add_argument("--scaling", choices=("centre", "unit", "pareto"), default="unit")
    b.add_argument("--alpha", type=float, default=0.01, help="actuation-level false-alarm rate (default 0.01)")
    add_store(b)
    add_profiles(b)
    b.set_defaults(func=build)
    ls = rsub.add_parser("list", help="list stored model versions")
    add_store(ls)
    ls.set_defaults(func=list_models)
    a = rsub.add_parser("activate", help="make a stored model version the active one")
    a.add_argument("--model", type=int, required=True, metavar="ID")
    a.add_argument("--by", default=None, metavar="NAME")
    add_store(a)
    a.set_defaults(func=activate)

    p = sub.add_parser("rescore", help="score stored actuations that lack scores under the active models")
    p.add_argument("--profile", default=None, help="default: every profile with an active model")
    p.add_argument("--event", action="append", default=[], metavar="EVENT")
    add_store(p)
    p.set_defaults(func=rescore)


def build(args) -> int:
    from ..references import build_reference
    from ..store import Store

    lots = [x for x in args.lots.split(",") if x.strip()]
    with Store.open(args.store) as store:
        build_reference(store, args.profile, args.event, lots, created_by=args.by, profile_dirs=args.profiles,
                        n_components=args.components, scaling=args.scaling, alpha=args.alpha, log=print)
    return 0


def list_models(args) -> int:
    from ..store import Store

    with Store.open(args.store) as store:
        df = store.models()
    cols = ["id", "profile", "event", "version", "status", "reference_lots", "n_recordings", "n_components",
            "created_by", "created_at"]
    print(df[cols].to_string(index=False) if len(df) else "no reference models in the store")
    return 0


def activate(args) -> int:
    from ..scoring import current_user
    from ..store import Store

    with Store.open(args.store) as store:
        store.activate_model(args.model, person=args.by or current_user())
    print(f"model {args.model} is now active")
    return 0


def rescore(args) -> int:
    from ..references import rescore as run
    from ..store import Store

    with Store.open(args.store) as store:
        models = store.models(profile=args.profile)
        profiles = sorted(set(models.loc[models["status"] == "active", "profile"])) if len(models) else []
        if args.profile is not None:
            profiles = [args.profile]
        if not profiles:
            raise AnalysisError(f"{store.url}: no active reference model; build one with `harken reference build`")
        for prof in profiles:
            n = run(store, prof, events=args.event or None)
            print(f"{prof}: {n} event scorings written")
    return 0
