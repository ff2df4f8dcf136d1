"""Provenance of a results file: the config's hash and the differences between two configs."""

from __future__ import annotations

import hashlib
import json
from typing import Any

from .schema import Config

__all__ = ["config_hash", "config_differences"]


def config_hash(config: Config) -> str:
    """SHA-256 of the resolved config (canonical JSON); equal configs give equal hashes."""
    text = json.dumps(config.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def _flatten(value, path: str = "") -> dict[str, Any]:
    """Leaves of a JSON-like value by path (``allele[1].fecundity``); lists of scalars are leaves."""
    if isinstance(value, dict):
        out = {}
        for key, item in value.items():
            out.update(_flatten(item, f"{path}.{key}" if path else str(key)))
        return out
    if isinstance(value, list) and any(isinstance(v, (dict, list)) for v in value):
        out = {}
        for i, item in enumerate(value):
            out.update(_flatten(item, f"{path}[{i}]"))
        return out
    return {path: value}


def config_differences(old: Config | dict, new: Config | dict) -> list[str]:
    """Lines ``path: OLD -> NEW`` for every key where two resolved configs differ."""
    a, b = (_flatten(c.model_dump(mode="json") if isinstance(c, Config) else c) for c in (old, new))
    missing = object()
    lines = []
    for path in sorted(set(a) | set(b)):
        x, y = a.get(path, missing), b.get(path, missing)
        if x != y:
            show = [("(absent)" if v is missing else json.dumps(v)) for v in (x, y)]
            lines.append(f"{path}: {show[0]} -> {show[1]}")
    return lines
