"""The aggregated ``counts`` engine against the ``individual`` engine, in distribution (its
checks against the Mesa reference are in ``tests/test_engine_conformance.py``).

The engines draw differently (one uniform per individual against one
binomial per class, random positions against a multivariate hypergeometric
removal), so they are compared by two-sample tests on independent runs, not
by seed. Every comparison uses fixed seeds; the error rates below are the
chance that a correct engine fails for a seed picked at random.

- means: Welch z = (mean_a - mean_b) / sqrt(var_a/n_a + var_b/n_b), refused
  when |z| > 4.5 (two-sided normal tail 6.8e-6);
- whole distributions: scipy.stats.ks_2samp, refused when p < 1e-5 (for
  integer-valued data the KS p-value is conservative, so the rate is at most
  1e-5);
- fractions (fixation): two-proportion z with pooled variance, |z| > 4.5.

About 90 such checks run in the default suite, so a correct engine fails one
with probability below 2e-3.
"""

import numpy as np
import pytest
from scipy import stats

from sim import aggregation
from sim.aggregation import PerIndividualFeature, counts_obstacles
from sim.cli import main
from sim.config import ConfigError, parse_config, sweep_points
from sim.describe import describe_experiment
from sim.engines import CountsPopulations
from sim.lifecycle import LifeCycle
from sim.offspring import Fixed, NegativeBinomial, Poisson
from sim.replicates import run_replicates

Z_MAX = 4.5
P_MIN = 1e-5

RESIDENT = {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
            "adult_survival": 0.5, "juvenile_survival": 0.5}
MUTANT = {"name": "one-shot", "breeding": "semelparous", "fecundity": 4.5, "juvenile_survival": 0.5}
LATE = {"name": "late", "breeding": "iteroparous", "fecundity": 3.0, "adult_survival": 0.7,
        "juvenile_survival": 0.6, "maturity_age": 3}


def _config(engine, seasons, *, density, offspring=None, alleles=None, counts=None,
            invasion=None, mutation=None, stop="max-steps", seed=1):
    raw = {"experiment": {"engine": engine, "seed": seed, "stop": stop, "max_steps": seasons,
                          "record_every": seasons},
           "density": density,
           "offspring": offspring or {"distribution": "poisson"},
           "allele": [dict(a, initial_count=c) for a, c in zip(alleles or [RESIDENT, MUTANT],
                                                                counts or [0, 0])]}
    if invasion:
        raw["invasion"] = invasion
    if mutation:
        raw["mutation"] = mutation
    return parse_config(raw)


# Several configs, each touching a different part of the season.
SCENARIOS = {
    "bh-recruitment": {"density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 80},
                           "counts": [60, 30]},
    "ricker-fecundity-breeders-negbin-ages": {
        "density": {"form": "ricker", "acts_on": "fecundity", "counted": "breeders", "capacity": 60},
        "offspring": {"distribution": "negative-binomial", "dispersion": 2.0},
        "alleles": [RESIDENT, MUTANT, LATE], "counts": [40, 20, 30]},
    "bh-adult-survival-fixed-mutation": {
        "density": {"form": "beverton-holt", "acts_on": "adult-survival", "capacity": 50},
        "offspring": {"distribution": "fixed"}, "alleles": [dict(RESIDENT, fecundity=1.5), MUTANT],
        "counts": [50, 20], "mutation": {"rate": 0.05}},
    "offspring-counted-all-survival": {
        "density": {"form": "beverton-holt", "acts_on": "all-survival", "counted": "offspring",
                 "capacity": 120}, "counts": [50, 40]},
    "ceiling-everyone-ages": {"density": {"form": "ceiling", "acts_on": "all-survival", "capacity": 70},
                                  "alleles": [RESIDENT, LATE], "counts": [60, 40]},
    "ceiling-recruits": {"density": {"form": "ceiling", "acts_on": "recruitment", "capacity": 70},
                             "counts": [50, 30]},
}


def _finals(engine, scenario, seasons, replicates, seed):
    """Final censuses (replicates, n_alleles, n_ages) after ``seasons`` seasons."""
    config = _config(engine, seasons, seed=seed, **scenario)
    point = sweep_points(config)[0]
    results = run_replicates(point, range(replicates), seed)
    return np.array([r.trajectory[-1] for r in results], dtype=float)


def _welch_z(a, b) -> float:
    se = np.sqrt(a.var(ddof=1) / a.size + b.var(ddof=1) / b.size)
    return 0.0 if se == 0 else float((a.mean() - b.mean()) / se)


def _same_distribution(a, b, what):
    z = _welch_z(a, b)
    assert abs(z) < Z_MAX, f"{what}: means {a.mean():.4g} vs {b.mean():.4g}, z = {z:.2f}"
    p = stats.ks_2samp(a, b).pvalue
    assert p > P_MIN, f"{what}: KS p = {p:.2g}"


def _compare(x, y, name):
    totals_x, totals_y = x.sum(axis=(1, 2)), y.sum(axis=(1, 2))
    _same_distribution(totals_x, totals_y, f"{name}: census size")
    for allele in range(x.shape[1]):
        fx = x[:, allele].sum(axis=1)[totals_x > 0] / totals_x[totals_x > 0]
        fy = y[:, allele].sum(axis=1)[totals_y > 0] / totals_y[totals_y > 0]
        _same_distribution(fx, fy, f"{name}: frequency of allele {allele}")
    if x.shape[2] > 1:  # the age structure: share of age-1 individuals
        _same_distribution(x[:, :, 0].sum(axis=1), y[:, :, 0].sum(axis=1), f"{name}: recruits at age 1")


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_counts_matches_individual_in_distribution(name):
    scenario = SCENARIOS[name]
    x = _finals("counts", scenario, 8, 2500, seed=101)
    y = _finals("individual", scenario, 8, 2500, seed=202)
    _compare(x, y, name)


def test_counts_matches_individual_on_fixation():
    # a single mutant invading a resident at equilibrium, run to fixation or loss
    def fixed(engine, seed):
        config = _config(engine, 3000, stop="fixation", seed=seed,
                         density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": 40},
                         invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 1},
                         alleles=[RESIDENT, dict(MUTANT, fecundity=5.0)])
        results = run_replicates(sweep_points(config)[0], range(4000), seed)
        assert all(r.outcome in ("mutant-fixed", "mutant-lost") for r in results)
        return sum(r.outcome == "mutant-fixed" for r in results), len(results)

    kx, n = fixed("counts", 7)
    ky, _ = fixed("individual", 8)
    pooled = (kx + ky) / (2 * n)
    z = (kx - ky) / n / np.sqrt(2 * pooled * (1 - pooled) / n)
    assert 0.02 < pooled < 0.98  # the test has power: neither outcome is near certain
    assert abs(z) < Z_MAX, (kx, ky, z)


@pytest.mark.parametrize("law, variance", [
    (Poisson(), lambda n, m, k: n * m * k),
    (NegativeBinomial(1.5), lambda n, m, k: n * m * k * (1 + m * k / 1.5)),
    (Fixed(), None),
])
def test_thinned_total_is_births_thinned(law, variance):
    # The recruits of a class are its births, each kept independently with probability
    # keep: draw_thinned_total must have the law of draw_total followed by a binomial.
    # (Poisson thinning; a gamma-mixed Poisson thinned stays gamma-mixed with mean m keep,
    # so NB(k, m) thinned is NB(k, m keep) with variance mu (1 + mu / k).)
    n, mean, keep, reps = 7, 2.5, 0.3, 40000
    rng = np.random.default_rng(5)
    direct = np.array([law.draw_thinned_total(n, mean, keep, rng) for _ in range(reps)], dtype=float)
    births = law.draw_total(np.full(reps, n), mean, rng)
    two_step = rng.binomial(births, keep).astype(float)
    _same_distribution(direct, two_step, f"{type(law).__name__} thinned total")
    assert abs(direct.mean() - n * mean * keep) < Z_MAX * direct.std() / np.sqrt(reps)
    if variance is not None:
        # variance of a sample variance ~ 2 sigma^4 / reps for near-normal totals; 6 SE margin
        v = variance(n, mean, keep)
        assert abs(direct.var() - v) < 6 * v * np.sqrt(2 / reps)
    assert law.draw_thinned_total(0, mean, keep, rng) == 0


def test_counts_state_does_not_grow_with_the_population():
    config = _config("counts", 1, density={"form": "beverton-holt", "capacity": 10},
                     counts=[10, 10])
    life = LifeCycle.from_config(config)
    sizes = []
    for n in (10, 10**9):
        batch = CountsPopulations(life, np.array([[[n], [n]]]), [np.random.default_rng(0)])
        batch.step()
        assert batch.census().sum() > 0
        sizes.append(batch.state_bytes())
    assert sizes[0] == sizes[1]


# -- when the counts engine is exact ------------------------------------------------------
ALL_OPTIONS = [SCENARIOS[name] for name in SCENARIOS]


@pytest.mark.parametrize("scenario", ALL_OPTIONS)
def test_counts_is_exact_for_every_current_option(scenario):
    config = _config("counts", 5, **scenario)
    assert counts_obstacles(config) == []
    assert "counts engine: exact in distribution here" in describe_experiment(config)


@pytest.fixture
def lineage_feature(monkeypatch):
    # a stand-in for a future per-individual option (the config has no lineage key yet):
    # it reads the experiment name, so a test can turn it on
    feature = PerIndividualFeature(
        key="experiment.lineage", present=lambda c: c.experiment.name.startswith("lineage"),
        reason="recording lineage needs each individual's parent")
    monkeypatch.setattr(aggregation, "PER_INDIVIDUAL_FEATURES", [feature])
    return feature


def _raw(engine, name):
    return {"experiment": {"engine": engine, "name": name},
            "density": {"form": "beverton-holt", "capacity": 50},
            "allele": [dict(RESIDENT, initial_count=5)]}


def test_counts_refused_where_individuals_carry_more(lineage_feature, tmp_path, capsys):
    with pytest.raises(ConfigError, match=r"experiment\.engine: 'counts' is not exact for this "
                                          r"config \(experiment\.lineage: recording lineage"):
        parse_config(_raw("counts", "lineage-run"))
    assert parse_config(_raw("counts", "plain")).experiment.engine == "counts"
    config = parse_config(_raw("individual", "lineage-run"))
    assert "counts engine: not exact here (experiment.lineage: recording lineage" \
        in describe_experiment(config)
    path = tmp_path / "c.toml"
    path.write_text('[experiment]\nengine = "counts"\nname = "lineage-x"\n'
                    '[density]\nform = "beverton-holt"\ncapacity = 50\n'
                    '[[allele]]\nname = "a"\nbreeding = "semelparous"\nfecundity = 3.0\n'
                    'juvenile_survival = 0.5\ninitial_count = 5\n')
    for command in (["check", str(path)], ["run", str(path), "-o", str(tmp_path / "o.h5")]):
        assert main(command) == 2
        err = capsys.readouterr().err
        assert "experiment.engine: 'counts' is not exact" in err and "Traceback" not in err
    assert not (tmp_path / "o.h5").exists()
