"""The ``broodline`` command line: a thin layer over the Python API.

Every command calls a function a user could call from a notebook. A user's
mistake (bad config, missing file, existing output) prints one message per
problem and exits with status 2, without a traceback.

Each subcommand module has a ``register(subparsers)``; ``COMMANDS`` names
them as ``"module:function"`` and ``build_parser`` imports them by name, so
the analysis layer's commands join the command line without sim importing
analysis anywhere but here, and without analysis importing this package.

Registering a command imports nothing heavy (no pandas, scipy, numba, h5py or
pydantic): each command imports what it uses when it runs, so ``--help``
answers at once and a worker process that imports this package pays nothing
for it (``tests/test_cli_imports.py``).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from ..errors import UserError

__all__ = ["main", "entry_point", "build_parser", "COMMANDS"]

# Who adds subcommands, in the order of ``broodline --help``.
COMMANDS = [
    "sim.cli.run:register",
    "sim.cli.check:register",
    "sim.cli.demo:register",
    "sim.cli.trace:register",
    "sim.cli.status:register",
    "analysis.commands:register",
    "analysis.trait_commands:register",
    "sim.cli.bench:register",
]

# Library messages name the Python parameters; at the command line they are these options.
_OPTIONS = {"resume=True": "--resume", "overwrite=True": "--overwrite", "budget=False": "--no-budget",
            "point must": "--point must", "replicate must": "--replicate must"}


class _ShowVersion(argparse.Action):
    """``--version``: the installed version, looked up only when asked (importlib.metadata is slow
    to import)."""

    def __init__(self, option_strings, dest=argparse.SUPPRESS, **kwargs):
        super().__init__(option_strings, dest, nargs=0, help="show the version and exit", **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        from ..version import software_version

        parser.exit(message=f"broodline {software_version()}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="broodline",
        description="Simulate the evolution of breeding schedules in finite populations.",
    )
    parser.add_argument("--version", action=_ShowVersion)
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for entry in COMMANDS:
        module, _, function = entry.partition(":")
        getattr(importlib.import_module(module), function)(sub)
    return parser


def as_options(message: str) -> str:
    """A library message in the command line's words (``resume=True`` -> ``--resume``)."""
    for parameter, option in _OPTIONS.items():
        message = message.replace(parameter, option)
    return message


def _plain_warnings(command: str) -> None:
    """Show warnings meant for the user as one line each: ``broodline run: warning: ...``."""
    import warnings

    def show(message, category, filename, lineno, file=None, line=None):
        print(f"broodline {command}: warning: {message}", file=file or sys.stderr)

    warnings.showwarning = show


def _user_errors() -> tuple[type[Exception], ...]:
    """The errors said in one line (a user's mistake or the machine's state), not as a traceback.

    Imported when one is raised: the modules that raise them are loaded by then."""
    from ..config import ConfigError
    from ..meanfield import NoEquilibriumError
    from ..parallel import PoolError
    from ..store import ResultsError

    return (ConfigError, NoEquilibriumError, UserError, FileExistsError, FileNotFoundError,
            PermissionError, IsADirectoryError, ResultsError, PoolError)


def main(argv=None) -> int:
    from ..parallel.blas import one_blas_thread

    one_blas_thread()  # before numpy is imported
    parser = build_parser()
    args = parser.parse_args(argv)
    _plain_warnings(args.command)
    try:
        return args.func(args)
    except KeyboardInterrupt:
        print(f"broodline {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader (e.g. `| head`) left early: not an error of ours (Python docs, signal module)
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except Exception as err:
        if not isinstance(err, _user_errors()):
            raise
        print(f"broodline {args.command}: error: {as_options(str(err))}", file=sys.stderr)
        return 2


def entry_point() -> int:
    """What the ``broodline`` command and ``python -m sim`` run: ``main``, then, as the process
    is about to end, every object frozen (``gc.freeze``), so that the interpreter's exit does
    not walk them all again with the cyclic collector (about 0.1 s after a run, measured).
    Objects are still released by reference counting, and files are closed by their owners
    before this (the results file by its writer). Not in ``main``, which tests and scripts call
    in a process that goes on."""
    import gc

    try:
        return main()
    finally:
        gc.freeze()
