"""``broodline trace``: one replicate from its keyed stream, census by allele and age every season."""

from __future__ import annotations

__all__ = ["register"]


def cmd_trace(args) -> int:
    from ..config import load_config
    from ..describe import describe_environment
    from ..trace import trace_replicate

    config = load_config(args.config)
    t = trace_replicate(config, point=args.point, replicate=args.replicate)
    where = ", ".join(f"{k} = {v}" for k, v in t.values.items())
    print(f"point {t.point}{f' ({where})' if where else ''}, replicate {t.replicate}, stream "
          f"SeedSequence({config.experiment.seed}, spawn_key=({t.point}, {t.replicate}))")
    if t.years is not None:
        shared = config.environment.shared_years
        key = f"({t.point}, 0, 2)" if shared else f"({t.point}, {t.replicate}, 1)"
        print(f"years: {describe_environment(config)}; year stream "
              f"SeedSequence({config.experiment.seed}, spawn_key={key}); "
              "'year' is the type of the season that ended in the census")
    print(t.census.to_string(index=False))
    print(f"outcome: {t.outcome} after {t.steps} seasons")
    return 0


def register(sub) -> None:
    """Add ``trace`` to the ``broodline`` subparsers."""
    p = sub.add_parser("trace", help="run one replicate and print its census by allele and age, season by season")
    p.add_argument("config", help="experiment config (TOML)")
    p.add_argument("--point", type=int, default=0, help="sweep point (default 0)")
    p.add_argument("--replicate", type=int, default=0, help="replicate (default 0)")
    p.set_defaults(func=cmd_trace)
