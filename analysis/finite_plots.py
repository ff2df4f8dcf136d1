"""The finite-N fixation curve along a swept parameter, for the fixation figure.

``finite_curve`` returns the arrays; ``draw_finite_curve`` draws them on a
matplotlib axis (solid where the diffusion is valid, dotted where it is
not), beside which the fixation figure draws the establishment curve and the
neutral line.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.config import Config
from sim.meanfield import NoEquilibriumError

from .fixation import finite_population_prediction
from .thresholds import with_values

__all__ = ["FiniteCurve", "finite_curve", "draw_finite_curve"]


@dataclass(frozen=True)
class FiniteCurve:
    """The diffusion's fixation probability on a fine grid of a parameter.

    Attributes
    ----------
    x : ndarray
        Parameter values.
    fixation_probability : ndarray
        nan where no prediction exists (no regulated census).
    valid : ndarray of bool
        Where the diffusion's assumptions hold (``FinitePrediction.valid``).
    neutral_expectation : ndarray
    """

    x: np.ndarray
    fixation_probability: np.ndarray
    valid: np.ndarray
    neutral_expectation: np.ndarray


def finite_curve(config: Config, parameter: str, low: float, high: float, *, resolution: int = 120) -> FiniteCurve:
    """The finite-N prediction at ``resolution`` values of ``parameter`` in [low, high].

    ``config`` is one combination of the other swept values (its sweep is
    ignored), as the fixation figure draws one curve per combination.
    """
    base = config.model_copy(update={"sweep": None})
    xs = np.linspace(low, high, resolution)
    u, neutral = np.full(resolution, np.nan), np.full(resolution, np.nan)
    ok = np.zeros(resolution, bool)
    for i, x in enumerate(xs):
        try:
            f = finite_population_prediction(with_values(base, {parameter: float(x)}))
        except (NoEquilibriumError, ValueError):
            continue
        u[i], ok[i], neutral[i] = f.fixation_probability, f.valid, f.initial_share
    return FiniteCurve(xs, u, ok, neutral)


def draw_finite_curve(ax, config: Config, parameter: str, low: float, high: float, *, color=None,
                      label: str = "finite-N diffusion (Gillespie 1974)", resolution: int = 120):
    """Draw the finite-N curve on ``ax``: solid where valid, dotted where only indicative.

    Returns the ``FiniteCurve`` drawn. Wire it into the fixation figure with
    ``draw_finite_curve(ax, config_of_this_colour, xpath, x.min(), x.max(), color=colour)``.
    """
    curve = finite_curve(config, parameter, low, high, resolution=resolution)
    solid = np.where(curve.valid, curve.fixation_probability, np.nan)
    dotted = np.where(~curve.valid, curve.fixation_probability, np.nan)
    if np.isfinite(solid).any():  # (a legend entry only for what is drawn)
        ax.plot(curve.x, solid, "-", color=color, lw=1.5, label=label)
    if np.isfinite(dotted).any():
        ax.plot(curve.x, dotted, ":", color=color, lw=1.2, alpha=0.7,
                label=f"{label}, outside its assumptions")
    return curve
