"""``harken demo-data generate``: write the demo scenario's recordings, sidecars and ground truth."""

from __future__ import annotations

__all__ = ["register", "generate"]


def register(sub) -> None:
    p = sub.add_parser("demo-data", help="the demo scenario generator")
    dsub = p.add_subparsers(dest="demo_command", required=True, metavar="ACTION")
    g = dsub.add_parser("generate", help="write an inbox-style tree of generated recordings and ground truth")
    g.add_argument("--out", required=True, metavar="DIR")
    g.add_argument("--scenario", default="default", metavar="default|small|NAME.toml")
    g.add_argument("--seed", type=int, default=None)
    g.add_argument("--jobs", type=int, default=None, help="worker processes (default: all cores)")
    g.set_defaults(func=generate)


def generate(args) -> int:
    import time

    from ..demo import generate as make

    t0 = time.perf_counter()
    summary = make(args.out, scenario=args.scenario, seed=args.seed, jobs=args.jobs)
    print(summary.describe())
    print(f"generated in {time.perf_counter() - t0:.1f} s")
    return 0
