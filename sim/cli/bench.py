"""``broodline bench`` and ``bench-memory``: speed against the random-number floor, peak memory."""

from __future__ import annotations

import argparse
import json
import sys

from ..bench_scaling import DEFAULT_REPLICATES as SCALING_REPLICATES
from ..bench_scaling import SCALING_ENGINES, format_scaling, run_scaling
from ..errors import UserError
from .run import positive

__all__ = ["register"]


def _size(text: str) -> int:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"a census size must be a number; got {text!r}") from None
    if value != int(value) or not 10 <= value <= 1e8:
        raise argparse.ArgumentTypeError(f"a census size must be a whole number in [10, 1e8]; got {text!r}")
    return int(value)


def _seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number of seconds; got {text!r}") from None
    if not 0 <= value <= 3600:
        raise argparse.ArgumentTypeError(f"must be in [0, 3600] seconds; got {text!r}")
    return value


def _count(low: int):
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number; got {text!r}") from None
        if value < low:
            raise argparse.ArgumentTypeError(f"must be >= {low}; got {value}")
        return value
    return parse


# The options of each kind of benchmark, with their defaults: one given to the other kind
# (with a value other than its default) is refused, not ignored.
ENGINE_OPTIONS = {"sizes": None, "large": False, "seasons": 20, "min_time": 1.0, "agents_max": 10_000,
                  "capacity": 200, "sequential": 1_000, "single_seasons": 20_000}
SCALING_OPTIONS = {"workers": None, "engine": None, "rounds": 1}


def _refuse_options_of_the_other_kind(args) -> None:
    others = ENGINE_OPTIONS if args.scaling else SCALING_OPTIONS
    given = [f"--{name.replace('_', '-')}" for name, default in others.items() if getattr(args, name) != default]
    if not given:
        return
    if args.scaling:
        raise UserError(f"{', '.join(given)}: of the engine benchmark, not of --scaling (leave "
                        f"{'it' if len(given) == 1 else 'them'} out)")
    raise UserError(f"{', '.join(given)}: only with --scaling")


def cmd_bench_scaling(args) -> int:
    if args.replicates == 0:
        raise UserError("--replicates must be >= 1 with --scaling; got 0")
    say = None if args.json else (lambda m: print(f"  running {m} ...", file=sys.stderr, flush=True))
    report = run_scaling(replicates=SCALING_REPLICATES if args.replicates is None else args.replicates,
                         workers=args.workers, engines=args.engine or SCALING_ENGINES,
                         rounds=args.rounds, progress=say)
    print(json.dumps(report.to_records(), indent=1) if args.json else format_scaling(report))
    return 0


def cmd_bench(args) -> int:
    _refuse_options_of_the_other_kind(args)
    if args.scaling:
        return cmd_bench_scaling(args)
    from ..bench import DEFAULT_SIZES, LARGE_SIZE, format_report, run_bench

    sizes = list(args.sizes or DEFAULT_SIZES)
    if args.large and LARGE_SIZE not in sizes:
        sizes.append(LARGE_SIZE)
    say = None if args.json else (lambda m: print(f"  timing {m} ...", file=sys.stderr, flush=True))
    report = run_bench(sizes, seasons=args.seasons, min_time=args.min_time,
                       agents_max=args.agents_max,
                       replicates=10_000 if args.replicates is None else args.replicates,
                       capacity=args.capacity,
                       sequential=args.sequential or None,
                       single_seasons=args.single_seasons, progress=say)
    if args.json:
        print(json.dumps(report.to_records(), indent=1))
    else:
        print(format_report(report))
    return 0


def cmd_bench_memory(args) -> int:
    from ..bench_memory import measure_memory, measure_planning

    report = measure_memory(args.replicates, workers=args.workers)
    print(report)
    planning = measure_planning()
    print("\npeak memory of `check` and of planning the run (nothing run), by requested replicates:")
    print(planning.to_string(index=False, float_format="{:.2f}".format))
    return 0


def register(sub) -> None:
    """Add ``bench`` and ``bench-memory`` to the command line."""
    p = sub.add_parser("bench", help="time the engines against the random-number floor and Mesa")
    p.add_argument("--sizes", nargs="+", type=_size, metavar="N",
                   help="census sizes (default: 1e3 1e4 1e5 1e6)")
    p.add_argument("--large", action="store_true", help="also N = 1e7")
    p.add_argument("--seasons", type=_count(1), default=ENGINE_OPTIONS["seasons"],
                   help="seasons per timed block, each from the starting census (default 20)")
    p.add_argument("--min-time", type=_seconds, default=ENGINE_OPTIONS["min_time"],
                   help="least seconds of stepping timed per engine and size (default 1)")
    p.add_argument("--agents-max", type=_count(0), default=ENGINE_OPTIONS["agents_max"],
                   help="largest N the slow Mesa engine runs at (default 1e4)")
    p.add_argument("--replicates", type=_count(0), default=None,
                   help="replicates of the K = 200 invasion experiment (default 1e4; 0 skips it); "
                        f"with --scaling, of its experiment (default {SCALING_REPLICATES:,})")
    p.add_argument("--capacity", type=_count(10), default=ENGINE_OPTIONS["capacity"],
                   help="K of the invasion experiment")
    p.add_argument("--sequential", type=_count(0), default=ENGINE_OPTIONS["sequential"],
                   help="replicates also run one at a time, for comparison (0 skips)")
    p.add_argument("--single-seasons", type=_count(0), default=ENGINE_OPTIONS["single_seasons"],
                   help="seasons of one replicate run alone at K = 100 and 1000 (default 20000; "
                        "0 skips)")
    p.add_argument("--scaling", action="store_true",
                   help="instead: one K = 500 invasion experiment on 1 worker and on every core, per "
                        "engine: speed-up, efficiency, fixed cost, the writer's load")
    p.add_argument("--workers", type=_count(1), default=None, metavar="N",
                   help="with --scaling: the larger worker count (default: every core available)")
    p.add_argument("--engine", action="append", choices=SCALING_ENGINES,
                   help="with --scaling: only this engine (repeat for several; default: both)")
    p.add_argument("--rounds", type=_count(1), default=SCALING_OPTIONS["rounds"], metavar="N",
                   help="with --scaling: run each worker count N times, alternating, and report the "
                        "fastest of each and each round's efficiency (default 1)")
    p.add_argument("--json", action="store_true", help="print the table as a JSON list of records")
    p.set_defaults(func=cmd_bench)

    p = sub.add_parser("bench-memory", help="peak memory of runs of growing size (is it flat?)")
    p.add_argument("--replicates", type=positive, nargs="+", default=[1000, 10000], metavar="N",
                   help="experiment sizes to measure (default: 1000 10000)")
    p.add_argument("--workers", type=positive, default=1, metavar="N",
                   help="local worker processes for each run (default: 1)")
    p.set_defaults(func=cmd_bench_memory)
