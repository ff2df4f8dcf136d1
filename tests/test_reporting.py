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
    assert "allele.one-shot.fecundity = 4" in words  # the analytic threshold
    assert re.search(
        r"Of 4 sweep points at K = 30, \d+ (agrees|agree), \d+ (is|are) inconclusive, \d+ (disagrees|disagree)",
        words,
    )
    assert "1 are" not in words and "breeds every season at age" not in words
    # published laws by their names as printed (Beverton & Holt 1957; the Poisson law)
    assert "has Beverton-Holt density dependence" in words and "offspring numbers are Poisson" in words
    assert " ".join(CAUTIONS.split()) in " ".join(words.split())
    assert "not advice for managing real populations" in words


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
