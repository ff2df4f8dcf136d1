"""Figures of a results file: fixation against the swept parameter, trajectories, invasion fitness.

Drawn with matplotlib's Agg backend (no display needed); each figure is
written as PNG and SVG.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

from sim.store import read_replicates, read_trajectories  # noqa: E402

from .comparison import compare, compare_thresholds, experiment_config  # noqa: E402
from .sweep import factor_of, numeric_sweep_paths, other_swept_paths  # noqa: E402
from .thresholds import fitness_along  # noqa: E402

__all__ = ["FIGURES", "Figures", "plot", "fixation_figure", "trajectory_figure", "fitness_figure"]

FIGURES = ("fixation", "trajectories", "invasion_fitness")
_DPI = 110


@dataclass(frozen=True)
class Figures:
    """Paths of the figures written by ``plot``: name -> {"png": Path, "svg": Path}."""

    files: dict

    def png(self, name: str) -> Path:
        return self.files[name]["png"]


def _axis(table: pd.DataFrame, config) -> tuple[str | None, np.ndarray, str]:
    """The swept parameter to put on the x axis (the first numeric one), its values and label."""
    paths = numeric_sweep_paths(config)
    if paths:
        return paths[0], table[paths[0]].to_numpy(dtype=float), paths[0]
    return None, table["point"].to_numpy(dtype=float), "sweep point"


def _groups(table: pd.DataFrame, config, xpath):
    """Rows grouped by the other swept parameters: (values as a dict, label, rows) per group."""
    others = other_swept_paths(config, xpath)
    if not others:
        return [({}, "", table)]
    out = []
    for key, sub in table.groupby(others, sort=False):
        at = dict(zip(others, key if isinstance(key, tuple) else (key,)))
        out.append((at, ", ".join(f"{k} = {v}" for k, v in at.items()), sub))
    return out


def _same(at: dict, text: str) -> bool:
    """True when the JSON ``at`` of a thresholds row names the group ``at``."""
    return {k: str(v) for k, v in json.loads(text).items()} == {k: str(v) for k, v in at.items()}


def fixation_figure(table: pd.DataFrame, thresholds: pd.DataFrame, config):
    """Fixation fraction with Wilson intervals, establishment curve, neutral line, thresholds."""
    xpath, _, xlabel = _axis(table, config)
    fig, ax = plt.subplots(figsize=(7.5, 4.8))
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    spans = []
    for g, (at, label, sub) in enumerate(_groups(table, config, xpath)):
        colour = colours[g % len(colours)]
        sub = sub.sort_values(xpath or "point")
        x = sub[xpath].to_numpy(float) if xpath else sub["point"].to_numpy(float)
        suffix = f" ({label})" if label else ""
        y = sub["fixed_fraction"].to_numpy(float)
        err = np.vstack(
            [y - sub["fixed_low"].to_numpy(float), sub["fixed_high"].to_numpy(float) - y]
        )
        ax.errorbar(
            x,
            y,
            yerr=err,
            fmt="o",
            color=colour,
            capsize=3,
            label=f"observed fixation, 95% Wilson interval{suffix}",
        )
        ax.plot(
            x,
            sub["establishment_probability"],
            "-",
            color=colour,
            alpha=0.8,
            label=f"establishment probability (branching process){suffix}",
        )
        ax.plot(
            x, sub["neutral_expectation"], ":", color=colour, label=f"neutral expectation{suffix}"
        )
        for _, row in thresholds.iterrows():
            if row["parameter"] != xpath or not _same(at, row["at"]):
                continue
            if np.isfinite(row["analytic"]):
                ax.axvline(
                    row["analytic"],
                    color=colour if label else "black",
                    ls="--",
                    lw=1,
                    label=f"analytic threshold {row['analytic']:.4g}{suffix}",
                )
            if np.isfinite(row["observed"]):
                spans.append((row, colour if label else "grey", suffix))
    for row, colour, suffix in spans:  # after the data, so open bounds reach the axis ends
        lo = row["observed_low"] if np.isfinite(row["observed_low"]) else ax.get_xlim()[0]
        hi = row["observed_high"] if np.isfinite(row["observed_high"]) else ax.get_xlim()[1]
        ax.axvspan(
            lo,
            hi,
            color=colour,
            alpha=0.15,
            label=f"observed threshold {row['observed']:.4g} (95% interval){suffix}",
        )
    ax.set_xlabel(xlabel)
    ax.set_ylabel("probability the mutant fixes")
    ax.set_ylim(bottom=0)
    ax.set_title("Mutant fixation against the prediction")
    ax.legend(fontsize=7.5, loc="upper left")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def _sample(reps: pd.DataFrame, point: int, k: int, rng) -> list[int]:
    """Up to k replicates of a point: fixed ones and lost ones, as evenly as they allow."""
    here = reps[reps["point"] == point]
    fixed = here.loc[here["outcome"] == "mutant-fixed", "replicate"].to_numpy()
    other = here.loc[here["outcome"] != "mutant-fixed", "replicate"].to_numpy()
    n_fixed = min(fixed.size, max(k // 2, k - other.size))
    chosen = list(rng.choice(fixed, n_fixed, replace=False)) + list(
        rng.choice(other, min(other.size, k - n_fixed), replace=False)
    )
    return sorted(int(c) for c in chosen)


def trajectory_figure(
    path, table: pd.DataFrame, config, *, per_point: int = 8, panels: int = 4, seed: int = 0
):
    """Mutant frequency over time for a sample of replicates, with census size, at a few points."""
    xpath, _, _ = _axis(table, config)
    reps = read_replicates(path)
    points = table["point"].to_numpy()
    chosen_points = points[
        np.unique(np.linspace(0, points.size - 1, min(panels, points.size)).round().astype(int))
    ]
    mutant = config.invasion.mutant
    rng = np.random.default_rng(seed)
    palette = [c for i, c in enumerate(plt.get_cmap("tab10").colors) if i != 7]  # 7 is grey: census
    fig, axes = plt.subplots(
        len(chosen_points), 1, figsize=(7.5, 2.4 * len(chosen_points)), squeeze=False
    )
    for ax, point in zip(axes[:, 0], chosen_points):
        sample = _sample(reps, int(point), per_point, rng)
        traj = read_trajectories(path, points=[int(point)], replicates=sample, by_age=False)
        twin = ax.twinx()
        for k, (_, one) in enumerate(traj.groupby("replicate")):
            wide = one.pivot_table(index="step", columns="allele", values="count", aggfunc="sum")
            total = wide.sum(axis=1)
            freq = (wide.get(mutant, 0) / total.where(total > 0)).fillna(0)
            ax.plot(wide.index, freq, lw=1.2, alpha=0.85, color=palette[k % len(palette)])
            twin.plot(wide.index, total, color="grey", lw=0.6, alpha=0.5)
        row = table[table["point"] == point].iloc[0]
        where = f"{xpath} = {row[xpath]:g}" if xpath else f"point {point}"
        ax.set_title(
            f"{where}: invasion fitness {row['invasion_fitness']:.3g}, "
            f"{row['mutant_fixed']} of {row['replicates']} fixed",
            fontsize=9,
        )
        ax.set_ylabel(f"{mutant} frequency", fontsize=8)
        ax.set_xlabel("season", fontsize=8)
        ax.set_xlim(0, max(float(traj["step"].max()) if len(traj) else 1.0, 1.0) * 1.02)
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_ylim(-0.02, 1.02)
        twin.set_ylabel("census size (grey)", fontsize=8, color="grey")
        twin.tick_params(axis="y", labelcolor="grey", labelsize=7)
        ax.grid(alpha=0.3)
    lines = [plt.Line2D([], [], color="C0", lw=1.2), plt.Line2D([], [], color="grey", lw=0.6)]
    fig.legend(
        lines,
        [f"{mutant} frequency (one line per replicate)", "census size (right axis)"],
        fontsize=8,
        loc="lower center",
        ncol=2,
    )
    fig.suptitle(
        f"Sampled replicates (at most {per_point} per point, fixed and lost)",
        fontsize=10,
        x=0.02,
        ha="left",
    )
    fig.tight_layout(rect=(0, 0.035, 1, 0.98))
    return fig


def fitness_figure(table: pd.DataFrame, thresholds: pd.DataFrame, config, *, resolution: int = 200):
    """Invasion fitness along the swept parameter: theory curve, sweep points, the line at 1."""
    xpath, x, xlabel = _axis(table, config)
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    if xpath is not None and not other_swept_paths(config, xpath):
        grid = np.linspace(x.min(), x.max(), resolution)
        group = factor_of(config, xpath)
        ax.plot(
            grid,
            fitness_along(config, xpath, grid, group=group if group.linked else None),
            "-",
            color="C0",
            label="invasion fitness (theory)",
        )
    ax.plot(x, table["invasion_fitness"], "o", color="C0", label="sweep points")
    ax.axhline(1.0, color="black", lw=1, label="invasion fitness 1 (neutral)")
    for _, row in thresholds.iterrows():
        if row["parameter"] == xpath and np.isfinite(row["analytic"]):
            ax.axvline(
                row["analytic"],
                color="black",
                ls="--",
                lw=1,
                label=f"analytic threshold {row['analytic']:.4g}",
            )
    ax.set_xlabel(xlabel)
    ax.set_ylabel("invasion fitness of the mutant")
    ax.set_title("Mutant's growth rate in the resident's equilibrium environment")
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def plot(
    path, out_dir, *, table: pd.DataFrame | None = None, thresholds: pd.DataFrame | None = None
) -> Figures:
    """Write the three figures of a results file into ``out_dir`` as PNG and SVG.

    Parameters
    ----------
    path : path-like
        A results file of an invasion experiment.
    out_dir : path-like
        Folder for the figures (created if missing).
    table, thresholds : DataFrame, optional
        ``compare(path)`` and ``compare_thresholds(path)``, if already computed.

    Returns
    -------
    Figures
        Paths of ``fixation``, ``trajectories`` and ``invasion_fitness``.
    """
    config = experiment_config(path)
    table = compare(path) if table is None else table
    thresholds = compare_thresholds(path, table) if thresholds is None else thresholds
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    figs = {
        "fixation": fixation_figure(table, thresholds, config),
        "trajectories": trajectory_figure(path, table, config),
        "invasion_fitness": fitness_figure(table, thresholds, config),
    }
    files = {}
    for name, fig in figs.items():
        files[name] = {}
        for ext in ("png", "svg"):
            target = out / f"{name}.{ext}"
            fig.savefig(target, dpi=_DPI)
            files[name][ext] = target
        plt.close(fig)
    return Figures(files)
