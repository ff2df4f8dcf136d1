"""Figures of a results file: fixation against the swept parameter, trajectories, outcomes,
invasion fitness, and the invasion map of a two-parameter sweep.

Drawn with matplotlib's Agg backend (no display needed); each figure is
written as PNG and SVG. Every results file gets ``trajectories`` and
``outcomes``; an invasion experiment adds ``fixation`` and
``invasion_fitness``, and ``invasion_map`` when two numeric parameters are
swept.
"""

from __future__ import annotations

import json
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

from sim.config import sweep_factors, swept_paths  # noqa: E402
from sim.meanfield import NoEquilibriumError, growth_rate  # noqa: E402
from sim.store import read_points, read_replicates, read_trajectories  # noqa: E402
from sim.years import scaled_schedule  # noqa: E402

from .comparison import (  # noqa: E402
    CAPPED,
    EXTINCT,
    FIXED,
    LOST,
    UNDECIDED,
    IncompleteResultsWarning,
    compare,
    compare_thresholds,
    experiment_config,
)
from .estimates import round_to_interval  # noqa: E402
from .finite_plots import draw_finite_curve  # noqa: E402
from .sweep import factor_of, numeric_sweep_paths, other_swept_paths  # noqa: E402
from .thresholds import establishment_along, fitness_along, with_values  # noqa: E402
from .varying_years import year_spans  # noqa: E402

__all__ = [
    "FIGURES",
    "Figures",
    "plot",
    "parameter_words",
    "fixation_figure",
    "trajectory_figure",
    "year_shades",
    "outcome_figure",
    "fitness_figure",
    "invasion_map_figure",
]

FIGURES = ("fixation", "trajectories", "outcomes", "invasion_fitness", "invasion_map")
_DPI = 110
_KEY_WORDS = {
    "fecundity": "fecundity",
    "adult_survival": "adult survival",
    "juvenile_survival": "juvenile survival",
    "maturity_age": "age at maturity",
    "initial_count": "starting count",
    "capacity": "capacity K",
    "mutant_count": "mutants introduced",
    "resident_count": "residents at the start",
    "dispersion": "offspring dispersion",
    "rate": "mutation rate",
    "max_steps": "seasons at most",
    "max_population": "population cap",
}
# one colour per outcome (colour-blind safe: Okabe & Ito 2008)
_OUTCOME_COLOURS = {
    FIXED: "#0072B2",
    "fixed": "#0072B2",
    LOST: "#E69F00",
    UNDECIDED: "#999999",
    CAPPED: "#CC79A7",
    EXTINCT: "#000000",
}
_OUTCOME_WORDS = {
    FIXED: "mutant fixed",
    LOST: "mutant lost",
    UNDECIDED: "undecided",
    CAPPED: "capped",
    EXTINCT: "extinct",
    "fixed": "one allele fixed",
}


@dataclass(frozen=True)
class Figures:
    """Paths of the figures written by ``plot``: name -> {"png": Path, "svg": Path}."""

    files: dict

    def png(self, name: str) -> Path:
        return self.files[name]["png"]


def parameter_words(path: str) -> str:
    """A sweep path in words: ``allele.one-shot.fecundity`` -> ``one-shot fecundity``."""
    parts = path.split(".")
    key = _KEY_WORDS.get(parts[-1], parts[-1].replace("_", " "))
    if parts[0] == "allele" and len(parts) == 3:
        return f"{parts[1]} {key}"
    if parts[0] == "environment" and len(parts) >= 4:
        return f"{key} multiplier in {parts[2]} years"
    return key


def _label_x(ax, path: str | None) -> None:
    """The axis label in words, the sweep path beneath in small grey type."""
    if path is None:
        ax.set_xlabel("sweep point")
        return
    ax.set_xlabel(parameter_words(path))
    ax.annotate(
        path,
        xy=(1.0, 0.0),
        xycoords="axes fraction",
        xytext=(0, -30),
        textcoords="offset points",
        ha="right",
        va="top",
        fontsize=7,
        color="0.45",
    )


def _axis(table: pd.DataFrame, config) -> tuple[str | None, np.ndarray]:
    """The swept parameter on the x axis (the numeric one with most values, the first of equals)."""
    paths = _by_values(config)
    if paths:
        return paths[0], table[paths[0]].to_numpy(dtype=float)
    return None, table["point"].to_numpy(dtype=float)


def _number(v: float) -> str:
    """Four significant digits at most, no trailing zeros: 4, 12.53."""
    return f"{float(f'{v:.4g}'):g}"


def _by_values(config) -> list[str]:
    """Numeric swept paths, the one with most distinct values first (stable among equals)."""
    paths = numeric_sweep_paths(config)
    return sorted(paths, key=lambda p: -len(set(factor_of(config, p).values[p])))


def _value_words(v) -> str:
    return f"{v:g}" if isinstance(v, (int, float, np.integer, np.floating)) else str(v)


def _groups(table: pd.DataFrame, config, xpath):
    """Rows grouped by the other swept parameters: (values as a dict, label, rows) per group."""
    others = [p for p in other_swept_paths(config, xpath) if p in table.columns]
    if not others:
        return [({}, "", table)]
    out = []
    for key, sub in table.groupby(others, sort=False):
        at = dict(zip(others, key if isinstance(key, tuple) else (key,)))
        out.append((at, ", ".join(f"{parameter_words(k)} {_value_words(v)}" for k, v in at.items()), sub))
    return out


def _same_value(a, b) -> bool:
    try:
        return math.isclose(float(a), float(b), rel_tol=1e-12, abs_tol=0.0)
    except (TypeError, ValueError):
        return str(a) == str(b)


def _same(at: dict, text: str) -> bool:
    """True when the JSON ``at`` of a thresholds row names the group ``at`` (50 equals 50.0)."""
    other = json.loads(text)
    return other.keys() == at.keys() and all(_same_value(other[k], at[k]) for k in at)


def _legend_below(fig, ax, *, ncol: int = 2) -> None:
    """The legend under the axes, where it cannot cover data."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(
            handles,
            labels,
            fontsize=7.5,
            loc="upper center",
            bbox_to_anchor=(0.5, -0.2),
            ncol=ncol,
            frameon=False,
        )


def _along_one_parameter(config, xpath, x) -> bool:
    """Whether theory can be drawn as a curve along the x axis: one parameter (a linked group
    moves several at once) in a constant environment (with year types the invasion fitness and
    the establishment are the stochastic theory's, estimated by simulation at the sweep points
    only, and no finite-N prediction exists; docs/environments.md)."""
    factor = factor_of(config, xpath) if xpath else None
    return (config.invasion is not None and config.environment is None and factor is not None
            and not factor.linked and len(x) >= 2)


def _finite_curve(ax, config, xpath, at, x, colour, suffix) -> float:
    """The finite-N fixation probability along the x axis (solid where valid), if it applies;
    returns its highest value drawn (nan: none)."""
    if not _along_one_parameter(config, xpath, x):
        return float("nan")
    try:
        curve = draw_finite_curve(ax, with_values(config, at) if at else config, xpath,
                                  float(np.nanmin(x)), float(np.nanmax(x)), color=colour,
                                  label=f"finite-N fixation probability (diffusion){suffix}")
    except (ValueError, ArithmeticError, NoEquilibriumError):
        return float("nan")  # no finite-N prediction here (e.g. no resident equilibrium): nothing to draw
    u = curve.fixation_probability
    return float(np.nanmax(u)) if np.isfinite(u).any() else float("nan")


def _establishment(ax, config, xpath, at, x, sub, colour, suffix) -> float:
    """The establishment probability: a curve on a fine grid where theory gives one along the
    axis (straight lines between sweep points put it above 0 below the threshold), else the
    sweep points' values as markers; returns its highest value drawn."""
    label = f"establishment probability (branching process){suffix}"
    if _along_one_parameter(config, xpath, x):
        grid = np.linspace(float(np.nanmin(x)), float(np.nanmax(x)), _CURVE_POINTS)
        values = establishment_along(with_values(config, at) if at else config, xpath, grid)
        ax.plot(grid, values, "-.", color=colour, alpha=0.85, lw=1.4, label=label)
    else:
        values = sub["establishment_probability"].to_numpy(float)
        ax.plot(x, values, "x", color=colour, ms=7, label=label)
    return float(np.nanmax(values)) if np.isfinite(values).any() else float("nan")


_CURVE_POINTS = 120  # values of the swept parameter where a theory curve is computed


def _replacement_line(ax, row, colour, suffix) -> None:
    """With year types and density dependence: where the resident stops invading back (between
    it and the invasion threshold the two coexist), if ``compare`` found one."""
    value = row.get("replacement", float("nan"))
    if value is not None and np.isfinite(value):
        ax.axvline(value, color=colour, ls="-.", lw=1,
                   label=f"replacement threshold {_number(value)} (the resident invades back below it){suffix}")


def fixation_figure(table: pd.DataFrame, thresholds: pd.DataFrame, config):
    """Fixation share with Wilson intervals, establishment curve, neutral line, thresholds."""
    xpath, _ = _axis(table, config)
    fig, ax = plt.subplots(figsize=(8, 6))
    colours = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00"]
    groups = _groups(table, config, xpath)
    spans, highest = [], []
    for g, (at, label, sub) in enumerate(groups):
        colour = colours[g % len(colours)]
        sub = sub.sort_values(xpath or "point")
        x = sub[xpath].to_numpy(float) if xpath else sub["point"].to_numpy(float)
        suffix = f" ({label})" if label else ""
        y = sub["fixed_fraction"].to_numpy(float)
        err = np.vstack([y - sub["fixed_low"].to_numpy(float), sub["fixed_high"].to_numpy(float) - y])
        ax.errorbar(x, y, yerr=err, fmt="o", color=colour, capsize=3, zorder=3,
                    label=f"observed fixation, 95% Wilson interval{suffix}")
        highest.append(_establishment(ax, config, xpath, at, x, sub, colour, suffix))
        ax.plot(x, sub["neutral_expectation"], ":", color=colour, lw=2.0,
                label=f"neutral expectation{suffix}")
        highest.append(_finite_curve(ax, config, xpath, at, x, colour, suffix))
        for _, row in thresholds.iterrows():
            if row["parameter"] != xpath or not _same(at, row["at"]):
                continue
            if np.isfinite(row["analytic"]):
                ax.axvline(row["analytic"], color=colour if label else "black", ls="--", lw=1,
                           label=f"analytic threshold {_number(row['analytic'])}{suffix}")
            _replacement_line(ax, row, colour if label else "black", suffix)
            if np.isfinite(row["observed"]) or np.isfinite(row["observed_low"]) or np.isfinite(
                row["observed_high"]
            ):
                spans.append((row, colour if label else "grey", suffix))
    ymax = float(np.nanmax(np.r_[table["fixed_high"].to_numpy(float),
                                 table["establishment_probability"].to_numpy(float), highest, 0.05]))
    ymax = min(ymax, 1.0)
    # room below 0 so that a neutral line near 0 stands clear of the axis
    ax.set_ylim(-0.04 * ymax, ymax * 1.08)
    for row, colour, suffix in spans:  # after the data, so open bounds reach the axis ends
        lo = row["observed_low"] if np.isfinite(row["observed_low"]) else ax.get_xlim()[0]
        hi = row["observed_high"] if np.isfinite(row["observed_high"]) else ax.get_xlim()[1]
        # to the digits its interval supports, as compare's text gives it
        what = (f"observed threshold {round_to_interval(row['observed'], hi - lo)}"
                if np.isfinite(row["observed"]) else "observed threshold")
        ax.axvspan(lo, hi, color=colour, alpha=0.15, label=f"{what}, 95% interval{suffix}")
    neutral = table["neutral_expectation"].to_numpy(float)
    if np.isfinite(neutral).any() and len(groups) == 1:
        ax.annotate(f"neutral {np.nanmean(neutral):.3g}", xy=(1.0, np.nanmean(neutral)),
                    xycoords=("axes fraction", "data"), xytext=(-4, 3), textcoords="offset points",
                    ha="right", va="bottom", fontsize=7.5, color="0.25")
    _label_x(ax, xpath)
    ax.set_ylabel("probability the mutant fixes")
    ax.set_title("Mutant fixation against the prediction")
    ax.grid(alpha=0.3)
    _legend_below(fig, ax)
    fig.tight_layout()
    return fig


_WINNER_COLOURS = ["#0072B2", "#D55E00", "#009E73", "#56B4E9", "#F0E442", "#E69F00"]


def _outcome_labels(reps: pd.DataFrame) -> pd.Series:
    """Each replicate's outcome as drawn: a plain ``fixed`` one by its winner ("one-shot fixed")."""
    outcome = reps["outcome"]
    winner = reps["winner"].astype(str)
    return outcome.where((outcome != "fixed") | (winner == ""), winner + " fixed")


def _colours(labels, config) -> dict:
    names = [a.name for a in config.allele]
    out = {}
    for o in labels:
        if o in _OUTCOME_COLOURS:
            out[o] = _OUTCOME_COLOURS[o]
        elif o.endswith(" fixed") and o[:-6] in names:
            out[o] = _WINNER_COLOURS[names.index(o[:-6]) % len(_WINNER_COLOURS)]
        else:
            out[o] = "#009E73"
    return out


def _outcome_order(labels) -> list:
    known = [FIXED, "fixed", LOST, EXTINCT, UNDECIDED, CAPPED]
    return sorted(set(labels) - set(known)) + [o for o in known if o in labels]


def _sample(reps: pd.DataFrame, point: int, k: int, rng) -> list[int]:
    """Up to k replicates of a point, shared among its outcomes as evenly as they allow."""
    here = reps[reps["point"] == point]
    by = {o: here.loc[here["outcome"] == o, "replicate"].to_numpy() for o in here["outcome"].unique()}
    chosen, left = [], k
    for o in sorted(by, key=lambda o: len(by[o])):
        take = min(len(by[o]), max(1, left // max(1, len(by) - len(chosen))))
        chosen.append(rng.choice(by[o], min(take, left), replace=False))
        left -= len(chosen[-1])
    return sorted(int(c) for part in chosen for c in part)


def _tracked(config, alleles) -> str:
    """The allele whose share is drawn: the mutant, or the first allele without [invasion]."""
    return config.invasion.mutant if config.invasion is not None else alleles[0]


def year_shades(config) -> dict:
    """Year type -> grey level (0 light .. 1 dark) of its shading; the best year type is not shaded.

    Year types are ranked by the resident's density-free growth rate in such a
    year (the first allele's without ``[invasion]``): the best is left clear,
    the others shaded, the worse the darker. Empty without ``[environment]``.
    """
    years = config.year_types()
    if years is None:
        return {}
    names = [a.name for a in config.allele]
    schedule = config.schedules()[names.index(config.invasion.resident if config.invasion else names[0])]
    rates = [growth_rate(scaled_schedule(schedule, y), offspring=config.offspring_distribution()) for y in years.types]
    ranked = [years.names[i] for i in np.argsort(rates, kind="stable")[::-1]]  # best first
    return {name: rank / (len(ranked) - 1) for rank, name in enumerate(ranked) if rank > 0}


def _years_shown(config, reps: pd.DataFrame, point: int, sample: list[int]):
    """Whose years a panel shades: (replicate or None, words for the legend).

    Shared years: the point's one sequence (read from its longest replicate).
    Own years and one replicate drawn: its years. Own years and several drawn:
    the years of the longest-running one, drawn bold (the years of the others
    differ and are not shown).
    """
    if config.year_types() is None or not sample:
        return None, ""
    here = reps[reps["point"] == point]
    if config.environment.shared_years:
        return int(here.loc[here["steps"].idxmax(), "replicate"]), "the point's years (shared by its replicates)"
    if len(sample) == 1:
        return sample[0], "the drawn replicate's years"
    shown = here[here["replicate"].isin(sample)]
    return (int(shown.loc[shown["steps"].idxmax(), "replicate"]),
            "the years of the bold replicate (each replicate draws its own; the others' differ)")


def _shade_years(axes, spans: pd.DataFrame, shades: dict, last_step: float) -> None:
    """Shade each run of non-best years behind the lines, up to ``last_step``."""
    for span in spans.itertuples():
        if span.year not in shades or span.start >= last_step:
            continue
        for ax in axes:
            ax.axvspan(span.start, min(span.stop, last_step), color=_shade_colour(shades[span.year]),
                       lw=0, zorder=0, gid=f"year:{span.year}")


def _shade_colour(level: float) -> tuple:
    """A light grey, darker for worse years (level 0..1)."""
    g = 0.9 - 0.1 * level
    return (g, g, g, 1.0)


def _no_trajectories_figure():
    """What ``trajectory_figure`` draws for a file that keeps no trajectories."""
    fig, ax = plt.subplots(figsize=(8, 2.4))
    ax.axis("off")
    ax.text(0.5, 0.5, 'No trajectories: this experiment kept none (trajectory = "none").\n'
            'Run it with trajectory = "by-allele" or "by-age" to draw them.',
            ha="center", va="center", fontsize=10, transform=ax.transAxes)
    return fig


def trajectory_figure(path, table: pd.DataFrame, config, *, per_point: int = 8, panels: int = 4,
                      seed: int = 0):
    """Share of the tracked allele (top) and census size (bottom), replicates coloured by outcome.

    With stored years (``[environment]``), the seasons of every year type but
    the best are shaded behind the lines (``year_shades``): the point's years
    when they are shared, else the years of one drawn replicate, drawn bold
    (each replicate lives through its own years; the legend says whose).
    """
    if config.experiment.trajectory == "none":
        return _no_trajectories_figure()
    xpath, _ = _axis(table, config)
    reps = read_replicates(path)
    reps["outcome"] = _outcome_labels(reps)
    colours = _colours(reps["outcome"].unique(), config)
    ordered = table.sort_values(xpath, kind="stable") if xpath else table
    points = ordered["point"].to_numpy()  # panels left to right along the x parameter
    chosen = points[np.unique(np.linspace(0, points.size - 1, min(panels, points.size)).round().astype(int))]
    alleles = [a.name for a in config.allele]
    tracked = _tracked(config, alleles)
    rng = np.random.default_rng(seed)
    fig, axes = plt.subplots(2, len(chosen), figsize=(3.3 * len(chosen) + 1.2, 6.2), squeeze=False,
                             sharex="col", gridspec_kw={"height_ratios": [1.3, 1.0]})
    seen = set()
    shades, whose = year_shades(config), set()
    for col, point in enumerate(chosen):
        top, bottom = axes[0, col], axes[1, col]
        sample = _sample(reps, int(point), per_point, rng)
        traj = read_trajectories(path, points=[int(point)], replicates=sample, by_age=False)
        outcome = reps[reps["point"] == point].set_index("replicate")["outcome"]
        shown, words = _years_shown(config, reps, int(point), sample)
        bold = shown if shown is not None and "bold" in words else None
        if shown is not None and len(traj):
            _shade_years((top, bottom), year_spans(path, point=int(point), replicate=shown), shades,
                         float(traj["step"].max()))
            whose.add(words)
        for rep, one in traj.groupby("replicate"):
            wide = one.pivot_table(index="step", columns="allele", values="count", aggfunc="sum")
            total = wide.sum(axis=1)
            share = (wide.get(tracked, 0) / total.where(total > 0)).fillna(0)
            o = outcome.get(rep, "")
            colour = colours.get(o, "#009E73")
            seen.add(o)
            width, z = (2.4, 3) if rep == bold else (1.0, 2)
            top.plot(wide.index, share, lw=width + 0.1, alpha=0.85, color=colour, zorder=z)
            bottom.plot(wide.index, total, lw=width, alpha=0.8, color=colour, zorder=z)
        row = table[table["point"] == point].iloc[0]
        where = f"{parameter_words(xpath)} {row[xpath]:g}" if xpath else f"point {point}"
        others = [p for p in other_swept_paths(config, xpath) if p in table.columns]
        if others:
            where += ", " + ", ".join(f"{parameter_words(p)} {_value_words(row[p])}" for p in others)
        counts = reps[reps["point"] == point]["outcome"].value_counts()
        summary = ", ".join(f"{counts[o]} {_OUTCOME_WORDS.get(o, o)}" for o in _outcome_order(counts.index))
        top.set_title(f"{where}\n{summary}", fontsize=8)
        top.set_ylim(-0.02, 1.02)
        top.grid(alpha=0.3)
        bottom.grid(alpha=0.3)
        bottom.set_xlabel("season", fontsize=8)
        bottom.xaxis.set_major_locator(MaxNLocator(integer=True))
        if len(traj):  # room above the highest census: a census held at a ceiling ran along the frame
            bottom.set_ylim(0, 1.1 * float(traj.groupby(["replicate", "step"])["count"].sum().max()) or 1.0)
        else:
            bottom.set_ylim(bottom=0)
        if len(traj) and traj.groupby(["replicate", "step"])["count"].sum().max() > 50 * max(
            1.0, float(traj[traj["step"] == 0].groupby("replicate")["count"].sum().max())
        ):
            bottom.set_yscale("log")  # a population growing without bound: census on a log axis
            bottom.set_ylim(bottom=1)
        for ax in (top, bottom):
            ax.tick_params(labelsize=7)
    axes[0, 0].set_ylabel(f"share of {tracked}", fontsize=8)
    axes[1, 0].set_ylabel("census size (age 1 and older)", fontsize=8)
    handles = [plt.Line2D([], [], color=colours.get(o, "#009E73"), lw=1.5) for o in _outcome_order(seen)]
    labels = [_OUTCOME_WORDS.get(o, o) for o in _outcome_order(seen)]
    title = "replicates coloured by outcome"
    if whose:
        handles += [Patch(color=_shade_colour(level)) for level in shades.values()]
        labels += [f"{name} years" for name in shades]
        title += "; shaded: " + " / ".join(sorted(whose))
    fig.legend(handles, labels, fontsize=8, loc="lower center", ncol=max(1, len(handles)), frameon=False,
               title=title, title_fontsize=8)
    fig.suptitle(f"Sampled replicates (at most {per_point} per point, every outcome shown)",
                 fontsize=10, x=0.02, ha="left")
    fig.tight_layout(rect=(0, 0.07, 1, 0.97))
    return fig


def outcome_figure(path, config):
    """Outcome counts per sweep point (stacked bars), for any results file."""
    reps = read_replicates(path)
    reps["outcome"] = _outcome_labels(reps)
    colours = _colours(reps["outcome"].unique(), config)
    points = read_points(path)
    counts = pd.crosstab(reps["point"], reps["outcome"]).reindex(points["point"], fill_value=0)
    xpath, _ = _axis(points, config) if swept_paths(config) else (None, None)
    fig, ax = plt.subplots(figsize=(8, 4.8))
    labels = ([f"{row[xpath]:g}" for _, row in points.iterrows()] if xpath
              else [str(p) for p in points["point"]])
    if len(swept_paths(config)) > 1:
        others = other_swept_paths(config, xpath)
        labels = [
            label + "\n" + ", ".join(_value_words(row[o]) for o in others)
            for label, (_, row) in zip(labels, points.iterrows())
        ]
        ax.set_title("second line: " + ", ".join(parameter_words(o) for o in others), fontsize=8,
                     loc="right", color="0.35")
    bottom = np.zeros(len(points))
    for o in _outcome_order(list(counts.columns)):
        v = counts[o].to_numpy()
        ax.bar(np.arange(len(points)), v, bottom=bottom, color=colours[o],
               label=_OUTCOME_WORDS.get(o, o), width=0.7)
        bottom += v
    ax.set_xticks(np.arange(len(points)), labels, fontsize=7.5)
    _label_x(ax, xpath)
    ax.set_ylabel("replicates")
    ax.set_title("How the replicates ended, per sweep point", loc="left")
    ax.grid(alpha=0.3, axis="y")
    _legend_below(fig, ax, ncol=5)
    fig.tight_layout()
    return fig


def fitness_figure(table: pd.DataFrame, thresholds: pd.DataFrame, config, *, resolution: int = 120):
    """Invasion fitness along the swept parameter: theory curve, sweep points, the line at 1."""
    xpath, x = _axis(table, config)
    fig, ax = plt.subplots(figsize=(8, 5))
    colours = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00"]
    groups = _groups(table, config, xpath)
    varying = config.environment is not None
    for g, (at, label, sub) in enumerate(groups[:6] if xpath is not None else []):
        suffix = f" ({label})" if label else ""
        colour = colours[g % len(colours)]
        xs = sub[xpath].to_numpy(float)
        if varying:  # the stochastic theory's estimates at the sweep points, with their SE
            se = sub["invasion_fitness_se"].to_numpy(float) if "invasion_fitness_se" in sub else None
            ax.errorbar(xs, sub["invasion_fitness"], yerr=se, fmt="o", color=colour, capsize=3,
                        label=f"sweep points, stochastic theory (+- 1 SE){suffix}")
            continue
        grid = np.linspace(x.min(), x.max(), resolution if len(groups) == 1 else resolution // 2)
        base = with_values(config, at) if at else config
        ax.plot(grid, fitness_along(base, xpath, grid), "-", color=colour,
                label=f"invasion fitness (theory){suffix}")
        ax.plot(xs, sub["invasion_fitness"], "o", color=colour, label=f"sweep points{suffix}")
    if xpath is None:
        ax.plot(x, table["invasion_fitness"], "o", color="#0072B2", label="sweep points")
    ax.axhline(1.0, color="black", lw=1, label="invasion fitness 1 (neutral)")
    drawn = set()
    for _, row in thresholds.iterrows():
        if row["parameter"] == xpath and np.isfinite(row["analytic"]):
            value = float(f"{row['analytic']:.4g}")
            if value in drawn:
                continue
            drawn.add(value)
            ax.axvline(row["analytic"], color="black", ls="--", lw=1, label=f"analytic threshold {value:g}")
            _replacement_line(ax, row, "black", "")
    _label_x(ax, xpath)
    ax.set_ylabel("invasion fitness of the mutant")
    ax.set_title("Mutant's long-run growth in the resident's fluctuating environment (stochastic theory)"
                 if varying else "Mutant's growth rate in the resident's equilibrium environment")
    ax.grid(alpha=0.3)
    _legend_below(fig, ax)
    fig.tight_layout()
    return fig


def invasion_map_figure(table: pd.DataFrame, config, *, resolution: int = 24):
    """Observed fixation on the plane of two swept parameters, the analytic boundary drawn over it.

    The boundary is where invasion fitness is 1, computed on a ``resolution``
    x ``resolution`` grid spanning the swept ranges (other swept values at
    their first value).
    """
    xpath, ypath = _by_values(config)[:2]
    fig, ax = plt.subplots(figsize=(7.5, 6))
    xs, ys = table[xpath].to_numpy(float), table[ypath].to_numpy(float)
    share = table["fixed_fraction"].to_numpy(float)
    scatter = ax.scatter(xs, ys, c=share, s=260, cmap="viridis", vmin=0, vmax=max(float(np.nanmax(share)), 0.01),
                         edgecolors="black", linewidths=0.6, zorder=3)
    for xv, yv, ag in zip(xs, ys, table["agreement"]):
        mark = {"agrees": "", "disagrees": "x", "inconclusive": "?"}.get(ag, "")
        if mark:
            ax.annotate(mark, (xv, yv), ha="center", va="center", fontsize=9, color="white", zorder=4)
    fig.colorbar(scatter, ax=ax, label="observed share of replicates with the mutant fixed")
    ax.margins(0.08)  # whole markers at the ends of the swept ranges
    others = {p: v for f in sweep_factors(config) if not {xpath, ypath} & set(f.values)
              for p, v in f.level(0).items()}
    base = with_values(config, others) if others else config.model_copy(update={"sweep": None})
    gx = np.linspace(xs.min(), xs.max(), resolution)
    gy = np.linspace(ys.min(), ys.max(), resolution)
    fit = np.empty((gy.size, gx.size))
    for i, yv in enumerate(gy):
        fit[i] = fitness_along(with_values(base, {ypath: float(yv)}), xpath, gx)
    ax.set_xlim(*ax.get_xlim())  # the boundary is drawn within the sweep, the axes kept
    ax.set_ylim(*ax.get_ylim())
    if np.nanmin(fit) < 1.0 < np.nanmax(fit):
        contour = ax.contour(gx, gy, fit, levels=[1.0], colors="#D55E00", linewidths=2)
        ax.clabel(contour, fmt={1.0: "invasion fitness 1"}, fontsize=8)
    ax.plot([], [], color="#D55E00", lw=2, label="analytic invasion boundary (invasion fitness 1)")
    ax.plot([], [], "o", color="0.5", mec="black", label="sweep point (? inconclusive, x disagrees)")
    _label_x(ax, xpath)
    ax.set_ylabel(parameter_words(ypath) + f"\n({ypath})")
    ax.set_title("Invasion map: observed fixation and the analytic boundary")
    _legend_below(fig, ax, ncol=1)
    fig.tight_layout()
    return fig


def plot(path, out_dir, *, table: pd.DataFrame | None = None,
         thresholds: pd.DataFrame | None = None) -> Figures:
    """Write the figures of a results file into ``out_dir`` as PNG and SVG.

    Parameters
    ----------
    path : path-like
        A results file (with or without ``[invasion]``).
    out_dir : path-like
        Folder for the figures (created if missing).
    table, thresholds : DataFrame, optional
        ``compare(path)`` and ``compare_thresholds(path)``, if already computed.

    Returns
    -------
    Figures
        Paths of ``trajectories`` and ``outcomes``; with ``[invasion]`` also
        ``fixation`` and ``invasion_fitness``, and ``invasion_map`` when two
        numeric parameters are swept.
    """
    config = experiment_config(path)
    figs = {}
    try:
        if config.invasion is not None:
            if table is None:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", IncompleteResultsWarning)
                    table = compare(path)
            thresholds = compare_thresholds(path, table) if thresholds is None else thresholds
            figs["fixation"] = fixation_figure(table, thresholds, config)
            figs["trajectories"] = trajectory_figure(path, table, config)
            figs["outcomes"] = outcome_figure(path, config)
            figs["invasion_fitness"] = fitness_figure(table, thresholds, config)
            if len(numeric_sweep_paths(config)) >= 2:
                figs["invasion_map"] = invasion_map_figure(table, config)
        else:
            figs["trajectories"] = trajectory_figure(path, read_points(path), config)
            figs["outcomes"] = outcome_figure(path, config)
        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)  # once every figure is drawn: a damaged file leaves no folder
        files = {}
        for name, fig in figs.items():
            files[name] = {}
            for ext in ("png", "svg"):
                target = out / f"{name}.{ext}"
                fig.savefig(target, dpi=_DPI)
                files[name][ext] = target
    finally:
        for fig in figs.values():
            plt.close(fig)
    return Figures(files)
