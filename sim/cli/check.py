"""``broodline check``: validate a config and print the resolved experiment."""

from __future__ import annotations

from .run import add_budget_option

__all__ = ["register"]


def cmd_check(args) -> int:
    from ..config import load_config
    from ..describe import describe_experiment

    print(describe_experiment(load_config(args.config), budget=args.budget))
    return 0


def register(sub) -> None:
    """Add ``check`` to the command line."""
    p = sub.add_parser("check", help="validate a config and print the resolved experiment")
    p.add_argument("config")
    add_budget_option(p)
    p.set_defaults(func=cmd_check)
