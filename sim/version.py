"""The installed broodline's version (what results files and ``--version`` record)."""

from importlib.metadata import PackageNotFoundError, version

__all__ = ["software_version"]


def software_version() -> str:
    """The version of the installed ``broodline`` distribution (``0+unknown`` in a source tree)."""
    try:
        return version("broodline")
    except PackageNotFoundError:  # running from a source tree
        return "0+unknown"
