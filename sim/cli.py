"""The ``broodline`` command line: a thin layer over the Python API.

Every command calls a function a user could call from a notebook. A user's
mistake (bad config, missing file, existing output) prints one message per
problem and exits with status 2, without a traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

import pandas as pd

from .bench import register_bench
from .config import ConfigError, load_config, parse_config
from .describe import describe_experiment
from .meanfield import NoEquilibriumError
from .trace import register_trace

__all__ = ["main", "build_parser", "demo_config_path"]


class UserError(Exception):
    """A mistake of the user's, reported as a message and exit status 2."""


def demo_config_path() -> Path:
    """The demo experiment's config, shipped with the package."""
    return Path(__file__).with_name("demo.toml")


def _load(path):
    return load_config(path)


def _print_table(table: pd.DataFrame) -> None:
    with pd.option_context("display.width", 120, "display.max_columns", 20,
                           "display.float_format", "{:.3f}".format):
        print(table.to_string(index=False))


def cmd_check(args) -> int:
    config = _load(args.config)
    print(describe_experiment(config))
    return 0


def _run(config, out, *, overwrite, quiet, **options):
    from .runs import run_from_command_line

    return run_from_command_line(config, out, overwrite=overwrite, quiet=quiet, **options)


def cmd_run(args) -> int:
    from .runs import run_options

    config = _with_overrides(_load(args.config), args)
    _run(config, args.output, overwrite=args.overwrite, quiet=args.quiet, **run_options(args))
    return 0


_OVERRIDES = ("seed", "replicates", "max_steps")


def _with_overrides(config, args):
    """``run --seed/--replicates/--max-steps``: the config with them set (and checked), so the
    results file records the experiment as run."""
    given = {k: getattr(args, k) for k in _OVERRIDES if getattr(args, k, None) is not None}
    if not given:
        return config
    raw = config.model_dump(mode="json", exclude_none=True)
    raw["experiment"].update(given)
    return parse_config(raw)


def cmd_demo(args) -> int:
    out = Path(args.output)
    out.mkdir(parents=True, exist_ok=True)
    config_path = out / "demo.toml"  # a copy the user can edit and run again
    results = out / "demo.h5"
    earlier = [p for p in (results, out / "report.html") if p.exists()]
    if earlier and not args.overwrite:
        raise FileExistsError(
            f"{out} holds an earlier demo's results ({', '.join(p.name for p in earlier)}); "
            "pass --overwrite to replace them"
        )
    if config_path.exists():  # never clobber a copy the user may have edited: run it
        print(f"running the demo from its own config {config_path} (delete it for the shipped one)\n")
    else:
        config_path.write_text(demo_config_path().read_text())
    config = _load(config_path)
    print(describe_experiment(config))
    print()
    _run(config, results, overwrite=True, quiet=args.quiet)
    from analysis.commands import finish_demo  # sim imports analysis only here, lazily

    finish_demo(results, out)
    print(f"\nNext, edit the demo's config and run it yourself:\n"
          f"  broodline check {config_path}\n"
          f"  broodline run {config_path} -o {out / 'my-run.h5'}\n"
          f"  or run the demo again from it: broodline demo -o {out} --overwrite")
    return 0


def _register_core(sub) -> None:
    p = sub.add_parser("run", help="run an experiment config and write an HDF5 results file")
    p.add_argument("config", help="experiment config (TOML)")
    p.add_argument("-o", "--output", required=True, help="results file to write (.h5)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing results file")
    p.add_argument("--quiet", action="store_true", help="no progress bar (per-point lines still logged)")
    p.add_argument("--seed", type=int, help="experiment.seed for this run (recorded in the results file)")
    p.add_argument("--replicates", type=int, help="experiment.replicates for this run (recorded)")
    p.add_argument("--max-steps", dest="max_steps", type=int, help="experiment.max_steps for this run (recorded)")
    _add_run_options(p)
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("check", help="validate a config and print the resolved experiment")
    p.add_argument("config")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("demo", help="run the demo invasion experiment (about a minute)")
    p.add_argument("-o", "--output", default="broodline-demo", help="folder for the demo's files")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--overwrite", action="store_true", help="replace the results of an earlier demo")
    p.set_defaults(func=cmd_demo)

    register_trace(sub)


def _register_analysis(sub) -> None:
    from analysis.commands import register  # lazily: sim does not import analysis otherwise

    register(sub)


def _add_run_options(parser) -> None:
    from .runs import add_run_options

    add_run_options(parser)


def _register_runs(sub) -> None:
    from .runs import register

    register(sub)


# Each entry adds its subcommands to the parser; other modules register theirs here.
REGISTRARS = [_register_core, _register_runs, _register_analysis, register_bench]


def build_parser() -> argparse.ArgumentParser:
    from .store import software_version

    parser = argparse.ArgumentParser(
        prog="broodline",
        description="Simulate the evolution of breeding schedules in finite populations.",
    )
    parser.add_argument("--version", action="version", version=f"broodline {software_version()}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for register in REGISTRARS:
        register(sub)
    return parser


def _run_errors() -> tuple:
    from .parallel import PoolError
    from .store import ResultsError

    return (ResultsError, PoolError)


def _plain_warnings(command: str):
    """Show warnings meant for the user as one line each: ``broodline run: warning: ...``."""
    import warnings

    def show(message, category, filename, lineno, file=None, line=None):
        print(f"broodline {command}: warning: {message}", file=file or sys.stderr)

    warnings.showwarning = show


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    _plain_warnings(args.command)
    try:
        return args.func(args)
    except (ConfigError, NoEquilibriumError, UserError, FileExistsError, FileNotFoundError,
            PermissionError, IsADirectoryError, *_run_errors()) as err:
        print(f"broodline {args.command}: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"broodline {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader (e.g. `| head`) left early: not an error of ours (Python docs, signal module)
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0


if __name__ == "__main__":
    sys.exit(main())
