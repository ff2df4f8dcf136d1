"""Effort configs and trait runs against adaptive-dynamics theory.

``effort_model(config)`` turns a config's effort alleles, ``[tradeoff]`` and
``[density]`` into the ``analysis.adaptive.EffortModel`` the theory takes;
``trait_analysis`` analyses it on the config's grid; ``compare_trait``
states, for every replicate of a ``[trait]`` run, whether its mean effort
ended within one grid step of a predicted evolutionarily stable attractor
("ended": the mean effort averaged over the last ``END_SHARE`` of its
recorded censuses, so one season's drift does not decide the verdict).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from sim.config import Config, ConfigError
from sim.store import read_attrs, read_point_configs, read_points, read_trait

from .adaptive import AdaptiveAnalysis, EffortModel, analyse_effort
from .varying_years import year_draws

__all__ = ["DEFAULT_GRID", "effort_model", "effort_grid", "trait_analysis", "is_trait_run", "compare_trait",
           "pooled_end_efforts", "pooled_lines"]

DEFAULT_GRID = 101  # evenly spaced efforts on [0, 1] where the config has no [trait] grid
END_SHARE = 0.1  # the closing stretch of a run (share of its recorded censuses) its verdict reads


def effort_model(config: Config) -> EffortModel:
    """The config's effort alleles as one ``EffortModel`` (the unswept values of a swept config).

    Raises
    ------
    ConfigError
        Where no allele has ``breeding = "effort"``, or where effort alleles
        differ in ``juvenile_survival``, ``maturity_age`` or their parental
        effects (the theory puts every effort on one life cycle), naming the
        allele.
    """
    alleles = [a for a in config.alleles if a.breeding == "effort"]
    if not alleles:
        raise ConfigError("allele: no allele has breeding = 'effort' (the invasibility analysis "
                          "compares efforts on the [tradeoff] curve)")
    first = alleles[0]
    for a in alleles[1:]:
        for key in ("juvenile_survival", "maturity_age", "orphan_survival", "brood_effect", "brood_scale"):
            mine, theirs = (getattr(b, key) for b in (a, first))
            if mine != theirs:
                shown = "not set" if theirs is None else f"{key} = {theirs!r}"
                raise ConfigError(
                    f"allele {a.name!r}: {key} = {mine!r} differs from allele {first.name!r} ({shown}); "
                    f"the effort analysis needs one {key} for every effort allele")
    tradeoff = config.tradeoff.tradeoff()
    schedule = first.schedule(tradeoff)  # its parental effects as the kernel reads them
    years = {}
    if config.environment is not None:  # the theory's year draws, as the invasion theory's
        years = {"years": config.year_types(), "year_draws": year_draws(config)}
    return EffortModel(tradeoff, first.juvenile_survival, first.maturity_age, config.density_dependence(),
                       orphan_survival=schedule.orphan_survival, brood_scale=schedule.brood_scale,
                       offspring=config.offspring_distribution(), **years)


def effort_grid(config: Config):
    """The ``[trait]`` grid where it has 3 or more values, else ``DEFAULT_GRID`` points."""
    if config.trait is not None and config.trait.grid().size >= 3:
        return config.trait.grid()
    return DEFAULT_GRID


_ANALYSES: dict = {}  # (config, grid) -> its analysis: a report, its figure and compare ask alike
_ANALYSES_KEPT = 32


def trait_analysis(config: Config, *, grid=None) -> AdaptiveAnalysis:
    """``analyse_effort`` of ``effort_model(config)`` on ``grid`` (default ``effort_grid(config)``),
    kept for the process: in random years one takes seconds."""
    grid = effort_grid(config) if grid is None else grid
    key = (config.model_dump_json(), tuple(np.atleast_1d(grid).tolist()))
    if key not in _ANALYSES:
        if len(_ANALYSES) >= _ANALYSES_KEPT:
            _ANALYSES.clear()
        _ANALYSES[key] = analyse_effort(effort_model(config), grid=grid)
    return _ANALYSES[key]


def is_trait_run(path) -> bool:
    """True for a results file of a config with ``[trait]``."""
    return "trait_efforts" in read_attrs(path)


def _step_near(grid: np.ndarray, effort: float) -> float:
    """The grid step at ``effort``: the wider of the two spacings around its nearest grid value."""
    i = int(np.argmin(np.abs(grid - effort)))
    gaps = [grid[j + 1] - grid[j] for j in (i - 1, i) if 0 <= j < grid.size - 1]
    return float(max(gaps))


def compare_trait(path) -> pd.DataFrame:
    """Every replicate's final mean effort against the predicted attractors of its sweep point.

    Returns
    -------
    DataFrame
        One row per replicate: ``point``, ``replicate``, ``final_step``,
        ``final_census``, ``final_mean_effort``, ``final_sd_effort`` (at the
        last census), ``end_mean_effort`` (the mean effort averaged over the
        last ``END_SHARE`` of the recorded censuses, at least one),
        ``attractors`` (the point's evolutionarily stable attractors,
        Geritz et al. 1998, as a list), ``nearest_attractor``, ``distance``
        (of ``end_mean_effort`` from it), ``attractor_se`` (its standard
        error from the theory's year draws; nan in a constant environment),
        ``grid_step`` (the grid's spacing there) and ``verdict``: "at
        attractor" (within one grid step), "away from attractor",
        "extinct" or "no attractor predicted".
    """
    configs = read_point_configs(path)
    points = read_points(path)["point"].to_numpy()
    trait = read_trait(path).sort_values(["point", "replicate", "step"], kind="stable")
    runs = trait.groupby(["point", "replicate"], sort=True)
    last = runs.tail(1).reset_index(drop=True)
    end = runs["mean_effort"].apply(lambda m: m.iloc[-max(1, int(round(END_SHARE * m.size))):].mean())
    last["end_mean_effort"] = end.to_numpy()
    analyses = {int(p): trait_analysis(c) for p, c in zip(points, configs)}
    attractors = {p: a.attractors for p, a in analyses.items()}
    # an attractor's standard error from the theory's year draws (nan in a constant environment)
    errors = {p: {s.effort: s.effort_se for s in a.singular} for p, a in analyses.items()}
    grids = {int(p): c.trait.grid() for p, c in zip(points, configs)}
    rows = []
    for r in last.itertuples():
        found = attractors[int(r.point)]
        row = {"point": int(r.point), "replicate": int(r.replicate), "final_step": int(r.step),
               "final_census": int(r.census), "final_mean_effort": r.mean_effort,
               "final_sd_effort": r.sd_effort, "end_mean_effort": r.end_mean_effort, "attractors": found}
        if r.census == 0:
            row.update(nearest_attractor=np.nan, attractor_se=np.nan, distance=np.nan, grid_step=np.nan,
                       verdict="extinct")
        elif not found:
            row.update(nearest_attractor=np.nan, attractor_se=np.nan, distance=np.nan, grid_step=np.nan,
                       verdict="no attractor predicted")
        else:
            near = min(found, key=lambda a: abs(a - r.end_mean_effort))
            step = _step_near(grids[int(r.point)], near)
            distance = abs(r.end_mean_effort - near)
            row.update(nearest_attractor=near, attractor_se=errors[int(r.point)][near], distance=distance,
                       grid_step=step, verdict="at attractor" if distance <= step else "away from attractor")
        rows.append(row)
    return pd.DataFrame(rows)


def pooled_end_efforts(table: pd.DataFrame) -> pd.DataFrame:
    """Each sweep point's replicates taken together: their end efforts' average against its attractor.

    A replicate's mean effort wanders (with drift, and in random years with
    the years), so one replicate more than a grid step from the attractor
    says little; the average of independent replicates has a standard error.

    Returns
    -------
    DataFrame
        One row per point of ``compare_trait``'s ``table``: ``point``,
        ``persisting`` (replicates not extinct), ``mean_end_effort``,
        ``standard_error`` (their sd / sqrt(n); NaN for fewer than 2),
        ``attractor`` (NaN unless exactly one is predicted), ``attractor_se``
        (its standard error in random years, else 0), ``difference``
        (|mean - attractor|) and ``grid_step`` (the grid's spacing there).
        The efforts live on a grid, so even many replicates' average need
        not reach the attractor between two grid values: read the difference
        against the grid step as well as against the standard errors.
    """
    rows = []
    for point, group in table.groupby("point", sort=True):
        alive = group[group["verdict"] != "extinct"]
        ends = alive["end_mean_effort"].to_numpy(dtype=float)
        found = group["attractors"].iloc[0]
        mean = float(ends.mean()) if ends.size else float("nan")
        se = float(ends.std(ddof=1) / np.sqrt(ends.size)) if ends.size >= 2 else float("nan")
        attractor, attractor_se = float("nan"), float("nan")
        if len(found) == 1:
            attractor = float(found[0])
            known = alive["attractor_se"].to_numpy(dtype=float)
            attractor_se = float(known[0]) if known.size and np.isfinite(known[0]) else 0.0
        steps = alive["grid_step"].to_numpy(dtype=float)
        rows.append({"point": int(point), "persisting": int(ends.size), "mean_end_effort": mean,
                     "standard_error": se, "attractor": attractor, "attractor_se": attractor_se,
                     "difference": abs(mean - attractor), "grid_step": float(steps[0]) if steps.size else np.nan})
    return pd.DataFrame(rows)


def pooled_lines(pooled: pd.DataFrame) -> list[str]:
    """``pooled_end_efforts`` in words, one line per point with 2 or more persisting replicates."""
    out = []
    for r in pooled.itertuples():
        if r.persisting < 2:
            continue
        line = (f"point {r.point}: the end effort of its {r.persisting} persisting replicates averages "
                f"{r.mean_end_effort:.4g} (SE {r.standard_error:.2g})")
        if np.isfinite(r.attractor):
            line += f"; predicted attractor {r.attractor:.4g}"
            if r.attractor_se > 0:
                line += f" (SE {r.attractor_se:.2g}, from the theory's year draws)"
            if np.isfinite(r.grid_step):
                line += (f"; they differ by {r.difference:.2g}, {r.difference / r.grid_step:.2g} of a grid "
                         f"step ({r.grid_step:.3g})")
        out.append(line)
    return out
