"""The finite-N curve for the fixation figure, the finite-N agreement rule, the command hooks."""

from __future__ import annotations

import json

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

from analysis.comparison import (  # noqa: E402
    FINITE_NOT_VALID,
    FINITE_PREDICTION,
    _default_prediction,
    _judged_against,
)
from analysis.finite_plots import draw_finite_curve  # noqa: E402
from analysis.fixation import finite_population_prediction  # noqa: E402
from analysis.thresholds import with_values  # noqa: E402
from sim.cli import main  # noqa: E402
from tests.invasion_configs import invasion_config  # noqa: E402

PATH = "allele.one-shot.fecundity"


def test_curve_is_the_prediction_and_marks_where_it_is_not_valid():
    config = invasion_config(form="ceiling", acts_on="all-survival", capacity=100)
    fig, ax = plt.subplots()
    curve = draw_finite_curve(ax, config, PATH, 2.8, 3.4, resolution=13)
    plt.close(fig)
    k = 4  # x = 3.0, the threshold
    assert curve.x[k] == pytest.approx(3.0)
    want = finite_population_prediction(with_values(config, {PATH: 3.0}))
    assert curve.fixation_probability[k] == pytest.approx(want.fixation_probability)
    # |s| = (B / 3 - 1) per season: weak up to 3.15, not beyond
    assert curve.valid[k] and not curve.valid[-1]
    assert np.all(np.diff(curve.fixation_probability) > 0)
    assert len(ax.lines) == 2  # solid (valid) and dotted (indicative)


def test_agreement_uses_the_finite_prediction_where_valid():
    row = {"verdict": "neutral", "neutral_expectation": 0.01, "fixation_probability": 0.0089,
           "fixation_probability_valid": True}
    # an interval below neutral that holds the variance-corrected value agrees (Gillespie 1974)
    finite = _default_prediction(row)
    assert finite.name == FINITE_PREDICTION
    assert finite.assess(0.0085, 0.0095)[0] == "agrees"
    assert finite.assess(0.0092, 0.0105)[0] == "disagrees"
    invalid = row | {"fixation_probability_valid": False}
    side = _default_prediction(invalid)
    assert side.name != FINITE_PREDICTION and side.assess(0.0085, 0.0095)[0] == "disagrees"
    assert side.name == FINITE_NOT_VALID  # the choice says the finite-N value was set aside


def test_recruitment_placement_is_not_valid_and_says_what_simulations_show():
    # Beverton-Holt on recruitment (DESIGN example, threshold B_s = 4, Mylius & Diekmann 1995):
    # the density factor's fluctuations act unequally on the schedules; the slow simulations
    # (docs/finite-population.md, section 5) found the curve flatter than the diffusion
    f = finite_population_prediction(invasion_config(mutant_fecundity=4.0, capacity=400, mutant_count=60))
    assert not f.valid
    assert "flatter than the diffusion" in f.fixation_probability_note
    assert "docs/finite-population.md" in f.fixation_probability_note
    table = pd.DataFrame({
        "point": [0, 1], "prediction": [FINITE_NOT_VALID, FINITE_NOT_VALID],
        "fixation_probability_note": [f.fixation_probability_note] * 2,
    })
    text = "\n".join(_judged_against(table, width=100))
    assert "points 0, 1" in text and "flatter than the diffusion" in text.replace("\n    ", " ")


def test_threshold_json_has_finite_keys_and_sensitivities(tmp_path, capsys):
    path = tmp_path / "c.toml"
    path.write_text(
        """
[density]
form = "ceiling"
acts_on = "all-survival"
capacity = 200
[[allele]]
name = "perennial"
breeding = "iteroparous"
fecundity = 2.0
adult_survival = 0.5
juvenile_survival = 0.5
[[allele]]
name = "one-shot"
breeding = "semelparous"
fecundity = 3.0
juvenile_survival = 0.5
[invasion]
resident = "perennial"
mutant = "one-shot"
"""
    )
    assert main(["threshold", str(path), "--json", "--sensitivities"]) == 0
    data = json.loads(capsys.readouterr().out)
    point = data["points"][0]
    # the ceiling threshold of the DESIGN example: N u = sigma_r^2 / sigma_m^2 = 0.889 (Gillespie 1974)
    assert point["fixation_probability"] * 201 == pytest.approx(0.889, abs=0.01)
    assert point["fixation_probability_valid"] is True
    rates = {r["rate"]: r for r in data["sensitivities"]}
    assert rates["m(1)"]["elasticity"] == pytest.approx(1.0)  # semelparous one class
    assert main(["threshold", str(path), "--sensitivities"]) == 0
    out = capsys.readouterr().out
    assert "finite_N" in out and "sensitivities of the mutant" in out
    assert main(["locate", str(path), "--parameter", "allele.nobody.fecundity", "-o",
                 str(tmp_path / "x.h5")]) == 2
