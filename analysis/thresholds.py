"""The threshold of a parameter: the value at which the mutant's invasion fitness is 1.

A parameter is named by a sweep path (``allele.NAME.KEY``, ``density.capacity``,
...) and set on a config with the sweep machinery of ``sim.config``, so a
value is checked exactly as a swept value would be.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np
from pydantic import ValidationError
from scipy.optimize import brentq

from sim.config import (
    Config,
    ConfigError,
    SweepFactor,
    get_path,
    is_probability_path,
    parse_config,
    sweep_points,
    swept_values,
    with_values,
)
from sim.meanfield import NoEquilibriumError

from .invasion import invasion_fitness

__all__ = ["ThresholdResult", "with_values", "parameter_value", "fitness_along", "establishment_along", "threshold"]

_GRID = 64  # intervals scanned for sign changes before the root is polished
_MAX_UPPER = 1e6  # an open-ended bracket is extended geometrically up to here
_ROUNDING = 1e-9  # |fitness - 1| below this is solver precision, not a side of the threshold


@dataclass(frozen=True)
class ThresholdResult:
    """Where invasion fitness crosses 1 along one parameter.

    Attributes
    ----------
    parameter : str
        The sweep path.
    value : float
        The threshold (nan when none was found).
    converged : bool
        True when a crossing was found and polished to ``tol``.
    bracket : tuple of float
        The range searched.
    fitness_at_bracket : tuple of float
        Invasion fitness at both ends of ``bracket`` (nan where the resident
        has no equilibrium).
    invades_above : bool or None
        True when the mutant invades above the threshold, False below it,
        None without a threshold.
    crossings : int
        Sign changes of fitness - 1 seen on the scan grid (more than one: the
        first is reported).
    message : str
        What was found, in words.
    at : dict
        Other swept parameters held fixed at these values (empty if none).
    linked : dict
        Along a ``[[sweep.linked]]`` group: the other members' values at the
        threshold (``parameter`` is the group's axis); empty otherwise.
    standard_error : float
        In a variable environment, the threshold's standard error from the
        year sampling (``analysis.varying_years``); nan otherwise.
    replacement : float
        In a density-regulated variable environment: where the resident stops
        invading back (its stochastic invasion fitness against the mutant as
        resident crosses 1), on the mutant's side of ``value``. Between the
        two each allele invades the other (they coexist), so a large
        population fixes the mutant only past ``replacement``; equal to
        ``value`` where no such region was found; nan otherwise.
    replacement_standard_error : float
    """

    parameter: str
    value: float
    converged: bool
    bracket: tuple[float, float]
    fitness_at_bracket: tuple[float, float]
    invades_above: bool | None
    crossings: int
    message: str
    at: dict = field(default_factory=dict)
    linked: dict = field(default_factory=dict)
    standard_error: float = float("nan")
    replacement: float = float("nan")
    replacement_standard_error: float = float("nan")

    def as_dict(self) -> dict:
        d = asdict(self)
        d["bracket"], d["fitness_at_bracket"] = list(self.bracket), list(self.fitness_at_bracket)
        if not self.linked:  # the key appears only for a threshold along a linked group
            del d["linked"]
        for key in ("standard_error", "replacement", "replacement_standard_error"):
            if math.isnan(d[key]):  # only in a variable environment
                del d[key]
        return d


def parameter_value(config: Config, parameter: str):
    """The current value at a sweep path (None where the key is unset)."""
    return get_path(config, parameter)


def _check_parameter(config: Config, parameter: str) -> None:
    """Refuse a path that names nothing, or a key that is not a real number."""
    probe = config.model_dump(mode="python", exclude_none=True)
    probe["sweep"] = {parameter: [0]}
    try:
        Config.model_validate(probe)  # checks the path only; values are checked per point
    except ValidationError:
        try:
            parse_config(probe)
        except ConfigError as err:  # reworded: the path is a parameter here, not a sweep key
            prefix = f"sweep.{parameter!r}: "
            raise ConfigError(
                [f"parameter {parameter!r}: {m.removeprefix(prefix)}" for m in err.problems]
            ) from None
    current = parameter_value(config, parameter)
    if isinstance(current, int) and not isinstance(current, bool):  # the schema's int fields
        raise ConfigError(
            f"{parameter}: takes whole numbers; a threshold needs a continuous parameter "
            "(sweep it instead)"
        )
    if isinstance(current, list):
        raise ConfigError(f"{parameter}: is a list by age; a threshold needs one number")
    if current is not None and (isinstance(current, bool) or not isinstance(current, (int, float))):
        raise ConfigError(f"{parameter}: is not a number (got {current!r})")


def fitness_along(config: Config, parameter: str, values, *, group: SweepFactor | None = None
                  ) -> np.ndarray:
    """Invasion fitness at each value of ``parameter`` (nan: no resident equilibrium).

    With ``group`` (a linked sweep factor whose axis is ``parameter``), the
    other members move with it (``SweepFactor.along``).
    """
    return _along(config, parameter, values, group, invasion_fitness)


def establishment_along(config: Config, parameter: str, values, *, group: SweepFactor | None = None
                        ) -> np.ndarray:
    """The introduced mutants' establishment probability (branching process) at each value of
    ``parameter`` (nan: no resident equilibrium); ``group`` as in ``fitness_along``."""
    from .invasion import predict

    return _along(config, parameter, values, group, lambda point: predict(point).establishment_probability)


def _along(config: Config, parameter: str, values, group, quantity) -> np.ndarray:
    base = config.model_copy(update={"sweep": None})
    setting = _setting(parameter, group)
    return np.array([_at(base, setting, float(v), quantity) for v in values], dtype=float)


def _setting(parameter: str, group: SweepFactor | None):
    """value -> the paths to set: the parameter alone, or every member of its linked group."""
    if group is None:
        return lambda value: {parameter: value}
    return group.along


def _at(base: Config, setting, value: float, quantity=invasion_fitness) -> float:
    """``quantity`` (of a point config) where ``setting(value)`` is set; nan without equilibrium."""
    sweep = {path: [v] for path, v in setting(value).items()}
    point = sweep_points(base.model_copy(update={"sweep": sweep}))[0].config  # checked as a point
    try:
        return float(quantity(point))
    except NoEquilibriumError:
        return float("nan")


def more_crossings_words(crossings: int, bracket) -> str:
    """What follows "the mutant invades above (below) it" where invasion fitness crosses 1 more
    than once in the bracket: the side holds only up to the next crossing ("" for one)."""
    if crossings <= 1:
        return ""
    lo, hi = bracket
    return (f"; up to the next crossing: invasion fitness passes 1 at {crossings} values in "
            f"[{lo:g}, {hi:g}], the lowest shown here (broodline threshold --bracket LOW HIGH "
            "finds the others)")


def _default_bracket(config: Config, parameter: str) -> tuple[float, float, bool]:
    """(lo, hi, open_ended): the swept range, [0, 1] for a probability, else [0, extendable]."""
    swept = swept_values(config, parameter)
    if swept:
        values = [float(v) for v in swept]
        return min(values), max(values), False
    if is_probability_path(parameter):
        return 0.0, 1.0, False
    current = parameter_value(config, parameter)
    return 0.0, max(2.0 * float(current or 0.0), 1.0), True


def threshold(
    config: Config, parameter: str, *, bracket=None, tol: float = 1e-10,
    group: SweepFactor | None = None,
) -> ThresholdResult:
    """The value of ``parameter`` at which the mutant's invasion fitness equals 1.

    Parameters
    ----------
    config : Config
        A config with ``[invasion]`` (its sweep, if any, is ignored except to
        give the default bracket).
    parameter : str
        A sweep path naming a real-valued key, e.g. ``allele.one-shot.fecundity``,
        ``allele.perennial.adult_survival`` or ``density.capacity``.
    bracket : (float, float), optional
        Range to search. By default the swept range when ``parameter`` is
        swept, [0, 1] for a probability, otherwise [0, 2 x current value]
        extended fourfold at a time (up to 1e6) until fitness - 1 changes sign.
    tol : float, optional
        Absolute tolerance of the root.
    group : SweepFactor, optional
        A ``[[sweep.linked]]`` group whose axis is ``parameter``: the other
        members move with it, read linearly between the group's levels (held
        at the end levels beyond them); the result names them in ``linked``.

    Returns
    -------
    ThresholdResult
        ``converged`` is False, with the fitness at both ends, when no
        crossing lies in the range: then there is no threshold there.

    Notes
    -----
    Fitness - 1 is scanned on a grid of 64 intervals, and the first sign
    change is polished with Brent's method (scipy.optimize.brentq). Points
    where the resident has no equilibrium are skipped. Invasion fitness is
    defined in ``analysis.invasion.invasion_fitness`` (Metz, Nisbet & Geritz
    1992). Special cases with closed forms: Cole (1954) B_s = B_i + 1;
    Charnov & Schaffer (1973) B_s = B_i + P / c; B_s = B_i / (1 - P) with
    density dependence on recruitment (Mylius & Diekmann 1995).
    """
    if config.invasion is None:
        raise ConfigError(
            "invasion: a threshold needs an [invasion] table naming resident and mutant"
        )
    _check_parameter(config, parameter)
    if group is not None:
        if group.axis != parameter:
            raise ConfigError(f"{parameter}: not the axis of the linked group {group.paths} "
                              f"(its axis is {group.axis})")
        for member in group.paths:
            if member != parameter:
                _check_parameter(config, member)
    setting = _setting(parameter, group)
    if bracket is None:
        lo, hi, open_ended = _default_bracket(config, parameter)
    else:
        lo, hi = (float(b) for b in bracket)
        open_ended = False
        if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
            raise ConfigError(f"bracket: needs two finite numbers, low < high; got {bracket!r}")
        with_values(config, setting(lo))  # refuse an out-of-range end now, naming it
    if bracket is None:
        try:
            with_values(config, setting(lo))
        except ConfigError:  # a key that must be > 0 (e.g. density.capacity)
            lo = hi * 1e-3
    with_values(config, setting(hi))
    base = config.model_copy(update={"sweep": None})

    def excess(v):
        return _at(base, setting, v) - 1.0

    scanned = []  # every grid's values: a widened grid is coarser, and may step over a peak
    while True:
        grid = np.linspace(lo, hi, _GRID + 1)
        ex = np.array([excess(v) for v in grid])
        scanned.append(ex)
        crossings = _crossings(ex)
        if crossings or not open_ended or hi >= _MAX_UPPER:
            break
        hi = min(hi * 4.0, _MAX_UPPER)
    ends = (float(ex[0] + 1.0), float(ex[-1] + 1.0))
    if not crossings:
        every = np.concatenate(scanned)
        f = every[np.isfinite(every)] + 1.0
        signed = np.abs(f - 1.0) > _ROUNDING
        if f.size == 0:
            why = "the resident has no equilibrium anywhere in the range"
        elif not signed.any():
            why = "invasion fitness is 1 throughout (the mutant is neutral)"
        else:
            side = "above" if f[signed][0] > 1 else "below"
            where = "throughout the range" if side == "above" else "nowhere in the range"
            why = (
                f"invasion fitness stays {side} 1 (from {f.min():.6g} to {f.max():.6g}), "
                f"so the mutant invades {where}"
            )
        return ThresholdResult(
            parameter,
            float("nan"),
            False,
            (lo, hi),
            ends,
            None,
            0,
            f"no threshold of {parameter} in [{lo:g}, {hi:g}]: {why}",
        )
    i, j, invades_above = crossings[0]
    value = (
        grid[i]
        if i == j
        else brentq(excess, grid[i], grid[j], xtol=tol, rtol=4 * np.finfo(float).eps, maxiter=500)
    )
    side = "above" if invades_above else "below"
    linked = {p: v for p, v in setting(float(value)).items() if p != parameter}
    msg = f"{parameter} = {value:.10g}: the mutant invades {side} it"
    if linked:
        msg += (" (along the linked group, axis " + parameter + ": there "
                + ", ".join(f"{p} = {v:.10g}" for p, v in linked.items()) + ")")
    msg += more_crossings_words(len(crossings), (lo, hi))
    return ThresholdResult(
        parameter, float(value), True, (lo, hi), ends, invades_above, len(crossings), msg,
        linked=linked,
    )


def _crossings(ex: np.ndarray) -> list[tuple[int, int, bool]]:
    """Where fitness - 1 on the grid changes sign: (i, j, invades_above), in increasing order.

    (i, j) brackets a strict sign change; (k, k) is a grid point within rounding of 1
    where fitness leaves 1 (e.g. a threshold at the end of the range). Nan (no
    equilibrium) points are skipped.
    """
    finite = [i for i in range(ex.size) if np.isfinite(ex[i])]
    signed = [i for i in finite if abs(ex[i]) > _ROUNDING]
    out = [
        (i, j, bool(ex[j] > 0))
        for i, j in zip(signed[:-1], signed[1:])
        if (ex[i] > 0) != (ex[j] > 0)
    ]
    for k in finite:
        if abs(ex[k]) > _ROUNDING or any(i < k < j for i, j, _ in out):
            continue
        after = [i for i in signed if i > k]
        before = [i for i in signed if i < k]
        next_to_signed = (after and after[0] == k + 1) or (before and before[-1] == k - 1)
        if next_to_signed:
            out.append((k, k, bool(ex[after[0]] > 0) if after else bool(ex[before[-1]] < 0)))
    return sorted(out)
