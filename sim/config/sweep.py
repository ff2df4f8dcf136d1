"""Sweep paths: read a path, write a path, expand ``[sweep]`` into points.

A path names one key of a config: ``SECTION.KEY`` (``density.capacity``) or
``allele.NAME.KEY`` (``allele.one-shot.fecundity``) or
``environment.year.NAME.KEY`` (``environment.year.harsh.juvenile_survival``). ``[sweep]`` maps paths to
lists of values; each plain key is a factor, each ``[[sweep.linked]]`` group
one factor whose lists advance together. The simulator (``sweep_points``) and
the analysis layer (thresholds, comparisons, figures) read sweeps only
through this module.
"""

from __future__ import annotations

import copy
import itertools
import math
import typing
from collections import Counter
from dataclasses import dataclass
from typing import Any

from pydantic import BaseModel, ConfigDict, ValidationError

from .messages import messages
from .schema import LINKED, AlleleSection, Config, ConfigError, Probability, YearSection

__all__ = [
    "swept_values",
    "SweepPoint",
    "SweepFactor",
    "sweep_points",
    "sweep_factors",
    "swept_paths",
    "get_path",
    "is_probability_path",
    "set_path",
    "with_values",
]


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


@dataclass(frozen=True)
class SweepFactor:
    """One factor of a sweep: a plain key, or a ``[[sweep.linked]]`` group read in step.

    Attributes
    ----------
    values : dict
        path -> list of values (equal lengths); one path for a plain key.
    """

    values: dict[str, list]

    @property
    def paths(self) -> list[str]:
        return list(self.values)

    @property
    def linked(self) -> bool:
        """True for a ``[[sweep.linked]]`` group of several paths."""
        return len(self.values) > 1

    @property
    def levels(self) -> int:
        return len(next(iter(self.values.values())))

    def level(self, k: int) -> dict[str, Any]:
        """Every path's value at level ``k``."""
        return {path: values[k] for path, values in self.values.items()}

    @property
    def axis(self) -> str | None:
        """The path a threshold or a figure is read along: the first member whose values are
        real numbers, distinct and in increasing or decreasing order (None if no member is)."""
        for path, values in self.values.items():
            if all(_is_number(v) for v in values) and len(values) > 1:
                steps = [b - a for a, b in itertools.pairwise(values)]
                if all(s > 0 for s in steps) or all(s < 0 for s in steps):
                    return path
        return None

    def along(self, value: float) -> dict[str, Any]:
        """Every member's value where the axis is at ``value``: piecewise linear between the
        listed levels, held at the end values beyond them (a plain key: just the axis)."""
        axis = self.axis
        if axis is None:
            raise ValueError(f"sweep factor {self.paths}: no member has ordered numeric values")
        x = [float(v) for v in self.values[axis]]
        order = sorted(range(len(x)), key=x.__getitem__)
        xs = [x[i] for i in order]
        out = {axis: float(value)}
        for path, values in self.values.items():
            if path == axis:
                continue
            if not all(_is_number(v) for v in values):
                raise ValueError(f"sweep factor {self.paths}: {path} is not numeric; "
                                 "it cannot be read between its levels")
            out[path] = _interp(float(value), xs, [float(values[i]) for i in order])
        return out


def _interp(x: float, xs: list[float], ys: list[float]) -> float:
    if x <= xs[0]:
        return ys[0]
    for (x0, y0), (x1, y1) in itertools.pairwise(zip(xs, ys)):
        if x <= x1:
            return y0 + (y1 - y0) * (x - x0) / (x1 - x0)
    return ys[-1]


def set_path(raw: dict, path: str, value) -> None:
    """Set the key a path names in a raw (dict) config."""
    parts = path.split(".")
    if parts[0] == "allele":
        for allele in raw["allele"]:
            if allele.get("name") == parts[1]:
                allele[parts[2]] = value
                return
        raise KeyError(path)
    if parts[:2] == ["environment", "year"]:
        for year in raw["environment"]["year"]:
            if year.get("name") == parts[2]:
                year[parts[3]] = value
                return
        raise KeyError(path)
    raw.setdefault(parts[0], {})[parts[1]] = value


class SweepPoint(BaseModel):
    """One point of an experiment: its index, the swept values and the full config there."""

    model_config = ConfigDict(frozen=True)

    index: int
    values: dict[str, Any]
    config: Config


def sweep_factors(config: Config) -> list[SweepFactor]:
    """The factors of the sweep, each a ``SweepFactor`` of paths whose values vary together.

    A plain ``[sweep]`` key is a factor of one path; a ``[[sweep.linked]]``
    group is one factor whose equal-length lists are read in step. Plain
    keys come first (in file order), then the linked groups (in file order).
    """
    if not config.sweep:
        return []
    factors = [{path: values} for path, values in config.sweep.items() if path != LINKED]
    return [SweepFactor(dict(f)) for f in factors + list(config.sweep.get(LINKED, []))]


def swept_paths(config: Config) -> list[str]:
    """Every swept path, in the order of the points table's columns."""
    return [path for factor in sweep_factors(config) for path in factor.paths]


def swept_values(config: Config, path: str) -> list | None:
    """The values ``path`` is swept over, in file order (None if it is not swept)."""
    factor = next((f for f in sweep_factors(config) if path in f.values), None)
    return None if factor is None else list(factor.values[path])


def sweep_points(config: Config) -> list[SweepPoint]:
    """Expand ``[sweep]`` into points: the cartesian product of its factors.

    Each plain key is a factor; each ``[[sweep.linked]]`` group is one factor
    whose lists advance together (a zip). The last factor varies fastest.
    Each point's config is validated on its own, so a swept value out of
    range is refused with the point and the key named. Without a sweep there
    is one point, the config itself.
    """
    base = config.model_dump(exclude={"sweep"}, exclude_none=True)
    factors = sweep_factors(config)
    if not factors:
        return [SweepPoint(index=0, values={}, config=Config.model_validate(base))]
    points, problems = [], []  # problems: (point, where, message)
    combos = list(itertools.product(*(range(f.levels) for f in factors)))
    for i, combo in enumerate(combos):
        raw = copy.deepcopy(base)
        values = {p: v for factor, k in zip(factors, combo) for p, v in factor.level(k).items()}
        for path, value in values.items():
            set_path(raw, path, value)
        try:
            points.append(SweepPoint(index=i, values=values, config=Config.model_validate(raw)))
        except ValidationError as err:
            where = ", ".join(f"{p} = {v!r}" for p, v in values.items())
            problems += [(i, where, m) for m in messages(err)]
    if problems:
        # a problem of every point is the unswept keys': said once, not once a point
        counts = Counter(m for _, _, m in problems)
        everywhere = {m for m, n in counts.items() if n == len(combos) > 1}
        raise ConfigError([f"every sweep point: {m}" for m in counts if m in everywhere]
                          + [f"sweep point {i} ({where}): {m}" for i, where, m in problems if m not in everywhere])
    return points


def get_path(config: Config, path: str):
    """The value at a path (None where the key is unset)."""
    parts = path.split(".")
    if parts[0] == "allele":
        return getattr(config.allele[config.allele_index(parts[1])], parts[2])
    if parts[:2] == ["environment", "year"]:
        return getattr(next(y for y in config.environment.year if y.name == parts[2]), parts[3])
    return getattr(getattr(config, parts[0]), parts[1])


def is_probability_path(path: str) -> bool:
    """Whether the key at a path holds a share in [0, 1] (the schema's ``Probability``: a
    survival, an effort, a year's probability, the mutation rate...)."""
    parts = path.split(".")
    if parts[0] == "allele" and len(parts) == 3:
        field = AlleleSection.model_fields.get(parts[2])
    elif parts[:2] == ["environment", "year"] and len(parts) == 4:
        field = YearSection.model_fields.get(parts[3])
    elif len(parts) == 2 and parts[0] in Config.model_fields:
        section = Config.model_fields[parts[0]].annotation
        section = next((t for t in typing.get_args(section) if isinstance(t, type)), section)  # X | None
        field = getattr(section, "model_fields", {}).get(parts[1])
    else:
        field = None
    if field is None:
        return False
    # pydantic keeps a bare Annotated type's markers in ``metadata``; in a union, the type itself
    share = typing.get_args(Probability)[-1]  # Probability's validator
    return share in field.metadata or Probability in typing.get_args(field.annotation)


def with_values(config: Config, values: dict) -> Config:
    """``config`` with the given paths set and its own sweep dropped, checked as a sweep point.

    Raises
    ------
    ConfigError
        Naming the path and the reason, for a path that names nothing or a
        value out of range.
    """
    raw = config.model_dump(mode="python", exclude_none=True)
    raw["sweep"] = {path: [value] for path, value in values.items()}
    try:
        probe = Config.model_validate(raw)
        return sweep_points(probe)[0].config
    except ValidationError as err:
        raise ConfigError(messages(err)) from None
    except ConfigError as err:
        where = ", ".join(f"{p} = {v!r}" for p, v in values.items())
        raise ConfigError([f"{where}: {m.split('): ', 1)[-1]}" if m.startswith("sweep point") else m
                           for m in err.problems]) from None
