"""Adaptive dynamics of reproductive effort: invasion fitness over pairs of efforts and singular efforts.

A resident with effort x sits at its equilibrium (``sim.meanfield``); a rare
mutant with effort y meets the density factors it sets there. The invasion
fitness s(x, y) is the mutant's dominant eigenvalue in that environment
(Metz, Nisbet & Geritz 1992); without density dependence it is the ratio of
growth rates lambda(y) / lambda(x), as in ``analysis.invasion``. From s:

- the pairwise invasibility plot: the sign of s(x, y) - 1 over a grid;
- the selection gradient D(x) = ds/dy at y = x;
- singular efforts (D = 0) and the ends E = 0, E = 1, classified by
  the second derivatives of s (Geritz, Kisdi, Meszena & Metz 1998).

Derivatives in the mutant's effort: without parental effects the
projection matrix is linear in m(a) and s(a), so dA/dE is the projection
matrix of the differentiated schedule (exact). With parental care or a
brood effect the kernel's fertility row is not (sigma = s f_adult weighs
the cared and orphaned young; a brood effect bends it in m), so dA/dE comes
by the chain rule from A's partial derivatives in the breeding class's m
and s: exact in s (A is linear in it, each young's recruitment being
sigma c_care + (1 - sigma) c_orphan), by differences in m. The eigenvalue's
first and second derivatives follow from perturbation theory (Caswell 2001,
ch. 9). The derivative of D along the diagonal, which needs the resident's
equilibrium to move, is a central difference of D.

In random years (``EffortModel.years``) the resident lives through the
theory's year draws on its mean-field path (``analysis.stochastic.
resident_path``), and s(x, y) is exp of the mutant's long-run log growth in
the density factors that path sets (Metz, Nisbet & Geritz 1992; without
density dependence, less the resident's own: the ratio of stochastic growth
rates). Every resident and mutant lives through the same draws (common
random numbers), so s is a smooth function of both efforts and its
derivatives in the mutant's effort are differences on those draws (step
``YEARS_STEP``); they estimate the long-run values with the draws' sampling
error.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from scipy.optimize import brentq

from sim.density import FORMS, DensityDependence, Factors, NoDensity
from sim.kernel import SeasonKernel
from sim.meanfield import NoEquilibriumError, growth_rate, projection_matrix, solve_equilibrium
from sim.schedules import Schedule
from sim.tradeoff import TradeOff, check_effort
from sim.years import YearTypes

from .demography import dominant_eigen
from .stochastic import YearSequences, regulated, resident_path, stacked_log_increments

__all__ = [
    "EffortModel",
    "EffortEnvironment",
    "MutantSlopes",
    "SingularStrategy",
    "PairwiseInvasibility",
    "AdaptiveAnalysis",
    "classify_singular",
    "pairwise_invasibility",
    "selection_gradient",
    "singular_strategies",
    "analyse_effort",
]

DEGENERATE_TOLERANCE = 1e-9  # a second derivative or gradient slope below this is called 0
DIAGONAL_STEP = 1e-5  # step of the central difference of D along the diagonal
FECUNDITY_STEP = 1e-4  # relative step of the differences in m under a brood effect (error ~ step^2)
YEARS_STEP = 1e-4  # step in the mutant's effort of the differences of log s in random years


@dataclass(frozen=True)
class EffortEnvironment:
    """What a rare mutant meets in a resident population of effort x.

    Attributes
    ----------
    resident : float
        The resident's effort x.
    status : str
        "equilibrium" (density-regulated), "density-free" (no density
        dependence: fitness is a ratio of growth rates), "extinct" (the
        resident cannot grow from low density: the mutant meets the empty
        environment) or "unregulated" (density dependence cannot stop the
        resident's growth: invasion fitness undefined).
    factors : Factors or None
        Density factors on fecundity, adult survival and recruitment (None
        in random years: see ``year_factors``).
    scale : float
        The mutant's growth rate is divided by this (the resident's own
        growth rate without density dependence, else 1; in random years the
        resident's own long-run growth on the draws, in the environment it
        meets).
    year_factors : Factors or None
        In random years, the density factors of every season of the draws
        (the resident's path; arrays of the draws' shape, or numbers); None:
        all 1.
    """

    resident: float
    status: str
    factors: Factors | None
    scale: float = 1.0
    year_factors: Factors | None = None

    @property
    def resident_persists(self) -> bool:
        """True where s(x, x) = 1: the resident is at equilibrium or density-free."""
        return self.status in ("equilibrium", "density-free")


@dataclass(frozen=True)
class MutantSlopes:
    """Invasion fitness s(x, y) and its first two derivatives in the mutant's y, at y = x."""

    resident: float
    fitness: float
    gradient: float
    curvature: float
    gradient_se: float = float("nan")  # in random years: from the draws' batch means; else nan


def _growth_rates(schedules, env: EffortEnvironment, offspring=None) -> np.ndarray:
    """Each schedule's dominant eigenvalue in ``env``, divided by ``env.scale`` (NaN if undefined)."""
    if env.status == "unregulated" or env.scale == 0:
        return np.full(len(schedules), np.nan)
    mats = np.array([projection_matrix(s, env.factors, offspring=offspring) for s in schedules])
    return np.linalg.eigvals(mats).real.max(axis=-1) / env.scale  # the Perron root has the largest real part


def _times(matrix: np.ndarray, slope: float) -> np.ndarray:
    """``matrix`` x ``slope``, 0 where the matrix is 0 (an infinite slope stays off the zeros)."""
    with np.errstate(invalid="ignore"):
        return np.where(matrix == 0.0, 0.0, matrix * slope)


@dataclass(frozen=True)
class EffortModel:
    """Effort alleles on one trade-off, with one juvenile survival, maturity age and density dependence.

    Parameters
    ----------
    tradeoff : TradeOff
        B(E) and P(E).
    juvenile_survival : float
        c, in [0, 1] (with parental care: c_care, while the parent lives).
    maturity_age : int, optional
        First breeding age (>= 1).
    density : DensityDependence, optional
        Form and placement (default: none).
    orphan_survival : float, optional
        c_orphan, the juvenile survival of young whose parent dies in their
        season (default: ``juvenile_survival``, no care).
    brood_scale : float, optional
        h of the exponential brood effect (default: none).
    offspring : offspring law, optional
        ``sim.offspring`` distribution (default Poisson); it matters only
        under a brood effect.
    years : YearTypes, optional
        Year types (default: a constant environment).
    year_draws : YearSequences, optional
        The seasons every resident and mutant lives through; required with
        ``years``.
    """

    tradeoff: TradeOff
    juvenile_survival: float
    maturity_age: int = 1
    density: DensityDependence = field(default_factory=lambda: DensityDependence(NoDensity()))
    orphan_survival: float | None = None
    brood_scale: float | None = None
    offspring: object = None
    years: YearTypes | None = None
    year_draws: YearSequences | None = None

    def __post_init__(self):
        if self.years is not None and not isinstance(self.year_draws, YearSequences):
            raise TypeError("an EffortModel with years needs year_draws, an analysis.stochastic.YearSequences")
        if not isinstance(self.tradeoff, TradeOff):
            raise TypeError(f"tradeoff must be a sim.tradeoff.TradeOff; got {type(self.tradeoff).__name__}")
        if not isinstance(self.density, DensityDependence):
            raise TypeError(f"density must be a sim.density.DensityDependence; got {type(self.density).__name__}")
        self.schedule(0.5)  # validates juvenile_survival and maturity_age

    def schedule(self, effort: float) -> Schedule:
        """The schedule of an allele with this effort (``TradeOff.schedule``, with its parental effects)."""
        schedule = self.tradeoff.schedule(effort, self.juvenile_survival, maturity_age=self.maturity_age)
        if self.orphan_survival is None and self.brood_scale is None:
            return schedule
        return replace(schedule, orphan_survival=self.orphan_survival, brood_scale=self.brood_scale)

    @cached_property
    def parental(self) -> bool:
        """True with parental care or a brood effect (the kernel's ``parental``)."""
        return SeasonKernel.for_schedule(self.schedule(0.5), offspring=self.offspring).parental

    def _matrix(self, schedule: Schedule, factors: Factors) -> np.ndarray:
        return projection_matrix(schedule, factors, offspring=self.offspring)

    def _effort_derivatives(self, effort: float, factors: Factors) -> tuple[np.ndarray, np.ndarray]:
        """dA/dE and d2A/dE2 in ``factors``.

        Without parental effects A is linear in m(a) and s(a): the projection
        matrices of the differentiated schedules. With them, the chain rule
        through the breeding class's m = B(E) and s = P(E)::

            A' = A_m B' + A_s P'
            A'' = A_mm B'^2 + 2 A_ms B' P' + A_m B'' + A_s P''

        A_s = A(m, 1) - A(m, 0) (A is linear in s; A_ss = 0), and the
        derivatives in m are central differences (forward ones near m = 0).
        """
        if not self.parental:
            return tuple(self._matrix(self.tradeoff.schedule_derivative(
                effort, self.juvenile_survival, maturity_age=self.maturity_age, order=n), factors)
                for n in (1, 2))
        base = self.schedule(effort)
        m = float(base.fecundity[-1])

        def at(fecundity: float, survival: float) -> np.ndarray:
            fec, surv = base.fecundity.copy(), base.survival.copy()
            fec[-1], surv[-1] = fecundity, survival
            return self._matrix(replace(base, fecundity=fec, survival=surv), factors)

        def by_survival(fecundity: float) -> np.ndarray:
            return at(fecundity, 1.0) - at(fecundity, 0.0)

        h = FECUNDITY_STEP * max(m, 1.0)
        central = m >= h
        steps = (-h, 0.0, h) if central else (0.0, h, 2 * h)

        def by_fecundity(values):  # first and second differences; an entry m leaves alone gets exact zeros
            low, mid, high = values
            first = (high - low) / (2 * h) if central else (4 * (mid - low) - (high - low)) / (2 * h)
            return first, ((high - mid) - (mid - low)) / h**2

        a = [at(m + d, float(base.survival[-1])) for d in steps]
        s_slopes = [by_survival(m + d) for d in steps]
        (a_m, a_mm), (a_ms, _) = by_fecundity(a), by_fecundity(s_slopes)
        a_s = s_slopes[1] if central else s_slopes[0]
        b1, b2 = (float(self.tradeoff.fecundity_derivative(effort, n)) for n in (1, 2))
        p1, p2 = (float(self.tradeoff.adult_survival_derivative(effort, n)) for n in (1, 2))
        first = _times(a_m, b1) + _times(a_s, p1)
        with np.errstate(invalid="ignore", over="ignore"):
            second = (_times(a_mm, b1 * b1) + 2 * _times(a_ms, b1 * p1) + _times(a_m, b2) + _times(a_s, p2))
        return first, second

    def environment(self, resident: float) -> EffortEnvironment:
        """The resident's equilibrium environment, or in random years the environment its path
        through the draws sets (see ``EffortEnvironment.status``)."""
        x = float(check_effort(resident, "resident effort"))
        schedule = self.schedule(x)
        if self.years is not None:
            return self._years_environment(x, schedule)
        if isinstance(self.density.form, NoDensity):
            return EffortEnvironment(x, "density-free", Factors(), growth_rate(schedule, offspring=self.offspring))
        try:
            equilibrium = solve_equilibrium(schedule, self.density, offspring=self.offspring)
            return EffortEnvironment(x, "equilibrium", equilibrium.factors)
        except NoEquilibriumError:
            empty = self.density.placed(1.0)  # every form gives f(0) = 1; a ceiling removes nobody
            if growth_rate(schedule, empty, offspring=self.offspring) <= 1.0:
                return EffortEnvironment(x, "extinct", empty)
            return EffortEnvironment(x, "unregulated", None)

    def _years_environment(self, x: float, schedule: Schedule) -> EffortEnvironment:
        """The resident's environment through the year draws (see ``EffortEnvironment``)."""
        if not regulated(self.density):
            scale = float(np.exp(self._log_growth([schedule], None)[0]))
            return EffortEnvironment(x, "density-free", None, scale)
        empty = self.density.placed(1.0)  # every form gives f(0) = 1; a ceiling removes nobody
        if self._log_growth([schedule], empty)[0] <= 0.0:  # it cannot grow when rare: it dies out
            return EffortEnvironment(x, "extinct", None, 1.0, empty)
        try:
            path = resident_path(schedule, self.years, self.density, self.year_draws, offspring=self.offspring)
        except NoEquilibriumError:  # it dies out all the same: the mutant meets the empty environment
            return EffortEnvironment(x, "extinct", None, 1.0, empty)
        if not np.all(np.isfinite(path.census_size)):
            return EffortEnvironment(x, "unregulated", None)
        # the resident's own log growth on its path: 0 in the long run, so dividing by it
        # leaves s's limit alone and makes s(x, x) = 1 on the draws, as in a constant environment
        scale = float(np.exp(self._log_growth([schedule], path.factors)[0]))
        return EffortEnvironment(x, "equilibrium", None, scale, path.factors)

    def _log_growth(self, schedules, factors: Factors | None, *, by_batch: bool = False) -> np.ndarray:
        """Each schedule's mean log growth over the recorded seasons of the draws, at ``factors``
        (with ``by_batch``, each batch's: shape (n_schedules, n_batches))."""
        inc = stacked_log_increments(schedules, self.years, self.year_draws, factors, offspring=self.offspring)
        means = inc[:, :, self.year_draws.burn_in:].mean(axis=2)
        return means if by_batch else means.mean(axis=1)

    def _fitnesses(self, schedules, env: EffortEnvironment) -> np.ndarray:
        """Each mutant schedule's invasion fitness in ``env`` (NaN where undefined)."""
        if self.years is None:
            return _growth_rates(schedules, env, self.offspring)
        if env.status == "unregulated" or env.scale == 0:
            return np.full(len(schedules), np.nan)
        with np.errstate(over="ignore"):
            return np.exp(self._log_growth(schedules, env.year_factors)) / env.scale

    def invasion_fitness(self, resident: float, mutants, *, environment: EffortEnvironment | None = None):
        """s(x, y) for one resident x and every mutant y (array of the mutants' shape).

        NaN where the resident is unregulated.
        """
        y = check_effort(mutants, "mutant effort")
        env = environment or self.environment(resident)
        return self._fitnesses([self.schedule(e) for e in y.ravel()], env).reshape(y.shape)

    def _years_slopes(self, x: float, env: EffortEnvironment) -> MutantSlopes:
        """s(x, x) and its derivatives in y by differences of log s on the draws (one-sided at
        an end): s' = s (log s)', s'' = s ((log s)'' + (log s)'^2)."""
        h = YEARS_STEP
        at = 0 if x < h else (2 if x > 1.0 - h else 1)  # where x sits among the three efforts
        efforts = np.array([x - at * h, x + (1 - at) * h, x + (2 - at) * h])
        batches = self._log_growth([self.schedule(e) for e in efforts], env.year_factors, by_batch=True)
        batches = batches - np.log(env.scale)  # log s by batch, shape (3, n_batches)

        def first(v):
            return {0: (-3 * v[0] + 4 * v[1] - v[2]) / (2 * h), 1: (v[2] - v[0]) / (2 * h),
                    2: (3 * v[2] - 4 * v[1] + v[0]) / (2 * h)}[at]

        log_s = batches.mean(axis=1)
        second = (log_s[0] - 2 * log_s[1] + log_s[2]) / h**2
        slope = first(log_s)
        fitness = float(np.exp(log_s[at]))
        spread = first(batches).std(ddof=1) / np.sqrt(batches.shape[1])  # the gradient's batch-means SE
        return MutantSlopes(x, fitness, fitness * slope, fitness * (second + slope * slope), fitness * spread)

    def slopes(self, resident: float, *, environment: EffortEnvironment | None = None) -> MutantSlopes:
        """s(x, x), ds/dy and d2s/dy2 at y = x (exact; infinite where B or P has an infinite slope;
        in random years, differences of log s on the year draws).

        Notes
        -----
        With A(y) the mutant's projection matrix in the resident's
        environment, w and v its right and left Perron vectors and
        Z = (lambda I - A)^# the group inverse (Caswell 2001, sec. 9.7)::

            lambda'  = v A' w / (v w)
            lambda'' = (v A'' w + 2 v A' Z A' w) / (v w)
            Z = (lambda I - A + w v / (v w))^-1 - w v / (v w)
        """
        x = float(check_effort(resident, "resident effort"))
        env = environment or self.environment(x)
        if env.status == "unregulated" or env.scale == 0:
            return MutantSlopes(x, np.nan, np.nan, np.nan)
        if self.years is not None:
            return self._years_slopes(x, env)
        a = self._matrix(self.schedule(x), env.factors)
        d1, d2 = self._effort_derivatives(x, env.factors)
        lam, w, v = dominant_eigen(a)
        vw = float(v @ w)
        with np.errstate(invalid="ignore", over="ignore"):
            first = float(v @ d1 @ w) / vw
            projector = np.outer(w, v) / vw
            try:
                group_inverse = np.linalg.inv(lam * np.eye(a.shape[0]) - a + projector) - projector
                second = (float(v @ d2 @ w) + 2.0 * float(v @ d1 @ group_inverse @ d1 @ w)) / vw
            except np.linalg.LinAlgError:  # lambda not simple
                second = np.nan
        return MutantSlopes(x, lam / env.scale, first / env.scale, second / env.scale)

    def gradient(self, resident: float) -> float:
        """The selection gradient D(x) = ds(x, y)/dy at y = x."""
        return self.slopes(resident).gradient

    def parameters(self) -> dict:
        """The model's inputs as plain values (for JSON)."""
        form = self.density.form
        return {
            "tradeoff": {
                "max_fecundity": self.tradeoff.max_fecundity,
                "fecundity_shape": self.tradeoff.fecundity_shape,
                "max_adult_survival": self.tradeoff.max_adult_survival,
                "survival_shape": self.tradeoff.survival_shape,
            },
            "juvenile_survival": float(self.juvenile_survival),
            "orphan_survival": None if self.orphan_survival is None else float(self.orphan_survival),
            "brood_scale": None if self.brood_scale is None else float(self.brood_scale),
            "maturity_age": int(self.maturity_age),
            "years": None if self.years is None else {
                "switching": self.years.switching,
                "types": [{"name": y.name, "fecundity": y.fecundity, "adult_survival": y.adult_survival,
                           "juvenile_survival": y.juvenile_survival} for y in self.years.types],
                "seasons_drawn": int(self.year_draws.n_batches * self.year_draws.batch_length)},
            "density": {
                "form": next((k for k, v in FORMS.items() if isinstance(form, v)), type(form).__name__),
                "capacity": getattr(form, "capacity", None),
                "acts_on": self.density.acts_on,
                "counted": self.density.counted,
            },
        }


def efforts_grid(grid) -> np.ndarray:
    """An int n (n evenly spaced efforts on [0, 1]) or increasing efforts in [0, 1] (>= 3 of them)."""
    if isinstance(grid, (int, np.integer)) and not isinstance(grid, bool):
        if grid < 3:
            raise ValueError(f"grid must have at least 3 points; got {grid}")
        return np.linspace(0.0, 1.0, int(grid))
    e = check_effort(grid, "grid")
    if e.ndim != 1 or e.size < 3 or np.any(np.diff(e) <= 0):
        raise ValueError(f"grid must be at least 3 strictly increasing efforts; got {e.tolist()}")
    return e


@dataclass(frozen=True)
class PairwiseInvasibility:
    """Invasion fitness of every mutant effort in every resident effort's environment.

    Attributes
    ----------
    efforts : ndarray
        The grid of efforts (residents and mutants alike).
    fitness : ndarray, shape (n, n)
        s[i, j]: fitness of mutant ``efforts[j]`` in resident ``efforts[i]``.
    status : tuple of str
        Each resident's ``EffortEnvironment.status``.
    """

    efforts: np.ndarray
    fitness: np.ndarray
    status: tuple

    @property
    def sign(self) -> np.ndarray:
        """sign(s - 1): +1 where the mutant invades, -1 where it does not (0 neutral, nan undefined)."""
        out = np.sign(self.fitness - 1.0)
        out[np.abs(self.fitness - 1.0) <= DEGENERATE_TOLERANCE] = 0.0
        return out


def pairwise_invasibility(model: EffortModel, *, grid=101) -> PairwiseInvasibility:
    """The pairwise invasibility table s(x, y) over a grid of efforts.

    Parameters
    ----------
    model : EffortModel
    grid : int or array_like, optional
        Number of evenly spaced efforts on [0, 1], or the efforts themselves.
    """
    e = efforts_grid(grid)
    envs = [model.environment(x) for x in e]
    mutants = [model.schedule(y) for y in e]
    fitness = np.array([model._fitnesses(mutants, env) for env in envs])
    return PairwiseInvasibility(e, fitness, tuple(env.status for env in envs))


def selection_gradient(model: EffortModel, efforts) -> np.ndarray:
    """D(x) = ds(x, y)/dy at y = x for each resident effort x (NaN where unregulated)."""
    e = check_effort(efforts, "efforts")
    return np.array([model.gradient(x) for x in e.ravel()]).reshape(e.shape)


def _gradient_slope(model: EffortModel, x: float, step: float = DIAGONAL_STEP) -> float:
    """dD/dx along the diagonal: central difference (one-sided at the ends)."""
    lo, hi = max(x - step, 0.0), min(x + step, 1.0)
    return (model.gradient(hi) - model.gradient(lo)) / (hi - lo)


@dataclass(frozen=True)
class SingularStrategy:
    """A singular effort (D = 0) or an end of the effort axis, classified.

    Attributes
    ----------
    effort : float
    position : str
        "interior", "lower end" (E = 0) or "upper end" (E = 1).
    gradient : float
        D at the effort (about 0 for an interior singular effort).
    mutant_curvature : float
        d2s/dy2 at y = x: below 0, nearby mutants cannot invade.
    resident_curvature : float
        d2s/dx2 at y = x, from s(x, x) = 1: -2 dD/dx + d2s/dy2.
    gradient_slope : float
        dD/dx along the diagonal: below 0, nearby residents move towards it.
    evolutionarily_stable, convergence_stable : bool
    invades_when_rare, mutual_invasibility : bool or None
        The other two properties of Geritz et al. (1998); None at an end
        with a non-zero gradient.
    kind : str
        See ``classify_singular``; "not viable" where a resident with this
        effort cannot persist, "unregulated" where density dependence cannot
        stop its growth (no equilibrium, so no invasion fitness).
    effort_se : float
        In random years, the standard error of an interior singular effort
        from the year draws: the gradient's batch-means standard error over
        |dD/dx| (a root moves by the error of D over its slope); else nan.
    """

    effort: float
    position: str
    gradient: float
    mutant_curvature: float
    resident_curvature: float
    gradient_slope: float
    evolutionarily_stable: bool
    convergence_stable: bool
    invades_when_rare: bool | None
    mutual_invasibility: bool | None
    kind: str
    effort_se: float = float("nan")

    def as_dict(self) -> dict:
        """Plain values (non-finite numbers as None, for JSON)."""
        out = {}
        for k, v in self.__dict__.items():
            if isinstance(v, (float, np.floating)):
                v = float(v) if np.isfinite(v) else None
            out[k] = v
        return out


KINDS = (
    "evolutionarily stable attractor",
    "branching point",
    "Garden of Eden",
    "repeller",
    "degenerate",
    "not viable",
    "unregulated",
)


def classify_singular(mutant_curvature: float, resident_curvature: float) -> dict:
    """The four properties and the name of a singular strategy (Geritz, Kisdi, Meszena & Metz 1998).

    Parameters
    ----------
    mutant_curvature : float
        a = d2s/dy2 at the singular point.
    resident_curvature : float
        c = d2s/dx2 at the singular point.

    Returns
    -------
    dict
        ``evolutionarily_stable`` (a < 0), ``convergence_stable`` (c > a),
        ``invades_when_rare`` (c > 0), ``mutual_invasibility`` (c > -a) and
        ``kind``: "evolutionarily stable attractor" (ES and CS, a CSS),
        "branching point" (CS, not ES), "Garden of Eden" (ES, not CS),
        "repeller" (neither), or "degenerate" where a, c - a, c or c + a
        is within 1e-9 of 0 (a higher-order case the test does not decide).
    """
    a, c = float(mutant_curvature), float(resident_curvature)
    margins = np.array([a, c - a, c, c + a])
    scale = max(abs(a), abs(c), 1.0)
    if not np.all(np.isfinite(margins)) or np.any(np.abs(margins[:2]) <= DEGENERATE_TOLERANCE * scale):
        kind = "degenerate"
    else:
        kind = {(True, True): KINDS[0], (False, True): KINDS[1], (True, False): KINDS[2], (False, False): KINDS[3]}[
            (a < 0, c > a)
        ]
    near = np.abs(margins) <= DEGENERATE_TOLERANCE * scale
    return {
        "evolutionarily_stable": bool(a < 0 and not near[0]),
        "convergence_stable": bool(c > a and not near[1]),
        "invades_when_rare": None if near[2] or not np.isfinite(c) else bool(c > 0),
        "mutual_invasibility": None if near[3] or not np.isfinite(c + a) else bool(c > -a),
        "kind": kind,
    }


def _classified(model: EffortModel, x: float, position: str, gradient: float) -> SingularStrategy:
    """Classify one point: by curvatures where D = 0, by the gradient's direction at an end."""
    env = model.environment(x)
    if not env.resident_persists:
        kind = "unregulated" if env.status == "unregulated" else "not viable"
        return SingularStrategy(x, position, gradient, np.nan, np.nan, np.nan, False, False, None, None, kind)
    here = model.slopes(x, environment=env)
    curvature = here.curvature
    slope = _gradient_slope(model, x)
    resident_curvature = -2.0 * slope + curvature
    outward = {"lower end": -1.0, "upper end": 1.0}.get(position, 0.0) * gradient
    if position != "interior" and not np.isnan(outward) and abs(gradient) > DEGENERATE_TOLERANCE:
        # a boundary strategy: mutants can only lie inside; if the gradient points out of
        # the axis, they do worse (ES) and nearby residents move towards the end (CS)
        stable = bool(outward > 0)
        kind = KINDS[0] if stable else KINDS[3]
        return SingularStrategy(
            x, position, gradient, curvature, resident_curvature, slope, stable, stable, None, None, kind
        )
    props = classify_singular(curvature, resident_curvature)
    with np.errstate(divide="ignore", invalid="ignore"):
        effort_se = float(here.gradient_se / abs(slope))
    return SingularStrategy(x, position, gradient, curvature, resident_curvature, slope, **props,
                            effort_se=effort_se)


def singular_strategies(model: EffortModel, *, grid=101, xtol: float = 1e-12) -> list[SingularStrategy]:
    """The ends E = 0 and E = 1 and every interior effort where the selection gradient is 0.

    Roots are bracketed by sign changes of D between neighbouring grid
    efforts (a root between two grid points where D does not change sign,
    e.g. a double root, is missed) and refined with ``scipy.optimize.brentq``.
    Interior roots where the resident cannot persist are left out (s(x, x)
    is not 1 there, so D = 0 has no evolutionary meaning).

    Returns
    -------
    list of SingularStrategy
        Ordered by effort, the ends first and last.
    """
    e = efforts_grid(grid)
    return _singular_on(model, e, selection_gradient(model, e), xtol)


def _singular_on(model: EffortModel, e: np.ndarray, d: np.ndarray, xtol: float) -> list[SingularStrategy]:
    out = [_classified(model, 0.0, "lower end", model.gradient(0.0))]
    roots = []
    for i in range(1, e.size - 1):
        if d[i] == 0.0:
            roots.append(e[i])
    for i in range(e.size - 1):
        (a, lo), (b, hi) = (e[i], d[i]), (e[i + 1], d[i + 1])
        # an infinite slope at an end of the curve (shape < 1): bracket from just inside instead
        if np.isinf(lo):
            a = a + 1e-9 * (b - a)
            lo = model.gradient(a)
        if np.isinf(hi):
            b = b - 1e-9 * (b - e[i])
            hi = model.gradient(b)
        if np.isfinite(lo) and np.isfinite(hi) and lo * hi < 0:
            roots.append(brentq(model.gradient, a, b, xtol=xtol, rtol=4 * np.finfo(float).eps))
    for x in sorted(roots):
        if model.environment(x).resident_persists:
            out.append(_classified(model, float(x), "interior", model.gradient(x)))
    out.append(_classified(model, 1.0, "upper end", model.gradient(1.0)))
    return out


@dataclass(frozen=True)
class AdaptiveAnalysis:
    """The pairwise invasibility table, the selection gradient and the classified singular efforts."""

    model: EffortModel
    invasibility: PairwiseInvasibility
    gradient: np.ndarray
    singular: list

    @property
    def attractors(self) -> list[float]:
        """Efforts of the evolutionarily stable attractors (ends included)."""
        return [s.effort for s in self.singular if s.kind == KINDS[0]]

    def as_dict(self, *, fitness_table: bool = False) -> dict:
        """JSON-ready: parameters, grid, gradient, singular efforts (and the s table if asked)."""

        def plain(a):
            return [float(v) if np.isfinite(v) else None for v in np.ravel(a)]

        out = {
            "parameters": self.model.parameters(),
            "efforts": plain(self.invasibility.efforts),
            "resident_status": list(self.invasibility.status),
            "selection_gradient": plain(self.gradient),
            "singular": [s.as_dict() for s in self.singular],
            "attractors": self.attractors,
        }
        if fitness_table:
            out["invasion_fitness"] = [plain(row) for row in self.invasibility.fitness]
        return out


def analyse_effort(model: EffortModel, *, grid=101) -> AdaptiveAnalysis:
    """Invasibility table, selection gradient and classified singular efforts on one grid."""
    pip = pairwise_invasibility(model, grid=grid)
    gradient = selection_gradient(model, pip.efforts)
    return AdaptiveAnalysis(model, pip, gradient, _singular_on(model, pip.efforts, gradient, 1e-12))
