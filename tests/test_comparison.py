"""Observed fixation in a results file against the prediction."""

import math

import numpy as np
import pytest

from analysis import agreement, compare, compare_thresholds
from analysis.comparison import COMPARE_COLUMNS
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
        assert row.mutant_fixed == (here["outcome"] == "mutant-fixed").sum()
        assert row.fixed_low <= row.fixed_fraction <= row.fixed_high
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


def test_unresolved_replicates_count_as_not_fixed(tmp_path):
    # stop after 1 season: most replicates are still undecided
    config = invasion_config(
        mutant_fecundity=6.0, capacity=30.0, replicates=20, max_steps=1, mutant_count=3
    )
    path = tmp_path / "short.h5"
    run_experiment(config, path, progress=False)
    row = compare(path).iloc[0]
    assert row["unresolved"] > 0
    assert row["mutant_fixed"] + row["mutant_lost"] + row["unresolved"] == 20
    assert row["fixed_fraction"] == row["mutant_fixed"] / 20
    assert not math.isnan(row["fixed_high"])
