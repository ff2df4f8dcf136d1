"""``broodline run``: run an experiment config; its options (workers, cluster, resume, batch size).

A thin layer over ``sim.experiment.run_experiment``: log lines, the summary
table, and the command that finishes an interrupted run.
"""

from __future__ import annotations

import logging
import shlex
import signal
import sys

from ..arguments import positive
from ..errors import UserError

__all__ = ["register", "add_run_options", "run_options", "run_from_command_line", "positive",
           "add_budget_option", "start_workers_soon"]


def add_run_options(parser) -> None:
    """Add ``--workers``, ``--cluster``, ``--resume`` and ``--batch-size`` to a ``run`` parser."""
    parser.add_argument("--workers", type=positive, default=None, metavar="N",
                        help="local worker processes (default: the cores this process may use)")
    parser.add_argument("--cluster", metavar="ADDRESS", default=None,
                        help="run the batches on a running dask scheduler: its address "
                             "(tcp://HOST:8786) or scheduler file (.json); needs "
                             "pip install 'broodline[cluster]'")
    parser.add_argument("--resume", action="store_true",
                        help="finish an unfinished results file (same config), skipping what is done")
    parser.add_argument("--batch-size", type=positive, default=None, metavar="N",
                        help="replicates per batch of work (default: about 5e5 individuals, or classes with "
                             "counts, at most 1024 replicates; without trajectories 4x the entries, at "
                             "most 16384 replicates; results do not depend on it)")
    add_budget_option(parser)


def add_budget_option(parser) -> None:
    """Add ``--no-budget`` (lift the limit on individual-seasons) to ``run`` or ``check``."""
    parser.add_argument("--no-budget", dest="budget", action="store_false",
                        help="run an experiment past the budget of 1e13 individual-seasons "
                             "(replicates x max_steps x starting census)")


def start_workers_soon(args) -> None:
    """With worker processes to come, start their fork server now: it loads the engines while
    this process reads and checks the config."""
    from ..parallel.start import default_workers, separate_workers, start_soon

    if args.cluster is None and separate_workers(args.workers or default_workers()):
        start_soon()


def run_options(args) -> dict:
    """The keyword arguments of ``run_experiment`` that ``run``'s options give."""
    if args.cluster is not None and args.workers is not None:
        raise UserError("--workers applies to local runs; with --cluster the cluster's workers "
                        "run the batches (give one of the two)")
    if args.cluster is not None and args.cluster.startswith("inproc://"):
        raise UserError(f"--cluster {args.cluster}: an inproc:// scheduler lives inside one Python "
                        "process; broodline reaches a dask scheduler over tcp:// (or tls://)")
    if args.resume and args.overwrite:
        raise UserError("--resume finishes the file and --overwrite starts it again: give one of the two")
    from ..parallel.start import default_workers, separate_workers

    workers = args.workers or default_workers()
    return dict(workers=workers, in_process=not separate_workers(workers), cluster=args.cluster,
                resume=args.resume, batch_size=args.batch_size, budget=args.budget,
                config_path=args.config)


class _TqdmHandler(logging.Handler):
    """Log lines printed above the progress bar, not through it."""

    def emit(self, record) -> None:
        from tqdm import tqdm

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
    from ..experiment import request_stop

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


def _quiet_distributed() -> None:
    """Silence dask.distributed's own log lines (tracebacks of a lost scheduler, reconnect
    attempts): our one last line says what happened. Importing distributed configures its
    loggers, so it is imported first, then every one of them is set."""
    try:
        import distributed  # noqa: F401  (sets its loggers' levels and handlers)
    except ImportError:
        return  # the run refuses with the install line
    names = [n for n in logging.root.manager.loggerDict if n.split(".")[0] == "distributed"]
    for name in ["distributed", *names]:
        logging.getLogger(name).setLevel(logging.CRITICAL)


def _resume_command(config_path, out) -> str:
    config = shlex.quote(str(config_path)) if config_path else "CONFIG"
    return f"broodline run {config} -o {shlex.quote(str(out))} --resume"


def run_from_command_line(config, out, *, overwrite=False, quiet=False, workers=1, in_process=True,
                          cluster=None, resume=False, batch_size=None, budget=True, config_path=None):
    """Run an experiment as ``broodline run`` does: log lines, the summary, the resume hint;
    returns the summary (a ``sim.outcomes.Summary``)."""
    from ..experiment import ExperimentInterrupted, refuse_locate_file, run_experiment
    from ..parallel.start import default_workers

    _log_to_stderr()
    _stop_on_signals()
    if cluster:  # a lost scheduler is said in our last line, not in distributed's tracebacks
        _quiet_distributed()
    cores = default_workers()
    if not cluster and workers > cores:
        logging.getLogger("sim.experiment").warning(
            "warning: --workers %d is more than the %d cores this process may use: the workers "
            "share them, which is no faster and holds %d batches in memory", workers, cores, workers)
    if resume:  # here too, to name the config in the command it gives
        refuse_locate_file(out, config_path)
    try:
        summary = run_experiment(config, out, overwrite=overwrite, resume=resume, workers=workers,
                                 in_process=in_process, cluster=cluster, progress=not quiet,
                                 batch_size=batch_size, budget=budget, as_frame=False)
    except ExperimentInterrupted as stop:
        print(f"\nStopped: {stop}. To finish the experiment, run:\n"
              f"  {_resume_command(config_path, out)}", file=sys.stderr)
        raise
    print(f"\nResults: {out}")
    print(summary.text())
    capped = summary.columns.get("capped", [])
    if sum(capped):
        points = [p for p, n in zip(summary.columns["point"], capped, strict=True) if n]
        print(f"\nwarning: {sum(capped)} replicates passed experiment.max_population "
              f"= {config.experiment.max_population} and were stopped there, marked capped "
              f"(points {', '.join(map(str, points))}): the population grows without "
              "bound there; add density dependence or raise max_population", file=sys.stderr)
    return summary




_OVERRIDES = ("seed", "replicates", "max_steps")


def with_overrides(config, args):
    """``run --seed/--replicates/--max-steps``: the config with them set (and checked), so the
    results file records the experiment as run."""
    given = {k: getattr(args, k) for k in _OVERRIDES if getattr(args, k, None) is not None}
    if not given:
        return config
    from ..config import parse_config, swept_values

    for key, value in given.items():
        # a point's swept value overrides the [experiment] table: the option would be recorded
        # in the results file but not run (seed and replicates cannot be swept; max_steps can)
        swept = swept_values(config, f"experiment.{key}")
        if swept is not None:
            option = "--" + key.replace("_", "-")
            raise UserError(
                f"{option}: experiment.{key} is swept by the config (over "
                f"{', '.join(map(str, swept))}), so {option} {value} would be recorded but not run; "
                f"remove {option} or the sweep of experiment.{key}")
    raw = config.model_dump(mode="json", exclude_none=True)
    raw["experiment"].update(given)
    return parse_config(raw)


def cmd_run(args) -> int:
    from ..outputs import check_output_file

    check_output_file(args.output, inputs=[args.config])
    start_workers_soon(args)
    from ..config import load_config

    config = with_overrides(load_config(args.config), args)
    run_from_command_line(config, args.output, overwrite=args.overwrite, quiet=args.quiet,
                          **run_options(args))
    if config.invasion is not None or config.trait is not None:
        against = "the singular efforts" if config.trait is not None else "the analytic prediction"
        out = shlex.quote(str(args.output))
        print(f"\nNext: broodline compare {out} (the results against {against}), "
              f"broodline plot {out} -o DIR (figures)")
    return 0


def register(sub) -> None:
    """Add ``run`` to the command line."""
    p = sub.add_parser("run", help="run an experiment config and write an HDF5 results file")
    p.add_argument("config", help="experiment config (TOML)")
    p.add_argument("-o", "--output", required=True, help="results file to write (.h5)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing results file")
    p.add_argument("--quiet", action="store_true", help="no progress bar (per-point lines still logged)")
    p.add_argument("--seed", type=int, help="experiment.seed for this run (recorded in the results file)")
    p.add_argument("--replicates", type=int, help="experiment.replicates for this run (recorded)")
    p.add_argument("--max-steps", dest="max_steps", type=int, help="experiment.max_steps for this run (recorded)")
    add_run_options(p)
    p.set_defaults(func=cmd_run)
