"""Figures of a results file: written as PNG and SVG, with labelled axes and legends."""

import xml.etree.ElementTree as ET

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.contour import ContourSet

from analysis import compare, compare_thresholds
from analysis.comparison import experiment_config
from analysis.plots import (
    FIGURES,
    fitness_figure,
    fixation_figure,
    invasion_map_figure,
    parameter_words,
    plot,
    trajectory_figure,
)
from sim.config import parse_config
from sim.runner import run_experiment
from tests.invasion_configs import invasion_config, wet_and_dry, write_small_results

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # the PNG file signature (PNG specification, sec. 5.2)


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    return write_small_results(tmp_path_factory.mktemp("plots") / "small.h5")


@pytest.fixture(scope="module")
def plane(tmp_path_factory):
    # two swept parameters, the capacity as whole numbers (TOML integers): the case
    config = invasion_config(
        replicates=40,
        seed=9,
        record_every=3,
        sweep={"density.capacity": [20, 40], "allele.one-shot.fecundity": [2.5, 3.5, 4.5, 6.0]},
    )
    path = tmp_path_factory.mktemp("plane") / "plane.h5"
    run_experiment(config, path, progress=False)
    return path


@pytest.fixture(scope="module")
def plain(tmp_path_factory):
    # no [invasion]: two alleles started side by side
    raw = invasion_config(replicates=12, max_steps=60, capacity=30.0).model_dump(exclude_none=True)
    del raw["invasion"]
    raw["allele"][0]["initial_count"] = 20
    raw["allele"][1]["initial_count"] = 5
    raw["sweep"] = {"allele.one-shot.fecundity": [3.0, 5.0]}
    path = tmp_path_factory.mktemp("plain") / "plain.h5"
    run_experiment(parse_config(raw), path, progress=False)
    return path


def test_plot_writes_png_and_svg(plane, tmp_path):
    figs = plot(plane, tmp_path / "figs")
    assert set(figs.files) == set(FIGURES)
    for name in figs.files:
        png, svg = figs.files[name]["png"], figs.files[name]["svg"]
        assert png.read_bytes()[:8] == PNG_SIGNATURE
        assert png.stat().st_size > 10_000
        ET.parse(svg)  # well-formed XML
        assert svg.read_text().count("<svg") == 1


def test_axis_labels_are_words_with_the_path_in_small_type(results):
    assert parameter_words("allele.one-shot.fecundity") == "one-shot fecundity"
    assert parameter_words("density.capacity") == "capacity K"
    config = experiment_config(results)
    table = compare(results)
    fig = fixation_figure(table, compare_thresholds(results, table), config)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "one-shot fecundity"
    small = [t for t in ax.texts if t.get_text() == "allele.one-shot.fecundity"]
    assert small and small[0].get_fontsize() < ax.xaxis.label.get_fontsize()
    plt.close(fig)


def test_fixation_figure_content(results):
    config = experiment_config(results)
    table = compare(results)
    thresholds = compare_thresholds(results, table)
    fig = fixation_figure(table, thresholds, config)
    ax = fig.axes[0]
    assert ax.get_ylabel() == "probability the mutant fixes"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("Wilson" in t for t in labels)
    assert any("establishment" in t for t in labels)
    assert any("neutral" in t for t in labels)
    assert any("analytic threshold 4" in t for t in labels)
    # the observed threshold is given to the digits compare's text gives it
    observed = next(t for t in labels if t.startswith("observed threshold"))
    value = observed.removeprefix("observed threshold ").split(",")[0]
    assert f"= {value} (" in thresholds["observed_message"].iloc[0]
    narrow = thresholds.copy()  # an interval 0.07 wide supports three decimals (the demo's case)
    narrow.loc[narrow.index[0], ["observed", "observed_low", "observed_high"]] = [3.99412, 3.959, 4.029]
    drawn = fixation_figure(table, narrow, config)
    assert "observed threshold 3.994, 95% interval" in [t.get_text() for t in drawn.axes[0].get_legend().get_texts()]
    plt.close(drawn)
    # the neutral line (1/31) stands clear of the axis: the axis starts below 0
    assert ax.get_ylim()[0] < 0
    # the legend sits below the axes, not over the data
    fig.canvas.draw()
    legend = ax.get_legend().get_window_extent()
    assert legend.y1 <= ax.get_window_extent().y0
    plt.close(fig)
    fig = fitness_figure(table, thresholds, config)
    ax = fig.axes[0]
    assert ax.get_ylabel() == "invasion fitness of the mutant"
    curve = ax.get_lines()[0].get_ydata()
    assert curve.min() == pytest.approx(2.5 / 4) and curve.max() == pytest.approx(6.0 / 4)
    plt.close(fig)


def test_threshold_lines_drawn_when_another_key_holds_whole_numbers(plane):
    # "density.capacity" = [20, 40] (integers in TOML): one analytic threshold line per
    # capacity (B_s = 4 at both: K never moves the threshold, Mylius & Diekmann 1995).
    config = experiment_config(plane)
    table = compare(plane)
    fig = fixation_figure(table, compare_thresholds(plane, table), config)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert sum("analytic threshold 4" in t for t in labels) == 2, labels
    plt.close(fig)


def test_two_parameter_sweep_gets_an_invasion_map(plane):
    config = experiment_config(plane)
    fig = invasion_map_figure(compare(plane), config, resolution=12)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "one-shot fecundity"
    # the analytic boundary: invasion fitness 1 at B_s = 4 whatever K (Mylius & Diekmann
    # 1995: K scales the equilibrium, not the factor the mutant meets): a vertical line
    contours = [c for c in ax.collections if isinstance(c, ContourSet)]
    assert contours
    xs = np.concatenate([p.vertices[:, 0] for c in contours for p in c.get_paths() if len(p.vertices)])
    assert xs == pytest.approx(4.0, abs=0.05)
    plt.close(fig)


def test_trajectories_coloured_by_outcome_with_census_panel(results):
    config = experiment_config(results)
    table = compare(results)
    fig = trajectory_figure(results, table, config)
    assert len(fig.axes) == 2 * 4  # a share panel and a census panel per chosen point
    assert fig.axes[4].get_ylabel().startswith("census size")
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "mutant fixed" in legend and "mutant lost" in legend
    colours = {line.get_color() for ax in fig.axes[:4] for line in ax.get_lines()}
    assert len(colours) >= 2
    plt.close(fig)


def test_plot_and_report_without_invasion(plain, tmp_path):
    from analysis import report

    page = report(plain, tmp_path / "plain.html", figures_dir=tmp_path / "plain").read_text()
    assert {p.name for p in (tmp_path / "plain").iterdir()} == {
        "trajectories.png", "trajectories.svg", "outcomes.png", "outcomes.svg"
    }
    assert page.count("data:image/png;base64,") == 2
    assert "one-shot fixed" in page  # the outcome counts, by winner


def _year_patches(ax):
    return [p for p in ax.patches if (p.get_gid() or "").startswith("year:")]


@pytest.mark.parametrize("shared", [False, True])
def test_trajectories_shade_the_bad_years_of_the_shown_replicate(tmp_path, shared):
    from sim.store import read_years

    path = tmp_path / "years.h5"
    run_experiment(wet_and_dry(shared=shared, replicates=6, seed=5, capacity=30.0, record_every=1,
                               sweep={"allele.one-shot.fecundity": [3.0, 6.0]}), path, progress=False)
    config, table = experiment_config(path), compare(path)
    years = read_years(path)
    # one replicate drawn per point: exactly its dry seasons are shaded (panels in point order)
    fig = trajectory_figure(path, table, config, per_point=1)
    for point, ax in enumerate(fig.axes[:2]):
        patches = _year_patches(ax)
        assert patches and {p.get_gid() for p in patches} == {"year:dry"}  # the wet (best) years stay clear
        shaded = {int(round(p.get_bbox().x0)) + 1 + k for p in patches for k in range(int(round(p.get_bbox().width)))}
        last = int(ax.get_lines()[0].get_xdata()[-1])  # the drawn replicate's last season
        here = years[(years["point"] == point) & (years["step"] <= last)]
        dry = {r: set(rows.loc[rows["year"] == "dry", "step"]) for r, rows in here.groupby("replicate")
               if rows["step"].max() == last}
        assert shaded in dry.values(), (point, sorted(shaded), dry)
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "dry years" in legend and "wet years" not in legend
    title = fig.legends[0].get_title().get_text()
    assert ("shared by its replicates" in title) if shared else ("drawn replicate" in title)
    plt.close(fig)
    if not shared:  # several replicates with their own years: one is drawn bold, the legend says so
        fig = trajectory_figure(path, table, config, per_point=4)
        assert _year_patches(fig.axes[0])
        assert "bold replicate" in fig.legends[0].get_title().get_text()
        assert max(line.get_linewidth() for line in fig.axes[0].get_lines()) > 2
        plt.close(fig)


def test_census_panels_leave_room_above_the_highest_census(results):
    # a census held at a ceiling ran along the panel's top frame and read as an empty panel
    fig = trajectory_figure(results, compare(results), experiment_config(results))
    for ax in fig.axes[len(fig.axes) // 2:]:  # the census row
        highest = max((line.get_ydata().max() for line in ax.get_lines()), default=0)
        assert highest > 0 and ax.get_ylim()[1] >= 1.09 * highest
    plt.close(fig)


def test_trajectories_without_years_shade_nothing(results):
    fig = trajectory_figure(results, compare(results), experiment_config(results))
    assert not any(_year_patches(ax) for ax in fig.axes)
    assert "shaded" not in fig.legends[0].get_title().get_text()
    plt.close(fig)


def _line(ax, label):
    found = [line for line in ax.get_lines() if line.get_label() == label]
    assert len(found) == 1, [line.get_label() for line in ax.get_lines()]
    return found[0]


def test_establishment_is_drawn_as_theory_along_the_axis_zero_below_the_threshold(results):
    # A subcritical branching process dies out with probability 1 (Harris 1963, ch. 1, from memory;
    # common practice): below the threshold (B_s = 4 here, Mylius & Diekmann 1995) the curve must be 0,
    # where straight lines between sweep points (3.5 and 4.5) rose above it; above it, the
    # curve's values are analysis.predict's at the same fecundities.
    from analysis import predict
    from analysis.thresholds import with_values

    config = experiment_config(results)
    table = compare(results)
    fig = fixation_figure(table, compare_thresholds(results, table), config)
    line = _line(fig.axes[0], "establishment probability (branching process)")
    x, y = line.get_xdata(), line.get_ydata()
    assert len(x) > 100 and line.get_linestyle() == "-."
    assert np.all(y[x < 4.0 - 1e-9] == 0.0) and np.all(y[x > 4.0 + 1e-6] > 0)
    base = config.model_copy(update={"sweep": None})
    for i in (len(x) // 2, len(x) - 1):
        expected = predict(with_values(base, {"allele.one-shot.fecundity": float(x[i])})).establishment_probability
        assert y[i] == pytest.approx(expected, rel=1e-12)
    # the finite-N curve is named in the legend only for the parts drawn
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    for text in labels:
        if text.startswith("finite-N"):
            assert any(line.get_label() == text for line in fig.axes[0].get_lines())
    plt.close(fig)


def test_with_year_types_no_constant_environment_theory_is_drawn(tmp_path):
    # the stochastic theory is estimated at the sweep points only and no finite-N prediction
    # exists for random years (docs/environments.md): a curve of the constant-year theory,
    # crossing 1 elsewhere than the stochastic threshold, contradicted it
    path = tmp_path / "years.h5"
    run_experiment(wet_and_dry(replicates=8, seed=5, capacity=30.0, max_steps=400,
                               sweep={"allele.one-shot.fecundity": [3.0, 5.0, 7.0]}), path, progress=False)
    config, table = experiment_config(path), compare(path)
    thresholds = compare_thresholds(path, table)
    fig = fixation_figure(table, thresholds, config)
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert not any(t.startswith("finite-N") for t in labels)
    marks = _line(ax, "establishment probability (branching process)")
    assert marks.get_linestyle() == "None" and len(marks.get_xdata()) == 3  # the sweep points' estimates
    plt.close(fig)
    fig = fitness_figure(table, thresholds, config)
    ax = fig.axes[0]
    assert "stochastic theory" in ax.get_title()
    assert not any(line.get_label().startswith("invasion fitness (theory)") for line in ax.get_lines())
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any(t.startswith("sweep points, stochastic theory") for t in labels)
    plt.close(fig)
