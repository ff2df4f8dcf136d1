"""``broodline demo``: run the demo invasion experiment, then compare, plot and report it."""

from __future__ import annotations

from pathlib import Path

from ..config import demo_config_path, load_config
from ..describe import describe_experiment
from .run import run_from_command_line

__all__ = ["register", "demo_config_path"]


def cmd_demo(args) -> int:
    out = Path(args.output)
    out.mkdir(parents=True, exist_ok=True)
    config_path = out / "demo.toml"  # a copy the user can edit and run again
    if not config_path.exists():  # never clobber a copy the user may have edited
        config_path.write_text(demo_config_path().read_text())
    config = load_config(demo_config_path())
    results = out / "demo.h5"
    print(describe_experiment(config))
    print()
    run_from_command_line(config, results, overwrite=True, quiet=args.quiet)
    from analysis.commands import finish_demo  # the command line alone may import analysis

    finish_demo(results, out)
    print(f"\nNext, edit the demo's config and run it yourself:\n"
          f"  broodline check {config_path}\n"
          f"  broodline run {config_path} -o {out / 'my-run.h5'}")
    return 0


def register(sub) -> None:
    """Add ``demo`` to the command line."""
    p = sub.add_parser("demo", help="run the demo invasion experiment (about a minute)")
    p.add_argument("-o", "--output", default="broodline-demo", help="folder for the demo's files")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_demo)
