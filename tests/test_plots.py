"""Figures of a results file: written as PNG and SVG, with labelled axes and legends."""

import xml.etree.ElementTree as ET

import matplotlib.pyplot as plt
import pytest

from analysis import compare, compare_thresholds
from analysis.comparison import experiment_config
from analysis.plots import FIGURES, fitness_figure, fixation_figure, plot
from tests.invasion_configs import write_small_results

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # the PNG file signature (PNG specification, sec. 5.2)


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    return write_small_results(tmp_path_factory.mktemp("plots") / "small.h5")


def test_plot_writes_png_and_svg(results, tmp_path):
    figs = plot(results, tmp_path / "figs")
    assert set(figs.files) == set(FIGURES)
    for name in FIGURES:
        png, svg = figs.files[name]["png"], figs.files[name]["svg"]
        assert png.read_bytes()[:8] == PNG_SIGNATURE
        assert png.stat().st_size > 10_000
        ET.parse(svg)  # well-formed XML
        assert svg.read_text().count("<svg") == 1


def test_fixation_figure_content(results):
    config = experiment_config(results)
    table = compare(results)
    thresholds = compare_thresholds(results, table)
    fig = fixation_figure(table, thresholds, config)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "allele.one-shot.fecundity"
    assert ax.get_ylabel() == "probability the mutant fixes"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("Wilson" in t for t in labels)
    assert any("establishment" in t for t in labels)
    assert any("neutral" in t for t in labels)
    assert any("analytic threshold 4" in t for t in labels)
    plt.close(fig)
    fig = fitness_figure(table, thresholds, config)
    ax = fig.axes[0]
    assert ax.get_ylabel() == "invasion fitness of the mutant"
    curve = ax.get_lines()[0].get_ydata()
    assert curve.min() == pytest.approx(2.5 / 4) and curve.max() == pytest.approx(6.0 / 4)
    plt.close(fig)
