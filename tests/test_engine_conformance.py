"""The engine contract: checks every registered engine must pass (``sim.engines.ENGINES``).

In the spirit of scikit-learn's estimator checks: each test is parametrised
over the registry, so an engine added there is checked without copying test
lists. What is checked:

- census bookkeeping: a census by (allele, age index) of non-negative
  integers; a semelparous allele has nobody past its breeding age; a ceiling
  holds the census at K; a batch's census is its replicates' censuses;
- outcomes: every replicate ends with an outcome its final census bears out;
- reproducibility from keyed streams: a replicate run twice is identical,
  another replicate differs, and (batchable engines) a replicate is
  bit-identical alone, in any batch and in any order;
- theory: one season's mean is the projection matrix applied to the census;
- agreement in distribution with the reference (``agents``) engine on the
  shared configs.
"""

import copy
from functools import cache

import numpy as np
import pytest
from scipy import stats

from sim.config import SweepPoint, parse_config, sweep_points
from sim.engines import ENGINES, REFERENCE_ENGINE, batchable
from sim.lifecycle import LifeCycle, initial_census
from sim.model import BroodModel
from sim.replicates import run_replicate, run_replicates
from tests.conftest import BASE
from tests.test_batched import CONFIGS, _config, _same, _with_initial_counts

ALL = list(ENGINES)
BATCHABLE = [name for name in ENGINES if batchable(name)]
OTHERS = [name for name in ENGINES if name != REFERENCE_ENGINE]
Z_MAX = 4.5  # two-sided normal tail 6.8e-6 per check


def _raw(**sections):
    raw = copy.deepcopy(BASE)
    raw.update(copy.deepcopy(sections))
    return raw


# Each touches a different part of the season (density forms and placements, who is
# counted, offspring laws, mutation, ceilings, ages).
SHARED_CONFIGS = {
    "beverton-holt on recruitment": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": 25},
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "table schedule, ricker on fecundity, breeders, negative binomial, mutation": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "ricker", "acts_on": "fecundity", "counted": "breeders", "capacity": 20},
        offspring={"distribution": "negative-binomial", "dispersion": 1.2},
        mutation={"rate": 0.03},
        allele=[BASE["allele"][0], {"name": "one-shot", "breeding": "table", "fecundity": [0.0, 2.0, 5.0],
                                    "adult_survival": [0.7, 0.6, 0.3], "juvenile_survival": 0.5}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "ceiling on everyone, fixed offspring": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "ceiling", "capacity": 30},
        offspring={"distribution": "fixed"},
        allele=[{**BASE["allele"][0], "initial_count": 15},
                {"name": "slow", "breeding": "iteroparous", "fecundity": 1.2, "adult_survival": 0.8,
                 "juvenile_survival": 0.5, "initial_count": 15}],
        invasion=None,
    ),
    "ceiling on recruits, delayed semelparity": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "ceiling", "acts_on": "recruitment", "capacity": 30},
        allele=[BASE["allele"][0], {"name": "one-shot", "breeding": "semelparous", "fecundity": 9.0,
                                    "maturity_age": 2, "adult_survival": 0.7, "juvenile_survival": 0.5}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "beverton-holt on adult survival, offspring counted": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "adult-survival", "counted": "offspring", "capacity": 30},
        allele=[{**BASE["allele"][0], "adult_survival": 0.8, "fecundity": 0.6},
                {"name": "one-shot", "breeding": "semelparous", "fecundity": 2.5, "juvenile_survival": 0.5}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "orphan survival, beverton-holt on recruitment": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": 25},
        allele=[{**BASE["allele"][0], "orphan_survival": 0.15},
                {**BASE["allele"][1], "fecundity": 6.0, "orphan_survival": 0.3}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "brood effect and care, negative binomial, offspring counted": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "adult-survival", "counted": "offspring", "capacity": 100},
        offspring={"distribution": "negative-binomial", "dispersion": 1.5},
        allele=[{**BASE["allele"][0], "adult_survival": 0.8, "fecundity": 2.0, "orphan_survival": 0.2,
                 "brood_effect": "exponential", "brood_scale": 3.0},
                {"name": "one-shot", "breeding": "semelparous", "fecundity": 6.0, "juvenile_survival": 0.5,
                 "brood_effect": "exponential", "brood_scale": 8.0}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "two year types (iid), beverton-holt on recruitment": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": 25},
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
        environment={"switching": "iid", "year": [
            {"name": "good", "probability": 0.4, "juvenile_survival": 1.6, "fecundity": 1.2,
             "adult_survival": 1.3},
            {"name": "bad", "probability": 0.6, "juvenile_survival": 0.3, "adult_survival": 0.7}]},
    ),
}


def _shared(name, engine, seed=7):
    raw = copy.deepcopy(SHARED_CONFIGS[name])
    raw["experiment"] = {**raw["experiment"], "engine": engine, "seed": seed}
    if raw.get("invasion") is None:
        raw.pop("invasion", None)
    return parse_config(raw)


# --- census bookkeeping ------------------------------------------------------------------
@pytest.mark.parametrize("engine", ALL)
@pytest.mark.parametrize("name", list(SHARED_CONFIGS))
def test_census_is_counts_by_allele_and_age(engine, name):
    config = _shared(name, engine)
    model = BroodModel(config, rng=np.random.default_rng(1))
    start = initial_census(config)
    assert np.array_equal(model.census(), start)  # nothing happens before the first step
    for _ in range(3):
        model.step()
        census = model.census()
        assert census.shape == start.shape and np.issubdtype(census.dtype, np.integer)
        assert census.min() >= 0


@pytest.mark.parametrize("engine", ALL)
def test_ceiling_caps_the_census(engine):
    model = BroodModel(_shared("ceiling on everyone, fixed offspring", engine), rng=np.random.default_rng(3))
    for _ in range(10):
        model.step()
        # A ceiling at K = 30 with a growing population (lambda = 1.5) holds it at K exactly.
        assert model.census().sum() == 30


@pytest.mark.parametrize("engine", ALL)
def test_semelparous_individuals_breed_once(engine):
    # A semelparous allele maturing at 2 has no individual older than 2 at any census.
    config = _shared("ceiling on recruits, delayed semelparity", engine)
    model = BroodModel(config, rng=np.random.default_rng(5))
    mutant = config.allele_index("one-shot")
    for _ in range(20):
        model.step()
        assert model.census()[mutant, 2:].sum() == 0


@pytest.mark.parametrize("engine", BATCHABLE)
def test_batch_census_is_its_replicates_censuses(engine):
    config = _shared("table schedule, ricker on fecundity, breeders, negative binomial, mutation", engine)
    life = LifeCycle.from_config(config)
    start = initial_census(config, life)
    rngs = [np.random.default_rng(r) for r in range(4)]
    batch = ENGINES[engine].populations(life, np.broadcast_to(start, (4, *start.shape)), rngs)
    for _ in range(3):
        batch.step()
    census = batch.census()
    assert census.shape == (4, *start.shape)
    assert np.array_equal(batch.sizes, census.sum(axis=(1, 2)))
    batch.keep(np.array([True, False, True, False]))
    assert np.array_equal(batch.census(), census[[0, 2]])


# --- outcomes ----------------------------------------------------------------------------
@pytest.mark.parametrize("engine", ALL)
def test_outcomes_agree_with_the_final_census(engine):
    config = parse_config(_raw(experiment={"engine": engine, "seed": 4, "max_steps": 200},
                               density={"form": "beverton-holt", "capacity": 15}))
    mutant = config.allele_index("one-shot")
    results = run_replicates(sweep_points(config)[0], range(12), 4)
    for r in results:
        last = r.trajectory[-1].sum(axis=1)
        assert r.final_census == last.sum()
        expected = {"mutant-fixed": last.sum() > 0 and last.sum() == last[mutant],
                    "mutant-lost": last[mutant] == 0 and last.sum() > 0,
                    "extinct": last.sum() == 0, "undecided": r.steps == 200}[r.outcome]
        assert expected, (r.outcome, last)
    assert {r.outcome for r in results} >= {"mutant-lost"}


# --- reproducibility from keyed streams ---------------------------------------------------
@pytest.mark.parametrize("engine", ALL)
def test_a_replicate_is_its_keyed_stream(engine):
    point = sweep_points(_shared("beverton-holt on recruitment", engine))[0]
    a, b = run_replicate(point, 3, 9), run_replicate(point, 3, 9)
    assert _same(a, b)
    others = [run_replicate(point, r, 9) for r in (4, 5)]
    assert any(not np.array_equal(a.trajectory, o.trajectory) for o in others)


def _batched_cases():
    for engine in ALL:
        # the agents engine runs one replicate at a time: one config suffices for it
        for name in (CONFIGS if batchable(engine) else ["bh-recruitment"]):
            yield engine, name


@pytest.mark.parametrize("engine, name", list(_batched_cases()))
def test_batched_equals_one_replicate_at_a_time(engine, name):
    config = _config(engine, **_with_initial_counts(name, CONFIGS[name]))
    point = sweep_points(config)[0]
    reps = list(range(14 if batchable(engine) else 2))
    alone = [run_replicate(point, r, 5) for r in reps]
    together = run_replicates(point, reps, 5)
    assert [r.replicate for r in together] == reps
    for a, b in zip(alone, together):
        assert _same(a, b), (name, a.replicate, a.outcome, b.outcome, a.steps, b.steps)


@pytest.mark.parametrize("engine", BATCHABLE)
def test_batch_grouping_and_order_do_not_matter(engine):
    config = _config(engine, density={"form": "ceiling", "acts_on": "all-survival", "capacity": 30})
    point = sweep_points(config)[0]
    whole = {r.replicate: r for r in run_replicates(point, range(20), 9)}
    pieces = run_replicates(point, [7], 9) + run_replicates(point, [19, 3, 11, 0], 9) \
        + run_replicates(point, range(12, 19), 9)
    for r in pieces:
        assert _same(r, whole[r.replicate])


# --- theory: one season's mean -------------------------------------------------------------
RESIDENT = {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
            "adult_survival": 0.5, "juvenile_survival": 0.5}
MUTANT = {"name": "one-shot", "breeding": "semelparous", "fecundity": 4.5, "juvenile_survival": 0.5}
LATE = {"name": "late", "breeding": "iteroparous", "fecundity": 3.0, "adult_survival": 0.7,
        "juvenile_survival": 0.6, "maturity_age": 3}


@pytest.mark.parametrize("engine", BATCHABLE)
@pytest.mark.parametrize("density", [
    {"form": "beverton-holt", "acts_on": "fecundity", "capacity": 200},
    {"form": "ricker", "acts_on": "all-survival", "counted": "breeders", "capacity": 300},
])
def test_one_season_mean_is_the_projection_matrix(engine, density):
    # Demographic stochasticity around the mean: E[n(t+1) | n(t)] = A(D) n(t), with the
    # projection matrix of the README's model at the density of n(t) (Caswell 2001, ch. 15),
    # written out here from the schedules, not taken from the kernel.
    config = parse_config({"experiment": {"engine": engine}, "density": density,
                           "allele": [dict(a, initial_count=c) for a, c in
                                      zip([RESIDENT, MUTANT, LATE], [150, 60, 90])]})
    life = LifeCycle.from_config(config)
    start = initial_census(config, life)
    start[2] = [30, 25, 35]  # spread the late allele over its three ages
    reps = 3000
    rngs = [np.random.default_rng(np.random.SeedSequence(77, spawn_key=(r,))) for r in range(reps)]
    batch = ENGINES[engine].populations(life, np.broadcast_to(start, (reps, *start.shape)), rngs)
    batch.step()
    after = batch.census().reshape(reps, -1).astype(float)
    d = float(start.sum() if density.get("counted", "census") == "census"
              else (start * (life.M > 0)).sum())
    k = density["capacity"]
    f = 1 / (1 + d / k) if density["form"] == "beverton-holt" else np.exp(-d / k)
    f_fec = f if density["acts_on"] == "fecundity" else 1.0
    f_surv = f if density["acts_on"] == "all-survival" else 1.0
    expected = np.zeros_like(start, dtype=float)
    for a in range(life.n_alleles):
        expected[a, 0] += (life.M[a] * f_fec * life.C[a] * f_surv * start[a]).sum()
        aged = life.S[a] * f_surv * start[a]
        expected[a, 1:] += aged[:-1]
        expected[a, -1] += aged[-1]
    expected = expected.ravel()
    se = after.std(axis=0, ddof=1) / np.sqrt(reps)
    live = se > 0
    assert np.array_equal(expected[~live], after[0, ~live])  # deterministic classes (all zero)
    z = (after.mean(axis=0)[live] - expected[live]) / se[live]
    assert np.all(np.abs(z) < Z_MAX), (z, expected, after.mean(axis=0))


# --- agreement in distribution with the reference engine ----------------------------------
def _sample(name, engine, n, seed):
    point = SweepPoint(index=0, values={}, config=_shared(name, engine, seed))
    totals, freqs, gone = [], [], []
    for result in run_replicates(point, range(n), seed):
        last = result.trajectory[-1].sum(axis=1).astype(float)
        totals.append(last.sum())
        focal = last[-1]  # the last allele: the mutant (or the second resident)
        freqs.append(focal / last.sum() if last.sum() else np.nan)
        gone.append(focal == 0)
    return np.array(totals), np.array(freqs), np.array(gone)


@cache
def _reference(name):
    return _sample(name, REFERENCE_ENGINE, 250, seed=202)


@pytest.mark.parametrize("engine", OTHERS)
@pytest.mark.parametrize("name", list(SHARED_CONFIGS))
def test_engine_agrees_with_the_reference_in_distribution(engine, name):
    # Both engines draw the same life cycle; their laws must agree. Checks (each at
    # alpha = 1e-4, so with 3 checks x 7 configs x 2 engines a correct engine fails with
    # probability < 0.5%): census size after T seasons and focal-allele frequency (two-sample
    # Kolmogorov-Smirnov, scipy.stats.ks_2samp), and the fraction of replicates in which the
    # focal allele was lost by T (Fisher's exact test, scipy.stats.fisher_exact).
    n = 250
    tot_i, freq_i, gone_i = _sample(name, engine, n, seed=101)
    tot_a, freq_a, gone_a = _reference(name)
    assert stats.ks_2samp(tot_i, tot_a).pvalue > 1e-4
    fi, fa = freq_i[~np.isnan(freq_i)], freq_a[~np.isnan(freq_a)]
    assert stats.ks_2samp(fi, fa).pvalue > 1e-4
    table = [[gone_i.sum(), n - gone_i.sum()], [gone_a.sum(), n - gone_a.sum()]]
    assert stats.fisher_exact(table).pvalue > 1e-4
    # The comparison has power: the populations are not trivially empty or constant.
    assert tot_i.std() > 0 and 0 < gone_i.mean() < 1 or 0 < freq_i[~np.isnan(freq_i)].mean() < 1
