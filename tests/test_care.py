"""Parental care and brood size: schema, theory (kernel, pgf), engines against formulas."""

import copy
import tomllib
from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from analysis.branching import extinction_probabilities
from analysis.invasion import predict
from analysis.thresholds import threshold
from sim.config import ConfigError, parse_config
from sim.density import Factors
from sim.engines import ENGINES
from sim.kernel import SeasonKernel
from sim.lifecycle import LifeCycle
from sim.offspring import Fixed, NegativeBinomial, Poisson
from sim.schedules import Schedule, iteroparous, table
from sim.years import YearType, YearTypes
from tests.conftest import BASE

Z_MAX = 4.5  # two-sided normal tail 6.8e-6 per check


def _raw(**alleles):
    raw = copy.deepcopy(BASE)
    for i, extra in alleles.items():
        raw["allele"][int(i[1:])].update(extra)
    return raw


# --- schema --------------------------------------------------------------------------------
@pytest.mark.parametrize("extra, message", [
    ({"orphan_survival": 1.2}, "allele[0].orphan_survival must be in [0, 1]"),
    ({"brood_effect": "exponential"}, "brood_scale: required for brood_effect 'exponential'"),
    ({"brood_scale": 2.0}, "brood_scale: only used by brood_effect 'exponential'"),
    ({"brood_effect": "exponential", "brood_scale": 0.0}, "allele[0].brood_scale"),
    ({"brood_effect": "linear", "brood_scale": 1.0}, "allele[0].brood_effect"),
])
def test_bad_care_keys_are_refused_naming_the_key(extra, message):
    with pytest.raises(ConfigError) as err:
        parse_config(_raw(a0=extra))
    assert message in str(err.value)


def test_without_care_keys_the_kernel_has_no_parental_effect():
    assert not LifeCycle.from_config(parse_config(BASE)).kernel.parental
    # orphan survival equal to juvenile survival is the model without care, written out
    life = LifeCycle.from_config(parse_config(_raw(a0={"orphan_survival": 0.5})))
    plain = LifeCycle.from_config(parse_config(BASE))
    f = Factors(0.7, 0.8, 0.6)
    assert np.allclose(life.kernel.projection_matrix(f), plain.kernel.projection_matrix(f), rtol=1e-15)


# --- theory: Charnov & Schaffer with care --------------------------------------------------
def _care_config(mutant_fecundity, orphan=0.1):
    raw = _raw(a0={"orphan_survival": orphan}, a1={"fecundity": mutant_fecundity, "orphan_survival": orphan})
    raw["density"] = {"form": "none"}
    raw["invasion"] = {**raw["invasion"], "resident_count": 100}
    return parse_config(raw)


def test_resident_growth_and_semelparous_threshold_with_care():
    # Derived from the model (README "Parental care and brood size"): a surviving parent's young
    # recruit with c_care, an orphan's with c_orphan, so lambda = P + B_i (P c_care + (1 - P)
    # c_orphan) = 0.5 + 2 (0.25 + 0.05) = 1.1, and a semelparous mutant (all young orphans)
    # grows at B_s c_orphan: its threshold is lambda / c_orphan = 11.
    config = _care_config(11.0)
    p = predict(config)
    assert p.resident_growth_rate == pytest.approx(1.1, rel=1e-12)
    t = threshold(config, "allele.one-shot.fecundity")
    assert t.value == pytest.approx(11.0, rel=1e-9) and t.invades_above
    # Without care (c_orphan = c = 0.5): lambda = P + B_i c = 1.5 and the threshold is
    # B_s = lambda / c = 3 (Charnov & Schaffer 1973, Am. Nat. 107: 791).
    t0 = threshold(_care_config(11.0, orphan=0.5), "allele.one-shot.fecundity")
    assert t0.value == pytest.approx(3.0, rel=1e-9)


def test_orphan_survival_threshold_under_beverton_holt_on_recruitment():
    # Derived from the model: at the resident's equilibrium, P + B_i f (P c + (1 - P) c_o) = 1
    # gives f = (1 - P) / (B_i (P c + (1 - P) c_o)); the semelparous mutant's invasion fitness is
    # B_s c_o' f, so its orphan-survival threshold is c_o' = 1 / (B_s f).
    raw = _raw(a0={"orphan_survival": 0.2}, a1={"fecundity": 6.0, "orphan_survival": 0.3})
    config = parse_config(raw)
    f = (1 - 0.5) / (2.0 * (0.5 * 0.5 + 0.5 * 0.2))
    t = threshold(config, "allele.one-shot.orphan_survival")
    assert t.value == pytest.approx(1.0 / (6.0 * f), rel=1e-8) and t.invades_above


# --- theory: the brood effect ----------------------------------------------------------------
@pytest.mark.parametrize("law, ref", [
    (Poisson(), lambda m: stats.poisson(m)),
    (NegativeBinomial(1.3), lambda m: stats.nbinom(1.3, 1.3 / (1.3 + m))),
    (Fixed(), None),
])
def test_expected_young_per_brood_is_the_pgf_derivative(law, ref):
    # E[B x^(B - 1)] = P'(x) (differentiating the pgf term by term); checked against the sum over
    # scipy's pmf (and, for the fixed law, its two sizes written out).
    m, x = 3.4, np.exp(-1 / 2.5)
    if ref is None:
        direct = 0.6 * 3 * x**2 + 0.4 * 4 * x**3  # sizes 3 and 4 with weights 1 - frac, frac
    else:
        b = np.arange(400)
        direct = float(np.sum(ref(m).pmf(b) * b * x ** np.maximum(b - 1, 0)))
    assert law.pgf_derivative(x, m) == pytest.approx(direct, rel=1e-12)
    b, pmf = law.pmf_table(m)
    assert pmf.sum() == pytest.approx(1.0, abs=1e-14)
    if ref is not None:
        assert np.allclose(pmf, ref(m).pmf(b), rtol=1e-10, atol=1e-300)


def test_poisson_brood_effect_closed_form_and_most_productive_brood():
    # Derived from the Poisson pgf: E[B x^(B-1)] = m exp(-m (1 - x)), x = e^(-1/h), so recruits per
    # parent are c m exp(-m (1 - e^(-1/h))), largest at m = 1 / (1 - e^(-1/h)) (the intermediate
    # most productive brood: Lack 1947, Ibis 89: 302).
    h, c = 3.0, 0.5
    schedule = Schedule("s", [4.0], [0.0], c, brood_scale=h)
    kernel = SeasonKernel.for_schedule(schedule)
    grid = np.linspace(0.5, 10.0, 2000)
    per_parent = [SeasonKernel.for_schedule(schedule, offspring=Poisson()).recruits_per_parent(
        Factors(g / 4.0, 1.0, 1.0))[0] for g in grid]
    closed = c * grid * np.exp(-grid * (1 - np.exp(-1 / h)))
    assert np.allclose(per_parent, closed, rtol=1e-12)
    best = 1 / (1 - np.exp(-1 / h))
    assert grid[np.argmax(per_parent)] == pytest.approx(best, abs=grid[1] - grid[0])
    assert kernel.projection_matrix()[0, 0] == pytest.approx(c * 4 * np.exp(-4 * (1 - np.exp(-1 / h))))


def _cared(law=None):
    """An iteroparous schedule over two ages with care and a brood effect, and its kernel."""
    base = iteroparous("p", 3.0, 0.6, 0.5, maturity_age=2)
    schedule = replace(base, orphan_survival=0.15, brood_scale=2.5)
    return schedule, SeasonKernel.for_schedule(schedule, offspring=law)


@pytest.mark.parametrize("law", [Poisson(), NegativeBinomial(1.5), Fixed()])
def test_offspring_pgf_jacobian_at_one_is_the_projection_matrix(law):
    # E[Z] = dG/ds at s = 1 for any branching process (Harris 1963, ch. II): the mean matrix is
    # the projection matrix, transposed (G_a is a parent of age a's generating function).
    _, kernel = _cared(law)
    f = Factors(0.9, 0.8, 0.7)
    a = kernel.projection_matrix(f)
    step = 1e-6
    jac = np.empty((2, 2))
    for j in range(2):
        s = np.ones(2)
        s[j] -= step
        jac[:, j] = (kernel.offspring_pgf(np.ones(2), f) - kernel.offspring_pgf(s, f)) / step
    assert np.allclose(jac.T, a, rtol=1e-5, atol=1e-6)


def test_offspring_pgf_matches_a_monte_carlo_of_one_parent():
    # One adult's contribution drawn plainly (survival, brood, each young by fate and brood size)
    # and E[s_next^survived s_1^recruits] averaged; tolerance 4.5 standard errors of the mean.
    _, kernel = _cared(NegativeBinomial(1.5))
    f = Factors(1.0, 0.9, 0.8)
    rng = np.random.default_rng(11)
    n = 200_000
    sigma = 0.6 * 0.9
    alive = rng.random(n) < sigma
    broods = NegativeBinomial(1.5).draw(np.full(n, 3.0), rng)
    p = np.where(alive, 0.5, 0.15) * 0.8 * np.exp(-(broods - 1) / 2.5)
    recruits = rng.binomial(broods, np.minimum(p, 1.0))
    for s in ([0.3, 0.5], [0.8, 0.2], [0.0, 0.9]):
        sample = np.where(alive, s[1], 1.0) * s[0] ** recruits
        pgf = kernel.offspring_pgf(np.array(s), f)[1]  # a parent of age 2 (the plus-group)
        assert abs(sample.mean() - pgf) < Z_MAX * sample.std() / np.sqrt(n), (s, sample.mean(), pgf)


def test_establishment_reads_the_joint_pgf():
    # A semelparous mutant with care: all young orphans, so its lineage is a Galton-Watson process
    # with offspring Poisson(B c_orphan) (Poisson thinning); q solves q = exp(B c_o (q - 1)).
    schedule = Schedule("s", [6.0], [0.0], 0.5, orphan_survival=0.3)
    q = extinction_probabilities(schedule, Factors(), Poisson()).probabilities[0]
    assert q == pytest.approx(np.exp(6.0 * 0.3 * (q - 1)), abs=1e-10) and q < 1


# --- engines against the formulas --------------------------------------------------------------
def _recruits_per_parent(engine, fecundity, *, parents, reps, h=3.0, seed=5):
    """Recruits per semelparous parent in one density-free season (mean and standard error)."""
    raw = {"experiment": {"engine": engine},
           "allele": [{"name": "s", "breeding": "semelparous", "fecundity": fecundity,
                       "juvenile_survival": 0.5, "brood_effect": "exponential", "brood_scale": h,
                       "initial_count": parents}]}
    life = LifeCycle.from_config(parse_config(raw))
    rngs = [np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(r,))) for r in range(reps)]
    batch = ENGINES[engine].populations(life, np.full((reps, 1, 1), parents), rngs)
    batch.step()
    per = batch.census()[:, 0, 0] / parents
    return per.mean(), per.std(ddof=1) / np.sqrt(reps)


@pytest.mark.parametrize("engine", ["individual", "counts"])
def test_simulated_recruits_per_parent_match_the_poisson_formula(engine):
    # c m exp(-m (1 - e^(-1/h))) (derived from the Poisson pgf); tolerance 4.5 standard errors
    # of the mean over replicates.
    m, h = 4.0, 3.0
    mean, se = _recruits_per_parent(engine, m, parents=2000, reps=200, h=h)
    expected = 0.5 * m * np.exp(-m * (1 - np.exp(-1 / h)))
    assert abs(mean - expected) < Z_MAX * se, (mean, expected, se)


def test_a_fecundity_sweep_puts_the_most_productive_brood_where_theory_does():
    # The most productive mean brood 1 / (1 - e^(-1/h)) = 3.53 for h = 3 (derived from the Poisson
    # pgf; Lack 1947). Counts engine, 10^6 parents per point: the standard error of recruits per
    # parent (~0.001) is a tenth of the gap between the best grid point and its neighbours.
    grid = [1.0, 2.0, 3.5, 5.0, 7.0]
    means = [_recruits_per_parent("counts", m, parents=1_000_000, reps=4, seed=9)[0] for m in grid]
    assert grid[int(np.argmax(means))] == 3.5


@pytest.mark.slow
def test_observed_orphan_survival_threshold_is_where_the_matrix_puts_it(tmp_path):
    # End to end: resident B_i = 2, P = 0.5, c = 0.5, c_orphan = 0.1 under Beverton-Holt on
    # recruitment (K = 250, census 50): f* = (1 - P) / (B_i (P c + (1 - P) c_o)) = 5/6, so a
    # semelparous mutant with B_s = 6 invades iff its c_orphan > 1 / (B_s f*) = 0.2 (derived from
    # the model). A theory ignoring the resident's care (c_o = c) would put it at 1/3. Interval
    # at 99.9% (bootstrap of analysis.estimates.observed_threshold): a correct theory fails with
    # probability about 1e-3.
    from analysis import compare, compare_thresholds
    from sim.experiment import run_experiment

    raw = _raw(a0={"orphan_survival": 0.1}, a1={"fecundity": 6.0, "orphan_survival": 0.2})
    raw["experiment"] = {"engine": "counts", "replicates": 1000, "seed": 31, "max_steps": 5000,
                         "record_every": 1000}
    raw["density"]["capacity"] = 250
    raw["sweep"] = {"allele.one-shot.orphan_survival": [0.12, 0.14, 0.16, 0.18, 0.2, 0.22, 0.24,
                                                         0.28, 0.32, 0.36]}
    path = tmp_path / "care.h5"
    run_experiment(parse_config(raw), path, progress=False)
    table = compare(path, level=0.999)
    row = compare_thresholds(path, table, level=0.999).iloc[0]
    assert row["analytic"] == pytest.approx(0.2, rel=1e-8)
    assert row["observed_low"] <= 0.2 <= row["observed_high"], row.to_dict()
    assert not row["observed_low"] <= 1 / 3 <= row["observed_high"], row.to_dict()


@pytest.mark.parametrize("engine", ["individual", "counts"])
def test_one_season_with_care_and_broods_matches_the_formula(engine):
    # Iteroparous parents (P = 0.6, c = 0.5, c_orphan = 0.1, h = 2) with fixed broods of mean 2.4
    # (2 young with probability 0.6, 3 with 0.4): recruits per parent, written out from the model,
    # (P c + (1 - P) c_o) (0.6 * 2 x + 0.4 * 3 x^2), x = e^(-1/2); survivors P per parent.
    # Tolerance 4.5 standard errors of the mean over replicates.
    raw = {"experiment": {"engine": engine}, "offspring": {"distribution": "fixed"},
           "allele": [{"name": "p", "breeding": "iteroparous", "fecundity": 2.4, "adult_survival": 0.6,
                       "juvenile_survival": 0.5, "orphan_survival": 0.1, "brood_effect": "exponential",
                       "brood_scale": 2.0, "initial_count": 500}]}
    life = LifeCycle.from_config(parse_config(raw))
    reps = 400
    rngs = [np.random.default_rng(np.random.SeedSequence(3, spawn_key=(r,))) for r in range(reps)]
    batch = ENGINES[engine].populations(life, np.full((reps, 1, 1), 500), rngs)
    batch.step()
    x = np.exp(-0.5)
    expected = 500 * (0.6 + (0.6 * 0.5 + 0.4 * 0.1) * (0.6 * 2 * x + 0.4 * 3 * x**2))
    after = batch.census()[:, 0, 0]
    assert abs(after.mean() - expected) < Z_MAX * after.std(ddof=1) / np.sqrt(reps), (after.mean(), expected)


# --- care and brood size in random years -------------------------------------------------------
WET_DRY = YearTypes((YearType("wet", juvenile_survival=1.6), YearType("dry", juvenile_survival=0.3)),
                    "iid", (0.5, 0.5))


def test_random_years_growth_rate_with_care_is_the_mean_log_of_the_years():
    # One class (breeding from age 1): each year's matrix is the number lambda_k = P + P'(x)
    # (P c_k + (1 - P) o_k), Poisson P'(x) = B exp(-B (1 - x)), x = exp(-1/h) (the mean of
    # B x^(B - 1), from the Poisson pgf; docs/care.md), the year's juvenile multiplier on both
    # c and o. Then log lambda_s = sum_k p_k log lambda_k (Lewontin & Cohen 1969), and the
    # small-noise formula is log E(lambda) - Var(lambda) / (2 E(lambda)^2) exactly for a
    # number (Tuljapurkar 1982). Without the care and brood terms in the year's matrix (as
    # before this was fixed) lambda_k = 0.5 + 2 x 0.5 k and both checks fail.
    from analysis.stochastic import draw_year_sequences, small_noise_approximation, stochastic_growth_rate

    schedule = replace(iteroparous("tending", 2.0, 0.5, 0.5), orphan_survival=0.2, brood_scale=3.0)
    young = 2.0 * np.exp(-2.0 * (1.0 - np.exp(-1.0 / 3.0)))
    lam = np.array([0.5 + young * (0.5 * 0.5 * k + 0.5 * 0.2 * k) for k in (1.6, 0.3)])
    draws = draw_year_sequences(WET_DRY, np.random.default_rng(31), n_batches=40, batch_length=1000, burn_in=100)
    g = stochastic_growth_rate(schedule, WET_DRY, draws)
    # 4 batch-means SE: a correct estimator misses with probability about 6e-5 (normal tails)
    assert abs(g.stochastic_growth_rate - np.log(lam).mean()) < 4 * g.stochastic_growth_rate_se
    assert g.stochastic_growth_rate_se < 0.01
    expected = np.log(lam.mean()) - lam.var() / (2 * lam.mean() ** 2)
    assert small_noise_approximation(schedule, WET_DRY) == pytest.approx(expected, abs=1e-12)


def test_an_orphan_survival_a_year_pushes_above_1_is_refused():
    raw = _raw(a1={"orphan_survival": 0.7})
    raw["environment"] = {"year": [{"name": "wet", "probability": 0.5, "juvenile_survival": 1.6},
                                   {"name": "dry", "probability": 0.5}]}
    with pytest.raises(ConfigError, match=r"environment\.year\.wet: allele '.*', year 'wet': orphan_survival "
                                          r"x juvenile_survival multiplier = 1\.12 > 1"):
        parse_config(raw)


@pytest.mark.parametrize("law, form, acts_on", [
    ({"distribution": "poisson"}, "beverton-holt", "recruitment"),
    ({"distribution": "negative-binomial", "dispersion": 2.0}, "beverton-holt", "fecundity"),
    ({"distribution": "fixed"}, "ricker", "adult-survival"),
    ({"distribution": "poisson"}, "beverton-holt", "all-survival"),
    pytest.param({"distribution": "poisson"}, "ceiling", "recruitment", marks=pytest.mark.slow),
    pytest.param({"distribution": "poisson"}, "ceiling", "all-survival", marks=pytest.mark.slow),
])
def test_random_years_that_are_all_alike_give_the_constant_theory_with_care(law, form, acts_on):
    # Years that do not differ make every season's matrix and generating function the
    # constant environment's, so the stochastic theory (Lyapunov exponent in the resident's
    # path, establishment over year sequences, neutral share of reproductive value) must give
    # the constant theory's numbers (Tuljapurkar 1990, ch. 2: log lambda_s = log lambda for a
    # constant matrix; from memory); that theory is checked against Charnov & Schaffer and
    # the care formulas above. Tolerances: rounding (1e-10 relative) and the establishment's
    # finite horizon of 1000 seasons (its horizon_gap; measured 2e-12). Before the fix the
    # random-years theory dropped care and brood size: invasion fitness 1.0 against 0.54 for
    # configs/duskmote-care.toml.
    from analysis.sweep import predict_point

    raw = tomllib.loads(open("configs/duskmote-care.toml").read())
    raw.pop("sweep")
    raw["allele"][1]["orphan_survival"] = 0.6
    raw["offspring"] = law
    raw["density"].update(form=form, acts_on=acts_on)
    constant = predict_point(parse_config(raw))
    raw["environment"] = {"year": [{"name": "a", "probability": 0.5}, {"name": "b", "probability": 0.5}]}
    years = predict_point(parse_config(raw))
    assert years["prediction"] == "stochastic"
    assert 0.1 < constant["establishment_probability"] < 1  # the mutant invades: a real check
    assert years["invasion_fitness"] == pytest.approx(constant["invasion_fitness"], rel=1e-10)
    assert years["establishment_probability"] == pytest.approx(constant["establishment_probability"], abs=1e-9)
    assert years["neutral_expectation"] == pytest.approx(constant["neutral_expectation"], abs=1e-12)


@pytest.mark.parametrize("engine", ["individual", "counts"])
def test_one_season_with_care_in_a_year_scales_orphans_as_the_theory_does(engine):
    # The engines put a year's multipliers on the density factors (SeasonKernel.multipliers), so
    # the juvenile multiplier reaches orphaned young too; the theory's scaled schedule says the
    # same (c_orphan x multiplier). A lean year (fecundity x1.5, adult survival x0.8, juvenile
    # x0.5) every season (Markov, identity rows, started in it): P' = 0.48, c' = 0.25,
    # c_o' = 0.05, fixed broods of mean 3.6 (3 young with probability 0.4, 4 with 0.6), so per
    # parent, written out from the model: P' + (P' c' + (1 - P') c_o') (0.4 * 3 x^2 + 0.6 * 4 x^3),
    # x = e^(-1/2). Tolerance 4.5 standard errors of the mean over replicates.
    from sim.year_draws import SeasonYears
    from sim.years import scaled_schedule

    raw = {"experiment": {"engine": engine}, "offspring": {"distribution": "fixed"},
           "allele": [{"name": "p", "breeding": "iteroparous", "fecundity": 2.4, "adult_survival": 0.6,
                       "juvenile_survival": 0.5, "orphan_survival": 0.1, "brood_effect": "exponential",
                       "brood_scale": 2.0, "initial_count": 500}],
           "environment": {"switching": "markov", "start": "lean", "transitions": [[1.0, 0.0], [0.0, 1.0]],
                           "year": [{"name": "lean", "fecundity": 1.5, "adult_survival": 0.8,
                                     "juvenile_survival": 0.5}, {"name": "plain"}]}}
    config = parse_config(raw)
    life = LifeCycle.from_config(config)
    reps = 400
    rngs = [np.random.default_rng(np.random.SeedSequence(3, spawn_key=(r,))) for r in range(reps)]
    batch = ENGINES[engine].populations(life, np.full((reps, 1, 1), 500), rngs)
    batch.years = SeasonYears(config.year_types(), [np.random.default_rng(r) for r in range(reps)])
    batch.step()
    assert np.all(batch.years.current == 0)  # every replicate lived through a lean year
    x = np.exp(-0.5)
    per_parent = 0.48 + (0.48 * 0.25 + 0.52 * 0.05) * (0.4 * 3 * x**2 + 0.6 * 4 * x**3)
    after = batch.census()[:, 0, 0]
    assert abs(after.mean() - 500 * per_parent) < Z_MAX * after.std(ddof=1) / np.sqrt(reps), after.mean()
    # the theory's matrix of that year is the same number
    lean = scaled_schedule(config.schedules()[0], config.year_types().types[0])
    matrix = SeasonKernel.for_schedule(lean, offspring=Fixed()).projection_matrix()
    assert matrix[0, 0] == pytest.approx(per_parent, rel=1e-12)


def test_care_in_random_years_end_to_end_the_verdicts_agree(tmp_path):
    # A caring resident (B = 2, P = 0.5, c = 0.5, c_o = 0.1) against a one-shot breeder (B = 6)
    # whose orphaned young survive c_o, in wet and dry years (juvenile survival x1.6 or x0.4),
    # Beverton-Holt on recruitment, K = 250: the stochastic theory puts the orphan-survival
    # threshold at about 0.226. Points far from it (invasion fitness below 0.8 or above 1.4)
    # must agree with 400 replicates each: there the fixed fraction is near 0 or near 0.8, the
    # neutral expectation 0.09, many binomial standard errors (at most 0.025) away. The theory
    # before the fix ignored care in random years and said "invades" (fitness 1.31) at every
    # point, so the low points disagreed.
    from analysis import compare
    from sim.experiment import run_experiment

    raw = _raw(a0={"orphan_survival": 0.1}, a1={"fecundity": 6.0, "orphan_survival": 0.2})
    raw["experiment"] = {"engine": "counts", "replicates": 400, "seed": 31, "max_steps": 5000,
                         "record_every": 1000}
    raw["density"]["capacity"] = 250
    raw["invasion"]["mutant_count"] = 5
    raw["environment"] = {"year": [{"name": "wet", "probability": 0.5, "juvenile_survival": 1.6},
                                   {"name": "dry", "probability": 0.5, "juvenile_survival": 0.4}]}
    raw["sweep"] = {"allele.one-shot.orphan_survival": [0.12, 0.16, 0.32, 0.36]}
    path = tmp_path / "care-years.h5"
    run_experiment(parse_config(raw), path, progress=False)
    table = compare(path)
    assert list(table["invasion_fitness"] < 0.8) == [True, True, False, False]
    assert list(table["invasion_fitness"] > 1.4) == [False, False, True, True]
    assert list(table["agreement"]) == ["agrees"] * 4, table.to_string()


# --- finite-population theory with care ---------------------------------------------------------
def test_next_season_covariance_with_care_closed_form():
    # One class, Poisson births of mean m f_fec, parent survives with sigma = P f_adult; each young
    # recruits with c f_rec if it does, c_o f_rec if not (no brood effect). Given the fate, the
    # recruits are Poisson (thinning), so by the law of total variance (common practice):
    # Var R = sigma mu_c + (1 - sigma) mu_o + sigma (1 - sigma) (mu_c - mu_o)^2, with
    # mu = m f_fec c f_rec, and Cov(R, S) = sigma (1 - sigma) (mu_c - mu_o). One class: R and S
    # both land at age 1, so the kernel's covariance is Var(R + S).
    from analysis.fixation import next_season_covariance

    schedule = replace(iteroparous("tending", 2.5, 0.6, 0.5), orphan_survival=0.1)
    f = Factors(0.9, 0.8, 0.7)
    sigma, mu_c, mu_o = 0.6 * 0.8, 2.5 * 0.9 * 0.5 * 0.7, 2.5 * 0.9 * 0.1 * 0.7
    var_r = sigma * mu_c + (1 - sigma) * mu_o + sigma * (1 - sigma) * (mu_c - mu_o) ** 2
    cov_rs = sigma * (1 - sigma) * (mu_c - mu_o)
    want = var_r + sigma * (1 - sigma) + 2 * cov_rs
    got = next_season_covariance(schedule, f, Poisson())
    assert got.shape == (1, 1, 1) and got[0, 0, 0] == pytest.approx(want, rel=1e-6)


@pytest.mark.parametrize("law", [Poisson(), NegativeBinomial(2.0)], ids=["poisson", "negative-binomial"])
def test_demographic_variance_with_care_and_broods_against_a_monte_carlo(law):
    # A table schedule of two ages (age 1 and the plus-group 2+):
    # W = v(1) R + v(a+1) S for a parent of age a. Drawn here from the model's rules (brood B from
    # the law, fate S ~ Bernoulli(sigma), recruits Binomial(B, c_fate f_rec x^(B-1))), not from
    # the kernel; tolerance 4.5 standard errors of the sample variance (its SE from the sample's
    # fourth moment), with 400,000 parents of each age.
    from analysis.fixation import demographic_variance

    schedule = replace(table("aged", [1.5, 3.0], [0.5, 0.7], 0.6), orphan_survival=0.15, brood_scale=2.5)
    f = Factors(1.0, 0.9, 0.8)
    v = np.array([1.0, 1.6])
    got = demographic_variance(schedule, f, law, v).by_age
    rng = np.random.default_rng(5)
    n, x = 400_000, np.exp(-1 / 2.5)
    for a in range(2):
        mean = schedule.fecundity[a] * f.fecundity
        if isinstance(law, Poisson):
            brood = rng.poisson(mean, n)
        else:  # numpy's (k, p) with p = k / (k + m): mean m, variance m + m^2 / k
            brood = rng.negative_binomial(2.0, 2.0 / (2.0 + mean), n)
        survives = rng.random(n) < schedule.survival[a] * f.adult
        c = np.where(survives, 0.6, 0.15) * f.recruitment * x ** np.maximum(brood - 1, 0)
        w = v[0] * rng.binomial(brood, c) + v[1] * survives  # age 1 -> 2, age 2+ stays 2+
        dev = (w - w.mean()) ** 2
        assert abs(got[a] - dev.mean()) < 4.5 * dev.std() / np.sqrt(n), (a, got[a], dev.mean())


# --- care under a ceiling -------------------------------------------------------------------------
def _ceiling_care_raw(acts_on):
    raw = tomllib.loads(open("configs/duskmote-care.toml").read())
    raw.pop("sweep")
    raw["allele"][1]["orphan_survival"] = 0.6
    raw["density"].update(form="ceiling", acts_on=acts_on)
    return raw


def test_a_ceiling_on_recruits_with_care_closed_form():
    # A ceiling on recruits leaves the parents, so their young's care is as without it; the
    # resident at K keeps P + phi R = 1 per resident (R its recruits per parent before the
    # cull), and the mutant grows by phi R_m. Poisson young per parent B e^(-B (1 - x)),
    # x = e^(-1/h) (docs/care.md): resident B = 3, P = 0.5, c = 0.5, c_o = 0.2; one-brood
    # mutant B = 6, c_o = 0.6, both h = 6 (configs/duskmote-care.toml). Derived from the model.
    x = np.exp(-1 / 6)
    r_res = 3 * np.exp(-3 * (1 - x)) * (0.5 * 0.5 + 0.5 * 0.2)
    r_mut = 6 * np.exp(-6 * (1 - x)) * 0.6
    assert predict(parse_config(_ceiling_care_raw("recruitment"))).invasion_fitness == pytest.approx(
        r_mut * (1 - 0.5) / r_res, rel=1e-9)


def test_a_ceiling_culling_parents_with_care_closed_form():
    # A ceiling on all-survival culls survivors and recruits alike after the season, when the
    # young's care is already set by their parent's fate in the season (SeasonKernel.
    # ceiling_excess comes after the recruits): the resident at K keeps phi (P + R) = 1, and the
    # mutant grows by phi R_m, with R as above (derived from the model). Reading the cull as
    # survival would orphan the culled parents' young: 1.268 instead of 1.233.
    x = np.exp(-1 / 6)
    r_res = 3 * np.exp(-3 * (1 - x)) * (0.5 * 0.5 + 0.5 * 0.2)
    r_mut = 6 * np.exp(-6 * (1 - x)) * 0.6
    got = predict(parse_config(_ceiling_care_raw("all-survival"))).invasion_fitness
    assert got == pytest.approx(r_mut / (0.5 + r_res), rel=1e-9)


@pytest.mark.parametrize("law", [Poisson(), NegativeBinomial(2.0)], ids=["poisson", "negative-binomial"])
def test_a_cull_is_thinning_after_the_season(law):
    # A removal after the season keeps each individual with probability k, independently, so the
    # numbers it leaves have pgf G_free(1 - k + k s) (thinning composes; common practice), with
    # care and broods whatever the parent's fate in the season was.
    from sim.density import Cull

    schedule = replace(iteroparous("tending", 2.5, 0.6, 0.5), orphan_survival=0.1, brood_scale=3.0)
    kernel = SeasonKernel.for_schedule(schedule, offspring=law)
    s = np.random.default_rng(7).random((6, 1))
    for k in (0.3, 0.8):
        got = kernel.offspring_pgf(s, Cull(1.0, k, k))
        want = kernel.offspring_pgf(1.0 - k + k * s, Factors())
        np.testing.assert_allclose(got, want, rtol=1e-12)


def test_no_fecundity_threshold_under_a_brood_effect_reports_the_peak():
    # With a Poisson brood effect the young per parent B e^(-B (1 - x)) peak at B = 1 / (1 - x)
    # (Lack 1947; derived above), so the one-brood mutant of configs/duskmote-care.toml (orphan
    # survival 0.3) stays below invasion fitness 1 at every B. The search widens its bracket to
    # 1e6, whose coarse grid steps over the peak: the reason must still give the largest value
    # seen (at least the configured B's 0.54), not "from 0 to 0".
    import re

    from sim.config import load_config, sweep_points

    config = sweep_points(load_config("configs/duskmote-care.toml"))[0].config
    found = threshold(config, "allele.one-brood.fecundity")
    assert not found.converged
    top = float(re.search(r"stays below 1 \(from \S+ to (\S+)\)", found.message)[1])
    assert predict(config).invasion_fitness <= top < 1
