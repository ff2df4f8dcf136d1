"""The lab page's controls: which config keys it sets, and how a typed value reaches the schema.

Every control names a key of the TOML config. A value typed on the page is
set in the config's raw dict and the whole dict is validated by
``sim.config.parse_config``, so a refusal reads exactly as it would for a
TOML file (``allele[1].adult_survival must be in [0, 1]; got 1.3``).

Keys: ``resident.KEY`` and ``mutant.KEY`` (the invasion's two alleles: an
effort allele shows its effort, the others their fecundity and adult
survival; a change of breeding to or from effort is valid at once, see
``_set_breeding``), ``SECTION.KEY`` (``tradeoff.KEY`` where the config has a
trade-off curve), ``environment.years`` (the year types' names,
comma-separated: naming some adds an ``[environment]``, emptying it removes
it, a new name at the end adds a year type and a changed one renames it,
keeping its multipliers), and, for a config with year types,
``environment.switching``, ``environment.year.NAME.KEY`` (the sweep's path of
a year's key) and ``environment.transitions.NAME`` (that year type's row of a
Markov chain, typed as comma-separated numbers). Where the number of year
types or the switching changes, the law is set to one that is valid at once:
equal probabilities, or rows of transitions that repeat them (an iid chain),
for the page to adjust.
"""

from __future__ import annotations

import copy
import re
from dataclasses import dataclass

from sim.config import Config

__all__ = ["Control", "controls", "page_raw", "set_control", "control_value", "control_of", "typed"]


@dataclass(frozen=True)
class Control:
    """One input of the page.

    Attributes
    ----------
    key : str
        ``resident.KEY``, ``mutant.KEY``, ``SECTION.KEY``, ``environment.year.NAME.KEY`` or
        ``environment.transitions.NAME`` (see the module's docstring).
    label : str
    kind : str
        ``"number"``, ``"integer"``, ``"numbers"`` (comma-separated), ``"names"``
        (comma-separated) or ``"choice"``.
    choices : tuple of str
        The allowed values of a choice ("" stands for "not set").
    unset : str
        What the page calls the choice "" (the schema's default then applies).
    """

    key: str
    label: str
    kind: str
    choices: tuple = ()
    unset: str = "(default)"


_BREEDING = ("iteroparous", "semelparous", "table", "effort")
_SCHEDULE = [("breeding", "breeding", "choice", _BREEDING), ("fecundity", "fecundity", "number", ()),
             ("adult_survival", "adult survival", "number", ()),
             ("effort", "effort", "number", ()),  # (breeding = "effort" only)
             ("juvenile_survival", "juvenile survival", "number", ()),
             ("maturity_age", "maturity age", "integer", ()),
             # parental care and brood size; an empty orphan survival is the juvenile survival
             ("orphan_survival", "orphan survival", "number", ()),
             ("brood_effect", "brood effect", "choice", ("", "exponential")),
             ("brood_scale", "brood scale", "number", ())]
_UNSET = {"brood_effect": "none"}  # a choice whose default has a name
_YEAR = [("juvenile_survival", "x juvenile survival"), ("fecundity", "x fecundity"),
         ("adult_survival", "x adult survival")]
_ON_CURVE = ("fecundity", "adult_survival")  # an effort allele's, read off the [tradeoff] curve
_TRADEOFF = [("max_fecundity", "max fecundity"), ("fecundity_shape", "fecundity shape"),
             ("max_adult_survival", "max adult survival"), ("survival_shape", "survival shape")]
# [tradeoff] made for an allele that turns to effort: a straight line through its fecundity m
# and survival s at effort 0.5 (max_fecundity 2 m, max_adult_survival 2 s, at most 1), or these
# values where it has no number for them
_CURVE_DEFAULTS = {"max_fecundity": 4.0, "max_adult_survival": 0.9}
_FIRST_EFFORT = 0.5


def controls(raw: dict | None = None) -> list[Control]:
    """Every control of the page, in page order; with ``raw`` (a config's raw dict) those of
    its year types too, each year's probability (or its row of transitions) and multipliers."""
    out = [Control(f"{who}.{key}", label, kind, choices, _UNSET.get(key, "(default)"))
           for who in ("resident", "mutant") for key, label, kind, choices in _SCHEDULE
           if _shown(raw, who, key)]
    out += [
        Control("density.form", "form", "choice", ("none", "beverton-holt", "ricker", "ceiling")),
        Control("density.acts_on", "acts on", "choice",
                ("", "recruitment", "fecundity", "adult-survival", "all-survival")),
        Control("density.capacity", "K", "number"),
        Control("invasion.mutant_count", "mutant count", "integer"),
        Control("experiment.replicates", "replicates", "integer"),
        Control("experiment.seed", "seed", "integer"),
    ]
    if (raw or {}).get("tradeoff") is not None:
        out += [Control(f"tradeoff.{key}", label, "number") for key, label in _TRADEOFF]
    environment = (raw or {}).get("environment")
    out.append(Control("environment.years", "year types", "names", unset="(constant)"))
    if environment:
        out.append(Control("environment.switching", "switching", "choice", ("iid", "markov")))
    for year in environment["year"] if environment else ():
        name = year["name"]
        if environment.get("switching", "iid") == "iid":
            out.append(Control(f"environment.year.{name}.probability", f"{name}: probability", "number"))
        else:
            out.append(Control(f"environment.transitions.{name}", f"{name}: next year", "numbers"))
        out += [Control(f"environment.year.{name}.{key}", f"{name}: {label}", "number") for key, label in _YEAR]
    return out


def _shown(raw: dict | None, who: str, key: str) -> bool:
    """Whether an allele's schedule shows a key: an effort allele its effort, not the fecundity
    and survival the curve gives; the others the reverse (without ``raw``: the latter)."""
    effort = raw is not None and _allele(raw, who).get("breeding") == "effort"
    return effort != (key in _ON_CURVE) if key in (*_ON_CURVE, "effort") else True


def _keys(raw: dict) -> set[str]:
    return {c.key for c in controls(raw)}


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


def _place(raw: dict, key: str, *, create: bool = False) -> tuple[dict | list, str | int]:
    """The table (or list) that holds a control's value in ``raw``, and its name (or index) there
    (an absent section: an empty table, added to ``raw`` only with ``create``)."""
    parts = key.split(".")
    if parts[0] in ("resident", "mutant"):
        return _allele(raw, parts[0]), parts[1]
    if parts[0] == "environment":
        # a year name may itself hold dots: it is everything between the fixed parts
        environment = raw["environment"]
        names = [y["name"] for y in environment["year"]]
        if parts[1] == "transitions":
            return environment["transitions"], names.index(".".join(parts[2:]))
        name = ".".join(parts[2:-1])
        return environment["year"][names.index(name)], parts[-1]
    return (raw.setdefault(parts[0], {}) if create else raw.get(parts[0], {})), parts[1]


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


def _equal_law(environment: dict) -> None:
    """Give ``environment`` a valid law for its year types: equal probabilities (iid), or
    transitions whose every row repeats them (markov)."""
    years = environment["year"]
    share = 1.0 / len(years)
    if environment.get("switching", "iid") == "iid":
        for year in years:
            year["probability"] = share
        environment.pop("transitions", None)
        environment.pop("start", None)
    else:
        for year in years:
            year.pop("probability", None)
        environment["transitions"] = [[share] * len(years) for _ in years]


def _set_year_names(raw: dict, text) -> None:
    """``environment.years``: add, rename, remove year types, or the whole ``[environment]``."""
    value = typed(text)
    names = [] if value is None else [str(n).strip() for n in (value if isinstance(value, list) else [value])]
    names = [n for n in names if n]
    if not names:
        raw.pop("environment", None)
        return
    environment = raw.setdefault("environment", {"switching": "iid", "year": []})
    old = environment["year"]
    environment["year"] = [dict(old[i], name=n) if i < len(old) else {"name": n} for i, n in enumerate(names)]
    if len(names) != len(old):
        _equal_law(environment)


def _set_switching(raw: dict, value) -> None:
    """``environment.switching``: iid or markov, with a law valid for it where it changes."""
    environment = raw["environment"]
    if value != environment.get("switching", "iid"):
        environment["switching"] = value
        _equal_law(environment)


def _number(value):
    return value if isinstance(value, (int, float)) and not isinstance(value, bool) else None


def _set_breeding(raw: dict, who: str, value) -> None:
    """``resident.breeding`` / ``mutant.breeding``, valid at once across effort and the rest:
    an allele turning to effort leaves its fecundity and survival to the [tradeoff] curve (made
    where there is none: a straight line through them at effort 0.5) at effort 0.5; one leaving
    effort takes the curve's fecundity and survival at its effort; [tradeoff] goes when no
    allele breeds by effort."""
    allele = _allele(raw, who)
    old = allele.get("breeding")
    allele["breeding"] = value
    if value == "effort" and old != "effort":
        m, s = (_number(allele.pop(k, None)) for k in _ON_CURVE)
        if raw.get("tradeoff") is None:
            raw["tradeoff"] = {
                "max_fecundity": 2.0 * m if m is not None else _CURVE_DEFAULTS["max_fecundity"],
                "max_adult_survival": (min(1.0, 2.0 * s) if s else _CURVE_DEFAULTS["max_adult_survival"])}
        allele.setdefault("effort", _FIRST_EFFORT)
    elif old == "effort" and value != "effort":
        e = _number(allele.pop("effort", None))
        curve = raw.get("tradeoff") or {}
        if e is not None and all(_number(curve.get(k)) is not None for k in _CURVE_DEFAULTS):
            b = curve["max_fecundity"] * e ** curve.get("fecundity_shape", 1.0)
            p = curve["max_adult_survival"] * (1.0 - e) ** curve.get("survival_shape", 1.0)
            b, p = float(f"{b:.10g}"), float(f"{p:.10g}")
            allele["fecundity"], allele["adult_survival"] = ([b], [p]) if value == "table" else (b, p)
            if value == "semelparous" and allele.get("maturity_age", 1) == 1:
                del allele["adult_survival"]  # (it breeds in its first season: no survival is used)
        if not any(a.get("breeding") == "effort" for a in raw["allele"]):
            raw.pop("tradeoff", None)


def set_control(raw: dict, key: str, value) -> dict:
    """A copy of ``raw`` with the control ``key`` set (``None`` removes the key).

    Raises
    ------
    KeyError
        For a key that is not one of ``controls()``.
    """
    if key not in _keys(raw):
        raise KeyError(f"the lab has no control {key!r}")
    raw = copy.deepcopy(raw)
    if key == "environment.years":
        _set_year_names(raw, value)
        return raw
    if key == "environment.switching":
        _set_switching(raw, typed(value))
        return raw
    if key in ("resident.breeding", "mutant.breeding"):
        _set_breeding(raw, key.split(".")[0], typed(value))
        return raw
    table, name = _place(raw, key, create=True)
    value = typed(value)
    if isinstance(table, list):  # a row of transitions: always a list, one value or many
        table[name] = value if isinstance(value, list) else [value]
    elif value is None:
        table.pop(name, None)
    else:
        table[name] = value
    return raw


def control_value(raw: dict, key: str):
    """The value a control shows (None where the key is not set)."""
    environment = raw.get("environment")
    if key == "environment.years":
        return ", ".join(y["name"] for y in environment["year"]) if environment else None
    if key == "environment.switching":
        return environment.get("switching", "iid") if environment else None
    table, name = _place(raw, key)
    return table[name] if isinstance(table, list) else table.get(name)


def control_of(problem: str, raw: dict) -> str | None:
    """The control a schema message is about (by its leading path), or None."""
    path = problem.split(" ", 1)[0].rstrip(":")
    keys = _keys(raw)
    names = [a.get("name") for a in raw["allele"]]
    for who in ("resident", "mutant"):
        prefix = f"allele[{names.index(raw['invasion'][who])}]."
        if path.startswith(prefix):
            key = f"{who}.{path[len(prefix):].split('.')[0]}"
            return key if key in keys else None
    year = re.match(r"environment\.(year|transitions)\[(\d+)\](?:\.(\w+))?", path)
    if year and "environment" in raw and int(year[2]) < len(raw["environment"].get("year", [])):
        name = raw["environment"]["year"][int(year[2])]["name"]
        key = f"environment.year.{name}.{year[3]}" if year[1] == "year" else f"environment.transitions.{name}"
        if year[1] == "year" and year[3] == "name":  # names are typed in one box
            key = "environment.years"
        return key if key in keys else None
    return path if path in keys else None
