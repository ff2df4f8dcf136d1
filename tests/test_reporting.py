"""The HTML report: one self-contained page, checked structurally (no browser needed)."""

import base64
import re
from html.parser import HTMLParser

import pytest

from analysis import report
from analysis.reporting import CAUTIONS
from tests.invasion_configs import SMALL_SWEEP, write_small_results


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.sections, self.images, self.links, self.rows, self.text = [], [], [], 0, []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "section":
            self.sections.append(attrs.get("id"))
        if tag == "img":
            self.images.append(attrs["src"])
        if tag in ("link", "script") and (attrs.get("href") or attrs.get("src")):
            self.links.append(attrs.get("href") or attrs.get("src"))
        if tag == "tr":
            self.rows += 1

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    out = report(write_small_results(folder / "small.h5"), folder / "report.html")
    text = out.read_text(encoding="utf-8")
    parser = _Page()
    parser.feed(text)
    return text, parser


def test_report_sections(page):
    text, parsed = page
    assert text.startswith("<!DOCTYPE html>")
    assert parsed.sections == [
        "experiment",
        "prediction",
        "results",
        "figures",
        "verdict",
        "cautions",
    ]


def test_report_is_self_contained(page):
    _, parsed = page
    assert parsed.links == []  # no external stylesheet or script
    assert len(parsed.images) == 4  # fixation, trajectories, outcomes, invasion fitness
    for src in parsed.images:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"


def test_report_content(page):
    text, parsed = page
    words = " ".join(parsed.text)
    assert parsed.rows == 1 + len(SMALL_SWEEP)  # header + one row per sweep point
    assert "perennial" in words and "one-shot" in words
    assert "one-shot fecundity = 4" in " ".join(words.split())  # the analytic threshold, in words
    assert re.search(
        r"Of 4 sweep points at K = 30, \d+ (agrees|agree), \d+ (is|are) inconclusive, \d+ (disagrees|disagree)",
        words,
    )
    assert "1 are" not in words and "breeds every season at age" not in words
    # published laws by their names as printed (Beverton & Holt 1957; the Poisson law)
    assert "has Beverton-Holt density dependence" in words and "offspring numbers are Poisson" in words
    assert " ".join(CAUTIONS.split()) in " ".join(words.split())
    assert "not advice for managing real populations" in words
    # the caption says whose share is drawn here, not both cases
    assert "Share of the mutant in a sample of replicates" in words and "without an invasion table" not in words


def test_report_refuses_missing_folder(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        report(tmp_path / "none.h5", tmp_path / "no" / "r.html")


def test_report_words_for_a_swept_capacity():
    # the base K would mislead where K is swept: the report names the swept values, and the
    # verdict says it is for each K; one agreeing point reads "1 agrees", not "1 agree"
    import pandas as pd

    from analysis.reporting import _density_words, verdict_text
    from tests.invasion_configs import invasion_config

    config = invasion_config(capacity=150.0, sweep={"density.capacity": [50, 200]})
    assert "capacity K swept over 50, 200" in _density_words(config)
    table = pd.DataFrame({"agreement": ["agrees", "inconclusive"], "point": [0, 1]})
    text = verdict_text(table, pd.DataFrame(columns=["parameter"]), config)
    assert text.startswith("Of 2 sweep points (K swept: see the table for each K), 1 agrees, 1 is inconclusive")


def _visible(path) -> str:
    """The page's text as a reader sees it (no tags, attributes or style), spaces collapsed."""
    parser = _Page()
    parser.feed(path.read_text(encoding="utf-8"))
    text = " ".join(parser.text)
    style = re.search(r"<style>(.*?)</style>", path.read_text(encoding="utf-8"), re.S).group(1)
    return " ".join(text.replace(style, " ").split())


# -- config words as prose ------------------------------------------------------------------
def test_swept_paths_and_placements_are_words_on_the_page(page, tmp_path):
    text, _ = page
    parser = _Page()
    parser.feed(text)
    words = " ".join(parser.text)
    # the sweep, the thresholds and the verdict say the parameter as the figures label it; the
    # config path is kept only in a title attribute (shown on hover)
    assert "sweeps the one-shot fecundity over 2.5, 3.5, 4.5, 6" in " ".join(words.split())
    assert "allele.one-shot.fecundity" not in words
    assert 'title="allele.one-shot.fecundity"' in text
    from analysis.reporting import _density_words
    from tests.invasion_configs import invasion_config

    assert "acting on all survival (adults' and young's)" in _density_words(invasion_config(acts_on="all-survival"))
    assert "all-survival" not in _density_words(invasion_config(acts_on="all-survival"))


def test_a_care_allele_is_described_with_its_orphan_survival_and_brood_effect():
    from analysis.reporting import describe_allele
    from sim.config import load_config

    config = load_config("configs/duskmote-care.toml")
    tending, one_brood = (describe_allele(a) for a in config.allele)
    assert "young whose parent survives the season survive 0.5 (parental care), orphans 0.2" in tending
    assert "exp(-(b - 1) / 6)" in tending
    assert "its young are all orphaned and survive 0.3 (orphan survival)" in one_brood
    plain = load_config("configs/fenmarrow-hopper.toml").allele[0]
    assert "orphan" not in describe_allele(plain) and "brood" not in describe_allele(plain)


# -- the results table fits the page ----------------------------------------------------------
def test_results_table_has_no_reason_column_and_the_reasons_follow_it(page):
    text, _ = page
    results = re.search(r'<section id="results">(.*?)</section>', text, re.S).group(1)
    table, after = results.split("</table>", 1)
    headers = re.findall(r"<th>(.*?)</th>", table)
    assert "reason" not in headers and len(headers) <= 14
    # every point's reason is said once, below the table, grouped by agreement and reason
    assert "Why each point agrees or not" in after
    said = re.findall(r"<li>Points? ([\d, ]+):", after)
    points = sorted(int(p) for group in said for p in group.split(", "))
    assert points == list(range(len(SMALL_SWEEP)))
    assert "white-space: nowrap; }" not in text.split("td.text", 1)[1].split("}", 1)[0] + "}"


# -- years that vary ------------------------------------------------------------------------
@pytest.fixture(scope="module")
def years_page(tmp_path_factory):
    from sim.experiment import run_experiment
    from tests.invasion_configs import wet_and_dry

    folder = tmp_path_factory.mktemp("years")
    config = wet_and_dry(capacity=30.0, replicates=4, max_steps=200, record_every=5,
                         sweep={"allele.one-shot.fecundity": [3.0, 6.0]})
    run_experiment(config, folder / "years.h5", progress=False)
    return _visible(report(folder / "years.h5", folder / "years.html"))


def test_a_report_with_year_types_says_the_environment_and_the_stochastic_theory(years_page):
    words = years_page
    # the experiment: the year types, their probabilities, what each multiplies, how drawn
    assert "Years vary" in words
    assert "wet (probability 0.5): juvenile survival x1.5" in words
    assert "dry (probability 0.5): juvenile survival x0.3" in words
    assert "each season's year type drawn independently" in words
    assert "each replicate draws its own sequence" in words
    # the prediction and the cautions: the fluctuating environment, not an equilibrium one
    assert "long-run growth rate" in words and "resident's fluctuating environment" in words
    assert "replacement threshold" in words
    assert "Thresholds of the stochastic theory" in words
    assert "equilibrium environment" not in words
    assert "resident at its deterministic equilibrium" not in words
    assert "mean-field dynamics through the years" in words


# -- trait runs -----------------------------------------------------------------------------
@pytest.fixture(scope="module")
def trait_page(tmp_path_factory):
    from sim.config import parse_config
    from sim.experiment import run_experiment
    from tests.test_trait import trait_raw

    folder = tmp_path_factory.mktemp("trait")
    run_experiment(parse_config(trait_raw(steps=200, replicates=2)), folder / "trait.h5", progress=False)
    out = report(folder / "trait.h5", folder / "trait.html")
    parser = _Page()
    parser.feed(out.read_text(encoding="utf-8"))
    return _visible(out), parser


def test_a_trait_run_reports_its_effort_allele_prediction_verdicts_and_figure(trait_page):
    words, parsed = trait_page
    assert parsed.sections == ["experiment", "prediction", "results", "figures", "verdict", "cautions"]
    # the allele, the trade-off, the grid and mutation
    assert "None" not in words and "iteroparous" not in words
    assert "no theory to compare with" not in words
    assert "fecundity B(E) = 3 E^0.5" in words and "P(E) = 0.9 (1 - E)^1" in words
    assert "10 efforts from 0.1 to 1 in steps of 0.1" in words
    assert "mutates to a neighbouring grid value with probability 0.02" in words
    # the prediction: singular efforts and the attractor E* = (1 - p) / p = 0.111 (docs/effort.md)
    assert "evolutionarily stable attractor" in words and "0.1111" in words
    # results: compare_trait's table (one row per replicate) and the count of verdicts
    assert parsed.rows == 1 + 2
    assert re.search(r"Of 2 replicates: (\d+ (at attractor|away from attractor|extinct))", words)
    # figures: the trait figure alone (trajectories and outcomes mean nothing here)
    assert len(parsed.images) == 1
    assert "Mean effort of each replicate" in words and "How the replicates ended" not in words
    assert "adaptive dynamics" in words


def test_trait_verdict_counts_each_verdict():
    import pandas as pd

    from analysis.reporting import trait_verdict_text

    table = pd.DataFrame({"point": [0, 0, 1], "replicate": [0, 1, 0],
                          "verdict": ["at attractor", "away from attractor", "at attractor"],
                          "end_mean_effort": [0.3, 0.5, 0.2], "attractors": [[0.35], [0.35], [0.2]],
                          "attractor_se": [float("nan")] * 3, "grid_step": [0.1] * 3})
    text = trait_verdict_text(table)
    assert text.startswith("Of 3 replicates: 2 at attractor, 1 away from attractor")
    assert "point 0 replicate 1" in text
    # point 0's two replicates together (sd 0.1414 / sqrt 2 = 0.1); point 1 has one, so no line
    assert ("Taken together: point 0: the end effort of its 2 persisting replicates averages 0.4 (SE 0.1); "
            "predicted attractor 0.35; they differ by 0.05, 0.5 of a grid step (0.1).") in text
    assert "point 1:" not in text
