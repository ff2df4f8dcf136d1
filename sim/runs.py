"""The command line of long experiments: ``run``'s options (workers, cluster, resume), ``status``
and ``bench-memory``.

A thin layer over ``runner.run_experiment``, ``status.experiment_status`` and
``bench_memory.measure_memory``.
"""

from __future__ import annotations

import logging
import shlex
import signal
import sys

import pandas as pd
from tqdm import tqdm

__all__ = ["add_run_options", "run_options", "run_from_command_line", "register"]


def _positive(text: str) -> int:
    import argparse

    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number; got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be >= 1; got {value}")
    return value


def add_run_options(parser) -> None:
    """Add ``--workers``, ``--cluster``, ``--resume`` and ``--batch-size`` to a ``run`` parser."""
    parser.add_argument("--workers", type=_positive, default=None, metavar="N",
                        help="local worker processes (default: the cores this process may use)")
    parser.add_argument("--cluster", metavar="ADDRESS", default=None,
                        help="run the batches on a running dask scheduler: its address "
                             "(tcp://HOST:8786) or scheduler file (.json); needs "
                             "pip install 'broodline[cluster]'")
    parser.add_argument("--resume", action="store_true",
                        help="finish an unfinished results file (same config), skipping what is done")
    parser.add_argument("--batch-size", type=_positive, default=None, metavar="N",
                        help="replicates per batch of work (default: at most 64; results do not depend on it)")


def run_options(args) -> dict:
    """The keyword arguments of ``run_experiment`` that ``run``'s options give."""
    from .cli import UserError
    from .parallel import default_workers

    if args.cluster is not None and args.workers is not None:
        raise UserError("--workers applies to local runs; with --cluster the cluster's workers "
                        "run the batches (give one of the two)")
    if args.resume and args.overwrite:
        raise UserError("--resume finishes the file and --overwrite starts it again: give one of the two")
    return dict(workers=args.workers or default_workers(), cluster=args.cluster, resume=args.resume,
                batch_size=args.batch_size, config_path=args.config)


class _TqdmHandler(logging.Handler):
    """Log lines printed above the progress bar, not through it."""

    def emit(self, record) -> None:
        tqdm.write(self.format(record), file=sys.stderr)


def _log_to_stderr() -> None:
    logger = logging.getLogger("sim")
    if not any(isinstance(h, _TqdmHandler) for h in logger.handlers):
        handler = _TqdmHandler()
        handler.setFormatter(logging.Formatter("%(asctime)s %(message)s", "%H:%M:%S"))
        logger.addHandler(handler)
    logger.setLevel(logging.INFO)


def _stop_on_signals() -> None:
    """Ctrl-C, and the SIGTERM batch schedulers send at a time limit: stop, keeping finished work."""
    from .runner import request_stop

    def handler(signum, frame):
        request_stop()  # checked after every batch, in case this exception is swallowed
        raise KeyboardInterrupt

    try:
        signal.signal(signal.SIGINT, handler)
        signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread (e.g. called from a notebook's worker thread)
        return
    previous = sys.unraisablehook
    if getattr(previous, "broodline", False):
        return

    def quiet_stop(unraisable):
        # the KeyboardInterrupt landed in a finalizer, which Python ignores: the run stops
        # anyway (request_stop above), so do not print it as an error
        if not isinstance(unraisable.exc_value, KeyboardInterrupt):
            previous(unraisable)

    quiet_stop.broodline = True
    sys.unraisablehook = quiet_stop


def _resume_command(config_path, out) -> str:
    config = shlex.quote(str(config_path)) if config_path else "CONFIG"
    return f"broodline run {config} -o {shlex.quote(str(out))} --resume"


def run_from_command_line(config, out, *, overwrite=False, quiet=False, workers=1, cluster=None,
                          resume=False, batch_size=None, config_path=None) -> pd.DataFrame:
    """Run an experiment as ``broodline run`` does: log lines, the summary, the resume hint."""
    from .runner import ExperimentInterrupted, run_experiment

    _log_to_stderr()
    _stop_on_signals()
    where = f"dask scheduler {cluster}" if cluster else \
        (f"{workers} worker processes" if workers > 1 else "1 process")
    logging.getLogger("sim.runner").info("running %s on %s", out, where)
    try:
        summary = run_experiment(config, out, overwrite=overwrite, resume=resume, workers=workers,
                                 cluster=cluster, progress=not quiet, batch_size=batch_size)
    except ExperimentInterrupted as stop:
        print(f"\nStopped: {stop}. To finish the experiment, run:\n"
              f"  {_resume_command(config_path, out)}", file=sys.stderr)
        raise
    print(f"\nResults: {out}")
    with pd.option_context("display.width", 120, "display.max_columns", 20,
                           "display.float_format", "{:.3f}".format):
        print(summary.to_string(index=False))
    if "capped" in summary and summary["capped"].sum():
        capped = summary[summary["capped"] > 0]
        print(f"\nwarning: {int(capped['capped'].sum())} replicates passed experiment.max_population "
              f"= {config.experiment.max_population} and were stopped there, marked capped "
              f"(points {', '.join(map(str, capped['point']))}): the population grows without "
              "bound there; add density dependence or raise max_population", file=sys.stderr)
    return summary


def cmd_status(args) -> int:
    from .cli import UserError
    from .status import experiment_status

    try:
        print(experiment_status(args.results))
    except ValueError as err:  # not a results file
        raise UserError(str(err)) from None
    return 0


def cmd_bench_memory(args) -> int:
    from .bench_memory import measure_memory

    report = measure_memory(args.replicates, workers=args.workers)
    print(report)
    return 0


def register(sub) -> None:
    """Add ``status`` and ``bench-memory`` to the command line."""
    p = sub.add_parser("status", help="progress per sweep point of a results file, also while it runs")
    p.add_argument("results", help="results file (.h5)")
    p.set_defaults(func=cmd_status)

    p = sub.add_parser("bench-memory", help="peak memory of runs of growing size (is it flat?)")
    p.add_argument("--replicates", type=_positive, nargs="+", default=[1000, 10000], metavar="N",
                   help="experiment sizes to measure (default: 1000 10000)")
    p.add_argument("--workers", type=_positive, default=1, metavar="N",
                   help="local worker processes for each run (default: 1)")
    p.set_defaults(func=cmd_bench_memory)
