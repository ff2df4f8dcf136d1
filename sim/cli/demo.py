"""``broodline demo``: run the demo invasion experiment, then compare, plot and report it."""

from __future__ import annotations

from pathlib import Path

from ..errors import UserError
from .run import run_from_command_line

__all__ = ["register"]


def cmd_demo(args) -> int:
    from ..config import ConfigError, demo_config_path, load_config
    from ..describe import describe_experiment

    out = Path(args.output)
    if out.exists() and not out.is_dir():
        raise UserError(f"-o {out}: exists and is not a folder (the demo writes several files there)")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise UserError(f"-o {out}: cannot create the folder ({err.strerror})") from None
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
    try:
        config = load_config(config_path)
    except ConfigError as err:  # the user's edited copy: name it, with the way back
        raise ConfigError([f"{config_path} (the demo's own config; delete it for the shipped one): "
                           f"{problem}" for problem in err.problems]) from None
    print(describe_experiment(config))
    print()
    run_from_command_line(config, results, overwrite=True, quiet=args.quiet)
    from analysis.commands import finish_demo  # the command line alone may import analysis

    finish_demo(results, out)
    print(f"\nNext, edit the demo's config and run it yourself:\n"
          f"  broodline check {config_path}\n"
          f"  broodline run {config_path} -o {out / 'my-run.h5'}\n"
          f"  or run the demo again from it: broodline demo -o {out} --overwrite")
    return 0


def register(sub) -> None:
    """Add ``demo`` to the command line."""
    p = sub.add_parser("demo", help="run the demo invasion experiment (seconds on two cores)")
    p.add_argument("-o", "--output", default="broodline-demo", help="folder for the demo's files")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--overwrite", action="store_true", help="replace the results of an earlier demo")
    p.set_defaults(func=cmd_demo)
