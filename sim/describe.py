"""Plain-text description of a resolved experiment (what ``broodline check`` prints)."""

from __future__ import annotations

import numpy as np

from . import vocabulary as words
from .aggregation import counts_obstacles
from .config import Config, ConfigError, sweep_factors, sweep_points, swept_values
from .density import Factors
from .lifecycle import initial_census
from .meanfield import growth_rate

__all__ = ["BUDGET", "AGENTS_BROOD_BUDGET", "ConfigWarning", "config_warnings", "describe_experiment",
           "describe_environment",
           "preflight", "counts_engine_note"]


class ConfigWarning(UserWarning):
    """A config that is valid but probably not what was meant (said before anything runs)."""


# the season factors at D -> infinity, by where density dependence acts
_FLOOR = {
    "recruitment": Factors(recruitment=0.0),
    "fecundity": Factors(fecundity=0.0),
    "adult-survival": Factors(adult=0.0),
    "all-survival": Factors(adult=0.0, recruitment=0.0),
}


def config_warnings(config: Config, points=None) -> list[str]:
    """What looks wrong in a valid config: keys it ignores, alleles nothing regulates.

    A key is said to be ignored only when it is ignored at every sweep point
    (``points``: the config's ``sweep_points``, expanded here if not given):
    ``adult_survival`` of a semelparous allele is used where a swept
    ``maturity_age`` passes 1, ``density.acts_on`` where a swept ``form`` is not
    "none".

    An allele cannot be regulated when its growth rate stays above 1 even as
    the density factor goes to 0 (a form that only scales the rate where
    density acts: Beverton-Holt, Ricker); a population of it grows without
    bound and every replicate ends capped.
    """
    points = sweep_points(config) if points is None else points
    at_every_point = None
    for point in points:
        found = _ignored_keys(point.config)
        at_every_point = found if at_every_point is None else [k for k in at_every_point if k in found]
        if not at_every_point:
            break
    out = list(at_every_point or [])
    d = config.density
    if d.form in ("beverton-holt", "ricker"):
        for a, schedule in zip(config.allele, config.schedules()):
            floor = growth_rate(schedule, _FLOOR[d.placement])
            if floor > 1.0:
                out.append(
                    f"density.acts_on = {d.placement!r} cannot regulate allele {a.name!r}: even with "
                    f"the density factor at 0 its growth rate is {floor:.3g} > 1 (it breeds and "
                    "recruits where density does not act), so it grows without bound and its "
                    "replicates will pass experiment.max_population"
                )
    return out


def _ignored_keys(config: Config) -> list[str]:
    """Keys a valid config sets that nothing reads, one ``KEY: ignored: why`` line each.

    Warned, not refused, like every key here: each is used where another key, which may be
    swept or edited on its own, says so (a semelparous allele's ``maturity_age`` > 1, a
    ``density.form`` other than "none", a second allele, no ``[invasion]``), so one table can
    serve several points or edits. A key that only a fixed word of its own table would use
    (``dispersion`` beside poisson, ``brood_scale`` without a brood effect, ``transitions``
    beside iid years) is refused by the schema instead.
    """
    out = []
    for i, a in enumerate(config.allele):
        if a.breeding == "semelparous" and a.maturity_age == 1 and a.adult_survival is not None:
            out.append(f"allele[{i}].adult_survival: ignored: {a.name!r} is semelparous and breeds at "
                       "age 1, then dies (adult_survival is the survival of the years before breeding)")
        if config.invasion is not None and a.initial_count:
            out.append(f"allele[{i}].initial_count: ignored: [invasion] sets the starting counts")
    d = config.density
    if d.form == "none":
        # counted's default ("census") cannot be told from a written one, so only another word is said
        set_keys = [key for key, unset in (("acts_on", None), ("counted", "census"), ("capacity", None))
                    if getattr(d, key) != unset]
        out += [f"density.{key}: ignored: form = 'none' has no density dependence" for key in set_keys]
    if config.trait is None and len(config.allele) == 1 and config.mutation.rate > 0:
        out.append(f"mutation.rate: ignored: {config.allele[0].name!r} is the only allele, so an "
                   "offspring has no other allele to mutate to")
    return out



def _fmt(values) -> str:
    return "[" + ", ".join(f"{v:g}" for v in np.asarray(values, dtype=float)) + "]"


def _capacity(config: Config) -> str:
    """K as set, or the values it is swept over (the base value would mislead)."""
    swept = swept_values(config, "density.capacity")
    if swept:
        return "K swept over " + ", ".join(f"{v:g}" for v in swept)
    return f"K = {config.density.capacity:g}"


# Individual-seasons an experiment may ask for (replicates x max_steps x starting census,
# summed over sweep points) unless the budget is lifted (``budget=False``, ``--no-budget``):
# about a day of one core at the individual engine's 1e8 individual-seasons a second.
BUDGET = 10**13
# The Mesa reference engine draws each young one by one in Python (about a million a
# second): a breeder whose mean brood passes this would take minutes a season, so such a
# config is refused for that engine unless the budget is lifted.
AGENTS_BROOD_BUDGET = 10**6


def preflight(config: Config, *, budget: bool = True) -> list:
    """Expand the sweep and build every point's starting census, so nothing fails mid-run.

    Returns the sweep points. Raises ConfigError (bad sweep values, a starting
    census of nobody or past ``experiment.max_population``, work past
    ``BUDGET`` unless ``budget=False``) or NoEquilibriumError (a resident with
    no equilibrium at some point), with the point named.
    """
    import warnings

    from .meanfield import NoEquilibriumError

    points = sweep_points(config)
    for message in config_warnings(config, points):
        warnings.warn(message, ConfigWarning, stacklevel=2)
    work, problems = 0, []
    for point in points:
        where = ", ".join(f"{k} = {v!r}" for k, v in point.values.items())
        where = f"sweep point {point.index}{f' ({where})' if where else ''}: " if len(points) > 1 else ""
        try:
            census = initial_census(point.config)
        except NoEquilibriumError as err:
            raise NoEquilibriumError(
                f"{where}{err}; set invasion.resident_count to a number or change the density settings"
            ) from None
        except ConfigError as err:
            problems += [where + m for m in err.problems]
            continue
        problems += [where + m for m in _census_problems(point.config, census)]
        exp = point.config.experiment
        work += exp.replicates * exp.max_steps * int(census.sum())
        if budget and exp.engine == "agents":
            problems += [where + m for m in _agents_problems(point.config)]
    if problems:
        raise ConfigError(problems)
    if budget and work > BUDGET:
        raise ConfigError(
            f"experiment.replicates: {work:.3g} individual-seasons (replicates x max_steps x starting "
            f"census, over {len(points)} points) passes the budget of {BUDGET:.0e}; lower "
            "replicates or max_steps, or lift the budget with budget=False")
    return points


def _agents_problems(config: Config) -> list[str]:
    """Why the ``agents`` engine cannot run a point in reasonable time: a brood too large."""
    from .lifecycle import LifeCycle

    kernel = LifeCycle.from_config(config).kernel
    env = config.environment
    boost = max(y.fecundity for y in env.year) if env is not None else 1.0
    brood = kernel.fecundity * boost
    c = int(np.argmax(brood))
    if brood[c] <= AGENTS_BROOD_BUDGET:
        return []
    a = int(kernel.allele_of[c])
    return [f"allele[{a}].fecundity: {config.allele[a].name!r} breeds {brood[c]:.3g} young a season "
            f"on average, and the 'agents' engine draws each young one by one (past "
            f"{AGENTS_BROOD_BUDGET:.0e} a breeder, minutes a season); use experiment.engine = "
            "'individual' or 'counts', or lift the budget with budget=False"]


def _census_problems(config: Config, census: np.ndarray) -> list[str]:
    """Why a point's starting census cannot run: nobody in it, or past max_population."""
    limit = config.experiment.max_population
    inv = config.invasion
    if inv is not None:
        r = config.allele_index(inv.resident)
        if census[r].sum() == 0:
            key = "density.capacity" if inv.resident_count == "equilibrium" else "invasion.resident_count"
            return [f"{key}: the resident {inv.resident!r} starts with no individuals (its "
                    "equilibrium rounds to 0); raise density.capacity or give invasion.resident_count"]
    total = int(census.sum())
    if total > limit:
        # the key that sets the count: a resident at equilibrium is as large as density.capacity
        # lets it be; a resident of a given count is that count
        if inv is None:
            key = "allele.initial_count"
        elif inv.mutant_count > limit:
            key = "invasion.mutant_count"
        elif inv.resident_count == "equilibrium":
            key = "density.capacity"
        else:
            key = "invasion.resident_count"
        return [f"{key}: the starting census has {total:,} individuals, more than "
                f"experiment.max_population = {limit:,}; lower it or raise max_population"]
    return []


def describe_environment(config: Config) -> str:
    """The environment in words: constant, or its year types, multipliers and how they follow."""
    env = config.environment
    if env is None:
        return "constant (every season alike)"
    types = []
    for y in env.year:
        changed = [f"{key.replace('_', ' ')} x{getattr(y, key):g}" for key in words.YEAR_MULTIPLIERS
                   if getattr(y, key) != 1.0]
        chance = f" (probability {y.probability:g})" if y.probability is not None else ""
        types.append(f"{y.name}{chance}: " + (", ".join(changed) or "rates as given"))
    if env.switching == "iid":
        law = "each season's year type drawn independently"
    else:
        law = (f"year types follow a Markov chain (transitions {env.transitions}), the first "
               + ("from its stationary law" if env.start == words.STATIONARY else f"a {env.start!r} year"))
    shared = "; all replicates of a point live through one sequence" if env.shared_years else \
        "; each replicate draws its own sequence"
    return f"{len(env.year)} year types, {law}{shared}: " + "; ".join(types)


def describe_experiment(config: Config, *, budget: bool = True) -> str:
    """The experiment as resolved: alleles and schedules, density, sweep points, total work."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConfigWarning)  # listed as lines at the end instead
        points = preflight(config, budget=budget)
    exp, d = config.experiment, config.density
    lines = [
        f"experiment {exp.name!r}: engine {exp.engine}, seed {exp.seed}, "
        f"stop at {exp.stop} (at most {exp.max_steps} seasons), record every {exp.record_every}",
        f"density: {d.form}"
        + ("" if d.form == "none" else f" ({_capacity(config)}) acting on {d.placement}, counting {d.counted}"),
        f"offspring: {config.offspring.distribution}"
        + (f" (dispersion {config.offspring.dispersion:g})" if config.offspring.dispersion else ""),
        "mutation: " + ("none" if not config.mutation_model().active else
                        (f"rate {config.mutation.rate:g} per offspring" if config.mutation.matrix is None
                         else "by matrix")),
        "environment: " + describe_environment(config),
        "alleles (m(a) fecundity and s(a) survival by census age 1, 2, ...; last age a plus-group):",
    ]
    for a, s in zip(config.alleles, config.schedules()):
        lines.append(f"  {a.name}: {a.breeding}, m = {_fmt(s.fecundity)}, s = {_fmt(s.survival)}, "
                     f"c = {s.juvenile_survival:g}; growth rate without density dependence "
                     f"{growth_rate(s, offspring=config.offspring_distribution()):.4g}")
        if s.orphan_survival is not None or s.brood_scale is not None:
            lines.append("    parental effects: young of a parent that dies survive "
                         f"{s.juvenile_survival if s.orphan_survival is None else s.orphan_survival:g}"
                         f" (c_orphan; c_care {s.juvenile_survival:g})"
                         + ("" if s.brood_scale is None else
                            f"; in a brood of b each survives x exp(-(b - 1) / {s.brood_scale:g})")
                         + "; recruits drawn by (class, fate, brood size) in every engine")
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
    named = [f"({' with '.join(f.paths)})" for f in factors]
    if len(factors) > 1:  # "12 = 3 (path) x 4 (path)"; one factor: "4 (path)"
        named = ["= " + " x ".join(f"{f.levels} {n}" for f, n in zip(factors, named, strict=True))]
    lines.append(" ".join([f"sweep points: {len(points)}", *named]))
    for p in points:
        if p.values:
            lines.append(f"  {p.index}: " + ", ".join(f"{k} = {v!r}" for k, v in p.values.items()))
    total = len(points) * exp.replicates
    seasons = sum(p.config.experiment.max_steps for p in points) * exp.replicates
    lines.append(f"replicates: {exp.replicates} per point, {total} in all "
                 f"(at most {seasons:,} seasons; trajectories {exp.trajectory})")
    lines.append(counts_engine_note(config))
    lines.extend(f"warning: {w}" for w in config_warnings(config, points))
    return "\n".join(lines)


def counts_engine_note(config: Config) -> str:
    """Whether the aggregated ``counts`` engine would be exact for this config, and if not, why."""
    obstacles = counts_obstacles(config)
    if obstacles:
        return "counts engine: not exact here (" + "; ".join(obstacles) + ")"
    return ("counts engine: exact in distribution here (individuals carry only allele and age); "
            + ("in use" if config.experiment.engine == "counts" else "choose it with engine = 'counts'"))
