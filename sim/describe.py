"""Plain-text description of a resolved experiment (what ``broodline check`` prints)."""

from __future__ import annotations

import numpy as np

from .aggregation import counts_obstacles
from .config import Config, sweep_factors, sweep_points
from .lifecycle import initial_census
from .meanfield import growth_rate

__all__ = ["describe_experiment", "preflight", "counts_engine_note"]


def _fmt(values) -> str:
    return "[" + ", ".join(f"{v:g}" for v in np.asarray(values, dtype=float)) + "]"


def preflight(config: Config) -> list:
    """Expand the sweep and build every point's starting census, so nothing fails mid-run.

    Returns the sweep points. Raises ConfigError (bad sweep values) or
    NoEquilibriumError (a resident with no equilibrium at some point), with the
    point named.
    """
    from .meanfield import NoEquilibriumError

    points = sweep_points(config)
    for point in points:
        try:
            initial_census(point.config)
        except NoEquilibriumError as err:
            where = ", ".join(f"{k} = {v!r}" for k, v in point.values.items())
            raise NoEquilibriumError(
                f"sweep point {point.index}{f' ({where})' if where else ''}: {err}; "
                "set invasion.resident_count to a number or change the density settings"
            ) from None
    return points


def describe_experiment(config: Config) -> str:
    """The experiment as resolved: alleles and schedules, density, sweep points, total work."""
    points = preflight(config)
    exp, d = config.experiment, config.density
    lines = [
        f"experiment {exp.name!r}: engine {exp.engine}, seed {exp.seed}, "
        f"stop at {exp.stop} (at most {exp.max_steps} seasons), record every {exp.record_every}",
        f"density: {d.form}"
        + ("" if d.form == "none" else f" (K = {d.capacity:g}) acting on {d.placement}, counting {d.counted}"),
        f"offspring: {config.offspring.distribution}"
        + (f" (dispersion {config.offspring.dispersion:g})" if config.offspring.dispersion else ""),
        "mutation: " + ("none" if not config.mutation_model().active else
                        (f"rate {config.mutation.rate:g} per offspring" if config.mutation.matrix is None
                         else "by matrix")),
        "alleles (m(a) fecundity and s(a) survival by census age 1, 2, ...; last age a plus-group):",
    ]
    for a, s in zip(config.alleles, config.schedules()):
        lines.append(f"  {a.name}: {a.breeding}, m = {_fmt(s.fecundity)}, s = {_fmt(s.survival)}, "
                     f"c = {s.juvenile_survival:g}; growth rate without density dependence "
                     f"{growth_rate(s):.4g}")
    if config.invasion is not None:
        inv = config.invasion
        start = initial_census(points[0].config)
        r = config.allele_index(inv.resident)
        how = "at equilibrium" if inv.resident_count == "equilibrium" else "given"
        lines.append(f"invasion: {inv.mutant_count} x {inv.mutant!r} (age 1) into {inv.resident!r} "
                     f"({how}: {int(start[r].sum())} individuals by age {start[r].tolist()})")
    else:
        shown = [a for a in config.alleles if a.initial_count or config.trait is None]
        lines.append("start: " + ", ".join(f"{a.name} {a.initial_count}" for a in shown)
                     + " individuals at age 1")
    if config.trait is not None:
        grid = config.trait.grid()
        lines.append(f"trait: {grid.size} effort alleles from {grid[0]:g} to {grid[-1]:g}, each offspring "
                     f"mutating to a neighbouring value with probability {config.mutation.rate:g}")
    factors = sweep_factors(config)
    sizes = [f"{f.levels} ({' with '.join(f.paths)})" for f in factors]
    lines.append(f"sweep points: {len(points)}" + (f" = {' x '.join(sizes)}" if factors else ""))
    for p in points:
        if p.values:
            lines.append(f"  {p.index}: " + ", ".join(f"{k} = {v!r}" for k, v in p.values.items()))
    total = len(points) * exp.replicates
    seasons = sum(p.config.experiment.max_steps for p in points) * exp.replicates
    lines.append(f"replicates: {exp.replicates} per point, {total} in all "
                 f"(at most {seasons:,} seasons; trajectories {exp.trajectory})")
    lines.append(counts_engine_note(config))
    return "\n".join(lines)


def counts_engine_note(config: Config) -> str:
    """Whether the aggregated ``counts`` engine would be exact for this config, and if not, why."""
    obstacles = counts_obstacles(config)
    if obstacles:
        return "counts engine: not exact here (" + "; ".join(obstacles) + ")"
    return ("counts engine: exact in distribution here (individuals carry only allele and age); "
            + ("in use" if config.experiment.engine == "counts" else "choose it with engine = 'counts'"))
