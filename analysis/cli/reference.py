"""``harken reference build|list|approve|policy|activate`` and ``harken rescore``: reference models in the store.

In a store with users, a build is attributed to a user of the store (``--by``, else the login name when it is
one), the new version waits for a signed approval (`harken reference approve`: the method owner re-enters the
password and gives the signature's meaning and a reason), and `activate` is refused. A store without users (a
single person's store) builds active versions, as before users existed."""

from __future__ import annotations

from ..errors import AnalysisError
from ._common import add_profiles, add_store, cli_person

__all__ = ["register", "build", "list_models", "approve", "policy", "activate", "rescore"]


def register(sub) -> None:
    p = sub.add_parser("reference", help="reference models in the store")
    rsub = p.add_subparsers(dest="reference_command", required=True, metavar="ACTION")
    b = rsub.add_parser("build", help="fit reference models from stored lots and score history (in a store with "
                                      "users the new version waits for `harken reference approve`)")
    b.add_argument("--profile", required=True)
    b.add_argument("--event", action="append", default=[], metavar="EVENT",
                   help="event to model (repeatable; default: every event of the profile)")
    b.add_argument("--lots", required=True, metavar="L1,L2,...", help="reference lots, comma-separated")
    b.add_argument("--by", default=None, metavar="NAME",
                   help="who builds it: in a store with users, an active method owner of the store (default: the "
                        "login name, when it is one)")
    b.add_argument("--components", type=int, default=None, help="fix the number of components (default: by CV)")
    b.add_argument("--scaling", choices=("centre", "unit", "pareto"), default="unit")
    b.add_argument("--alpha", type=float, default=0.01, help="actuation-level false-alarm rate (default 0.01)")
    add_store(b)
    add_profiles(b)
    b.set_defaults(func=build)
    ls = rsub.add_parser("list", help="list stored model versions")
    add_store(ls)
    ls.set_defaults(func=list_models)
    ap = rsub.add_parser("approve", help="sign the approval of a pending version and make it active (audited)")
    ap.add_argument("--model", type=int, required=True, metavar="ID")
    ap.add_argument("--by", required=True, metavar="NAME", help="the approving method owner (a user of the store)")
    ap.add_argument("--meaning", required=True, help="the signature's meaning: 'approved for routine monitoring' "
                                                     "or 'approved for investigation only'")
    ap.add_argument("--reason", required=True, help="why this version is approved")
    ap.add_argument("--password-stdin", action="store_true",
                    help="read the password from standard input instead of asking on the terminal")
    add_store(ap)
    ap.set_defaults(func=approve)
    po = rsub.add_parser("policy", help="the site's rules for approvals (audited)")
    po.add_argument("--approver-not-builder", choices=("yes", "no"), required=True,
                    help="whether the approver must be someone other than the person who built the version")
    add_store(po)
    po.set_defaults(func=policy)
    a = rsub.add_parser("activate", help="make a stored model version the active one (a store without users only)")
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
    from ..scoring import current_user
    from ..store import Store
    from ..store.users import list_users, role_at_least

    lots = [x for x in args.lots.split(",") if x.strip()]
    with Store.open(args.store) as store:
        with store.read() as conn:
            users = {u.user_name: u for u in list_users(conn)}
        who, activate = args.by, True
        if users:
            who = args.by or current_user()
            u = users.get(who)
            if u is None or not u.active or not role_at_least(u.role, "method_owner"):
                raise AnalysisError(f"{store.url}: this store has users, so a build is attributed to one: give --by "
                                    f"an active method owner of the store ({who!r} is not one)")
            activate = False
        made = build_reference(store, args.profile, args.event, lots, created_by=who, profile_dirs=args.profiles,
                               n_components=args.components, scaling=args.scaling, alpha=args.alpha, log=print,
                               activate=activate)
    if not activate:
        for m in made:
            print(f"model {m.model_id} ({m.event} version {m.version}) awaits approval: harken reference approve "
                  f"--model {m.model_id} --by NAME --meaning '...' --reason '...'")
    return 0


def approve(args) -> int:
    from ..store import Store
    from ._common import read_password

    password = read_password(args, twice=False)
    with Store.open(args.store) as store:
        store.approve_model(args.model, person=args.by, password=password, meaning=args.meaning,
                            reason=args.reason)
    print(f"model {args.model} approved by {args.by} ({args.meaning}) and now active")
    return 0


def policy(args) -> int:
    from ..store import Store
    from ..store.writes import POLICY_OTHER_APPROVER

    with Store.open(args.store) as store:
        store.set_policy(POLICY_OTHER_APPROVER, "true" if args.approver_not_builder == "yes" else "false",
                         person=cli_person())
    print(f"approver must differ from the builder: {args.approver_not_builder}")
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
    from ..store.users import list_users

    with Store.open(args.store) as store:
        with store.read() as conn:
            if list_users(conn):
                raise AnalysisError(f"{store.url}: this store has users: a version becomes active by a signed "
                                    "approval (`harken reference approve`)")
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
