"""Values made plain for JSON output (the commands' ``--json`` and the lab page)."""

from __future__ import annotations

import math

__all__ = ["jsonable"]


def jsonable(value):
    """Plain JSON values: nan and inf become null, numpy scalars Python numbers."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
