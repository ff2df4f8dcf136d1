"""Thresholds in closed form: the formula printed beside the solver's value."""

import pytest

from analysis import threshold
from analysis.closedform import closed_form
from tests.invasion_configs import invasion_config

PATH = "allele.one-shot.fecundity"


@pytest.mark.parametrize(
    "kw, text, value",
    [
        # Mylius & Diekmann (1995): density dependence on recruitment or fecundity
        ({"acts_on": "recruitment"}, "B_s = B_i / (1 - P) = 2 / (1 - 0.5) = 4", 4.0),
        ({"acts_on": "fecundity"}, "B_s = B_i / (1 - P) = 2 / (1 - 0.5) = 4", 4.0),
        # Charnov & Schaffer (1973): on all survival, and without density dependence
        ({"acts_on": "all-survival"}, "B_s = B_i + P / c = 2 + 0.5 / 0.5 = 3", 3.0),
        ({"form": "none"}, "B_s = B_i + P / c = 2 + 0.5 / 0.5 = 3", 3.0),
    ],
)
def test_closed_form_matches_the_solver(kw, text, value):
    config = invasion_config(**kw)
    assert closed_form(config, PATH) == text
    assert threshold(config, PATH, bracket=(1.0, 8.0)).value == pytest.approx(value, rel=1e-8)


def test_no_closed_form_where_none_applies():
    assert closed_form(invasion_config(acts_on="adult-survival"), PATH) == ""
    assert closed_form(invasion_config(), "allele.perennial.fecundity") == ""
    assert closed_form(invasion_config(mutant_juvenile_survival=0.4), PATH) == ""


def test_no_constant_environment_formula_when_years_vary():
    # the formulas hold for a constant environment; with year types the threshold is the
    # stochastic one (5.34 for issue 13's case, not B_i / (1 - P) = 4), so none is printed
    from sim.config import parse_config

    raw = invasion_config(acts_on="recruitment").model_dump(exclude_none=True)
    raw["environment"] = {"year": [{"name": "wet", "probability": 0.5, "juvenile_survival": 1.6},
                                   {"name": "dry", "probability": 0.5, "juvenile_survival": 0.4}]}
    assert closed_form(parse_config(raw), PATH) == ""


@pytest.mark.parametrize("care", [{"orphan_survival": 0.1},
                                  {"brood_effect": "exponential", "brood_scale": 4.0}])
@pytest.mark.parametrize("who", [0, 1])
def test_no_textbook_formula_with_parental_care_or_a_brood_effect(care, who):
    # with care the threshold moves (docs/care.md: a resident B = 2, P = 0.5, c = 0.5,
    # c_orphan = 0.1 grows at 0.5 + 2 (0.25 + 0.05) = 1.1, so a semelparous mutant, all of
    # whose young are orphans, needs B = 1.1 / 0.1 = 11 without density dependence, not 3):
    # the textbook formula must not be printed beside the solver's value
    from sim.config import parse_config

    raw = invasion_config(form="none").model_dump(exclude_none=True)
    raw["allele"][who].update(care)
    config = parse_config(raw)
    assert closed_form(config, PATH) == ""
    if care == {"orphan_survival": 0.1} and who == 0:  # the resident cares: the worked example
        raw["allele"][1]["orphan_survival"] = 0.1
        assert threshold(parse_config(raw), PATH, bracket=(1.0, 20.0)).value == pytest.approx(11.0, rel=1e-8)


@pytest.mark.parametrize("kw, text, value", [
    # a ceiling on recruits: the rare mutant meets the resident's factor f, B_i c f = 1 - P
    # (Mylius & Diekmann 1995, as for any form acting on recruitment)
    ({"form": "ceiling", "acts_on": "recruitment"}, "B_s = B_i / (1 - P) = 2 / (1 - 0.5) = 4", 4.0),
    # on adult survival the mutant meets no density factor: B_s c = 1 (the resident needs
    # B_i c < 1 for an equilibrium: B_i = 1.5)
    ({"acts_on": "adult-survival", "fecundity": 1.5}, "B_s = 1 / c = 1 / 0.5 = 2", 2.0),
])
def test_the_ceiling_on_recruits_and_adult_survival_cases_match_the_solver(kw, text, value):
    config = invasion_config(**kw)
    assert closed_form(config, PATH) == text
    assert threshold(config, PATH, bracket=(1.0, 8.0)).value == pytest.approx(value, rel=1e-8)


def test_the_lab_shows_the_closed_form_the_command_line_prints():
    # one statement of the closed forms: the lab's theory panel reads analysis.closedform
    from analysis.lab.theory import page_theory

    config = invasion_config(acts_on="recruitment")
    assert page_theory(config).closed_form.text() == closed_form(config, PATH)
    from sim.config import parse_config

    raw = config.model_dump(exclude_none=True)
    raw["allele"][0]["orphan_survival"] = 0.1  # the resident cares: not the textbook case
    assert page_theory(parse_config(raw)).closed_form is None
