"""The lab page's controls: which config keys it sets, and how a typed value reaches the schema.

Every control names a key of the TOML config. A value typed on the page is
set in the config's raw dict and the whole dict is validated by
``sim.config.parse_config``, so a refusal reads exactly as it would for a
TOML file (``allele[1].adult_survival must be in [0, 1]; got 1.3``).
"""

from __future__ import annotations

import copy
from dataclasses import dataclass

from sim.config import Config

__all__ = ["Control", "controls", "page_raw", "set_control", "control_value", "control_of", "typed"]


@dataclass(frozen=True)
class Control:
    """One input of the page.

    Attributes
    ----------
    key : str
        ``resident.KEY``, ``mutant.KEY`` (the invasion's two alleles) or ``SECTION.KEY``.
    label : str
    kind : str
        ``"number"``, ``"integer"`` or ``"choice"``.
    choices : tuple of str
        The allowed values of a choice ("" stands for "not set").
    """

    key: str
    label: str
    kind: str
    choices: tuple = ()


_BREEDING = ("iteroparous", "semelparous", "table")
_SCHEDULE = [("breeding", "breeding", "choice", _BREEDING), ("fecundity", "fecundity", "number", ()),
             ("adult_survival", "adult survival", "number", ()),
             ("juvenile_survival", "juvenile survival", "number", ()),
             ("maturity_age", "maturity age", "integer", ())]


def controls() -> list[Control]:
    """Every control of the page, in page order."""
    out = [Control(f"{who}.{key}", label, kind, choices)
           for who in ("resident", "mutant") for key, label, kind, choices in _SCHEDULE]
    return out + [
        Control("density.form", "form", "choice", ("none", "beverton-holt", "ricker", "ceiling")),
        Control("density.acts_on", "acts on", "choice",
                ("", "recruitment", "fecundity", "adult-survival", "all-survival")),
        Control("density.capacity", "K", "number"),
        Control("invasion.mutant_count", "mutant count", "integer"),
        Control("experiment.replicates", "replicates", "integer"),
        Control("experiment.seed", "seed", "integer"),
    ]


_KEYS = {c.key for c in controls()}


def page_raw(config: Config) -> dict:
    """The raw dict of a config as the page holds it: one point (no sweep), the invasion kept.

    Raises
    ------
    ValueError
        Without ``[invasion]``: the page is built around a resident and a mutant.
    """
    if config.invasion is None:
        raise ValueError("invasion: the lab needs an [invasion] table naming the resident and the mutant")
    raw = config.model_dump(mode="python", exclude_none=True)
    raw.pop("sweep", None)
    return raw


def _allele(raw: dict, who: str) -> dict:
    name = raw["invasion"][who]
    return next(a for a in raw["allele"] if a.get("name") == name)


def typed(text):
    """A value typed on the page as TOML would give it: int, float, string, a list of them
    (comma-separated, for a table schedule's ages), or None for empty."""
    if not isinstance(text, str):
        return text
    text = text.strip()
    if text == "":
        return None
    if "," in text:
        return [typed(part) for part in text.strip("[]").split(",")]
    for kind in (int, float):
        try:
            return kind(text)
        except ValueError:
            pass
    return text


def set_control(raw: dict, key: str, value) -> dict:
    """A copy of ``raw`` with the control ``key`` set (``None`` removes the key).

    Raises
    ------
    KeyError
        For a key that is not one of ``controls()``.
    """
    if key not in _KEYS:
        raise KeyError(f"the lab has no control {key!r}")
    raw = copy.deepcopy(raw)
    section, name = key.split(".")
    table = _allele(raw, section) if section in ("resident", "mutant") else raw.setdefault(section, {})
    value = typed(value)
    if value is None:
        table.pop(name, None)
    else:
        table[name] = value
    return raw


def control_value(raw: dict, key: str):
    """The value a control shows (None where the key is not set)."""
    section, name = key.split(".")
    table = _allele(raw, section) if section in ("resident", "mutant") else raw.get(section, {})
    return table.get(name)


def control_of(problem: str, raw: dict) -> str | None:
    """The control a schema message is about (by its leading path), or None."""
    path = problem.split(" ", 1)[0].rstrip(":")
    names = [a.get("name") for a in raw["allele"]]
    for who in ("resident", "mutant"):
        prefix = f"allele[{names.index(raw['invasion'][who])}]."
        if path.startswith(prefix):
            key = f"{who}.{path[len(prefix):].split('.')[0]}"
            return key if key in _KEYS else None
    return path if path in _KEYS else None
