"""How many replicates ``locate`` saves: the sequential design against a uniform grid.

Not a timed test: ``broodline locate-bench`` runs both in one process and
reports the ratio of replicates. The scenario: an iteroparous resident (B 2,
P 0.5, c 0.5) against one semelparous mutant under a ceiling K = 200
(analytic threshold B_s = 3, Charnov & Schaffer 1973), counts engine.
"""

from __future__ import annotations

import math
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from sim.config import parse_config, sweep_points

from .invasion import neutral_expectation
from .locate import _slope, diffusion_threshold, fit_dose_response, locate

__all__ = ["LocateBenchmark", "bench_config", "locate_benchmark"]

PARAMETER = "allele.one-shot.fecundity"


def bench_config(*, capacity: int = 200, replicates: int = 400, seed: int = 2026):
    """The benchmark's config: semelparous mutant against an iteroparous resident under a ceiling."""
    return parse_config(
        {
            "experiment": {"name": "locate-bench", "seed": seed, "replicates": replicates,
                           "max_steps": 10**6, "engine": "counts", "trajectory": "none"},
            "density": {"form": "ceiling", "acts_on": "all-survival", "capacity": capacity},
            "allele": [
                {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
                 "adult_survival": 0.5, "juvenile_survival": 0.5},
                {"name": "one-shot", "breeding": "semelparous", "fecundity": 3.0, "juvenile_survival": 0.5},
            ],
            "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 1},
        }
    )


@dataclass(frozen=True)
class LocateBenchmark:
    """Replicates for a 95% interval of half-width ``tolerance``: locate against a 9-point grid.

    Attributes
    ----------
    tolerance : float
        Target half-width (1% of the analytic threshold).
    locate_replicates : int
        Replicates ``locate`` used until its interval reached the tolerance.
    locate_value, locate_half_width : float
    grid_replicates_run : int
        Replicates run on the grid (``grid_per_point`` at each of 9 points).
    grid_half_width : float
        The grid fit's half-width with those replicates.
    grid_replicates_needed : float
        Replicates the grid needs for the tolerance: run x (half-width / tolerance)^2
        (the interval narrows as 1 / sqrt(replicates)).
    ratio : float
        grid_replicates_needed / locate_replicates.
    """

    tolerance: float
    locate_replicates: int
    locate_value: float
    locate_half_width: float
    locate_converged: bool
    grid_per_point: int
    grid_replicates_run: int
    grid_value: float
    grid_half_width: float
    grid_replicates_needed: float
    ratio: float

    def as_dict(self) -> dict:
        return asdict(self)

    def summary(self) -> str:
        return (
            f"target: 95% interval half-width {self.tolerance:.4g} (1% of the threshold)\n"
            f"locate: {self.locate_replicates} replicates, threshold {self.locate_value:.5g} "
            f"+- {self.locate_half_width:.3g}\n"
            f"9-point grid: {self.grid_replicates_run} replicates gave +- {self.grid_half_width:.3g} "
            f"(threshold {self.grid_value:.5g}); {self.grid_replicates_needed:.0f} needed for the target\n"
            f"ratio grid / locate: {self.ratio:.2f}"
        )


def _grid(config, lo, hi, per_point, workers, out: Path):
    from sim.runner import run_experiment
    from sim.store import read_outcomes

    values = np.linspace(lo, hi, 9)
    raw = config.model_dump(mode="python", exclude_none=True)
    raw["experiment"]["replicates"] = per_point
    raw["sweep"] = {PARAMETER: [float(v) for v in values]}
    grid = parse_config(raw)
    run_experiment(grid, out, overwrite=True, workers=workers, progress=False)
    reps = read_outcomes(out)
    fixed = reps.assign(f=reps["outcome"] == "mutant-fixed").groupby("point")["f"].sum().to_numpy()
    neutral = [neutral_expectation(p.config) for p in sweep_points(grid)]
    return values, np.asarray(neutral), fixed


def locate_benchmark(
    *, capacity: int = 200, grid_per_point: int = 2000, workers: int = 1, folder=None, progress=None
) -> LocateBenchmark:
    """Run ``locate`` to 1% of the threshold, and a uniform 9-point grid over the same bracket.

    The grid's replicates needed are extrapolated from its measured half-width
    (which narrows as 1 / sqrt(n) once the fit is regular); both fits are the
    same Kimura curve with profile-likelihood intervals (``analysis.locate``).
    """
    config = bench_config(capacity=capacity)
    analytic = 3.0  # B_i + P / c (Charnov & Schaffer 1973)
    tolerance = 0.01 * analytic
    bracket = (0.9 * analytic, 1.1 * analytic)
    with tempfile.TemporaryDirectory(dir=folder) as tmp:
        found = locate(config, PARAMETER, Path(tmp) / "locate.h5", bracket=bracket, tolerance=tolerance,
                       budget=10**6, workers=workers, progress=progress)
        values, neutral, fixed = _grid(config, *bracket, grid_per_point, workers, Path(tmp) / "grid.h5")
    base = config.model_copy(update={"sweep": None})
    theta0 = diffusion_threshold(base, PARAMETER, bracket=bracket)
    beta0 = _slope(base, PARAMETER, theta0, bracket[1] - bracket[0])
    fit = fit_dose_response(values, neutral, fixed, np.full(9, grid_per_point), bracket=bracket,
                            theta0=theta0, beta0=beta0)
    run = 9 * grid_per_point
    needed = run * (fit.half_width / tolerance) ** 2 if math.isfinite(fit.half_width) else math.inf
    return LocateBenchmark(
        tolerance, found.replicates, found.value, (found.high - found.low) / 2, found.converged,
        grid_per_point, run, fit.theta, fit.half_width, needed, needed / found.replicates,
    )
