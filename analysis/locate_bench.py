"""How many replicates ``locate`` saves: the sequential design against a uniform grid.

Not a timed test: ``broodline locate-bench`` runs both in one process and
reports the ratio of replicates. The scenario: an iteroparous resident (B 2,
P 0.5, c 0.5) against one semelparous mutant under a ceiling K = 200
(analytic threshold B_s = 3, Charnov & Schaffer 1973), counts engine.
"""

from __future__ import annotations

import json
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


def bench_config(*, capacity: int = 200, replicates: int = 200, seed: int = 2026):
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
    bracket : tuple of float
        The range both search.
    locate_replicates : list of int
        Replicates ``locate`` used until its interval reached the tolerance, one
        run per seed.
    locate_values, locate_half_widths : list of float
    grid_per_point : int
        Replicates run at each of the 9 grid points.
    grid_value_fit, grid_half_width_fit : float
        The grid fitted with locate's curve (profile-likelihood interval).
    grid_value_observed, grid_half_width_observed : float
        The grid read as ``compare`` reads a sweep (``analysis.observed_threshold``:
        isotonic fit, interpolated crossing, bootstrap interval; inf: not bounded).
    grid_needed_fit, grid_needed_observed : float
        Replicates the grid needs for the tolerance: run x (half-width / tolerance)^2
        (intervals narrow as 1 / sqrt(replicates)).
    ratio_fit, ratio_observed : float
        Those over locate's mean replicates.
    """

    tolerance: float
    bracket: tuple
    locate_replicates: list
    locate_values: list
    locate_half_widths: list
    grid_per_point: int
    grid_value_fit: float
    grid_half_width_fit: float
    grid_needed_fit: float
    grid_value_observed: float
    grid_half_width_observed: float
    grid_needed_observed: float
    ratio_fit: float
    ratio_observed: float

    def as_dict(self) -> dict:
        return asdict(self)

    def summary(self) -> str:
        mean = float(np.mean(self.locate_replicates))
        return (
            f"target: 95% interval half-width {self.tolerance:.4g} (1% of the threshold); "
            f"bracket [{self.bracket[0]:.4g}, {self.bracket[1]:.4g}]\n"
            f"locate ({len(self.locate_replicates)} seeds): {self.locate_replicates} replicates "
            f"(mean {mean:.0f}); thresholds {[round(v, 4) for v in self.locate_values]}\n"
            f"9-point grid, {9 * self.grid_per_point} replicates:\n"
            f"  fitted with locate's curve: {self.grid_value_fit:.5g} +- {self.grid_half_width_fit:.3g}; "
            f"{self.grid_needed_fit:.0f} replicates needed for the target (ratio {self.ratio_fit:.2f})\n"
            f"  read as compare reads a sweep: {self.grid_value_observed:.5g} +- "
            f"{self.grid_half_width_observed:.3g}; {self.grid_needed_observed:.0f} replicates needed "
            f"(ratio {self.ratio_observed:.2f})"
        )


def _grid(config, lo, hi, per_point, workers, out: Path):
    from sim.experiment import run_experiment
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
    *, capacity: int = 200, grid_per_point: int = 2000, seeds=(2026, 2027, 2028), half_range: float = 0.1,
    workers: int = 1, folder=None, progress=None,
) -> LocateBenchmark:
    """Run ``locate`` to 1% of the threshold (once per seed), and a uniform 9-point grid.

    Both search the analytic threshold +- ``half_range`` (10% by default,
    locate's default bracket). The grid's
    replicates needed are extrapolated from its measured half-width, read two
    ways: fitted with locate's own curve, and as ``compare`` reads a sweep.
    """
    from .estimates import observed_threshold

    analytic = 3.0  # B_i + P / c (Charnov & Schaffer 1973)
    tolerance = 0.01 * analytic
    bracket = ((1 - half_range) * analytic, (1 + half_range) * analytic)
    found = []
    with tempfile.TemporaryDirectory(dir=folder) as tmp:
        for seed in seeds:
            config = bench_config(capacity=capacity, seed=seed)
            found.append(locate(config, PARAMETER, Path(tmp) / f"locate-{seed}.h5", bracket=bracket,
                                tolerance=tolerance, budget=10**6, workers=workers, progress=progress))
        config = bench_config(capacity=capacity, seed=seeds[0])
        values, neutral, fixed = _grid(config, *bracket, grid_per_point, workers, Path(tmp) / "grid.h5")
    base = config.model_copy(update={"sweep": None})
    theta0 = diffusion_threshold(base, PARAMETER, bracket=bracket)
    beta0 = _slope(base, PARAMETER, theta0, bracket[1] - bracket[0])
    n = np.full(9, grid_per_point)
    fit = fit_dose_response(values, neutral, fixed, n, bracket=bracket, theta0=theta0, beta0=beta0)
    seen = observed_threshold(PARAMETER, values, fixed, n, neutral)
    seen_half = (seen.high - seen.low) / 2 if np.isfinite(seen.low) and np.isfinite(seen.high) else math.inf
    run = 9 * grid_per_point

    def needed(half):
        return run * (half / tolerance) ** 2 if math.isfinite(half) else math.inf

    mean = float(np.mean([f.replicates for f in found]))
    return LocateBenchmark(
        tolerance,
        bracket,
        [f.replicates for f in found],
        [f.value for f in found],
        [(f.high - f.low) / 2 for f in found],
        grid_per_point,
        fit.theta,
        fit.half_width,
        needed(fit.half_width),
        seen.value,
        seen_half,
        needed(seen_half),
        needed(fit.half_width) / mean,
        needed(seen_half) / mean,
    )


def cmd_locate_bench(args) -> int:
    from .jsonable import jsonable

    bench = locate_benchmark(half_range=args.half_range, workers=args.workers or 1,
                             progress=None if args.json else print)
    print(json.dumps(jsonable(bench.as_dict()), indent=2) if args.json else bench.summary())
    return 0


def register(sub) -> None:
    """Add ``locate-bench`` to the ``broodline`` subparsers."""
    p = sub.add_parser(
        "locate-bench",
        help="replicates locate needs against a uniform 9-point grid (semelparous vs iteroparous, K = 200)",
    )
    p.add_argument("--half-range", type=float, default=0.1, metavar="F",
                   help="both search the analytic threshold +- F x itself (default 0.1)")
    p.add_argument("--workers", type=int, default=None, metavar="N", help="local worker processes")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_locate_bench)
