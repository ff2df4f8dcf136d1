"""The lab: a local web page that drives the simulator and draws its replicates as they run.

``LabSession`` (session.py) holds the page's settings, replicates and theory
as plain Python; ``LabServer`` (server.py) serves the page (static/) and a
JSON interface to the session on 127.0.0.1; ``register`` (command.py) adds
``broodline lab`` to the command line. The session and server load on first
use, so registering the command stays light.
"""

from .command import register

__all__ = ["LabServer", "LabSession", "SavedFiles", "Tally", "register"]


def __getattr__(name):
    if name == "LabServer":
        from .server import LabServer

        return LabServer
    if name in ("LabSession", "SavedFiles", "Tally"):
        from . import session

        return getattr(session, name)
    raise AttributeError(f"module 'analysis.lab' has no attribute {name!r}")
