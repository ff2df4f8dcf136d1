"""``broodline status``: progress per sweep point of a results file, also while it runs."""

from __future__ import annotations

from ..errors import UserError

__all__ = ["register"]


def cmd_status(args) -> int:
    from ..status import experiment_status

    try:
        print(experiment_status(args.results))
    except ValueError as err:  # not a results file
        raise UserError(str(err)) from None
    return 0




def register(sub) -> None:
    """Add ``status`` to the command line."""
    p = sub.add_parser("status", help="progress per sweep point of a results file, also while it runs")
    p.add_argument("results", help="results file (.h5)")
    p.set_defaults(func=cmd_status)
