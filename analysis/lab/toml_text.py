"""A config written back as TOML text (the standard library reads TOML but does not write it)."""

from __future__ import annotations

import json
import re

from sim.config import Config

__all__ = ["toml_text", "raw_toml_text"]

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")
_ORDER = ("experiment", "density", "offspring", "allele", "invasion", "mutation", "sweep")


def _key(key: str) -> str:
    return key if _BARE_KEY.match(key) else json.dumps(key)


def _value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)  # Python's repr of a finite float is valid TOML and round-trips exactly
    if isinstance(value, str):
        return json.dumps(value)  # a JSON string is a valid TOML basic string
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as a TOML value")


def _table(lines: list[str], name: str, table: dict, *, array: bool = False) -> None:
    """Scalars and lists of ``table`` under its header, then its sub-tables and arrays of tables."""
    lines += ["", f"[[{name}]]" if array else f"[{name}]"]
    nested = []
    for key, value in table.items():
        if isinstance(value, dict) or (isinstance(value, list) and value and all(isinstance(v, dict) for v in value)):
            nested.append((key, value))
        elif value is not None:
            lines.append(f"{_key(key)} = {_value(value)}")
    for key, value in nested:
        for item in value if isinstance(value, list) else [value]:
            _table(lines, f"{name}.{_key(key)}", item, array=isinstance(value, list))


def toml_text(config: Config, *, header: str = "") -> str:
    """The config as TOML that ``sim.config.load_config`` reads back to an equal config.

    Parameters
    ----------
    config : Config
    header : str
        One line written as a comment at the top.
    """
    return raw_toml_text(config.model_dump(mode="json", exclude_none=True), header=header)


def raw_toml_text(raw: dict, *, header: str = "") -> str:
    """A raw config (a dict, as TOML gives, checked or not) as TOML text; None values left out."""
    lines = [f"# {header}"] if header else []
    for section in [*_ORDER, *(k for k in raw if k not in _ORDER)]:
        value = raw.get(section)
        if isinstance(value, list):
            for item in value:
                _table(lines, _key(section), item, array=True)
        elif isinstance(value, dict):
            _table(lines, _key(section), value)
    return "\n".join(lines).lstrip("\n") + "\n"
