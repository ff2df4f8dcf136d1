"""The ``locate`` and ``locate-bench`` commands: a thin layer over ``analysis.locate`` and
``analysis.locate_bench``, imported (with scipy and pandas) only when one of them runs."""

from __future__ import annotations

import json
import shlex
import sys

from sim.arguments import positive, positive_number

__all__ = ["register_locate", "register_locate_bench"]


def cmd_locate(args) -> int:
    from sim.config import load_config
    from sim.outputs import check_output_file
    from sim.parallel import default_workers

    from .jsonable import jsonable
    from .locate import locate, locate_report

    if args.resume and args.overwrite:
        from sim.errors import UserError

        raise UserError("--resume goes on with the file and --overwrite starts it again: give one of the two")
    check_output_file(args.output, inputs=[args.config])
    config = load_config(args.config)
    try:
        result = locate(
            config,
            args.parameter,
            args.output,
            bracket=tuple(args.bracket) if args.bracket else None,
            tolerance=args.tolerance,
            budget=args.budget,
            resume=args.resume,
            overwrite=args.overwrite,
            workers=args.workers or default_workers(),
            progress=None if args.json else print,
        )
    except KeyboardInterrupt:
        print(f"finished batches are saved in {args.output}; go on with\n  {_resume_command(args)}",
              file=sys.stderr)
        raise
    if args.json:
        print(json.dumps(jsonable(result.as_dict()), indent=2))
    else:
        print(locate_report(result))
        print(f"results: {args.output} (broodline status / compare / report read it)")
    return 0


def _resume_command(args) -> str:
    """This command line made to go on with its file: the same design (bracket, tolerance, budget)."""
    design = ["--parameter", args.parameter]
    if args.bracket:
        design += ["--bracket", *map(repr, args.bracket)]
    if args.tolerance is not None:
        design += ["--tolerance", repr(args.tolerance)]
    design += ["--budget", str(args.budget)]
    return shlex.join(["broodline", "locate", args.config, *design, "-o", args.output, "--resume"])


def register_locate(sub) -> None:
    """Add ``locate`` to the ``broodline`` subparsers."""
    p = sub.add_parser(
        "locate",
        help="find by simulation the parameter value where fixation equals the neutral expectation",
        description="Each stage runs the config's experiment.replicates replicates at one value; the stop "
        "rule is checked after every stage, so smaller stages (e.g. 50) stop nearer the tolerance.",
    )
    p.add_argument("config", help="experiment config (TOML) with an [invasion] table")
    p.add_argument("--parameter", required=True, metavar="PATH", help="sweep path of the parameter")
    p.add_argument("--bracket", nargs=2, type=float, metavar=("LO", "HI"),
                   help="range searched (default: the analytic threshold +- 10%%)")
    p.add_argument("--tolerance", type=positive_number, default=None, metavar="T",
                   help="stop at a 95%% interval half-width <= T (default: 1%% of the analytic threshold)")
    p.add_argument("--budget", type=positive, default=200_000, metavar="REPLICATES",
                   help="stop before using more replicates than this (default 200000)")
    p.add_argument("-o", "--output", required=True, help="results file to write (.h5)")
    p.add_argument("--resume", action="store_true", help="go on with an unfinished locate file")
    p.add_argument("--overwrite", action="store_true", help="replace an existing results file")
    p.add_argument("--workers", type=positive, default=None, metavar="N",
                   help="local worker processes (default: the cores this process may use)")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=cmd_locate)


def cmd_locate_bench(args) -> int:
    from .jsonable import jsonable
    from .locate_bench import locate_benchmark

    benches = [
        locate_benchmark(half_range=h, seeds=tuple(range(2026, 2026 + args.seeds)),
                         grid_seeds=tuple(range(3026, 3026 + args.grid_seeds)), workers=args.workers or 1,
                         progress=None if args.json else print)
        for h in args.half_range
    ]
    if args.json:
        print(json.dumps(jsonable([b.as_dict() for b in benches]), indent=2))
    else:
        print("\n".join(b.summary() for b in benches))
        print("The grids are centred on the analytic threshold, within 0.1% of the finite-N one: the best "
              "case for a grid. A user who does not know where the threshold lies needs a wider grid.")
    return 0


def register_locate_bench(sub) -> None:
    """Add ``locate-bench`` to the ``broodline`` subparsers."""
    p = sub.add_parser(
        "locate-bench",
        help="replicates locate needs against a uniform 9-point grid (semelparous vs iteroparous, K = 200)",
    )
    p.add_argument("--half-range", type=float, nargs="+", default=[0.1, 0.25], metavar="F",
                   help="brackets: the analytic threshold +- F x itself (default 0.1 0.25)")
    p.add_argument("--seeds", type=positive, default=10, metavar="N", help="locate runs (default 10)")
    p.add_argument("--grid-seeds", type=positive, default=5, metavar="N", help="grid runs per bracket (default 5)")
    p.add_argument("--workers", type=positive, default=None, metavar="N", help="local worker processes")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_locate_bench)
