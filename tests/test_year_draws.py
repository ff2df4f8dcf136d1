"""Variable environments in the simulator: the [environment] schema, the year streams, the
engines' years, the results file's /years, and the science (growth in random years)."""

import copy

import numpy as np
import pytest
from scipy import stats

from sim.config import ConfigError, parse_config, sweep_points
from sim.config.sweep import get_path
from sim.replicates import replicate_rng, run_replicate, run_replicates
from sim.year_draws import SeasonYears, year_sequence
from tests.conftest import BASE

TWO_YEARS = {"year": [{"name": "good", "probability": 0.5, "juvenile_survival": 1.6},
                      {"name": "bad", "probability": 0.5, "juvenile_survival": 0.2}]}
MARKOV = {"switching": "markov", "transitions": [[0.7, 0.3], [0.4, 0.6]],
          "year": [{"name": "good", "juvenile_survival": 1.6, "fecundity": 1.1},
                   {"name": "bad", "juvenile_survival": 0.2, "adult_survival": 0.5}]}


def _config(environment=TWO_YEARS, **sections):
    raw = copy.deepcopy(BASE)
    raw["environment"] = copy.deepcopy(environment)
    for key, value in sections.items():
        raw[key] = {**raw.get(key, {}), **value} if isinstance(value, dict) else value
    if environment is None:
        raw.pop("environment")
    return parse_config(raw)


def _refused(raw_environment, match, **sections):
    with pytest.raises(ConfigError, match=match):
        _config(raw_environment, **sections)


# --- schema --------------------------------------------------------------------------------
def test_the_environment_builds_its_year_types():
    years = _config(MARKOV).year_types()
    assert years.names == ["good", "bad"] and years.switching == "markov"
    assert years.multipliers().tolist() == [[1.1, 1.0, 1.6], [1.0, 0.5, 0.2]]
    assert _config(None).year_types() is None


@pytest.mark.parametrize("change, match", [
    (lambda e: e["year"][1].update(probability=0.4), r"environment\.year\.probability: .*sum to 1"),
    (lambda e: e["year"].pop(), r"environment\.year: .*at least 2"),
    (lambda e: e["year"][1].update(name="good"), r"environment\.year\[1\]\.name: 'good' is used twice"),
    (lambda e: e["year"][0].pop("probability"), r"environment\.year\[0\]\.probability: required"),
    (lambda e: e.update(start="good"), r"environment\.start: only used by switching = 'markov'"),
    (lambda e: e["year"][0].update(fecundity=-1), r"environment\.year\[0\]\.fecundity must be >= 0; got -1"),
])
def test_an_iid_environment_is_refused_with_its_key(change, match):
    env = copy.deepcopy(TWO_YEARS)
    change(env)
    _refused(env, match)


@pytest.mark.parametrize("change, match", [
    (lambda e: e.update(transitions=[[0.7, 0.2], [0.4, 0.6]]), r"environment\.transitions\[0\]: row must sum to 1"),
    (lambda e: e.update(transitions=[[1.0]]), r"environment\.transitions: must be 2 x 2"),
    (lambda e: e.pop("transitions"), r"environment\.transitions: required"),
    (lambda e: e.update(start="average"), r"environment\.start: 'stationary' or a year name"),
    (lambda e: e.update(transitions=[[1.0, 0.0], [0.0, 1.0]]), r"no unique stationary law"),
    (lambda e: e["year"][0].update(probability=0.5), r"probability: not used by switching = 'markov'"),
])
def test_a_markov_environment_is_refused_with_its_key(change, match):
    env = copy.deepcopy(MARKOV)
    change(env)
    _refused(env, match)


def test_an_absorbing_chain_with_a_named_start_is_accepted():
    env = {**copy.deepcopy(MARKOV), "transitions": [[1.0, 0.0], [0.0, 1.0]], "start": "bad"}
    assert _config(env).year_types().start_law().tolist() == [0.0, 1.0]


def test_a_survival_above_one_is_refused_naming_allele_year_and_point():
    # BASE's alleles have juvenile survival 0.5: a multiplier 2.5 makes it 1.25.
    env = copy.deepcopy(TWO_YEARS)
    env["year"][0]["juvenile_survival"] = 2.5
    _refused(env, r"environment\.year\.good: allele 'perennial', year 'good': juvenile_survival "
                  r"x multiplier = 1\.25 > 1")
    env = copy.deepcopy(TWO_YEARS)
    env["year"][1]["adult_survival"] = 2.2  # perennial's 0.5 -> 1.1
    _refused(env, r"allele 'perennial', year 'bad': adult_survival x multiplier = 1\.1 > 1")
    with pytest.raises(ConfigError, match=r"sweep point 1 \(environment\.year\.good\.juvenile_survival "
                                          r"= 2\.5\): .*allele 'one-shot', year 'good'"):
        _config(TWO_YEARS, sweep={"environment.year.good.juvenile_survival": [1.5, 2.5]})


def test_year_keys_are_sweep_paths():
    config = _config(TWO_YEARS, sweep={"environment.year.bad.juvenile_survival": [0.2, 0.6, 1.0]})
    points = sweep_points(config)
    assert [get_path(p.config, "environment.year.bad.juvenile_survival") for p in points] == [0.2, 0.6, 1.0]
    assert [p.config.year_types().types[1].juvenile_survival for p in points] == [0.2, 0.6, 1.0]
    for path, match in [("environment.year.awful.fecundity", "no year type is named 'awful'"),
                        ("environment.year.bad.juvenile", "did you mean 'juvenile_survival'"),
                        ("environment.year.bad", "environment.year.NAME.KEY")]:
        with pytest.raises(ConfigError, match=match):
            _config(TWO_YEARS, sweep={path: [1.0]})
    with pytest.raises(ConfigError, match=r"no \[environment\] table"):
        _config(None, sweep={"environment.year.bad.fecundity": [1.0]})


# --- streams ---------------------------------------------------------------------------------
@pytest.mark.parametrize("environment", [TWO_YEARS, MARKOV])
def test_a_replicates_years_are_its_own_keyed_stream(environment):
    # Season by season, in chunks, the years are YearTypes.draw's from the stream
    # SeedSequence(seed, spawn_key=(point, replicate, 1)).
    years = _config(environment).year_types()
    for point, rep in [(0, 0), (3, 17)]:
        own = np.random.default_rng(np.random.SeedSequence(9, spawn_key=(point, rep, 1)))
        assert np.array_equal(year_sequence(years, 9, point, rep, 150), years.draw(150, own))
    shared = np.random.default_rng(np.random.SeedSequence(9, spawn_key=(2, 0, 2)))
    assert np.array_equal(year_sequence(years, 9, 2, 5, 70, shared=True), years.draw(70, shared))


@pytest.mark.parametrize("engine", ["individual", "counts", "agents"])
def test_years_of_multiplier_one_change_no_draw(engine):
    # The year streams are separate from the demographic ones: an environment whose years
    # change nothing gives bit-identical replicates (and no environment stores no years).
    flat = {"year": [{"name": "a", "probability": 0.3}, {"name": "b", "probability": 0.7}]}
    exp = {"engine": engine, "max_steps": 40}
    with_years = run_replicates(sweep_points(_config(flat, experiment=exp))[0], range(4), 3)
    without = run_replicates(sweep_points(_config(None, experiment=exp))[0], range(4), 3)
    for a, b in zip(with_years, without):
        assert np.array_equal(a.trajectory, b.trajectory) and a.outcome == b.outcome
        assert a.years.size == a.steps and b.years is None


@pytest.mark.parametrize("engine", ["individual", "agents"])
def test_a_replicate_repeats_its_years_alone_and_batched(engine):
    point = sweep_points(_config(MARKOV, experiment={"engine": engine, "max_steps": 30}))[0]
    reps = [0, 1, 2, 5] if engine == "individual" else [0, 1]
    together = run_replicates(point, reps, 4)
    for r in together:
        alone = run_replicate(point, r.replicate, 4)
        assert np.array_equal(alone.years, r.years) and np.array_equal(alone.trajectory, r.trajectory)
        assert np.array_equal(r.years, year_sequence(point.config.year_types(), 4, 0, r.replicate, r.steps))


def test_shared_years_give_a_point_one_sequence():
    exp = {"max_steps": 25, "stop": "max-steps"}
    own = run_replicates(sweep_points(_config(TWO_YEARS, experiment=exp))[0], range(6), 8)
    assert len({r.years.tobytes() for r in own}) > 1
    shared = run_replicates(sweep_points(_config({**TWO_YEARS, "shared_years": True}, experiment=exp))[0],
                            range(6), 8)
    assert len({r.years.tobytes() for r in shared}) == 1


@pytest.mark.parametrize("engine", ["individual", "counts", "agents"])
def test_brood_model_alone_is_the_replicate_with_its_years(engine):
    from sim.model import BroodModel

    config = _config(TWO_YEARS, experiment={"engine": engine, "max_steps": 8, "stop": "max-steps"})
    model = BroodModel(config, rng=replicate_rng(4, 0, 2))
    seen, census = [], [model.census()]
    for _ in range(8):
        model.step()
        seen.append(int(model.years.current[0]))
        census.append(model.census())
    assert seen == year_sequence(config.year_types(), 4, 0, 2, 8).tolist()
    assert isinstance(model.years, SeasonYears)
    run = run_replicate(sweep_points(config)[0], 2, 4)
    assert np.array_equal(np.array(census), run.trajectory)


# --- the results file ---------------------------------------------------------------------------
def test_the_results_file_stores_every_seasons_year(tmp_path):
    from sim.experiment import run_experiment
    from sim.store import read_replicates, read_years

    config = _config(TWO_YEARS, experiment={"replicates": 5, "max_steps": 30},
                     sweep={"environment.year.bad.juvenile_survival": [0.2, 0.8]})
    out = tmp_path / "years.h5"
    run_experiment(config, out, workers=1, batch_size=2, progress=False)
    reps, years = read_replicates(out), read_years(out)
    assert len(years) == reps["steps"].sum()
    for point in (0, 1):
        expected = {r.replicate: r for r in run_replicates(sweep_points(config)[point], range(5), 7)}
        for rep, rows in years[years["point"] == point].groupby("replicate"):
            names = np.array(["good", "bad"])[expected[rep].years]
            assert rows["step"].tolist() == list(range(1, expected[rep].steps + 1))
            assert rows["year"].tolist() == names.tolist()
    assert read_years(out, points=[1], replicates=[3])["replicate"].unique().tolist() == [3]
    # runs of one year type, for shading figures: they tile the seasons 0..steps
    from analysis.varying_years import year_spans

    spans = year_spans(out, point=1, replicate=3)
    one = years[(years["point"] == 1) & (years["replicate"] == 3)]
    assert spans["start"].iloc[0] == 0 and spans["stop"].iloc[-1] == one["step"].max()
    assert (spans["start"].iloc[1:].to_numpy() == spans["stop"].iloc[:-1].to_numpy()).all()
    assert (spans["year"].iloc[1:].to_numpy() != spans["year"].iloc[:-1].to_numpy()).all()
    assert [y for s in spans.itertuples() for y in [s.year] * (s.stop - s.start)] == one["year"].tolist()


# --- the science ----------------------------------------------------------------------------------
def test_large_density_free_populations_grow_at_the_mean_log_rate():
    # One-class life cycles (maturity 1): each season multiplies the expected numbers by the
    # year's lambda_k (iteroparous B c_k + P, semelparous B c_k), so the long-run growth
    # rate is log lambda_s = sum_k p_k log lambda_k (Lewontin & Cohen 1969; Tuljapurkar 1990,
    # ch. 2). Two equally likely years, juvenile survival 0.8 and 0.1 (mean 0.45);
    # iteroparous B = 2, P = 0.5; semelparous B = 4.29, the stochastic threshold
    # exp(E log(B c + P) - E log c) = 4.29 (issue 13; both rates are then 0.193, while
    # the constant environment's log(B mean(c) + P) = 0.30 and log(4.29 x 0.45) = 0.66).
    # Each replicate's (log N_T - log N_0) / T averages T independent log lambda_k plus a
    # demographic error of order 1/sqrt(N) (N >= 1e3 here); over R replicates its standard
    # error is sd(log lambda_k) / sqrt(R T), estimated from the replicates themselves.
    # Tolerance 4.5 standard errors (false failure 7e-6 per check).
    raw = {"experiment": {"seed": 21, "max_steps": 10, "stop": "max-steps", "engine": "counts",
                          "max_population": 2**32 - 1, "trajectory": "by-allele"},
           "allele": [{"name": "it", "breeding": "iteroparous", "fecundity": 2.0, "adult_survival": 0.5,
                       "juvenile_survival": 0.45, "initial_count": 10_000},
                      {"name": "se", "breeding": "semelparous", "fecundity": 4.29, "juvenile_survival": 0.45,
                       "initial_count": 10_000}],
           "environment": {"year": [{"name": "good", "probability": 0.5, "juvenile_survival": 0.8 / 0.45},
                                    {"name": "bad", "probability": 0.5, "juvenile_survival": 0.1 / 0.45}]}}
    point = sweep_points(parse_config(raw))[0]
    results = run_replicates(point, range(1500), 21)
    assert all(r.outcome == "undecided" and r.steps == 10 for r in results)
    end = np.array([r.trajectory[-1].sum(axis=-1) for r in results], dtype=float)  # by allele
    growth = np.log(end / 10_000) / 10
    for k, lam in enumerate([np.array([2 * 0.8 + 0.5, 2 * 0.1 + 0.5]), np.array([4.29 * 0.8, 4.29 * 0.1])]):
        expected = np.mean(np.log(lam))  # sum_k p_k log lambda_k
        se = growth[:, k].std(ddof=1) / np.sqrt(len(growth))
        assert abs(growth[:, k].mean() - expected) < 4.5 * se, (k, growth[:, k].mean(), expected, se)
        assert abs(expected - 0.193) < 1e-3  # both at the threshold (issue 13's numbers)
        # and far from the constant environment's rate (the check has power)
        assert abs(growth[:, k].mean() - np.log(lam.mean())) > 20 * se
    # the stored years are the ones lived through: each good year adds log(2.1 / 0.7) to
    # the iteroparous log N_T (regression of T x growth on the number of good years; the
    # residual is demographic noise only; 4.5 standard errors of the slope)
    good = np.array([(r.years == 0).sum() for r in results])
    fit = stats.linregress(good, growth[:, 0] * 10)
    assert abs(fit.slope - np.log(2.1 / 0.7)) < 4.5 * fit.stderr, (fit.slope, fit.stderr)


def _invasion(fecundity, variable, *, capacity=25, replicates=300, seed=11):
    raw = {"experiment": {"seed": seed, "replicates": replicates, "max_steps": 5000, "engine": "counts"},
           "density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": capacity},
           "allele": [{"name": "it", "breeding": "iteroparous", "fecundity": 2.0, "adult_survival": 0.5,
                       "juvenile_survival": 0.45},
                      {"name": "se", "breeding": "semelparous", "fecundity": fecundity,
                       "juvenile_survival": 0.45}],
           "invasion": {"resident": "it", "mutant": "se", "mutant_count": 2}}
    if variable:
        raw["environment"] = copy.deepcopy(LEWONTIN_COHEN)
    return parse_config(raw)


LEWONTIN_COHEN = {"year": [{"name": "good", "probability": 0.5, "juvenile_survival": 0.8 / 0.45},
                           {"name": "bad", "probability": 0.5, "juvenile_survival": 0.1 / 0.45}]}


def _wilson(k, n, z=3.29):
    """Wilson score interval (Wilson 1927) at z = 3.29 (two-sided 0.1%)."""
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return centre - half, centre + half


@pytest.mark.parametrize("capacity, replicates", [
    (25, 300),
    pytest.param(100, 1500, marks=pytest.mark.slow),
])
def test_a_mutant_that_invades_in_constant_years_fails_in_varying_ones(capacity, replicates):
    # Resident iteroparous B = 2, P = 0.5, c = 0.45; Beverton-Holt on recruitment. Constant
    # environment: the resident's equilibrium has B c f = 1 - P, so a semelparous mutant's
    # invasion fitness is B_s (1 - P) / B = B_s / 4 (Charnov & Schaffer 1973): B_s = 4.7
    # invades (1.18). Juvenile survival 0.8 or 0.1 in equally likely years (mean 0.45):
    # the stochastic invasion fitness is below 1 up to B_s = 5.34 (analysis.stochastic,
    # stochastic_threshold, with the resident's mean-field path; the bet-hedging argument
    # of Schaffer 1974 and Orzack & Tuljapurkar 1989). Observed: the fraction of replicates
    # in which the mutant fixed, against the neutral expectation (2 mutants' share of
    # reproductive value), with Wilson intervals at the 0.1% level on each side.
    from analysis.invasion import neutral_expectation

    constant, variable = (_invasion(4.7, v, capacity=capacity, replicates=replicates) for v in (False, True))
    for config, invades in [(constant, True), (variable, False)]:
        results = run_replicates(sweep_points(config)[0], range(replicates), config.experiment.seed)
        fixed = sum(r.outcome == "mutant-fixed" for r in results)
        low, high = _wilson(fixed, replicates)
        neutral = neutral_expectation(config)
        assert (low > neutral) if invades else (high < neutral), (invades, fixed, replicates, neutral)


@pytest.mark.slow
def test_observed_fixation_crosses_neutral_on_either_side_of_the_stochastic_threshold():
    # Same case at K = 100: the stochastic threshold (analysis.stochastic.stochastic_threshold,
    # mean-field resident path) is B_s = 5.34. Well below it (4.5, invasion fitness 0.84) the
    # observed fixation is below the neutral expectation, well above it (6.5, fitness 1.2)
    # above; Wilson intervals at the 0.1% level on each side (Wilson 1927).
    from analysis.invasion import neutral_expectation

    for fecundity, invades in [(4.5, False), (6.5, True)]:
        config = _invasion(fecundity, True, capacity=100, replicates=800, seed=29)
        results = run_replicates(sweep_points(config)[0], range(800), 29)
        fixed = sum(r.outcome == "mutant-fixed" for r in results)
        low, high = _wilson(fixed, 800)
        neutral = neutral_expectation(config)
        assert (low > neutral) if invades else (high < neutral), (fecundity, fixed, neutral)


@pytest.mark.slow
def test_the_observed_threshold_is_where_the_resident_can_no_longer_return(tmp_path):
    # Issue 13's end-to-end case at K = 1600 (census ~1300): 2000 replicates at each of 8
    # values of the semelparous fecundity, counts engine. Theory (analysis.stochastic, the
    # same years for every trial value): the mutant invades above B_s = 5.34 (its Lyapunov
    # exponent in the resident's fluctuating path); the iteroparous allele invades a
    # semelparous resident below B_s = 5.48. Between them each invades the other: a protected
    # polymorphism (mutual invasibility, Geritz et al. 1998), in which a large population
    # does not fix the mutant, so observed fixation crosses the neutral expectation at the
    # replacement threshold 5.48, not at 5.34. Observed: compare_thresholds' 95%
    # profile-likelihood interval (its width is the sampling error of 2000 replicates per
    # point). Seen while building it: K = 100, 400, 1600, 6400 gave 5.84 (5.79-5.89),
    # 5.57 (5.51-5.62), 5.47 (5.41-5.51), 5.44 (5.36-5.49): the finite-N excess shrinks
    # with N, and the invasion threshold stays outside every interval.
    from analysis.comparison import compare_thresholds
    from sim.experiment import run_experiment

    raw = _invasion(5.0, True, capacity=1600, replicates=2000, seed=31).model_dump(mode="json", exclude_none=True)
    raw["sweep"] = {"allele.se.fecundity": [5.0, 5.25, 5.375, 5.5, 5.625, 5.75, 6.0, 6.5]}
    config = parse_config(raw)
    out = tmp_path / "e2e.h5"
    run_experiment(config, out, workers=1, progress=False)
    row = compare_thresholds(out).iloc[0]
    assert row["analytic"] == pytest.approx(5.34, abs=0.01) and row["replacement"] == pytest.approx(5.48, abs=0.01)
    assert row["replacement_in_interval"] and not row["analytic_in_interval"], row["observed_message"]
    assert row["observed_low"] > row["analytic"]  # the invasion threshold is not where fixation turns


def test_between_the_invasion_and_replacement_thresholds_compare_makes_no_fixation_claim():
    # Where each allele invades the other (B_s between 5.34 and 5.48 in issue 13's two-year
    # case; mutual invasibility, Geritz et al. 1998) the invasion fitness does not say on which
    # side of the neutral expectation fixation lies, so compare's default prediction is
    # "no prediction" there, and the side of the neutral expectation outside it.
    from analysis.comparison import _default_prediction
    from analysis.varying_years import stochastic_prediction

    verdicts = {}
    for fecundity in (5.2, 5.41, 5.7):
        row = stochastic_prediction(_invasion(fecundity, True, capacity=100, replicates=10))
        verdicts[fecundity] = (row["verdict"], row["resident_invades_back"],
                               _default_prediction(row).assess(0.0, 0.001)[0])
    assert verdicts[5.2] == ("does not invade", False, "agrees")
    assert verdicts[5.41] == ("invades", True, "no prediction")
    assert verdicts[5.7] == ("invades", False, "disagrees")


def test_just_past_the_replacement_threshold_a_disagreement_names_the_drift_of_the_return(tmp_path):
    # Issue 13's two-year case at K = 60 (the shipped configs/fenmarrow-hopper.toml): the
    # replacement threshold is B_s = 5.48 (the slow test above), so at 5.5 the resident's
    # invasion fitness against the mutant is just below 1, and at the mutant's census of some
    # 44 N |log w| is far below 1: the resident's return is effectively neutral (N |s| < 1,
    # Kimura 1983; common practice), and a small population there fixes the mutant less often
    # than a neutral allele (docs/environments.md, "End to end"). compare keeps its verdict
    # (the interval lies below the neutral expectation) and says that this is why. At 6.5 the
    # return is no longer within drift, and nothing is added.
    # 400 replicates, seed fixed: 2 of 400 fixed at 5.5 (0.005), against a neutral expectation
    # of 0.04, which the 95% Wilson interval reaches from 9 fixed on; were 0.005 the true
    # fraction, 9 or more of 400 would have binomial probability 2.2e-4 (scipy.stats.binom).
    from analysis.comparison import DRIFT_BAND, compare, drift_note
    from analysis.varying_years import stochastic_prediction
    from sim.experiment import run_experiment

    near, past = (stochastic_prediction(_invasion(b, True, capacity=60, replicates=10)) for b in (5.5, 6.5))
    assert 0.99 < near["resident_return_fitness"] < 1 and not near["resident_invades_back"]
    assert near["resident_return_census"] * abs(np.log(near["resident_return_fitness"])) < DRIFT_BAND
    assert past["resident_return_census"] * abs(np.log(past["resident_return_fitness"])) > DRIFT_BAND
    assert drift_note(near) and not drift_note(past)

    raw = _invasion(5.5, True, capacity=60, replicates=400, seed=1313).model_dump(mode="json", exclude_none=True)
    raw["sweep"] = {"allele.se.fecundity": [5.5, 6.5]}
    out = tmp_path / "edge.h5"
    run_experiment(parse_config(raw), out, workers=1, progress=False)
    table = compare(out).set_index("allele.se.fecundity")
    assert table.loc[5.5, "agreement"] == "disagrees"
    assert table.loc[5.5, "reason"].startswith("the interval lies below the neutral expectation; just "
                                              "past the replacement threshold: the resident's invasion")
    assert "within drift" not in table.loc[6.5, "reason"]


def test_a_bracket_from_a_fecundity_of_zero_finds_the_stochastic_threshold():
    # At a fecundity of 0 the mutant's log invasion fitness is -inf (it never breeds): the
    # search moves that end inward instead of reporting "the same sign at both ends". With
    # the same years for every trial value, the threshold is the one found from a bracket
    # that starts where the fitness is finite (5.34: the slow end-to-end test above).
    from analysis.varying_years import stochastic_threshold_result

    config = _invasion(4.7, True, capacity=60, replicates=10)
    from_zero = stochastic_threshold_result(config, "allele.se.fecundity", bracket=(0.0, 9.4))
    inside = stochastic_threshold_result(config, "allele.se.fecundity", bracket=(3.0, 9.4))
    assert from_zero.value == pytest.approx(inside.value, abs=1e-8)
    assert from_zero.value == pytest.approx(5.34, abs=0.02)
