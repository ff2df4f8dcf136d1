"""Fixation probability of a mutant schedule in a finite, regulated population.

A diffusion approximation for two types with different projection matrices
in an age-structured population (Gillespie 1974, 1975; Shpak 2007, Genetics
177: 2181), read from the simulator's own schedules, density factors and
offspring law. The full derivation is in ``docs/finite-population.md``; the
Notes of ``finite_population_prediction`` give the result.
"""

from __future__ import annotations

import math
import re
import textwrap
from dataclasses import asdict, dataclass

import numpy as np

from sim.config import Config
from sim.density import Ceiling, Factors
from sim.kernel import SeasonKernel
from sim.schedules import Schedule

from .demography import schedule_demography
from .environment import ResidentEnvironment, invasion_pair, resident_environment
from .invasion import neutral_expectation

__all__ = [
    "WEAK_SELECTION",
    "DemographicVariance",
    "FinitePrediction",
    "demographic_variance",
    "diffusion_fixation",
    "DensityFluctuation",
    "density_fluctuation",
    "finite_population_prediction",
    "finite_population_columns",
    "shown_finite_columns",
    "note_lines",
    "COLUMNS",
]

WEAK_SELECTION = 0.05  # |s| per season above this: the diffusion is not used (errors of order s)
_NEGLECTED = 0.1  # 2 V |neglected selection| / sigma^2 above this could move u by ~10%: not valid
_DOC = "docs/finite-population.md"
# measured (docs/finite-population.md, section 5): Beverton-Holt on recruitment, K = 100, 400, 1600
_RECRUITMENT_FINDING = (
    "simulated at K = 100, 400 and 1600, the fixation curve is flatter than the diffusion "
    "(from s = -0.5 / K to +1 / K it rises 0.72-0.76 of the diffusion's rise: above it below the "
    "threshold, below it above), so it is not used as a prediction here"
)
_MIN_SIZE = 10.0  # a regulated census below this is too small for a diffusion


def next_season_covariance(schedule: Schedule, factors: Factors, offspring) -> np.ndarray:
    """Covariance of the numbers by census age that one individual leaves a season later.

    Returns C of shape (n_ages, n_ages, n_ages): C[a] is the covariance matrix of
    next season's numbers (its recruits at age 1 and itself, one age older, if it
    survives) left by one individual of census age a.

    Notes
    -----
    From the season kernel's joint generating function G_a(s)
    (``SeasonKernel.offspring_pgf``; parental care and brood size included,
    where the parent's fate and its recruits are not independent):
    Cov(N_i, N_j) = d2G/ds_i ds_j + delta_ij dG/ds_i - dG/ds_i dG/ds_j at s = 1
    (factorial moments of a pgf; e.g. Harris 1963, from memory). The first
    derivatives are the projection matrix's column a, the second central
    differences of G (step 1e-3; the offspring law is stated once, by its pgf).
    """
    kernel = SeasonKernel.for_schedule(schedule, offspring=offspring)
    n = schedule.n_ages
    first = kernel.projection_matrix(factors).T  # [a, i] = dG_a / ds_i at s = 1
    h = 1e-3
    unit = np.eye(n) * h
    # rows 1 + h (e_i + e_j) and the like, for every pair i <= j: G of every parent age at once
    pairs = [(i, j) for i in range(n) for j in range(i, n)]
    points = np.ones((len(pairs), 4, n))
    for k, (i, j) in enumerate(pairs):
        if i == j:
            points[k] += [unit[i], -unit[i], np.zeros(n), np.zeros(n)]
        else:
            points[k] += [unit[i] + unit[j], unit[i] - unit[j], unit[j] - unit[i], -unit[i] - unit[j]]
    g = kernel.offspring_pgf(points.reshape(-1, n), factors).reshape(len(pairs), 4, n)
    second = np.empty((n, n, n))
    for k, (i, j) in enumerate(pairs):
        if i == j:
            d2 = (g[k, 0] - 2.0 * g[k, 2] + g[k, 1]) / h**2
        else:
            d2 = (g[k, 0] - g[k, 1] - g[k, 2] + g[k, 3]) / (4.0 * h**2)
        second[:, i, j] = second[:, j, i] = d2
    cov = second - first[:, :, None] * first[:, None, :]
    cov[:, np.arange(n), np.arange(n)] += first
    # an individual that cannot contribute to an age has no variance there (not rounding noise)
    cov[(first[:, :, None] == 0) | (first[:, None, :] == 0)] = 0.0
    return cov


@dataclass(frozen=True)
class DemographicVariance:
    """One type's demographic variance in a given environment.

    Attributes
    ----------
    variance : float
        Variance of next season's reproductive value contributed per unit of
        reproductive value now (individuals in the type's own stable age
        distribution), with the values ``values``.
    by_age : ndarray
        Var(W | a): the variance of one individual's contribution by census age.
    stable_ages : ndarray
        The type's own stable age distribution in the environment (sums to 1).
    growth_rate : float
        The type's dominant eigenvalue in the environment.
    """

    variance: float
    by_age: np.ndarray
    stable_ages: np.ndarray
    growth_rate: float


def demographic_variance(
    schedule: Schedule, factors: Factors, offspring, values: np.ndarray
) -> DemographicVariance:
    """Demographic variance of a schedule, valued by the reproductive values ``values``.

    Parameters
    ----------
    schedule : Schedule
    factors : Factors
        The environment's density factors (for a ceiling, its removal fraction).
    offspring : Poisson | Fixed | NegativeBinomial
        Anything with ``pgf(s, mean)``.
    values : ndarray
        Reproductive values by census age (the resident's, in the resident's
        equilibrium environment).

    Notes
    -----
    An individual of census age a contributes W = v(1) R + v(a + 1) S to the
    next season's total reproductive value: R recruits (births thinned by
    recruitment) and S = 1 if it survives (probability s(a) f_adult). So
    Var(W | a) = v' C_a v, C_a the covariance of next season's numbers it
    leaves (``next_season_covariance``): v(1)^2 Var R + v(a+1)^2 S(1-S) where R
    and S are independent, plus 2 v(1) v(a+1) Cov(R, S) under parental care.
    The demographic variance is sum_a u(a) Var(W | a) / sum_a u(a) v(a), u
    the type's stable age distribution (Engen, Lande & Saether 2005, Genetics
    170: 941, per unit of reproductive value rather than per individual).
    """
    n = schedule.n_ages
    v = np.asarray(values, dtype=float)
    if v.size < n:
        v = np.concatenate([v, np.repeat(v[-1], n - v.size)])
    v = v[:n]
    by_age = np.einsum("i,aij,j->a", v, next_season_covariance(schedule, factors, offspring), v)
    demo = schedule_demography(schedule, factors, offspring=offspring)
    u = demo.stable_age_distribution
    weight = float(u @ v)
    variance = float(u @ by_age) / weight if weight > 0 else float("nan")
    return DemographicVariance(variance, by_age, u, demo.growth_rate)


def _placement_derivative(schedule: Schedule, density, factor: float, offspring) -> np.ndarray:
    """dA/df at the factor f = ``factor`` at its placement.

    Without parental effects A is linear in f, and this is A(1) - A(0). With
    them the fertility row f_rec P'(x; m f_fec) (sigma c_care + (1 - sigma)
    c_orphan), sigma = s f_adult, is not linear where f reaches two of its
    factors or the brood's mean: a central difference at f (step 1e-6).
    """
    from sim.meanfield import projection_matrix

    if SeasonKernel.for_schedule(schedule).parental:
        h = 1e-6
        up, down = (projection_matrix(schedule, density.placed(factor + d), offspring=offspring) for d in (h, -h))
        return (up - down) / (2 * h)
    return projection_matrix(schedule, density.placed(1.0)) - projection_matrix(schedule, density.placed(0.0))


def _scales_with_factor(schedule: Schedule, derivative: np.ndarray, factors: Factors, factor: float,
                        offspring) -> bool:
    """True where A(f) = f A(1): f multiplies every rate of the schedule (all survival without
    parental care; a ceiling's cull after the season, with or without it)."""
    from sim.meanfield import projection_matrix

    matrix = projection_matrix(schedule, factors, offspring=offspring)
    return bool(np.allclose(factor * derivative, matrix, rtol=1e-5, atol=1e-9))


@dataclass(frozen=True)
class DensityFluctuation:
    """The mean shift of the density factor in a finite population, and the selection it adds.

    Attributes
    ----------
    factor_shift : float
        E[f] - f*: the stationary mean of the factor minus its mean-field value.
    differential : float
        kappa: how much more the mutant's growth (per unit reproductive value)
        rises with f than the resident's.
    selection : float
        kappa (E[f] - f*): added to the per-season selection coefficient.
    census_variance : float
        Stationary variance of the resident's census (linear noise approximation).
    """

    factor_shift: float
    differential: float
    selection: float
    census_variance: float


def density_fluctuation(
    config: Config, env: ResidentEnvironment, values: np.ndarray, mutant_ages: np.ndarray
) -> DensityFluctuation | None:
    """Selection from the fluctuating density factor (None where it is not derived: see Notes).

    Notes
    -----
    With f at one placement, A(f) = A(f*) + (f - f*) A' for both types. The
    share's drift at a season with factor f is p(1-p) [s + kappa (f - f*)],
    kappa = v A_m' u_m / v u_m - v A_r' u_r / v u_r, so on average the
    selection coefficient gains kappa (E[f] - f*). The resident's census is
    stationary, E[v n_{t+1}] = E[v n_t]; since v A_r(f*) = v this gives
    E[f] - f* = -Cov(f, v A_r' n) / (v A_r' n*) ~ -f'(D*) w C a / (a n*),
    with a = A_r'^T v, D = w n the density index and C the stationary
    covariance of the census in the linear noise approximation: C = J C J^T + Q,
    J the Jacobian of the mean-field season at n*, Q = sum_a n*_a Cov(an
    age-a individual's recruits and survival) (van Kampen 1981; Caswell 2001
    ch. 16 for the Jacobian). Derived where D is taken from the census before
    breeding; None for a ceiling on recruits only and for ``counted =
    "offspring"`` (the factor then depends on the season's own draws), and
    where the equilibrium is not stable (|eigenvalues of J| >= 1).
    """
    from scipy.linalg import solve_discrete_lyapunov

    density = config.density_dependence()
    r, m = invasion_pair(config)
    schedules = config.schedules()
    res, mut = schedules[r], schedules[m]
    offspring = config.offspring_distribution()
    n_star = env.equilibrium.census
    v = values[: res.n_ages]
    # the factor f* at its placement (the equilibrium's factors are 1 elsewhere)
    factor = next(f for f, placed in zip(env.factors, density.placed(0.0)) if placed == 0.0)
    d_res = _placement_derivative(res, density, factor, offspring)
    d_mut = _placement_derivative(mut, density, factor, offspring)
    if all(_scales_with_factor(s, d, env.factors, factor, offspring) for s, d in ((res, d_res), (mut, d_mut))):
        return DensityFluctuation(0.0, 0.0, 0.0, float("nan"))  # A(f) = f A(1) for both: the ratio does not move
    u_r = env.demography.stable_age_distribution
    vm = np.concatenate([values, np.repeat(values[-1], max(mut.n_ages - values.size, 0))])[: mut.n_ages]
    kappa = float(vm @ d_mut @ mutant_ages) / float(vm @ mutant_ages) - float(v @ d_res @ u_r) / float(v @ u_r)
    if abs(kappa) <= 1e-12:  # both schedules lean on the factor alike
        return DensityFluctuation(0.0, 0.0, 0.0, float("nan"))
    if density.ceiling is not None or density.counted_after_breeding:
        return None
    d_star = env.density_index
    h = 1e-6 * max(d_star, 1.0)
    slope = float(density.form.factor(d_star + h) - density.form.factor(d_star - h)) / (2 * h)
    w = density.index_weights(res.fecundity[None, :])[0]
    jac = env.demography.matrix + np.outer(d_res @ n_star, slope * w)
    if np.max(np.abs(np.linalg.eigvals(jac))) >= 1.0:
        return None
    q = np.einsum("a,aij->ij", n_star, next_season_covariance(res, env.factors, offspring))
    cov = solve_discrete_lyapunov(jac, q)
    a = d_res.T @ v
    shift = -slope * float(w @ cov @ a) / float(a @ n_star)
    return DensityFluctuation(shift, kappa, kappa * shift, float(cov.sum()))


def _expm1_ratio(a: float, b: float) -> float:
    """expm1(a) / expm1(b) for a, b of one sign with |a| <= |b|, without overflow."""
    if b == 0.0:
        return 1.0
    if b > 700.0:  # both large: e^(a-b) (1 - e^-a) / (1 - e^-b)
        return math.exp(a - b) * (-math.expm1(-a)) / (-math.expm1(-b))
    return math.expm1(a) / math.expm1(b)


def diffusion_fixation(
    p: float, *, size: float, selection: float, variance_mutant: float, variance_resident: float
) -> float:
    """Fixation probability of a type at share ``p`` under Gillespie's diffusion.

    Parameters
    ----------
    p : float
        Initial share of the total reproductive value, in [0, 1].
    size : float
        Total reproductive value V of the population (the census, with values
        scaled to 1 per individual at the resident's stable age distribution).
    selection : float
        s: the per-season excess of the type's mean growth over the other's.
    variance_mutant, variance_resident : float
        Demographic variances (per unit reproductive value, per season).

    Notes
    -----
    The share has drift M(p) = p(1-p) [s - (sm - sr) / V] and variance
    Var(p) = p(1-p) [(1-p) sm + p sr] / V per season (Gillespie 1974, 1975).
    With b = (sm - sr) / sm and k = (2 V s - (sm - sr)) / (sm - sr), the scale
    function integrates to::

        u(p) = (1 - (1 - b p)^k) / (1 - (1 - b)^k)

    and, for equal variances sm = sr = sigma2, to Kimura's (1962)
    u(p) = (1 - exp(-2 V s p / sigma2)) / (1 - exp(-2 V s / sigma2)).
    """
    if not (0.0 <= p <= 1.0) or size <= 0 or variance_mutant <= 0 or variance_resident <= 0:
        return float("nan")
    if p in (0.0, 1.0):
        return p
    sm, sr = variance_mutant, variance_resident
    diff = sm - sr
    if abs(diff) <= 1e-12 * max(sm, sr):
        rate = -2.0 * size * selection / sm  # Kimura
        if abs(rate) < 1e-12:
            return p
        return _expm1_ratio(rate * p, rate) if rate * p != 0 else p
    k = (2.0 * size * selection - diff) / diff
    b = diff / sm
    lp, l1 = math.log1p(-b * p), math.log1p(-b)
    a, c = k * lp, k * l1
    if abs(c) < 1e-12:  # k -> 0: the scale function is logarithmic
        return lp / l1
    return _expm1_ratio(a, c)


@dataclass(frozen=True)
class FinitePrediction:
    """The finite-population prediction for one invasion config.

    Attributes
    ----------
    fixation_probability : float
        Diffusion prediction of the probability that the introduced mutants
        fix (nan where no regulated census exists).
    valid : bool
        True where the diffusion's assumptions hold well enough to judge
        observations by it: a regulated census of at least 10, |s| <= 0.05
        per season, and density fluctuations that act on both schedules alike
        (or too weakly to move u by about 10%).
    fixation_probability_note : str
        Which approximation, on which assumptions; or why it is not valid.
    initial_share : float
        The mutants' initial share of reproductive value (the neutral limit).
    effective_size : float
        N_e = V / (sigma_r^2 T): the Wright-Fisher size with the same neutral
        drift per generation.
    census_size : float
        The resident's regulated census (mean field).
    total_reproductive_value : float
        V: the census in units of reproductive value (v . u_resident = 1).
    selection_coefficient : float
        s per season: the mutant's invasion fitness minus 1, plus
        ``density_selection``.
    selection_coefficient_per_generation : float
        s T, T the resident's generation time.
    generation_time : float
        The resident's generation time (seasons).
    demographic_variance_resident, demographic_variance_mutant : float
        Per season, per unit of reproductive value (values scaled so that an
        average resident individual has value 1).
    variance_selection : float
        -(sigma_m^2 - sigma_r^2) / V: the selection-like term of unequal
        variances (Gillespie 1974).
    density_selection : float
        The selection that the density factor's mean shift in a finite
        population would add, kappa (E[f] - f*) (``density_fluctuation``; nan
        where not derived). Not part of s: where it is large enough to move u
        by about 10% the prediction is marked not valid.
    """

    fixation_probability: float
    valid: bool
    fixation_probability_note: str
    initial_share: float
    effective_size: float
    census_size: float
    total_reproductive_value: float
    selection_coefficient: float
    selection_coefficient_per_generation: float
    generation_time: float
    demographic_variance_resident: float
    demographic_variance_mutant: float
    variance_selection: float
    density_selection: float

    def as_dict(self) -> dict:
        """Plain-Python values (JSON, DataFrame rows)."""
        return {k: (v.item() if isinstance(v, np.generic) else v) for k, v in asdict(self).items()}

    @classmethod
    def missing(cls, note: str, initial_share: float = float("nan")) -> FinitePrediction:
        """A prediction that cannot be made, with the reason."""
        nan = float("nan")
        return cls(nan, False, note, initial_share, nan, nan, nan, nan, nan, nan, nan, nan, nan, nan)


COLUMNS = [
    "fixation_probability",
    "fixation_probability_valid",
    "fixation_probability_note",
    "effective_size",
    "selection_coefficient",
    "selection_coefficient_per_generation",
    "demographic_variance_resident",
    "demographic_variance_mutant",
]


def _placement_note(config: Config, fluct: DensityFluctuation | None) -> str:
    density = config.density_dependence()
    alike = fluct is not None and fluct.selection == 0.0
    if isinstance(density.form, Ceiling):
        where = "all-survival" if density.acts_on == "all-survival" else "recruits only"
        base = f"ceiling ({where}): the culling's sampling variance is in the demographic variances"
        if alike:
            return base + "; it scales both schedules alike"
        return base + "; fluctuations of the culled fraction act unequally on the schedules (not derived)"
    if alike:
        if density.acts_on == "all-survival":
            return "density factor on all survival scales both schedules alike"
        return f"density factor on {density.acts_on} acts on both schedules alike"
    if fluct is None:
        return (
            f"density factor on {density.acts_on} counted as {density.counted}: its fluctuations "
            f"act unequally on the two schedules, a term not derived here (see {_DOC})"
        )
    note = (
        f"density factor on {density.acts_on}: its finite-N mean exceeds the mean-field value "
        f"by {fluct.factor_shift:.3g}, a selection term of about {fluct.selection:.3g} per season "
        f"that acts unequally on the schedules and is not in the diffusion (see {_DOC})"
    )
    if density.acts_on == "all-survival":  # only parental care makes all survival act unequally
        note += ("; with parental care a parent's survival sets its young's, so a factor on all "
                 "survival does not scale the schedules alike")
    if density.acts_on == "recruitment":
        note += f"; {_RECRUITMENT_FINDING}"
    return note


def _zero_variance_note(resident: float, mutant: float) -> str:
    """Why the diffusion has no value: which demographic variance is 0, and what that means."""
    if not mutant > 0:
        return ("the mutant's demographic variance is 0 (it leaves no offspring: fecundity or "
                "juvenile survival 0), so the diffusion has no value; such a mutant cannot fix")
    if not resident > 0:
        return "the resident's demographic variance is 0, so the diffusion has no value"
    return "a demographic variance is 0"


def finite_population_prediction(
    config: Config, env: ResidentEnvironment | None = None
) -> FinitePrediction:
    """The diffusion prediction of fixation for one (sweep point) invasion config.

    Parameters
    ----------
    config : Config
        One config with ``[invasion]`` (a sweep, if any, is ignored).
    env : ResidentEnvironment, optional
        The resident's environment, if already computed.

    Returns
    -------
    FinitePrediction
        ``valid`` is False (with the reason in the note) without a regulated
        census, for a census under 10, or for selection stronger than 0.05 per
        season.

    Notes
    -----
    The diffusion variable is p, the mutants' share of the total reproductive
    value (values v of the resident at its equilibrium). Each type is taken to
    be in its own stable age distribution u_i, where its reproductive value
    grows by its dominant eigenvalue lambda_i per season in expectation, with
    variance sigma_i^2 per unit of value (``demographic_variance``). With the
    census V held near the resident's equilibrium and independent
    contributions, a second-order expansion of p' = X_m' / (X_m' + X_r') gives
    (Gillespie 1974, 1975; Shpak 2007 for age structure)::

        E[dp]   = p (1 - p) [s - (sigma_m^2 - sigma_r^2) / V]
        Var[dp] = p (1 - p) [(1 - p) sigma_m^2 + p sigma_r^2] / V

    with s = lambda_m - 1 (the invasion fitness minus 1; lambda_r = 1), solved
    by ``diffusion_fixation``. Where the density factor multiplies rates the
    two schedules rely on unequally (recruitment, fecundity or adult survival
    alone), its fluctuations add a selection term of the same order 1/V
    (``density_fluctuation``); it is estimated, not included, and the
    prediction is marked not valid where it matters. The neutral limit (equal schedules) is
    u = p, the share of reproductive value (Emigh 1979); with equal
    variances it is Kimura's (1962) formula. A ceiling's culling is a
    removal with probability phi at its placement: it enters the
    contributions' variances like any other survival factor.
    """
    env = env or resident_environment(config)
    p0 = neutral_expectation(config, env)
    if not env.regulated:
        return FinitePrediction.missing(
            "no regulated census (no density dependence): no finite-N prediction", p0
        )
    r, m = invasion_pair(config)
    schedules = config.schedules()
    offspring = config.offspring_distribution()
    demo_r = env.demography
    v = demo_r.reproductive_values
    v = v / float(v @ demo_r.stable_age_distribution)  # an average resident has value 1
    res = demographic_variance(schedules[r], env.factors, offspring, v)
    mut = demographic_variance(schedules[m], env.factors, offspring, v)
    census = env.census_size
    size = census  # v . n* = N* (v . u_r = 1)
    fluct = density_fluctuation(config, env, v, mut.stable_ages)
    s = mut.growth_rate - 1.0
    generation = demo_r.generation_time
    ne = size / (res.variance * generation) if res.variance > 0 else float("nan")
    var_sel = -(mut.variance - res.variance) / size
    u = diffusion_fixation(
        p0, size=size, selection=s, variance_mutant=mut.variance, variance_resident=res.variance
    )
    problems = []
    if size < _MIN_SIZE:
        problems.append(f"census {size:.3g} < {_MIN_SIZE:g}")
    if abs(s) > WEAK_SELECTION:
        problems.append(f"selection not weak: |s| = {abs(s):.3g} > {WEAK_SELECTION} per season")
    if not np.isfinite(u):
        problems.append(_zero_variance_note(res.variance, mut.variance))
    if fluct is None:
        problems.append(_placement_note(config, fluct))
    elif mut.variance > 0 and 2.0 * size * abs(fluct.selection) / mut.variance > _NEGLECTED:
        problems.append(_placement_note(config, fluct))
    if problems:
        note = (
            "diffusion not valid here (" + "; ".join(problems) + "); the value shown is only indicative"
        )
    else:
        note = (
            "diffusion (Gillespie 1974; Shpak 2007): weak selection "
            f"(s = {s:.3g} per season), each type near its stable age distribution, census near "
            f"its equilibrium {census:.4g}; {_placement_note(config, fluct)}"
        )
    return FinitePrediction(
        fixation_probability=float(u),
        valid=not problems,
        fixation_probability_note=note,
        initial_share=float(p0),
        effective_size=float(ne),
        census_size=float(census),
        total_reproductive_value=float(size),
        selection_coefficient=float(s),
        selection_coefficient_per_generation=float(s * generation),
        generation_time=float(generation),
        demographic_variance_resident=float(res.variance),
        demographic_variance_mutant=float(mut.variance),
        variance_selection=float(var_sel),
        density_selection=float(fluct.selection) if fluct is not None else float("nan"),
    )


def finite_population_columns(config: Config) -> dict:
    """The finite-N keys of one point, as ``threshold``/``compare`` output them (see COLUMNS)."""
    try:
        f = finite_population_prediction(config)
    except ValueError as err:  # NoEquilibriumError and config problems
        f = FinitePrediction.missing(str(err))
    d = f.as_dict()
    d["fixation_probability_valid"] = d.pop("valid")
    return {k: d[k] for k in COLUMNS}



def shown_finite_columns(points):
    """A printed table's finite-N columns in short, and the notes below it (for ``threshold``).

    Returns the table with ``fixation_probability`` as ``finite_N`` (in
    brackets where not valid) and ``effective_size`` as ``Ne``, the other
    finite-N columns dropped, and a text listing each distinct note with its points.
    """
    table = points.copy()
    if "fixation_probability_valid" not in table:  # e.g. the stochastic theory's rows: none to show
        return table, ""
    valid = table.pop("fixation_probability_valid").astype(bool)
    u = table.pop("fixation_probability")
    table["finite_N"] = [f"{x:.4g}" if ok else f"({x:.4g})" for x, ok in zip(u, valid)]
    table["Ne"] = table.pop("effective_size")
    notes = table.pop("fixation_probability_note")
    for name in COLUMNS:
        table.pop(name) if name in table else None
    lines = ["finite_N: the diffusion's fixation probability; in brackets where not valid:"]
    ids = points["point"] if "point" in points else points.index
    lines += note_lines(list(ids), list(notes))
    return table, "\n".join(lines)


_NUMBER = re.compile(r"\d[\d.e+-]*")


def note_lines(points: list, notes: list[str], *, width: int = 100) -> list[str]:
    """Each point's note, said once for the points whose notes differ only in their numbers
    (with the first point's numbers), wrapped to ``width``."""
    groups: dict[str, list[int]] = {}
    for i, note in enumerate(notes):
        groups.setdefault(_NUMBER.sub("#", note), []).append(i)
    lines = []
    for rows in groups.values():
        where = [points[i] for i in rows]
        numbers = f" (numbers of point {where[0]}; every point's in --json)" if len(where) > 1 else ""
        said = ("point " if len(where) == 1 else "points ") + ", ".join(map(str, where))
        lines += textwrap.wrap(f"{said}{numbers}: {notes[rows[0]]}", width=width,
                               initial_indent="  ", subsequent_indent="    ")
    return lines
