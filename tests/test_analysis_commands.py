"""The threshold, compare, plot and report commands (thin layers over the Python API)."""

import json
import re
from pathlib import Path

import pandas as pd
import pytest

from analysis.commands import finish_demo, jsonable
from analysis.fixation import COLUMNS as FINITE_COLUMNS
from sim.cli import main
from tests.invasion_configs import SMALL_SWEEP, write_small_results

POINT_KEYS = {
    "point",
    "density_index",
    "census_size",
    "resident_growth_rate",
    "mutant_growth_rate",
    "invasion_fitness",
    "verdict",
    "establishment_probability",
    "neutral_expectation",
    "problem",
    *FINITE_COLUMNS,  # issue 12
}
THRESHOLD_KEYS = {
    "parameter",
    "value",
    "converged",
    "bracket",
    "fitness_at_bracket",
    "invades_above",
    "crossings",
    "message",
    "at",
}
COMPARE_KEYS = {
    "point",
    "replicates",
    "mutant-fixed",  # one name per outcome: as in the results file and the run table
    "mutant-lost",
    "extinct",
    "undecided",
    "capped",
    "capped_rising",
    "counted",
    "established",
    "left_out",
    "missing",
    "fixed_fraction",
    "fixed_low",
    "fixed_high",
    "invasion_fitness",
    "verdict",
    "establishment_probability",
    "neutral_expectation",
    "agreement",
    "reason",
    "prediction",
}
COMPARE_THRESHOLD_KEYS = {
    "parameter",
    "at",
    "analytic",
    "analytic_message",
    "observed",
    "observed_low",
    "observed_high",
    "observed_message",
    "observed_add_points",
    "analytic_in_interval",
    "replacement",
    "replacement_in_interval",
}

CONFIG = """
[experiment]
name = "cli-test"
replicates = 5
[density]
form = "beverton-holt"
acts_on = "all-survival"
capacity = 50
[[allele]]
name = "perennial"
breeding = "iteroparous"
fecundity = 2.0
adult_survival = 0.5
juvenile_survival = 0.5
[[allele]]
name = "one-shot"
breeding = "semelparous"
fecundity = 4.0
juvenile_survival = 0.5
[invasion]
resident = "perennial"
mutant = "one-shot"
[sweep]
"allele.one-shot.fecundity" = [2.0, 3.5, 5.0]
"""


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    return write_small_results(tmp_path_factory.mktemp("cli") / "small.h5")


@pytest.fixture
def config(tmp_path):
    path = tmp_path / "exp.toml"
    path.write_text(CONFIG)
    return path


def test_threshold_text(config, capsys):
    assert main(["threshold", str(config)]) == 0
    out = capsys.readouterr().out
    assert "resident 'perennial', mutant 'one-shot'" in out
    # Charnov & Schaffer (1973) with density on all survival: B_i + P / c = 3
    assert (
        "allele.one-shot.fecundity = 3 (B_s = B_i + P / c = 2 + 0.5 / 0.5 = 3): "
        "the mutant invades above it" in out
    )
    # plain words: the abbreviations come with a legend below the table
    assert "D*: the resident's equilibrium density index" in out


def test_notes_that_differ_only_in_numbers_are_said_once():
    from analysis.fixation import note_lines

    notes = ["selection not weak: |s| = 0.4 > 0.05 per season", "no regulated census",
             "selection not weak: |s| = 0.25 > 0.05 per season"]
    assert note_lines([3, 5, 7], notes, width=200) == [
        "  points 3, 7 (numbers of point 3; every point's in --json): selection not weak: |s| = 0.4 > "
        "0.05 per season",
        "  point 5: no regulated census",
    ]
    long = note_lines([0], ["word " * 60], width=40)
    assert len(long) > 1 and all(len(line) <= 40 for line in long)
    assert long[1].startswith("    ")


def test_threshold_text_says_each_kind_of_finite_n_note_once(config, capsys):
    assert main(["threshold", str(config)]) == 0
    notes = capsys.readouterr().out.split("in brackets where not valid:\n")[1].split("\nthresholds:")[0]
    said = [line for line in notes.splitlines() if line.startswith("  point")]
    assert main(["threshold", str(config), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    kinds = {re.sub(r"\d[\d.e+-]*", "#", p["fixation_probability_note"]) for p in data["points"]}
    assert len(data["points"]) == 3 and 1 <= len(said) == len(kinds) < 3


def test_threshold_json(config, capsys):
    assert main(["threshold", str(config), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["resident"] == "perennial" and data["mutant"] == "one-shot"
    assert len(data["points"]) == 3
    assert POINT_KEYS | {"allele.one-shot.fecundity"} == set(data["points"][0])
    assert THRESHOLD_KEYS == set(data["thresholds"][0])
    assert data["thresholds"][0]["value"] == pytest.approx(3.0)


def test_threshold_of_a_chosen_parameter_with_bracket(config, capsys):
    assert (
        main(
            [
                "threshold",
                str(config),
                "--json",
                "--parameter",
                "allele.perennial.fecundity",
                "--bracket",
                "0.5",
                "10",
            ]
        )
        == 0
    )
    data = json.loads(capsys.readouterr().out)
    # one result per swept mutant fecundity B_s; B_i* = B_s - P / c = B_s - 1. For B_s = 2
    # that is B_i = 1, where the resident itself stops being viable (P + B_i c = 1): below it
    # there is no equilibrium, above it the mutant never invades, so no threshold.
    first, *rest = data["thresholds"]
    assert first["value"] is None and first["converged"] is False
    assert "invades nowhere" in first["message"]
    assert [t["value"] for t in rest] == pytest.approx([2.5, 4.0])
    assert all(t["invades_above"] is False for t in rest)


def test_compare_json_and_csv(results, tmp_path, capsys):
    csv = tmp_path / "table.csv"
    assert main(["compare", str(results), "--json", "--csv", str(csv)]) == 0
    data = json.loads(capsys.readouterr().out)
    assert COMPARE_KEYS <= set(data["points"][0])
    assert COMPARE_THRESHOLD_KEYS == set(data["thresholds"][0])
    table = pd.read_csv(csv)
    assert list(table["allele.one-shot.fecundity"]) == SMALL_SWEEP
    # an existing CSV is not replaced without --overwrite, and is left as it was
    before = csv.read_bytes()
    assert main(["compare", str(results), "--csv", str(csv)]) == 2
    assert "pass --overwrite" in capsys.readouterr().err
    assert csv.read_bytes() == before
    assert main(["compare", str(results), "--csv", str(csv), "--overwrite"]) == 0
    out = capsys.readouterr().out
    assert "agreement" in out and "observed fixation" in out


def test_plot_and_report(results, tmp_path, capsys):
    figs = tmp_path / "figs"
    assert main(["plot", str(results), "-o", str(figs)]) == 0
    assert sorted(p.name for p in figs.iterdir()) == sorted(
        f"{n}.{e}"
        for n in ("fixation", "trajectories", "outcomes", "invasion_fitness")
        for e in ("png", "svg")
    )
    assert main(["plot", str(results), "-o", str(figs)]) == 2
    assert "pass --overwrite" in capsys.readouterr().err
    page = tmp_path / "r.html"
    assert main(["report", str(results), "-o", str(page)]) == 0
    assert page.read_text().startswith("<!DOCTYPE html>")
    assert main(["report", str(results), "-o", str(page)]) == 2


@pytest.mark.parametrize(
    "argv, message",
    [
        (["compare", "missing.h5"], "not found"),
        (["plot", "missing.h5", "-o", "x"], "not found"),
        (["threshold", "missing.toml"], "not found"),
    ],
)
def test_user_errors_exit_2(argv, message, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


def test_not_a_results_file(config, capsys):
    assert main(["compare", str(config)]) == 2
    err = capsys.readouterr().err
    assert err.count("is not a broodline results file") == 1  # said once, not nested


def test_threshold_bad_parameter_and_no_invasion(config, tmp_path, capsys):
    assert main(["threshold", str(config), "--parameter", "allele.one-shot.fecundty"]) == 2
    assert "did you mean 'fecundity'" in capsys.readouterr().err
    plain = tmp_path / "plain.toml"
    plain.write_text(
        CONFIG.split("[invasion]")[0].replace(
            "juvenile_survival = 0.5\n[[allele]]",
            "juvenile_survival = 0.5\ninitial_count = 5\n[[allele]]",
        )
    )
    assert main(["threshold", str(plain)]) == 2
    err = capsys.readouterr().err
    assert "needs an [invasion] table" in err and "invasibility" not in err


def test_threshold_of_a_trait_config_points_to_invasibility(capsys):
    trait = Path(__file__).parents[1] / "configs" / "tallowcap-effort.toml"
    assert main(["threshold", str(trait)]) == 2
    err = capsys.readouterr().err
    assert "needs an [invasion] table" in err and f"`broodline invasibility {trait} -o DIR`" in err


def test_finish_demo_prints_table_and_report(results, tmp_path, capsys):
    page = finish_demo(results, tmp_path)
    out = capsys.readouterr().out
    assert "agreement" in out
    assert f"Report:  {page}" in out
    assert (tmp_path / "fixation.png").exists() and page.exists()


def test_jsonable():
    import numpy as np

    assert jsonable({"a": np.float64("nan"), "b": [np.int64(3), float("inf")], "c": "x"}) == {
        "a": None,
        "b": [3, None],
        "c": "x",
    }


def test_compare_plot_and_report_read_a_linked_sweep(tmp_path, capsys):
    # the sweep of tests/runs_support.SMALL has a [[sweep.linked]] group beside a plain key
    from sim.experiment import run_experiment
    from tests.runs_support import small_config

    out = tmp_path / "linked.h5"
    run_experiment(small_config(replicates=4), out, workers=1, progress=False)
    assert main(["compare", str(out), "--json"]) == 0
    thresholds = json.loads(capsys.readouterr().out)["thresholds"]
    assert [t["parameter"] for t in thresholds] == ["density.capacity"] * 2 + [
        "allele.one-shot.fecundity"] * 2
    assert main(["plot", str(out), "-o", str(tmp_path / "figs")]) == 0
    assert main(["report", str(out), "-o", str(tmp_path / "r.html")]) == 0
    assert "allele.one-shot.juvenile_survival" in (tmp_path / "r.html").read_text()
