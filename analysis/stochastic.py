"""Invasion theory in a variable environment: stochastic growth rates, Lyapunov exponents, establishment.

Years follow one another by the law of a ``sim.years.YearTypes``; a year
multiplies every allele's rates (``sim.years.scaled_schedule``) before the
density factors apply, and the year's projection matrix is then
``sim.meanfield.projection_matrix`` of the scaled schedule. Without parental
effects that matrix is linear in each factor, so it is split once per year
type into its fertility part F (first row) and survival part T::

    A(year, f) = F_year f_fec f_rec + T_year f_adult

so many seasons and batches are advanced at once without restating the model.
With parental care or a brood effect the fertility row is not linear in the
factors; it is the year's season kernel's expected recruits per parent at
each season's factors (``_YearProjections``).

Every estimate here is a time average over seasons drawn in ``n_batches``
independent batches (``YearSequences``): each batch lives through its own
burn-in, then ``batch_length`` recorded seasons. The standard error is the
spread of the batch means over sqrt(n_batches) (the method of batch means,
here with independent batches; e.g. Asmussen & Glynn 2007, Stochastic
Simulation, ch. IV, from memory). Passing the same ``YearSequences`` to every call is what
makes comparisons and thresholds use common random numbers.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass, field

import numpy as np
from scipy.optimize import brentq

from sim.density import Ceiling, DensityDependence, Factors, NoDensity
from sim.kernel import SeasonKernel
from sim.meanfield import (
    NoEquilibriumError,
    projection_matrix,
    solve_equilibrium,
    stable_age_distribution,
)
from sim.schedules import Schedule
from sim.years import YearType, YearTypes, scaled_schedule

from .demography import dominant_eigen

__all__ = [
    "YearSequences",
    "draw_year_sequences",
    "year_matrices",
    "StochasticGrowth",
    "stochastic_growth_rate",
    "small_noise_approximation",
    "stacked_log_increments",
    "regulated",
    "ResidentPath",
    "resident_path",
    "StochasticInvasion",
    "stochastic_invasion",
    "log_invasion_fitness",
    "InvasionSetting",
    "StochasticThreshold",
    "stochastic_threshold",
    "NeutralShare",
    "neutral_share_in_years",
]


def _plain(d: dict) -> dict:
    return {k: (v.item() if isinstance(v, np.generic) else v) for k, v in d.items()}


# --------------------------------------------------------------------------- year sequences


@dataclass(frozen=True)
class YearSequences:
    """Year-type indices of ``n_batches`` independent batches of seasons.

    Attributes
    ----------
    indices : ndarray of int, shape (n_batches, burn_in + batch_length)
    burn_in : int
        Leading seasons of each batch that are lived through but not recorded.
    uniforms : ndarray, optional
        The uniforms the indices were made from (``YearTypes.from_uniforms``),
        kept so that other year laws can be applied to the same draws.
    years : YearTypes, optional
        The law the indices follow.
    """

    indices: np.ndarray
    burn_in: int
    uniforms: np.ndarray | None = None
    years: YearTypes | None = None

    def __post_init__(self):
        idx = np.asarray(self.indices)
        if idx.ndim != 2 or idx.shape[0] < 2:
            raise ValueError(f"year sequences: need shape (n_batches >= 2, seasons); got {idx.shape}")
        if not 0 <= self.burn_in < idx.shape[1]:
            raise ValueError(f"burn_in must be in [0, {idx.shape[1]}); got {self.burn_in}")
        object.__setattr__(self, "indices", idx.astype(np.int64))

    @property
    def n_batches(self) -> int:
        return self.indices.shape[0]

    @property
    def batch_length(self) -> int:
        return self.indices.shape[1] - self.burn_in

    @property
    def recorded(self) -> np.ndarray:
        """The recorded seasons' year indices, shape (n_batches, batch_length)."""
        return self.indices[:, self.burn_in :]

    def for_years(self, years: YearTypes) -> YearSequences:
        """The same draws under the law of ``years`` (itself when that law is already theirs).

        Raises
        ------
        ValueError
            When no uniforms are kept and ``years`` is another law.
        """
        if self.years is None and self.uniforms is None:
            if int(self.indices.max()) >= len(years):
                raise ValueError(f"year sequences index {int(self.indices.max()) + 1} types; years has {len(years)}")
            return self
        if self.years == years:
            return self
        if self.uniforms is None:
            raise ValueError("year sequences: drawn for another law and no uniforms kept to redraw them")
        return YearSequences(years.from_uniforms(self.uniforms), self.burn_in, self.uniforms, years)


def draw_year_sequences(
    years: YearTypes, rng: np.random.Generator, *, n_batches: int = 50, batch_length: int = 2000,
    burn_in: int = 200,
) -> YearSequences:
    """Draw independent batches of seasons (each started from ``years.start_law()``)."""
    if n_batches < 2 or batch_length < 1 or burn_in < 0:
        raise ValueError(
            f"need n_batches >= 2, batch_length >= 1, burn_in >= 0; got {n_batches}, "
            f"{batch_length}, {burn_in}"
        )
    u = rng.random((n_batches, burn_in + batch_length))
    return YearSequences(years.from_uniforms(u), burn_in, u, years)


# --------------------------------------------------------------------------- matrices by year


@dataclass(frozen=True)
class _YearProjections:
    """One schedule's projection matrix in each year type, as a function of the density factors.

    Without parental effects the matrix is linear in f_fec f_rec and in f_adult, so it is kept
    as two parts per year type, A = F f_fec f_rec + T f_adult (``fert``, ``surv``). With them
    the fertility row is the season kernel's expected recruits per parent, f_rec P'(x; m f_fec)
    (sigma c_care + (1 - sigma) c_orphan) with sigma = s f_adult (``SeasonKernel.
    recruits_per_parent``), which is neither: it is computed from the year's kernel at each
    season's factors (``kernels``), and T stays the survival part.
    """

    fert: np.ndarray  # (n_types, n, n), at Factors(1, 0, 1)
    surv: np.ndarray  # (n_types, n, n), at Factors(0, 1, 1)
    kernels: tuple | None  # each year type's SeasonKernel where parental effects act, else None

    @property
    def n_ages(self) -> int:
        return self.fert.shape[1]

    def matrices(self, y: np.ndarray, f_fec=1.0, f_adult=1.0, f_rec=1.0, *, kind=Factors) -> np.ndarray:
        """A(year, f) for each entry of the year-type indices ``y`` (shape (n_b,)) at its factors
        (numbers, or arrays of shape (n_b,)), shape (n_b, n, n); ``kind`` ``Cull`` where the
        factors are a ceiling's removal (``sim.density.Cull``)."""
        f_fec, f_adult, f_rec = (np.broadcast_to(np.asarray(f, dtype=float), y.shape) for f in (f_fec, f_adult, f_rec))
        if self.kernels is None:
            return self.fert[y] * (f_fec * f_rec)[:, None, None] + self.surv[y] * f_adult[:, None, None]
        a = self.surv[y] * f_adult[:, None, None]
        for k in np.unique(y):
            at = y == k
            a[at, 0, :] += self.kernels[k].recruits_per_parent(kind(f_fec[at], f_adult[at], f_rec[at]))
        return a


def _projections(schedule: Schedule, years: YearTypes, offspring=None) -> _YearProjections:
    """The year types' projection matrices of ``schedule`` (``offspring``: the offspring law,
    default Poisson; it matters only under a brood effect)."""
    kernels = [SeasonKernel.for_schedule(scaled_schedule(schedule, y), offspring=offspring) for y in years.types]
    fert = np.array([k.projection_matrix(Factors(1.0, 0.0, 1.0)) for k in kernels])  # (as projection_matrix)
    surv = np.array([k.projection_matrix(Factors(0.0, 1.0, 1.0)) for k in kernels])
    return _YearProjections(fert, surv, tuple(kernels) if kernels[0].parental else None)


def year_matrices(schedule: Schedule, years: YearTypes, factors: Factors = Factors(), *,
                  offspring=None) -> np.ndarray:
    """Projection matrix of each year type at fixed density factors, shape (n_types, n, n)."""
    return _projections(schedule, years, offspring).matrices(np.arange(len(years.types)), *factors,
                                                             kind=type(factors))


# a span of seasons whose matrices ``_log_increments`` builds at once: at most this many
# seasons, and this many matrix entries (32 MB of float64)
_SPAN_SEASONS = 256
_SPAN_ENTRIES = 1 << 22


def _log_increments(proj: _YearProjections, seq, factors: Factors | None = None, weights=None) -> np.ndarray:
    """log(size after / size before) of each season of a normalised matrix product.

    ``factors`` holds the density factors of each season (arrays of the shape
    of ``seq``); all 1 when omitted. Size is ``x @ weights``
    (default: the total); any positive weights give the same long-run mean,
    since the sums telescope to log(size at the end / size at the start).
    """
    n_b, n_t = seq.shape
    n = proj.n_ages
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    x = np.zeros((n_b, n))
    x[:, 0] = 1.0 / w[0]  # one recruit (age 1) of size 1: see the notes of stochastic_growth_rate
    out = np.empty((n_b, n_t))
    # the matrices of a span of seasons are built at once, season-major (each season's block
    # contiguous), so that the season loop only multiplies: building them one season at a
    # time cost more than the products (the same numbers, element by element)
    span = max(1, min(_SPAN_SEASONS, _SPAN_ENTRIES // (n_b * n * n)))
    with np.errstate(divide="ignore", invalid="ignore"):
        for t0 in range(0, n_t, span):
            t1 = min(t0 + span, n_t)
            y = seq[:, t0:t1].T.ravel()
            if factors is None:
                a = proj.matrices(y)
            else:
                a = proj.matrices(y, *(np.broadcast_to(f, seq.shape)[:, t0:t1].T.ravel() for f in factors),
                                  kind=type(factors))
            a = a.reshape(t1 - t0, n_b, n, n)
            for t in range(t1 - t0):
                x = np.einsum("bij,bj->bi", a[t], x)
                size = x @ w
                out[:, t0 + t] = np.log(size)
                x = x / np.where(size > 0, size, 1.0)[:, None]
    return out


def stacked_log_increments(schedules, years: YearTypes, sequences: YearSequences, factors: Factors | None = None,
                           *, offspring=None) -> np.ndarray:
    """Every season's log growth of each of ``schedules`` on the same draws, in one pass.

    ``factors`` (each an array of the draws' shape, or None for all 1) are the density
    factors every schedule meets, as a resident's path sets them. The schedules must have as
    many census ages as each other. Returns shape (n_schedules, n_batches, seasons), burn-in
    included: the schedules' year matrices are stacked on the year-type axis, so the season
    loop runs once for all of them.
    """
    sequences = sequences.for_years(years)
    parts = [_projections(s, years, offspring) for s in schedules]
    if len({p.n_ages for p in parts}) != 1:
        raise ValueError("stacked_log_increments: the schedules differ in their number of census ages")
    kernels = None if parts[0].kernels is None else tuple(k for p in parts for k in p.kernels)
    proj = _YearProjections(np.concatenate([p.fert for p in parts]), np.concatenate([p.surv for p in parts]),
                            kernels)
    k, n_types = len(parts), len(years.types)
    seq = sequences.indices
    stacked = (np.arange(k)[:, None, None] * n_types + seq[None]).reshape(k * seq.shape[0], seq.shape[1])
    if factors is not None:
        factors = type(factors)(*(np.tile(np.broadcast_to(f, seq.shape), (k, 1)) for f in factors))
    return _log_increments(proj, stacked, factors).reshape(k, *seq.shape)


def _batch_estimate(increments: np.ndarray) -> tuple[float, float]:
    """Mean over everything and the batch-means standard error."""
    means = increments.mean(axis=1)
    if not np.all(np.isfinite(means)):
        return float(np.mean(means)), float("nan")
    return float(means.mean()), float(means.std(ddof=1) / np.sqrt(means.size))


# --------------------------------------------------------------------------- density-free


@dataclass(frozen=True)
class StochasticGrowth:
    """An allele's density-free long-run growth in a variable environment.

    Attributes
    ----------
    allele : str
    stochastic_growth_rate : float
        log lambda_s, the long-run mean of log(N_{t+1} / N_t), by simulation
        of the random matrix product.
    stochastic_growth_rate_se : float
        Its batch-means standard error.
    small_noise_approximation : float
        Tuljapurkar's (1982) approximation of log lambda_s (nan for Markov
        switching).
    n_batches, batch_length, burn_in : int
    """

    allele: str
    stochastic_growth_rate: float
    stochastic_growth_rate_se: float
    small_noise_approximation: float
    n_batches: int
    batch_length: int
    burn_in: int

    def as_dict(self) -> dict:
        return _plain(asdict(self))


def small_noise_approximation(schedule: Schedule, years: YearTypes, factors: Factors = Factors(), *,
                              offspring=None) -> float:
    """Tuljapurkar's small-noise approximation of log lambda_s for iid years (nan for Markov).

    Notes
    -----
    With mean matrix A_bar = sum_k p_k A_k, its dominant eigenvalue lambda_1
    and sensitivities S_ij = v_i w_j / <v, w> (Caswell 2001, ch. 9)::

        log lambda_s ~ log lambda_1 - tau^2 / (2 lambda_1^2),
        tau^2 = sum_k p_k (sum_ij S_ij (A_k - A_bar)_ij)^2

    i.e. tau^2 is the sensitivities applied to the covariances of the entries
    (Tuljapurkar 1982, Theor. Pop. Biol. 21; Tuljapurkar 1990, Population
    Dynamics in Variable Environments; Caswell 2001, ch. 14; references from
    memory). The error is of third order in the noise.
    """
    if years.switching != "iid":
        return float("nan")
    mats = year_matrices(schedule, years, factors, offspring=offspring)
    p = np.asarray(years.probabilities)
    mean = np.tensordot(p, mats, axes=1)
    lam, w, v = dominant_eigen(mean)
    if lam <= 0:
        return float("-inf")
    sens = np.outer(v, w) / float(v @ w)
    dev = np.einsum("ij,kij->k", sens, mats - mean)
    tau2 = float(p @ dev**2)
    return float(np.log(lam) - tau2 / (2.0 * lam**2))


def _linear_term(schedule: Schedule, years: YearTypes, factors: Factors, offspring=None):
    """Z_k = S : (A_k - A_bar) / lambda_1 for each year type (mean 0 under the law), and weights.

    The weights are the reproductive values v of A_bar where all are positive
    (else None: the total): measured by v, a season's log growth is Z_t plus
    terms of second order in the noise.
    """
    mats = year_matrices(schedule, years, factors, offspring=offspring)
    mean = np.tensordot(years.stationary_law(), mats, axes=1)
    lam, w, v = dominant_eigen(mean)
    if lam <= 0 or float(v @ w) <= 0 or np.any(v <= 0):
        return None, None
    sens = np.outer(v, w) / float(v @ w)
    return np.einsum("ij,kij->k", sens, mats - mean) / lam, v


def stochastic_growth_rate(
    schedule: Schedule, years: YearTypes, sequences: YearSequences, *, factors: Factors = Factors(),
    offspring=None,
) -> StochasticGrowth:
    """log lambda_s of one schedule by simulating the random matrix product.

    Parameters
    ----------
    schedule : Schedule
    years : YearTypes
    sequences : YearSequences
        The seasons lived through (the same object for every allele compared).
    factors : Factors, optional
        Fixed density factors (all 1: the density-free growth rate).
    offspring : optional
        The offspring law (default Poisson); it matters only under a brood effect.

    Notes
    -----
    log lambda_s = lim (1/t) log ||A_t ... A_1 x|| exists and does not depend on
    x or on the norm for an ergodic year sequence (Furstenberg & Kesten 1960;
    Tuljapurkar 1990, ch. 2). A one-class schedule has a scalar matrix, so
    log lambda_s is exactly sum_k pi_k log lambda_k (Lewontin & Cohen 1969).

    The product starts from one age-1 individual, so it follows the lineage
    of a recruit: for an imprimitive (cyclic) schedule, such as semelparity
    at an age above 1, a start spread over all ages would make two or more
    cohort lines whose size ratio wanders like a random walk, biasing each
    batch's mean upward by order 1/sqrt(batch_length).

    For iid years size is measured by the reproductive values v of the mean
    matrix, and the season's first-order term Z_t = S : (A_t - A_bar) / lambda_1
    (the linear term of Tuljapurkar's expansion, of mean exactly 0) is then
    subtracted from each increment as a control variate: the estimate stays
    unbiased and its variance falls from order sigma^2 to order sigma^4 in
    the noise sigma (control variates: Asmussen & Glynn 2007, ch. V, from memory).
    """
    sequences = sequences.for_years(years)
    proj = _projections(schedule, years, offspring)
    linear, values = (_linear_term(schedule, years, factors, offspring) if years.switching == "iid"
                      else (None, None))
    fixed = type(factors)(*(np.full(sequences.indices.shape, float(f)) for f in factors))
    inc = _log_increments(proj, sequences.indices, fixed, weights=values)[:, sequences.burn_in :]
    if linear is not None and np.all(np.isfinite(inc)):
        inc = inc - linear[sequences.recorded]
    est, se = _batch_estimate(inc)
    return StochasticGrowth(
        schedule.name, est, se, small_noise_approximation(schedule, years, factors, offspring=offspring),
        sequences.n_batches, sequences.batch_length, sequences.burn_in,
    )


# --------------------------------------------------------------------------- density-dependent


@dataclass(frozen=True)
class ResidentPath:
    """The resident's mean-field dynamics driven by the year sequence.

    Attributes
    ----------
    factors : Factors
        Density factors of every season (burn-in included), each an array of
        shape (n_batches, seasons).
    census_size : ndarray, shape (n_batches, seasons)
        The resident's census at the start of each season.
    """

    factors: Factors
    census_size: np.ndarray


def _starting_census(resident: Schedule, years: YearTypes, density: DensityDependence,
                     offspring=None) -> np.ndarray:
    """The resident's equilibrium in the average year (a start for the burn-in)."""
    mean = YearType("mean", *(years.start_law() @ years.multipliers()))
    try:
        return solve_equilibrium(scaled_schedule(resident, mean), density, offspring=offspring).census
    except (NoEquilibriumError, ValueError):
        return density.form.capacity * stable_age_distribution(resident, offspring=offspring)


def resident_path(
    resident: Schedule, years: YearTypes, density: DensityDependence, sequences: YearSequences, *,
    start: np.ndarray | None = None, offspring=None,
) -> ResidentPath:
    """Run the resident's deterministic season map through each batch's years.

    Each season is the season kernel's mean-field step (``SeasonKernel.mean_step``)
    with the year's scaled rates: D from the census (weights
    ``density.index_weights`` of the year's fecundities), factors f(D), then
    the projection ``A(year, f)``. Batches start from the resident's
    equilibrium in the average year (or from ``start``, a census by age);
    the burn-in lets them forget it.

    A ceiling's removal is not a factor of D: there each season is
    ``mean_step`` itself (one batch at a time, so slower), and the
    removal fraction phi is read off as the ratio of the census it leaves to
    the census without removal, placed like the ceiling (recruits only, or
    everyone).

    Raises
    ------
    sim.meanfield.NoEquilibriumError
        Without density dependence, or when the resident dies out along the path.
    """
    if isinstance(density.form, NoDensity):
        raise NoEquilibriumError(f"resident {resident.name!r}: no density dependence, so no regulated path")
    sequences = sequences.for_years(years)
    start = (_starting_census(resident, years, density, offspring) if start is None
             else np.asarray(start, float))
    if isinstance(density.form, Ceiling):
        return _ceiling_path(resident, years, density, sequences, start, offspring)
    proj = _projections(resident, years, offspring)
    scaled_m = np.array([scaled_schedule(resident, y).fecundity for y in years.types])
    weights = density.index_weights(scaled_m)  # (n_types, n_ages)
    seq = sequences.indices
    n_b, n_t = seq.shape
    x = np.tile(start, (n_b, 1))
    f = np.empty((3, n_b, n_t))  # fecundity, adult, recruitment factors
    size = np.empty((n_b, n_t))
    for t in range(n_t):
        y = seq[:, t]
        d = np.einsum("bj,bj->b", weights[y], x)
        f[0, :, t], f[1, :, t], f[2, :, t] = density.placed(density.form.factor(d))
        size[:, t] = x.sum(axis=1)
        a = proj.matrices(y, f[0, :, t], f[1, :, t], f[2, :, t])
        x = np.einsum("bij,bj->bi", a, x)
    if not np.all(size[:, -1] > 1e-200):
        raise NoEquilibriumError(f"resident {resident.name!r}: dies out in the variable environment")
    return ResidentPath(Factors(*f), size)


def _ceiling_path(resident, years, density, sequences, start, offspring=None) -> ResidentPath:
    """The resident's path under a ceiling, all batches at once: each season the kernel's
    density-free projection (its survival part apart), then the removal the kernel's
    ``ceiling_excess`` makes of it, in expectation (as ``SeasonKernel.mean_step`` takes it)."""
    proj = _projections(resident, years, offspring)
    kernel = SeasonKernel.for_schedule(resident, density, offspring)
    seq = sequences.indices
    n_b, n_t = seq.shape
    x = np.tile(start, (n_b, 1))
    phi = np.ones((n_b, n_t))
    size = np.empty((n_b, n_t))
    free = proj.matrices(np.arange(len(years.types)))  # each year type's, density-free
    for t in range(n_t):
        y = seq[:, t]
        size[:, t] = x.sum(axis=1)
        unchecked = np.einsum("bij,bj->bi", free[y], x)
        survivors = np.einsum("bij,bj->bi", proj.surv[y], x)  # the survival part: no young
        recruits = unchecked - survivors
        excess, pool = kernel.ceiling_excess(survivors.sum(axis=1), recruits.sum(axis=1))
        keep = 1.0 - np.divide(excess, pool, out=np.zeros_like(pool), where=pool > 0)
        phi[:, t] = keep
        x = survivors + recruits * keep[:, None] if kernel.ceiling_on_recruits else unchecked * keep[:, None]
    if not np.all(size[:, -1] > 1e-200):
        raise NoEquilibriumError(f"resident {resident.name!r}: dies out in the variable environment")
    culled = density.placed(phi)  # a Cull: the removal comes after the season
    return ResidentPath(type(culled)(*(np.broadcast_to(v, phi.shape) for v in culled)), size)


@dataclass(frozen=True)
class StochasticInvasion:
    """A rare mutant's invasion fitness in a variable environment.

    Attributes
    ----------
    resident, mutant : str
    regulated : bool
        True: the resident's density-regulated path sets the mutant's
        environment; False: density-free (ratio of stochastic growth rates).
    invasion_fitness : float
        exp(mutant's long-run log growth - resident's); > 1: invades.
    log_invasion_fitness_se : float
        Batch-means standard error of log(invasion fitness).
    invasion_fitness_se : float
        Delta method: invasion_fitness x log_invasion_fitness_se.
    resident_growth, mutant_growth : StochasticGrowth
        Density-free stochastic growth rates (with the small-noise
        approximation).
    mean_census_size : float
        The resident's mean census over the recorded seasons (nan without
        density dependence).
    """

    resident: str
    mutant: str
    regulated: bool
    invasion_fitness: float
    log_invasion_fitness_se: float
    invasion_fitness_se: float
    resident_growth: StochasticGrowth
    mutant_growth: StochasticGrowth
    mean_census_size: float

    @property
    def log_invasion_fitness(self) -> float:
        return float(np.log(self.invasion_fitness))

    def as_dict(self) -> dict:
        """Flat JSON-ready keys; ``stochastic_growth_rate*`` and ``small_noise_approximation`` are the mutant's."""
        return _plain({
            "resident": self.resident,
            "mutant": self.mutant,
            "regulated": self.regulated,
            "invasion_fitness": self.invasion_fitness,
            "invasion_fitness_se": self.invasion_fitness_se,
            "log_invasion_fitness_se": self.log_invasion_fitness_se,
            "stochastic_growth_rate": self.mutant_growth.stochastic_growth_rate,
            "stochastic_growth_rate_se": self.mutant_growth.stochastic_growth_rate_se,
            "small_noise_approximation": self.mutant_growth.small_noise_approximation,
            "resident_stochastic_growth_rate": self.resident_growth.stochastic_growth_rate,
            "resident_stochastic_growth_rate_se": self.resident_growth.stochastic_growth_rate_se,
            "resident_small_noise_approximation": self.resident_growth.small_noise_approximation,
            "mean_census_size": self.mean_census_size,
        })


def regulated(density: DensityDependence | None) -> bool:
    """True when ``density`` regulates the resident (not None, not the form "none")."""
    return density is not None and not isinstance(density.form, NoDensity)


def _same_schedule(a: Schedule, b: Schedule) -> bool:
    return (a.juvenile_survival == b.juvenile_survival and np.array_equal(a.fecundity, b.fecundity)
            and np.array_equal(a.survival, b.survival) and a.orphan_survival == b.orphan_survival
            and a.brood_scale == b.brood_scale)


def _log_fitness_increments(resident, mutant, years, density, sequences, cache=None, offspring=None):
    """Per-season log growth of the mutant minus the resident's (recorded seasons) and the path.

    ``cache`` (a dict) keeps the resident's path or increments between calls
    with the same resident (a threshold along a mutant's parameter).
    """
    sequences = sequences.for_years(years)
    mutant_proj = _projections(mutant, years, offspring)
    cache = {} if cache is None else cache
    key = (years, density, offspring, id(sequences.indices))
    if cache.get("key") == key and _same_schedule(cache["resident"], resident):
        resident_part = cache["part"]
    else:
        if regulated(density):
            resident_part = resident_path(resident, years, density, sequences, offspring=offspring)
        else:
            resident_part = _log_increments(_projections(resident, years, offspring), sequences.indices)
        cache.update(key=key, resident=resident, part=resident_part)
    if not regulated(density):
        inc = _log_increments(mutant_proj, sequences.indices) - resident_part
        return inc[:, sequences.burn_in :], None
    path = resident_part
    inc = _log_increments(mutant_proj, sequences.indices, path.factors)
    return inc[:, sequences.burn_in :], path


def stochastic_invasion(
    resident: Schedule, mutant: Schedule, years: YearTypes, density: DensityDependence | None,
    sequences: YearSequences, *, offspring=None,
) -> StochasticInvasion:
    """The mutant's invasion fitness in the resident's fluctuating environment.

    Parameters
    ----------
    resident, mutant : Schedule
    years : YearTypes
    density : DensityDependence or None
        None or a ``NoDensity`` form: density-free.
    sequences : YearSequences
        The seasons (common random numbers for both alleles).
    offspring : optional
        The offspring law (default Poisson); it matters only under a brood effect.

    Notes
    -----
    With density dependence the resident follows its mean-field dynamics
    through the years (``resident_path``) and the invasion fitness is
    exp(mutant's Lyapunov exponent) in that fluctuating environment: a rare
    mutant invades iff it is > 1 (Metz, Nisbet & Geritz 1992, TREE 7: 198;
    Ferriere & Gatto 1995, Theor. Pop. Biol. 48: 126). Without density
    dependence it is exp(log lambda_s(mutant) - log lambda_s(resident)), so
    "above 1" still means the mutant's share grows; its standard error comes
    from the paired batch means of the difference (common random numbers).
    """
    inc, path = _log_fitness_increments(resident, mutant, years, density, sequences, offspring=offspring)
    log_fit, se = _batch_estimate(inc)
    fitness = float(np.exp(log_fit))
    mean_size = float(path.census_size[:, sequences.burn_in :].mean()) if path is not None else float("nan")
    return StochasticInvasion(
        resident.name, mutant.name, path is not None, fitness, se, fitness * se,
        stochastic_growth_rate(resident, years, sequences, offspring=offspring),
        stochastic_growth_rate(mutant, years, sequences, offspring=offspring),
        mean_size,
    )


# --------------------------------------------------------------------------- thresholds


@dataclass(frozen=True)
class InvasionSetting:
    """Everything a stochastic invasion depends on at one parameter value."""

    resident: Schedule
    mutant: Schedule
    years: YearTypes
    density: DensityDependence | None = None
    offspring: object = None  # the offspring law (default Poisson; it matters under a brood effect)


def log_invasion_fitness(setting: InvasionSetting, sequences: YearSequences, cache: dict | None = None) -> float:
    """log of the mutant's stochastic invasion fitness at ``setting`` on these year draws (the
    mean of its seasons' log growth, less the resident's without density dependence).

    ``cache`` (a dict kept between calls) reuses the resident's path while the resident stays
    the same: derivatives along the mutant's rates on common random numbers.
    """
    s = setting
    inc, _ = _log_fitness_increments(s.resident, s.mutant, s.years, s.density, sequences, cache, s.offspring)
    return float(inc.mean())


@dataclass(frozen=True)
class StochasticThreshold:
    """Where the stochastic invasion fitness crosses 1 along one parameter.

    Attributes
    ----------
    value : float
        The threshold (nan when none was found).
    standard_error : float
        Its standard error from the year sampling (delta method).
    converged : bool
    bracket : tuple of float
    log_fitness_at_bracket : tuple of float
    slope : float
        d log(invasion fitness) / d parameter at the threshold.
    message : str
    """

    value: float
    standard_error: float
    converged: bool
    bracket: tuple[float, float]
    log_fitness_at_bracket: tuple[float, float]
    slope: float
    message: str

    def as_dict(self) -> dict:
        d = _plain(asdict(self))
        d["bracket"], d["log_fitness_at_bracket"] = list(self.bracket), list(self.log_fitness_at_bracket)
        return d


def stochastic_threshold(
    setting: Callable[[float], InvasionSetting],
    sequences: YearSequences,
    *,
    bracket: tuple[float, float],
    xtol: float = 1e-10,
) -> StochasticThreshold:
    """The parameter value at which the mutant's stochastic invasion fitness is 1.

    Parameters
    ----------
    setting : callable
        ``setting(value) -> InvasionSetting``: schedules, years and density at
        a trial value (any parameter: an allele's rate, a capacity, a year
        type's multiplier or probability).
    sequences : YearSequences
        The same draws serve every trial value (common random numbers; under
        another year law they are re-read from the same uniforms), so the
        estimated log fitness g(value) is smooth in rates and multipliers,
        and has only steps of order 1 / (seasons drawn) in probabilities.
    bracket : (float, float)
        Values with g of opposite signs.
    xtol : float, optional

    Notes
    -----
    The threshold theta solves g(theta) = 0. Its standard error is the delta
    method's se(g(theta)) / |g'(theta)|, with se(g) from the batch means at
    theta and g' by a central difference on the same draws (e.g. Asmussen &
    Glynn 2007, ch. III, on smooth functions of estimates).
    """
    cache: dict = {}

    def increments(v):
        s = setting(float(v))
        return _log_fitness_increments(s.resident, s.mutant, s.years, s.density, sequences, cache,
                                       s.offspring)[0]

    def g(v):
        return float(increments(v).mean())

    lo, hi = map(float, bracket)
    # an end where the mutant cannot grow at all (a fecundity of 0: log fitness -inf) is moved
    # inward until g is finite there, so that a bracket from 0 finds the threshold
    lo, g_lo = _finite_end(g, lo, hi)
    hi, g_hi = _finite_end(g, hi, lo)
    if not (np.isfinite(g_lo) and np.isfinite(g_hi)) or g_lo * g_hi > 0:
        why = ("has the same sign at both ends" if np.isfinite(g_lo) and np.isfinite(g_hi)
               else "is not finite at an end")
        return StochasticThreshold(
            float("nan"), float("nan"), False, (lo, hi), (g_lo, g_hi), float("nan"),
            f"log invasion fitness {why}: {g_lo:.6g}, {g_hi:.6g}",
        )
    root = brentq(g, lo, hi, xtol=xtol, rtol=1e-12, maxiter=200)
    _, se = _batch_estimate(increments(root))
    # a wide step: g has steps of order 1 / (seasons drawn) when a probability varies, and a
    # central difference's error in a smooth g is only of order h^2
    h = 1e-2 * (hi - lo)
    slope = (g(root + h) - g(root - h)) / (2 * h)
    err = se / abs(slope) if slope != 0 else float("inf")
    side = "above" if g_hi > 0 else "below"
    return StochasticThreshold(
        float(root), float(err), True, (lo, hi), (g_lo, g_hi), float(slope),
        f"invades {side} {root:.6g} (SE {err:.2g}; {sequences.n_batches} batches of "
        f"{sequences.batch_length} seasons)",
    )


def _finite_end(g, end: float, other: float) -> tuple[float, float]:
    """``end`` of a bracket and g there, moved toward ``other`` (by 1e-9 of the bracket, then
    1e-6, 1e-3, 1e-2) while g is infinite there; as given where it is finite or nan."""
    value = g(end)
    for step in (1e-9, 1e-6, 1e-3, 1e-2):
        if not np.isinf(value):
            break
        end += (other - end) * step
        value = g(end)
    return end, value


# --------------------------------------------------------------------------- neutral expectation


@dataclass(frozen=True)
class NeutralShare:
    """A neutral mutant's fixation probability in random years.

    Attributes
    ----------
    value : float
        The mean over year sequences of the mutants' share of reproductive
        value at the start.
    standard_error : float
        Its standard error over the sequences (sd / sqrt(n_sequences)).
    constant_years : float
        The same share with the reproductive values of the average year (the
        constant-environment statement), for comparison.
    n_sequences, seasons : int
    shares : ndarray
        The share under each sequence's years (the fixation probability given
        those years).
    """

    value: float
    standard_error: float
    constant_years: float
    n_sequences: int
    seasons: int
    shares: np.ndarray = field(repr=False, compare=False, default=None)


def neutral_share_in_years(
    resident: Schedule, years: YearTypes, density: DensityDependence | None, sequences: YearSequences,
    census: np.ndarray, mutant_count: int, *, offspring=None,
) -> NeutralShare:
    """Fixation probability of ``mutant_count`` neutral mutants of age 1 among ``census`` residents.

    Parameters
    ----------
    resident : Schedule
        The resident's (and so the neutral mutant's) schedule.
    years : YearTypes
    density : DensityDependence or None
    sequences : YearSequences
        Each row is one possible future, season 1 onwards from the start
        (its ``burn_in`` is ignored: the start is the census given).
    census : ndarray
        The residents' starting census by age (the mutants come on top).
    mutant_count : int
    offspring : optional
        The offspring law (default Poisson); it matters only under a brood effect.

    Notes
    -----
    A neutral mutant has the resident's matrices, so given the years ahead
    (and, in a large population, the density path they drive, which the
    mutants share) the expected reproductive-value share of its lineage is
    constant: with v_t' = v_{t+1}' A_t / (scale), the reproductive values
    of a random environment, read backwards from the future (Tuljapurkar 1990,
    Population Dynamics in Variable Environments, ch. 11, from memory),
    v_{t+1}' E[M_{t+1}] = v_{t+1}' A_t M_t is proportional to v_t' M_t, and
    the same for the whole population. The share ends at 0 or 1, so the
    fixation probability given the years is the starting share v_0' M_0 /
    v_0' N_0, and over the years its mean. v_0 depends on the first seasons'
    years (a year good for breeding raises the breeders' value for those who
    are about to breed), so the mean share is not the share under the
    average year's reproductive values (Jensen's inequality); they agree
    exactly where the life cycle has one class (v is then a number).
    The density path is the mean-field one from the starting census (mutants
    included); the backward product starts from equal values at the last
    season of each sequence, long enough ahead for it to be forgotten.
    """
    sequences = sequences.for_years(years)
    census = np.asarray(census, dtype=float)
    n = census.size
    schedule = resident.padded(n) if resident.n_ages < n else resident
    start = census.copy()
    start[0] += mutant_count
    seq = sequences.indices
    proj = _projections(schedule, years, offspring)
    if regulated(density):
        factors = resident_path(schedule, years, density, sequences, start=start, offspring=offspring).factors
    else:
        factors = Factors(*(np.ones(seq.shape),) * 3)
    v = np.ones((seq.shape[0], n))
    for t in range(seq.shape[1] - 1, -1, -1):
        a = proj.matrices(seq[:, t], *(f[:, t] for f in factors), kind=type(factors))
        v = np.einsum("bi,bij->bj", v, a)
        v /= v.sum(axis=1, keepdims=True)
    share = mutant_count * v[:, 0] / (v @ start)
    mean = YearType("mean", *(years.start_law() @ years.multipliers()))
    if regulated(density):
        try:
            factors = solve_equilibrium(scaled_schedule(schedule, mean), density, offspring=offspring).factors
        except (NoEquilibriumError, ValueError):
            factors = Factors()
    else:
        factors = Factors()
    _, _, v_mean = dominant_eigen(projection_matrix(scaled_schedule(schedule, mean), factors,
                                                    offspring=offspring))
    return NeutralShare(float(share.mean()), float(share.std(ddof=1) / np.sqrt(share.size)),
                        float(mutant_count * v_mean[0] / (v_mean @ start)), int(share.size), int(seq.shape[1]), share)
