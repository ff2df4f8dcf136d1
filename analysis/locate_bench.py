"""How many replicates ``locate`` saves: the sequential design against a uniform grid.

Not a timed test: ``broodline locate-bench`` runs both and reports ratios of
replicates. The scenario: an iteroparous resident (B 2, P 0.5, c 0.5) against
one semelparous mutant under a ceiling K = 200 (analytic threshold B_s = 3,
Charnov & Schaffer 1973), one mutant at the start, counts engine. The target:
a 95% interval of the threshold with half-width 1% of it (0.03).

Both are sequential and stop the same way, at the first look where their
interval's half-width is at most the target:

- ``locate`` (stages of 50 replicates, its own design and fit), once per seed;
- a uniform grid of 9 points over a bracket centred on the analytic
  (infinite-N) threshold, read exactly as ``broodline compare`` reads a sweep
  (``analysis.comparison.observed_along``: the same counts, the same
  dose-response fit and profile-likelihood interval), after every 10
  replicates per point (90 in all), once per grid seed. The grid's reading
  of a whole run is checked against ``compare_thresholds`` of its file.

The grid is also read with locate's own curve (``fit_dose_response``, also
every 10 replicates per point): that ratio is what the design alone saves, the
rest is what the curve's shape saves.
"""

from __future__ import annotations

import math
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from sim.config import parse_config, sweep_points

from .locate import _slope, diffusion_threshold, fit_dose_response, locate

__all__ = ["GridReading", "LocateBenchmark", "bench_config", "grid_first_passage", "locate_benchmark"]

PARAMETER = "allele.one-shot.fecundity"
ANALYTIC = 3.0  # B_i + P / c (Charnov & Schaffer 1973)


def bench_config(*, capacity: int = 200, replicates: int = 50, seed: int = 2026):
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
class GridReading:
    """A grid read after each increment of replicates per point, until the target half-width.

    Attributes
    ----------
    replicates : float
        Replicates in all (9 points) at the first look whose half-width is at
        most the target (inf: not within the replicates run).
    value, low, high : float
        The threshold and its 95% interval at that look (at the last look if none).
    """

    replicates: float
    value: float
    low: float
    high: float


def grid_first_passage(values, fixed_by_replicate, read, *, tolerance: float, step: int) -> GridReading:
    """Read a grid after every ``step`` replicates per point until the half-width is at most ``tolerance``.

    Parameters
    ----------
    values : array, shape (k,)
        The grid's values.
    fixed_by_replicate : bool array, shape (k, n)
        Replicate r of point i fixed (replicates in their index order).
    read : callable
        ``read(values, fixed, counted) -> (value, low, high)``.
    """
    k, n = fixed_by_replicate.shape
    cumulative = np.cumsum(fixed_by_replicate, axis=1)
    value = low = high = float("nan")
    for m in range(step, n + 1, step):
        value, low, high = read(values, cumulative[:, m - 1], np.full(k, m))
        if np.isfinite(low) and np.isfinite(high) and (high - low) / 2 <= tolerance:
            return GridReading(float(k * m), value, low, high)
    return GridReading(math.inf, value, low, high)


@dataclass(frozen=True)
class LocateBenchmark:
    """Replicates for a 95% interval of half-width ``tolerance``: locate against a 9-point grid.

    Attributes
    ----------
    tolerance : float
        Target half-width (1% of the analytic threshold).
    half_range : float
        Both search the analytic threshold +- half_range x itself.
    bracket : tuple of float
    grid_values : list of float
        The grid: 9 evenly spaced values over the bracket, centred on the analytic threshold.
    diffusion_threshold : float
        Where the diffusion's fixation probability equals the neutral one (the
        finite-N threshold the theory gives).
    locate_replicates, locate_values, locate_half_widths : list
        One ``locate`` run per seed: replicates used until the target, the threshold, the half-width.
    locate_covers : int
        Locate intervals that contain the diffusion threshold.
    grid_replicates_compare, grid_values_compare : list
        One grid per grid seed, read as ``compare`` reads a sweep: replicates at the
        first look reaching the target (inf: not within ``grid_max_per_point``), and the threshold.
    grid_replicates_curve : list
        The same grids read with locate's curve.
    grid_max_per_point : int
    ratio_compare, ratio_curve : float
        Mean grid replicates over mean locate replicates.
    """

    tolerance: float
    half_range: float
    bracket: tuple
    grid_values: list
    diffusion_threshold: float
    locate_replicates: list
    locate_values: list
    locate_half_widths: list
    locate_covers: int
    grid_replicates_compare: list
    grid_values_compare: list
    grid_replicates_curve: list
    grid_max_per_point: int
    ratio_compare: float
    ratio_curve: float

    def as_dict(self) -> dict:
        return asdict(self)

    def summary(self) -> str:
        def mean(v):
            return float(np.mean(v))

        spacing = self.grid_values[1] - self.grid_values[0]
        return "\n".join([
            f"threshold +- {self.half_range:.0%}: bracket [{self.bracket[0]:.4g}, {self.bracket[1]:.4g}]; "
            f"target 95% half-width {self.tolerance:.3g} (1% of the threshold)",
            f"  grid: 9 points {self.grid_values[0]:.4g} to {self.grid_values[-1]:.4g} (spacing {spacing:.3g}), "
            f"centred on the analytic threshold {ANALYTIC:g}, {abs(ANALYTIC - self.diffusion_threshold):.2g} from "
            f"the diffusion's finite-N threshold {self.diffusion_threshold:.5g}",
            f"  locate ({len(self.locate_replicates)} seeds): mean {mean(self.locate_replicates):.0f} replicates "
            f"{self.locate_replicates}; intervals containing the diffusion threshold: "
            f"{self.locate_covers} of {len(self.locate_replicates)}",
            f"  grid read as compare reads a sweep ({len(self.grid_replicates_compare)} grids): mean "
            f"{mean(self.grid_replicates_compare):.0f} replicates {self.grid_replicates_compare}; "
            f"ratio {self.ratio_compare:.2f}",
            f"  grid read with locate's curve: mean {mean(self.grid_replicates_curve):.0f} replicates "
            f"{self.grid_replicates_curve}; ratio {self.ratio_curve:.2f}",
        ])


def _grid_config(base, values, per_point: int, seed: int):
    raw = base.model_dump(mode="python", exclude_none=True)
    raw["experiment"] |= {"replicates": per_point, "seed": seed}
    raw["sweep"] = {PARAMETER: [float(v) for v in values]}
    return parse_config(raw)


def _grid_run(config, workers: int, out: Path) -> np.ndarray:
    """Run a grid; per point, each replicate's fixed flag in replicate order (shape points x replicates)."""
    from sim.experiment import run_experiment
    from sim.store import read_outcomes

    run_experiment(config, out, overwrite=True, workers=workers, progress=False, as_frame=False)
    reps = read_outcomes(out).sort_values(["point", "replicate"])
    if not reps["outcome"].isin(["mutant-fixed", "mutant-lost"]).all():
        raise RuntimeError("locate-bench: a grid replicate did not resolve (raise max_steps)")
    return (reps["outcome"] == "mutant-fixed").to_numpy().reshape(-1, config.experiment.replicates)


def locate_benchmark(
    *, capacity: int = 200, half_range: float = 0.1, seeds=tuple(range(2026, 2036)),
    grid_seeds=tuple(range(3026, 3031)), grid_max_per_point: int | None = None, workers: int = 1,
    folder=None, progress=None,
) -> LocateBenchmark:
    """Run ``locate`` to 1% of the threshold once per seed, and a uniform 9-point grid once per grid seed.

    Both search the analytic threshold +- ``half_range``. Each grid runs
    ``grid_max_per_point`` replicates per point (default 20000 x half_range)
    and is read after every 10 of them, both ways, until
    its half-width reaches the target.
    """
    from .comparison import compare_thresholds, observed_along
    from .invasion import neutral_expectation
    from .sweep import sweep_thresholds

    tolerance = 0.01 * ANALYTIC
    bracket = ((1 - half_range) * ANALYTIC, (1 + half_range) * ANALYTIC)
    values = np.linspace(*bracket, 9)
    per_point = grid_max_per_point or int(round(20000 * half_range))
    base = bench_config(capacity=capacity).model_copy(update={"sweep": None})
    theta0 = diffusion_threshold(base, PARAMETER, bracket=bracket)
    beta0 = _slope(base, PARAMETER, theta0, bracket[1] - bracket[0])
    grid = _grid_config(base, values, per_point, grid_seeds[0])
    line = sweep_thresholds(grid)[0]  # what compare reads the grid along
    neutral = np.array([neutral_expectation(point.config) for point in sweep_points(grid)])

    def read_compare(x, fixed, counted):
        obs = observed_along(line, x, fixed, counted, neutral)
        return obs.value, obs.low, obs.high

    def read_curve(x, fixed, counted):
        fit = fit_dose_response(x, neutral, fixed, counted, bracket=bracket, theta0=theta0, beta0=beta0)
        return fit.theta, fit.low, fit.high

    found, by_compare, by_curve = [], [], []
    with tempfile.TemporaryDirectory(dir=folder) as tmp:
        for seed in seeds:
            config = bench_config(capacity=capacity, seed=seed)
            found.append(locate(config, PARAMETER, Path(tmp) / f"locate-{seed}.h5", bracket=bracket,
                                tolerance=tolerance, budget=10**6, workers=workers))
            if progress:
                progress(f"locate seed {seed}: {found[-1].message}")
        for seed in grid_seeds:
            path = Path(tmp) / f"grid-{seed}.h5"
            fixed = _grid_run(_grid_config(base, values, per_point, seed), workers, path)
            whole = compare_thresholds(path).iloc[0][["observed", "observed_low", "observed_high"]]
            mine = read_compare(values, fixed.sum(axis=1), np.full(9, per_point))
            if not np.allclose(mine, whole.to_numpy(float), equal_nan=True):
                raise RuntimeError(f"locate-bench: the grid read {mine}, compare read {whole.to_dict()}")
            by_compare.append(grid_first_passage(values, fixed, read_compare, tolerance=tolerance, step=10))
            by_curve.append(grid_first_passage(values, fixed, read_curve, tolerance=tolerance, step=10))
            if progress:
                progress(f"grid seed {seed}: {by_compare[-1].replicates:g} replicates read as compare reads "
                         f"a sweep, {by_curve[-1].replicates:g} with locate's curve")
    mean = float(np.mean([f.replicates for f in found]))
    return LocateBenchmark(
        tolerance,
        half_range,
        bracket,
        [float(v) for v in values],
        theta0,
        [f.replicates for f in found],
        [f.value for f in found],
        [(f.high - f.low) / 2 for f in found],
        int(sum(f.low <= theta0 <= f.high for f in found)),
        [g.replicates for g in by_compare],
        [g.value for g in by_compare],
        [g.replicates for g in by_curve],
        per_point,
        float(np.mean([g.replicates for g in by_compare])) / mean,
        float(np.mean([g.replicates for g in by_curve])) / mean,
    )
