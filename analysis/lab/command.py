"""``broodline lab [CONFIG] [--port P] [--no-browser]``: serve the lab page for a config."""

from __future__ import annotations

import webbrowser
from pathlib import Path

__all__ = ["register", "cmd_lab"]


def cmd_lab(args) -> int:
    from sim.config import demo_config_path, load_config
    from sim.errors import UserError

    from .server import LabServer
    from .session import LabSession

    config = load_config(args.config or demo_config_path())
    try:
        session = LabSession(config)
    except ValueError as err:
        raise UserError(f"{args.config}: {err}") from None
    output = Path(args.output)
    if not output.is_dir():
        raise UserError(f"--output: {str(output)!r} is not a folder")
    try:
        server = LabServer(session, port=args.port, output=output)
    except OSError as err:
        raise UserError(f"--port {args.port}: cannot listen on 127.0.0.1 ({err.strerror or err})") from None
    print(f"broodline lab: serving {server.url} (saves go to {output.resolve()}; Ctrl-C to stop)", flush=True)
    if not args.no_browser:
        webbrowser.open(server.url)
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.close()
    return 0


def _port(text: str) -> int:
    import argparse

    if not text.isdigit() or int(text) > 65535:
        raise argparse.ArgumentTypeError(f"must be a whole number in [0, 65535]; got {text!r}")
    return int(text)


def register(sub) -> None:
    """Add ``lab`` to the ``broodline`` subparsers."""
    p = sub.add_parser("lab", help="a local web page that runs an invasion experiment as you watch")
    p.add_argument("config", nargs="?", help="experiment config (TOML) with [invasion] (default: the demo's)")
    p.add_argument("--port", type=_port, default=8765, help="port on 127.0.0.1 (default: 8765; 0: any free one)")
    p.add_argument("--no-browser", action="store_true", help="do not open a browser (print the address only)")
    p.add_argument("-o", "--output", default=".", help="folder where the page saves files (default: here)")
    p.set_defaults(func=cmd_lab)
