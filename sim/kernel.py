"""The season kernel: one season's vital rates for every (allele, age) class.

This module is the one statement of the model's season (the README's "The
model"; DEVELOPERS.md's architecture map). Given the density index D
(and, through the seams below, the year and the parent's fate), it says:

- the mean number of offspring bred by an individual of each class, m(a) f_fec;
- the probability that it survives to the next census, s(a) f_adult;
- the probability that each of its offspring recruits at age 1, c f_rec;
- where a survivor goes (age + 1; the plus-group stays) and where a recruit
  starts (age 1 of its allele, after mutation);
- how many individuals a ceiling removes after recruitment, and from whom.

A class is one (allele, age index) pair, numbered allele-major:
``class = allele * n_ages + age``. The three engines only *sample* from a
``SeasonKernel`` (``sim.engines``); the projection matrix, the equilibrium
solver and the deterministic season map (``sim.meanfield``) and the
branching process's generating function (``analysis.branching``) are derived
from it.

Seams (documented in DEVELOPERS.md)
-----------------------------------
``multipliers(factors, year=...)`` is where a year's multipliers on
fecundity, adult survival and juvenile survival join the density factors,
per replicate (variable environments, ``sim.years``); ``recruitment(factors, parent_survived=...,
brood=...)`` is where a young's recruitment depends on its parent's fate
(c_care or c_orphan) and brood size (x exp(-(b - 1) / h)), from the
alleles' ``sim.care.ParentalCare``; a trade-off curve for effort alleles is
a schedule constructor (``sim.schedules``) and needs nothing here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .care import ParentalCare
from .density import Cull, DensityDependence, Factors, NoDensity
from .mutation import Mutation
from .offspring import Poisson

__all__ = ["SeasonKernel", "SeasonRates"]

_KNOWN_FACTORS = 4096  # values of D whose factors a kernel remembers for a batch of one


@dataclass(frozen=True)
class SeasonRates:
    """The vital rates of every class in one season (after density, year, parent effects).

    Attributes
    ----------
    breeding : ndarray, shape (..., n_classes)
        Mean offspring per individual, m(a) f_fec.
    survival : ndarray, shape (..., n_classes)
        Probability of surviving to the next census, s(a) f_adult.
    recruitment : ndarray, shape (..., n_classes)
        Probability that each offspring recruits at age 1, c f_rec.

    A leading axis, where present, is the replicate.
    """

    breeding: np.ndarray
    survival: np.ndarray
    recruitment: np.ndarray


class SeasonKernel:
    """One season of the life cycle for every (allele, age) class.

    Parameters
    ----------
    M, S, C, density, offspring, mutation, care
        As the fields of ``sim.lifecycle.LifeCycle`` (a ``LifeCycle``'s
        ``kernel`` is built from them); ``offspring`` defaults to Poisson,
        ``mutation`` to none, ``care`` (``sim.care.ParentalCare``) to none.

    Attributes
    ----------
    fecundity, survival, juvenile : ndarray, shape (n_classes,)
        m(a), s(a) and the juvenile survival c of each class (density-free).
    aged : ndarray, shape (n_classes,)
        The class a survivor moves to (age + 1; the plus-group stays).
    first : ndarray, shape (n_alleles,)
        The class of a recruit of each allele (age 1, index 0).
    weights : ndarray, shape (n_classes,)
        Each class's weight in the density index D.
    counted_after_breeding : bool
        D is the number of offspring born (known only after breeding).
    ceiling : int or None
        A ceiling's capacity K; None for the other forms.
    ceiling_on_recruits : bool
        A ceiling removes recruits only (else anyone).
    parental : bool
        A young's recruitment depends on its parent's fate or brood size.
    orphan, decay : ndarray, shape (n_classes,)
        c_orphan of each class (c without care) and x = exp(-1 / h) of its
        brood effect (1 without one).
    """

    def __init__(self, M, S, C, density: DensityDependence, offspring=None, mutation=None,
                 care: ParentalCare | None = None):
        M, S = np.asarray(M, dtype=float), np.asarray(S, dtype=float)
        self.M, self.S, self.C = M, S, np.asarray(C, dtype=float)
        self.density = density
        self.offspring = Poisson() if offspring is None else offspring
        self.mutation = Mutation(np.eye(M.shape[0])) if mutation is None else mutation
        n_alleles, n_ages = M.shape
        self.n_alleles, self.n_ages = n_alleles, n_ages
        self.n_classes = n_alleles * n_ages
        self.fecundity = M.ravel()
        self.survival = S.ravel()
        self.juvenile = np.repeat(self.C, n_ages)
        self.allele_of = np.repeat(np.arange(n_alleles), n_ages)
        ages = np.tile(np.arange(n_ages), n_alleles)
        self.aged = self.allele_of * n_ages + np.minimum(ages + 1, n_ages - 1)
        self.first = np.arange(n_alleles) * n_ages
        self.weights = density.index_weights(M).ravel().astype(float)
        self._whole_weights = bool(np.all(self.weights == np.round(self.weights)))
        self.counted_after_breeding = density.counted_after_breeding
        self.ceiling = None if density.ceiling is None else int(density.ceiling)
        self.ceiling_on_recruits = density.acts_on == "recruitment"
        # (class, allele, m, c) of each class that breeds, as Python numbers (the engines'
        # per-class loops)
        self.breeders = [(int(c), int(self.allele_of[c]), float(self.fecundity[c]),
                          float(self.juvenile[c])) for c in np.flatnonzero(self.fecundity > 0)]
        # the same as arrays, for the season's hot path (``expected_recruits``)
        breeding = np.flatnonzero(self.fecundity > 0)
        self._breeding, self._breeding_allele = breeding, self.allele_of[breeding]
        self._breeding_m, self._breeding_c = self.fecundity[breeding], self.juvenile[breeding]
        self._one_breeding_class = len(set(self._breeding_allele.tolist())) == breeding.size
        self._all_breed = breeding.size == self.n_classes
        self._terms_are_means = self._breeding_allele.tolist() == list(range(n_alleles))
        self._ones = np.ones(0)  # factors that do not act, one per replicate (``factors``)
        self._known_factors = {}  # D -> a batch of one's factors (``_one_replicate_factors``)
        self._known_rates = {}  # id of known factors -> (them, their ``_breeding_rates``)
        self.care = care
        self.parental = care is not None
        self.orphan = self.juvenile if care is None else np.repeat(care.orphan, n_ages)
        self.decay = np.ones(self.n_classes) if care is None else np.repeat(care.decay, n_ages)

    @classmethod
    def for_schedule(cls, schedule, density: DensityDependence | None = None,
                     offspring=None) -> SeasonKernel:
        """The kernel of one allele alone (the theory's mutant or resident)."""
        density = density or DensityDependence(NoDensity())
        return cls(schedule.fecundity[None, :], schedule.survival[None, :],
                   [schedule.juvenile_survival], density, offspring,
                   care=ParentalCare.from_schedules([schedule]))

    # -- step 1: density ----------------------------------------------------------------
    def density_index(self, census) -> np.ndarray | float:
        """D from a census: counts by class (..., n_classes) or by (allele, age).

        Not for ``counted = "offspring"``, where D is the number born
        (``birth_factors``).
        """
        census = np.asarray(census)
        if census.shape[-1] != self.n_classes:
            census = census.reshape(*census.shape[:-2], self.n_classes)
        if census.dtype.kind in "iu" and self._whole_weights:
            # counts and whole weights: every partial sum is a whole number, exact in any order,
            # and ``dot`` skips ``@``'s conversion machinery (the engines' every season)
            return census.dot(self.weights)
        return census @ self.weights

    def factors(self, d) -> Factors:
        """Density factors at index ``d``: a number, or one per replicate (contiguous arrays)."""
        if type(d) is not np.ndarray:
            if np.ndim(d) == 0:
                return self.density.factors(d)
            d = np.asarray(d, dtype=float)
        if d.ndim == 0:
            return self.density.factors(d)
        n = d.shape[0]
        if n == 1:
            return self._one_replicate_factors(d[0])
        fecundity, adult, recruitment = self.density.factors(d)
        return Factors(self._per_replicate(fecundity, n), self._per_replicate(adult, n),
                       self._per_replicate(recruitment, n))

    def _one_replicate_factors(self, d) -> Factors:
        """``factors`` of a batch of one at index ``d`` (a number), remembered by ``d``.

        A long run of a small population meets the same few hundred values of
        D season after season; worked out once each (on the number: numpy's
        scalar arithmetic rounds as its arrays do), they cost a look-up after.
        The arrays are read-only, as they are shared by the seasons that meet ``d``.
        """
        known = self._known_factors.get(d)
        if known is None:
            if len(self._known_factors) >= _KNOWN_FACTORS:
                self._known_factors.clear()
                self._known_rates.clear()
            known = Factors(*(self._per_replicate(x, 1) for x in self.density.factors(d)))
            for x in known:
                x.flags.writeable = False
            self._known_factors[d] = known
            # and what ``expected_recruits`` makes of them (held with them: their id is theirs)
            self._known_rates[id(known)] = (known, self._breeding_rates(known))
        return known

    def _breeding_rates(self, factors: Factors) -> tuple[np.ndarray, np.ndarray]:
        """m f_fec and c f_rec of the breeding classes, (..., breeding classes)."""
        return (self._times(self._breeding_m, factors.fecundity),
                self._times(self._breeding_c, factors.recruitment))

    def _per_replicate(self, x, n: int) -> np.ndarray:
        """``x`` (a number, or one value per replicate) as a contiguous float array of ``n``
        values: what the compiled passes take. A factor that does not act (1) is one read-only
        array of ones, kept while the batch has ``n`` replicates."""
        if type(x) is np.ndarray and x.dtype == np.float64 and x.shape == (n,) and x.flags.c_contiguous:
            return x
        if type(x) is float:
            if x != 1.0:
                return np.array((x,)) if n == 1 else np.full(n, x)
            if self._ones.size != n:
                self._ones = np.ones(n)
                self._ones.flags.writeable = False
            return self._ones
        return np.ascontiguousarray(np.broadcast_to(np.asarray(x, dtype=float), (n,)))

    def census_factors(self, census, n: int | None = None) -> Factors:
        """The factors known at the census: from D where D counts the census, else all 1.

        ``census`` is one census by (allele, age) (``n`` None) or counts of
        ``n`` replicates by class; where D counts births the factors are
        placed once the births are known (``birth_factors``).
        """
        if self.counted_after_breeding:
            return Factors() if n is None else Factors(np.ones(n), np.ones(n), np.ones(n))
        if n is None:
            return self.factors(float(self.density_index(np.ravel(census))))
        return self.factors(self.density_index(census))

    def birth_factors(self, born) -> Factors:
        """The factors where D is the number of offspring born (a number or one per replicate)."""
        return self.factors(float(born) if np.ndim(born) == 0 else np.asarray(born, dtype=float))

    # -- steps 2 to 4: the rates --------------------------------------------------------
    def multipliers(self, factors: Factors, *, year=None) -> Factors:
        """The season's multipliers on fecundity, adult survival and recruitment.

        Parameters
        ----------
        factors : Factors
            The density factors (numbers, or one per replicate).
        year : array_like, shape (3,) or (n_replicates, 3), optional
            The year's multipliers on (fecundity, adult survival, juvenile
            survival) (a row of ``sim.years.YearTypes.multipliers``, one per
            replicate); None in a constant environment.

        Returns
        -------
        Factors
            The density factors, times the year's multipliers: a year
            multiplies every allele's m(a), s(a) and c, then density acts.
        """
        if year is None:
            return factors
        year = np.asarray(year, dtype=float)
        if year.ndim == 1:
            return Factors(*(float(f) * float(y) for f, y in zip(factors, year)))
        # contiguous float arrays (fresh products): what the compiled passes take
        fecundity, adult, recruitment = factors
        return Factors(np.asarray(fecundity, dtype=float) * year[:, 0],
                       np.asarray(adult, dtype=float) * year[:, 1],
                       np.asarray(recruitment, dtype=float) * year[:, 2])

    def recruitment(self, factors: Factors, *, parent_survived=None, brood=None):
        """Probability that each offspring of each class recruits at age 1.

        c f_rec by default (c is c_care: the parent lives); with
        ``parent_survived`` false, c_orphan f_rec; with a brood size ``brood``
        b (>= 1), times x^(b - 1) = exp(-(b - 1) / h). Both may be arrays
        broadcasting against the class axis. Without parental effects in the
        model (``parental`` false) every young of a class has the same
        probability, and the array engines draw a class's recruits as one total.
        """
        c = self.juvenile if parent_survived is None else np.where(parent_survived, self.juvenile,
                                                                    self.orphan)
        if brood is not None:
            c = c * self.decay ** (np.asarray(brood) - 1.0)
        return c * np.asarray(factors.recruitment)[..., None]

    def recruits_per_parent(self, factors: Factors) -> np.ndarray:
        """Expected recruits per individual of each class, (..., n_classes), before mutation.

        Notes
        -----
        A parent breeds B young (pgf P, mean m f_fec) and survives with
        probability sigma = s f_adult, independently; each young recruits with
        probability c_fate x^(B - 1) f_rec. So E[recruits] = f_rec
        E[B x^(B - 1)] (sigma c_care + (1 - sigma) c_orphan), and E[B x^(B - 1)]
        = P'(x) (derived from the pgf; for Poisson P'(x) = m exp(-m (1 - x)),
        x = e^(-1/h)). Without parental effects: m f_fec c f_rec.
        """
        rates = self.rates(factors)
        if not self.parental:
            return rates.breeding * rates.recruitment
        young = self.offspring.pgf_derivative(self.decay, rates.breeding)
        sigma = self._season_survival(factors, rates)
        care = sigma * self.juvenile + (1.0 - sigma) * self.orphan
        return young * care * np.asarray(factors.recruitment, dtype=float)[..., None]

    def _season_survival(self, factors: Factors, rates: SeasonRates) -> np.ndarray:
        """sigma, each class's chance to live through the season, which decides its young's care:
        s f_adult, or s where f_adult is a ceiling's cull (``sim.density.Cull``), which comes
        after the young's fate is set."""
        if isinstance(factors, Cull):
            return np.broadcast_to(self.survival, rates.survival.shape)
        return rates.survival

    def rates(self, factors: Factors) -> SeasonRates:
        """Every class's vital rates at these factors (numbers, or one row per replicate)."""
        def per(x):
            return np.asarray(x, dtype=float)[..., None]

        return SeasonRates(self.fecundity * per(factors.fecundity),
                           self.survival * per(factors.adult), self.recruitment(factors))

    def expected_recruits(self, counts, factors: Factors) -> np.ndarray:
        """Mean recruits by (replicate, allele) before mutation: sum over classes of n m f_fec c f_rec.

        ``counts`` by (replicate, class), one factor per replicate. Summed
        class by class (elementwise, so a replicate's value is the same in any
        batch); under Poisson offspring the recruits are Poisson with this mean.
        """
        if self.parental:
            mean = np.zeros((counts.shape[0], self.n_alleles))
            per_parent = np.broadcast_to(self.recruits_per_parent(factors), counts.shape)
            for c, allele, _, _ in self.breeders:
                mean[:, allele] += counts[:, c] * per_parent[:, c]
            return mean
        # n m f_fec c f_rec of every breeding class at once, (replicate, breeding class); each
        # entry is the product ((n (m f_fec)) (c f_rec)), the rounding of every version since 0.1
        breeders = counts if self._all_breed else counts[:, self._breeding]
        known = self._known_rates.get(id(factors))
        fecundity, recruitment = (known[1] if known is not None and known[0] is factors
                                  else self._breeding_rates(factors))
        terms = breeders * fecundity * recruitment
        if self._terms_are_means:  # allele a's one breeding class is column a
            return terms
        mean = np.zeros((counts.shape[0], self.n_alleles))
        if self._one_breeding_class:  # each allele's sum has one term
            mean[:, self._breeding_allele] = terms
            return mean
        for j, allele in enumerate(self._breeding_allele.tolist()):  # summed in class order
            mean[:, allele] += terms[:, j]
        return mean

    @property
    def removes(self) -> bool:
        """True where a ceiling may remove individuals after recruitment (``ceiling_excess``)."""
        return self.ceiling is not None

    def _times(self, rate: np.ndarray, factor) -> np.ndarray:
        """``rate`` (by class) times ``factor`` (a number or one per replicate), (..., classes);
        a factor that does not act (the shared ones, ``factors``) multiplies nothing (x 1.0 is
        exact)."""
        if factor is self._ones:
            return rate
        return rate * np.asarray(factor, dtype=float)[..., None]

    # -- step 5: the ceiling ------------------------------------------------------------
    def ceiling_excess(self, survivors, recruits):
        """Individuals a ceiling removes, and the size of the pool they are chosen from.

        ``survivors`` and ``recruits`` are totals (numbers, or one per
        replicate). The pool is the recruits (acting on recruitment) or
        everyone (all-survival); without a ceiling nobody is removed.
        """
        survivors, recruits = np.asarray(survivors), np.asarray(recruits)
        if self.ceiling is None:
            return np.zeros_like(recruits), recruits
        if self.ceiling_on_recruits:
            room = np.maximum(self.ceiling - survivors, 0)
            return np.maximum(recruits - room, 0), recruits
        pool = survivors + recruits
        return np.maximum(pool - self.ceiling, 0), pool

    # -- the deterministic (mean-field) season, derived from the rates -------------------
    def projection_matrix(self, factors: Factors = Factors(), allele: int = 0) -> np.ndarray:
        """Pre-breeding-census projection matrix of one allele at these factors.

        Notes
        -----
        A[0, a] = m(a) f_fec c f_rec; A[a + 1, a] = s(a) f_adult; the plus-group
        A[L-1, L-1] = s(L-1) f_adult (Caswell 2001, Matrix Population Models,
        ch. 2). With parental effects A[0, a] is the expected recruits per
        parent, ``recruits_per_parent``: f_rec P'(x) (sigma c_care + (1 - sigma)
        c_orphan), sigma = s(a) f_adult.
        """
        n = self.n_ages
        m, s = self.M[allele], self.S[allele]
        a = np.zeros((n, n))
        if self.parental:
            a[0, :] = self.recruits_per_parent(factors)[allele * n:(allele + 1) * n]
        else:
            # in this order: ((m f_fec) c) f_rec, the rounding of every version since 0.1
            a[0, :] = m * factors.fecundity * self.C[allele] * factors.recruitment
        s = s * factors.adult
        idx = np.arange(n - 1)
        a[idx + 1, idx] += s[:-1]
        a[n - 1, n - 1] += s[-1]
        return a

    def mean_step(self, census) -> np.ndarray:
        """One deterministic season for all alleles: census[allele, age] -> next census.

        The ceiling's removal is taken in expectation: recruits (or everyone)
        scaled down so that the census is K.
        """
        census = np.asarray(census, dtype=float)
        born = (self.M * census).sum()
        f = self.birth_factors(born) if self.counted_after_breeding else self.census_factors(census)
        rates = self.rates(f)
        nxt = np.zeros_like(census)
        survivors = rates.survival.reshape(census.shape) * census
        np.add.at(nxt.reshape(-1), self.aged, survivors.ravel())
        recruits = self.expected_recruits(census.reshape(1, -1), f)[0]
        excess, pool = self.ceiling_excess(nxt.sum(), recruits.sum())
        if excess > 0:
            keep = 1.0 - excess / pool
            recruits = recruits * keep
            if not self.ceiling_on_recruits:
                nxt = nxt * keep
        nxt[:, 0] += recruits
        return nxt

    def offspring_pgf(self, s, factors: Factors, allele: int = 0) -> np.ndarray:
        """G(s): generating function of next season's numbers by age, one entry per parent age.

        ``s`` (n_ages,) with factors that are numbers; or (..., n_ages), one row per environment,
        with factors of shape (...).

        Notes
        -----
        An individual of class a draws N offspring (pgf P, mean m(a) f_fec);
        each recruits independently with probability p = c f_rec (thinning:
        P(1 - p + p s_1)); independently, it survives to the next class with
        probability sigma = s(a) f_adult::

            G_a(s) = (1 - sigma + sigma s_next(a)) P(1 - p + p s_1; m(a) f_fec)

        (Harris 1963; Athreya & Ney 1972.)

        With parental effects the parent's survival and its young's recruits
        are no longer independent. Derivation: given the parent's fate
        (survives with probability sigma) and its brood B = b, each young
        recruits independently with probability q_fate x^(b - 1), q_care =
        c_care f_rec, q_orphan = c_orphan f_rec, so the recruits are
        Binomial(b, q x^(b - 1)), with pgf (1 - q x^(b - 1) (1 - s_1))^b.
        Averaging over B (independent of the fate) and over the fate::

            H_q(s_1) = E[(1 - q x^(B - 1) (1 - s_1))^B]
            G_a(s)   = sigma s_next(a) H_care(s_1) + (1 - sigma) H_orphan(s_1)

        Without a brood effect (x = 1), H_q(s_1) = P(1 - q + q s_1); with one,
        H is summed over the offspring law's probabilities (``pmf_table``, tail
        below 1e-15). With c_care = c_orphan and x = 1 this is the formula
        above. Its Jacobian at s = 1: dG_a/ds_next = sigma and dG_a/ds_1 =
        E[B x^(B - 1)] (sigma q_care + (1 - sigma) q_orphan), the projection
        matrix's entries (``recruits_per_parent``).

        A ceiling's cull (``sim.density.Cull``, kept with probability k after
        the season) comes after the young's fate: the parent lives through the
        season with probability s(a) and is then kept with k, so
        G_a(s) = s(a) (1 - k + k s_next(a)) H_care(s_1) + (1 - s(a)) H_orphan(s_1),
        which is G_free(1 - k + k s) (thinning after the season).
        """
        s = np.asarray(s, dtype=float)
        rates = self.rates(factors)
        ages = slice(allele * self.n_ages, (allele + 1) * self.n_ages)
        sigma, p = rates.survival[..., ages], rates.recruitment[..., ages]
        nxt = self.aged[ages] - allele * self.n_ages
        s1 = s[..., :1]
        if self.parental:
            orphan = self.recruitment(factors, parent_survived=False)[..., ages]
            mean, decay = rates.breeding[..., ages], self.decay[ages]
            cared = self._brood_pgf(s1, p, mean, decay)
            orphaned = self._brood_pgf(s1, orphan, mean, decay)
            if isinstance(factors, Cull):  # lives through the season (s), then is kept (the cull)
                season = self._season_survival(factors, rates)[..., ages]
                kept = np.asarray(factors.adult, dtype=float)[..., None]
                return season * (1.0 - kept + kept * s[..., nxt]) * cared + (1.0 - season) * orphaned
            return sigma * s[..., nxt] * cared + (1.0 - sigma) * orphaned
        births = self.offspring.pgf(1.0 - p + p * s1, rates.breeding[..., ages])
        return (1.0 - sigma + sigma * s[..., nxt]) * births

    def _brood_pgf(self, s1, q, mean, decay) -> np.ndarray:
        """H_q(s_1) = E[(1 - q x^(B - 1) (1 - s_1))^B] for each class (``offspring_pgf``);
        ``s1``, ``q`` and ``mean`` broadcast against the class axis (the last)."""
        s1, q, mean, decay = np.broadcast_arrays(s1, q, mean, decay)
        out = np.asarray(self.offspring.pgf(1.0 - q + q * s1, mean), dtype=float)  # where x = 1
        tables = {}  # a brood law's table, by its mean (one per class and year at fixed density)
        for i in zip(*np.nonzero(decay != 1.0)):
            q_i, m_i, x_i, s_i = q[i], mean[i], decay[i], s1[i]
            if m_i not in tables:
                tables[m_i] = self.offspring.pmf_table(m_i)
            b, pmf = tables[m_i]
            out[i] = pmf @ (1.0 - q_i * x_i ** (b - 1.0) * (1.0 - s_i)) ** b
        return out
