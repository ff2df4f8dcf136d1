"""Observed fixation in a results file against the prediction."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from analysis import agreement, compare, compare_thresholds
from analysis.comparison import (
    COMPARE_COLUMNS,
    IncompleteResultsWarning,
    PredictedFixation,
    SideOfNeutral,
    judge,
    outcome_name,
)
from sim.config import ConfigError, parse_config
from sim.experiment import run_experiment
from sim.store import read_replicates
from tests.invasion_configs import SMALL_SWEEP, invasion_config, write_small_results


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    return write_small_results(tmp_path_factory.mktemp("cmp") / "small.h5")


@pytest.mark.parametrize(
    "verdict, low, high, expected",
    [
        ("invades", 0.2, 0.4, "agrees"),
        ("invades", 0.0, 0.3, "inconclusive"),
        ("invades", 0.0, 0.02, "disagrees"),
        ("does not invade", 0.0, 0.02, "agrees"),
        ("does not invade", 0.01, 0.2, "inconclusive"),
        ("does not invade", 0.1, 0.2, "disagrees"),
        ("neutral", 0.01, 0.1, "agrees"),
        ("neutral", 0.1, 0.2, "disagrees"),
        ("undefined", 0.1, 0.2, "no prediction"),
    ],
)
def test_agreement_rule(verdict, low, high, expected):
    # the rule of the README: the Wilson interval against the neutral expectation (0.05 here)
    assert agreement(verdict, low, high, 0.05) == expected


def test_compare_table(results):
    table = compare(results)
    assert list(table.columns[:2]) == ["point", "allele.one-shot.fecundity"]
    assert set(COMPARE_COLUMNS) <= set(table.columns)
    assert list(table["allele.one-shot.fecundity"]) == SMALL_SWEEP
    reps = read_replicates(results)
    for row in table.itertuples():
        here = reps[reps["point"] == row.point]
        assert row.replicates == len(here) == 60
    for (_, row) in table.iterrows():
        here = reps[reps["point"] == row["point"]]
        assert row["mutant-fixed"] == (here["outcome"] == "mutant-fixed").sum()
        assert row["fixed_low"] <= row["fixed_fraction"] <= row["fixed_high"]
    # theory columns equal the prediction: B_s / 4 under recruitment (Mylius & Diekmann 1995)
    assert table["invasion_fitness"].to_numpy() == pytest.approx(np.array(SMALL_SWEEP) / 4)
    assert list(table["verdict"]) == ["does not invade", "does not invade", "invades", "invades"]
    assert table["neutral_expectation"].to_numpy() == pytest.approx(1 / 31)
    assert table["agreement"].isin(["agrees", "inconclusive", "disagrees"]).all()


def test_compare_thresholds(results):
    table = compare(results)
    th = compare_thresholds(results, table)
    assert len(th) == 1
    row = th.iloc[0]
    assert row["parameter"] == "allele.one-shot.fecundity"
    assert row["analytic"] == pytest.approx(4.0)
    assert SMALL_SWEEP[0] <= row["observed"] <= SMALL_SWEEP[-1]
    assert "observed fixation" in row["observed_message"]
    assert isinstance(row["analytic_in_interval"], (bool, np.bool_))


def test_results_without_invasion_are_refused(tmp_path):
    raw = invasion_config(replicates=2, max_steps=5).model_dump(exclude_none=True)
    del raw["invasion"]
    raw["allele"][0]["initial_count"] = 5
    path = tmp_path / "plain.h5"
    run_experiment(parse_config(raw), path, progress=False)
    with pytest.raises(ConfigError, match="no \\[invasion\\] table"):
        compare(path)


def test_undecided_replicates_are_left_out_not_lost(tmp_path):
    # Stop after 1 season: most replicates are still undecided. They are neither losses nor
    # in the fraction, and they could change the verdict, so the point is inconclusive.
    config = invasion_config(
        mutant_fecundity=6.0, capacity=30.0, replicates=20, max_steps=1, mutant_count=3
    )
    path = tmp_path / "short.h5"
    run_experiment(config, path, progress=False)
    row = compare(path).iloc[0]
    assert row["undecided"] > 0
    assert row["mutant-fixed"] + row["mutant-lost"] + row["undecided"] == 20
    assert row["left_out"] == row["undecided"] and row["counted"] == 20 - row["undecided"]
    if row["counted"]:
        assert row["fixed_fraction"] == row["established"] / row["counted"]
    assert row["agreement"] == "inconclusive"
    assert "left out" in row["reason"] or "no replicate resolved" in row["reason"]


def _counts(fixed, lost, left_out, neutral=0.05, verdict="invades"):
    return judge(fixed, fixed + lost, SideOfNeutral(verdict, neutral), left_out=left_out)


def test_left_out_replicates_turn_a_point_inconclusive_only_when_they_could_change_it():
    # 30 of 100 fixed, neutral 0.05: agrees. 10 undecided more cannot move the interval
    # below 0.05 (30 of 110 has Wilson low 0.20); 400 could (30 of 500: high 0.084 ... still
    # above? no: counted as lost they give 30/500 = 0.06, low 0.042 < 0.05).
    assert _counts(30, 70, 10).agreement == "agrees"
    j = _counts(30, 70, 400)
    assert j.agreement == "inconclusive" and "400 replicates left out" in j.reason
    # the other way: 0 of 200 against an invading prediction disagrees; 200 left out could flip it
    assert _counts(0, 200, 0).agreement == "disagrees"
    assert _counts(0, 200, 200).agreement == "inconclusive"
    assert _counts(0, 0, 5).agreement == "inconclusive"


def test_the_prediction_is_a_parameter():
    # A point judged against a predicted probability (e.g. a finite-population one) names it.
    j = judge(30, 100, PredictedFixation(0.3, name="finite-N fixation probability"))
    assert (j.agreement, j.prediction) == ("agrees", "finite-N fixation probability")
    assert judge(30, 100, PredictedFixation(0.6)).agreement == "disagrees"


def test_old_outcome_spellings_are_read_as_one_name():
    assert outcome_name("mutant_fixed") == outcome_name("mutant-fixed") == "mutant-fixed"
    assert outcome_name("mutant_lost") == "mutant-lost"


# Density-free, as in Cole (1954) with Charnov & Schaffer's (1973) juvenile survival: resident
# iteroparous B_i = 2, P = 0.5, c = 0.5 (lambda 1.5) from 50 individuals; semelparous mutant
# B_s = 4 (lambda 2) or 2.5 (lambda 1.25). Every replicate in which the mutant survives
# passes the cap.
def _density_free(tmp_path, fecundity, replicates, seed):
    config = invasion_config(
        form="none", mutant_fecundity=fecundity, replicates=replicates, seed=seed, record_every=1
    )
    raw = config.model_dump(exclude_none=True)
    raw["experiment"]["max_population"] = 3000
    path = tmp_path / f"free-{fecundity}.h5"
    run_experiment(parse_config(raw), path, progress=False)
    return path


def test_capped_rising_replicates_establish_at_the_branching_rate(tmp_path):
    # A capped replicate whose mutant share was rising counts as established. The share of
    # established replicates must match the branching-process establishment probability of
    # one mutant (analysis/branching.py; for Poisson offspring of mean B_s c = 2 in one class,
    # q = exp(2 (q - 1)), 1 - q = 0.797: Harris 1963). 600 replicates: standard error 0.0164;
    # the check allows 4 SE (false-failure rate 6e-5) plus the chance that a lineage alive at
    # the cap (some 2000 mutants) still dies out (q^2000, nil).
    path = _density_free(tmp_path, 4.0, 600, seed=7)
    row = compare(path).iloc[0]
    assert row["capped"] > 300 and row["capped_rising"] > 0.9 * row["capped"]
    p = row["establishment_probability"]  # from analysis/branching.py
    q = brentq(lambda q: q - math.exp(2.0 * (q - 1.0)), 0.0, 0.9)  # one class, Poisson mean 2
    assert p == pytest.approx(1 - q, abs=1e-6)
    se = math.sqrt(p * (1 - p) / row["counted"])
    assert abs(row["fixed_fraction"] - p) <= 4 * se, row.to_dict()
    assert row["agreement"] == "agrees"


def test_capped_falling_replicates_are_never_losses(tmp_path):
    # lambda 1.25 < 1.5: the surviving mutant lineages pass the cap with a falling share. They
    # are left out, not counted as losses, and their number could change the verdict.
    path = _density_free(tmp_path, 2.5, 200, seed=8)
    row = compare(path).iloc[0]
    assert row["capped"] > 20 and row["capped_rising"] <= 0.1 * row["capped"]
    assert row["left_out"] == row["capped"] - row["capped_rising"]
    assert row["counted"] == row["mutant-lost"] + row["mutant-fixed"] + row["extinct"]
    assert row["agreement"] == "inconclusive"  # not "agrees" on losses that were not losses


def test_a_stopped_file_is_warned_about(tmp_path, monkeypatch, capsys):
    # Stop a run after its first batch (as Ctrl-C would): compare warns that the file is
    # incomplete, and a point without replicates is inconclusive with the reason, not
    # "no replicates" (a value the README does not list).
    import sim.experiment as runner

    update = runner._Progress.update

    def stop_after_first(self, batch, results):
        update(self, batch, results)
        runner.request_stop()

    monkeypatch.setattr(runner._Progress, "update", stop_after_first)
    config = invasion_config(replicates=10, capacity=20.0, sweep={"allele.one-shot.fecundity": [3.0, 5.0]})
    path = tmp_path / "stopped.h5"
    with pytest.raises(runner.ExperimentInterrupted):
        run_experiment(config, path, progress=False, batch_size=5)
    with pytest.warns(IncompleteResultsWarning, match="incomplete: 5 of 20 replicates saved"):
        table = compare(path)
    assert list(table["missing"]) == [5, 10]
    last = table.iloc[1]
    assert (last["agreement"], last["reason"]) == ("inconclusive", "no replicates saved")
    assert set(table["agreement"]) <= {"agrees", "disagrees", "inconclusive", "no prediction"}
    # at the command line: one plain warning line before the table
    from sim.cli import main

    capsys.readouterr()  # only what `compare` itself prints
    assert main(["compare", str(path)]) == 0
    err = capsys.readouterr().err
    assert err.startswith("broodline compare: warning: ") and "--resume" in err
    assert "Warning:" not in err  # no Python warning format


def test_compare_of_a_config_says_so_once(capsys):
    # `compare demo.toml` used to nest the same message twice
    from sim.cli import main

    assert main(["compare", "configs/demo.toml"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("is not a broodline results file") == 1 and "cannot be read" not in err


def test_run_and_status_tables_leave_capped_replicates_out(tmp_path):
    # The run's summary and `status` used to divide the fixed count by every replicate, so
    # capped ones read as losses (issue 10). Both now divide by the resolved replicates, as
    # compare does with the capped ones it cannot class as rising.
    from sim.status import experiment_status
    from sim.store import read_replicates

    path = _density_free(tmp_path, 2.5, 60, seed=8)
    reps = read_replicates(path)
    resolved = reps["outcome"].isin(["mutant-fixed", "mutant-lost", "extinct"])
    assert (reps["outcome"] == "capped").sum() > 0
    expected = (reps["outcome"] == "mutant-fixed").sum() / resolved.sum()
    status = experiment_status(path)
    assert status.table["fixed_fraction"].iloc[0] == pytest.approx(expected)
    from sim.outcomes import summarize

    summary = summarize(reps)
    assert summary["resolved"].iloc[0] == resolved.sum()
    assert summary["fixed_fraction"].iloc[0] == pytest.approx(expected)
