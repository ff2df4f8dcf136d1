"""The invasibility command's work: the pairwise invasibility plot and the selection gradient of effort.

``invasibility(model, out_dir)`` runs ``analysis.adaptive.analyse_effort``
and writes, into ``out_dir``:

- ``pairwise_invasibility.png`` / ``.svg``: resident effort across, mutant
  effort up; shaded where the mutant invades (s > 1), the diagonal drawn,
  the singular efforts marked;
- ``selection_gradient.png`` / ``.svg``: D(E) along the diagonal;
- ``invasion_fitness.csv``: s(x, y), one row per resident effort;
- ``invasibility.json``: ``AdaptiveAnalysis.as_dict()``.

Drawn with matplotlib's Agg backend (no display needed).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.colors import ListedColormap  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402

from .adaptive import AdaptiveAnalysis, EffortModel, analyse_effort  # noqa: E402

__all__ = ["InvasibilityOutput", "INVASIBILITY_FILES", "invasibility", "invasibility_figure", "gradient_figure"]

_DPI = 110
_MARKERS = {
    "evolutionarily stable attractor": ("o", "black"),
    "branching point": ("D", "tab:purple"),
    "Garden of Eden": ("s", "tab:green"),
    "repeller": ("o", "white"),
    "degenerate": ("x", "tab:orange"),
    "not viable": ("x", "tab:red"),
    "unregulated": ("x", "tab:blue"),
}
_HATCHES = {  # resident status -> (colour, legend label)
    "extinct": ("tab:red", "resident cannot persist"),
    "unregulated": ("tab:blue", "resident unregulated (fitness undefined)"),
}


@dataclass(frozen=True)
class InvasibilityOutput:
    """What ``invasibility`` computed and wrote: the analysis and the paths of its files."""

    analysis: AdaptiveAnalysis
    files: dict

    def as_dict(self) -> dict:
        """The analysis (``AdaptiveAnalysis.as_dict``) with the written files' paths."""
        return {**self.analysis.as_dict(), "files": {k: str(v) for k, v in self.files.items()}}


def _mark_singular(ax, analysis: AdaptiveAnalysis, y_of) -> None:
    seen = set()
    e = analysis.invasibility.efforts
    for s in analysis.singular:
        if not e[0] - 1e-9 <= s.effort <= e[-1] + 1e-9:
            continue  # outside the efforts drawn (and computed)
        marker, colour = _MARKERS[s.kind]
        label = None if s.kind in seen else s.kind
        seen.add(s.kind)
        edge = colour if marker == "x" else "black"
        ax.plot([s.effort], [y_of(s.effort)], marker=marker, color=colour, markeredgecolor=edge,
                markersize=8, linestyle="none", label=label, clip_on=False, zorder=5)


def invasibility_figure(analysis: AdaptiveAnalysis):
    """The pairwise invasibility plot: the sign of s(resident, mutant) - 1 over the grid."""
    pip = analysis.invasibility
    e = pip.efforts
    edges = np.concatenate([[e[0]], (e[1:] + e[:-1]) / 2, [e[-1]]])
    sign = np.where(np.isnan(pip.fitness), np.nan, (pip.fitness > 1.0).astype(float))
    fig, ax = plt.subplots(figsize=(6.0, 5.6))
    ax.pcolormesh(edges, edges, sign.T, cmap=ListedColormap(["white", "0.55"]), vmin=0, vmax=1, shading="flat")
    for i, status in enumerate(pip.status):
        if status in _HATCHES:
            colour = _HATCHES[status][0]
            ax.axvspan(edges[i], edges[i + 1], facecolor="none", edgecolor=colour, hatch="//", linewidth=0)
    ax.plot([edges[0], edges[-1]], [edges[0], edges[-1]], color="black", linewidth=1)
    _mark_singular(ax, analysis, lambda x: x)
    # the efforts computed, not all of [0, 1]: a band left white outside the grid read as "does
    # not invade" (a [trait] grid from 0.05)
    ax.set_xlim(edges[0], edges[-1])
    ax.set_ylim(edges[0], edges[-1])
    ax.set_aspect("equal")
    ax.set_xlabel("resident effort (share put into breeding)")
    ax.set_ylabel("mutant effort (share put into breeding)")
    ax.set_title("Pairwise invasibility: shaded where the mutant invades")
    handles, labels = ax.get_legend_handles_labels()
    handles.append(Patch(facecolor="0.55", label="mutant invades (fitness > 1)"))
    for status, (colour, label) in _HATCHES.items():
        if status in pip.status:
            handles.append(Patch(facecolor="none", edgecolor=colour, hatch="//", label=label))
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=2, fontsize=8, frameon=False)
    fig.tight_layout()
    return fig


def gradient_figure(analysis: AdaptiveAnalysis):
    """The selection gradient D(E) = ds/dE(mutant) at mutant = resident, with the singular efforts."""
    e = analysis.invasibility.efforts
    d = np.asarray(analysis.gradient, dtype=float)
    shown = np.isfinite(d)
    fig, ax = plt.subplots(figsize=(6.5, 4.2))
    ax.axhline(0.0, color="0.5", linewidth=1)
    ax.plot(e[shown], d[shown], color="tab:blue", label="selection gradient")
    _mark_singular(ax, analysis, lambda x: 0.0)
    ax.set_xlim(e[0], e[-1])
    ax.set_xlabel("resident effort (share put into breeding)")
    ax.set_ylabel("selection gradient (d fitness / d mutant effort)")
    ax.set_title("Selection gradient along the diagonal: effort rises where it is above 0")
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return fig


def _save(fig, out_dir: Path, stem: str) -> dict:
    paths = {}
    for ext in ("png", "svg"):
        paths[ext] = out_dir / f"{stem}.{ext}"
        fig.savefig(paths[ext], dpi=_DPI)
    plt.close(fig)
    return paths


# what ``invasibility`` writes into its folder
INVASIBILITY_FILES = ("pairwise_invasibility.png", "pairwise_invasibility.svg", "selection_gradient.png",
                      "selection_gradient.svg", "invasion_fitness.csv", "invasibility.json")


def invasibility(model: EffortModel, out_dir, *, grid=101) -> InvasibilityOutput:
    """Invasion fitness over a grid of resident and mutant efforts, its figures, table and JSON.

    Parameters
    ----------
    model : EffortModel
        The trade-off, juvenile survival, maturity age and density dependence.
    out_dir : path
        Directory for the files (created if missing).
    grid : int or array_like, optional
        Number of evenly spaced efforts on [0, 1] (default 101), or the efforts.

    Returns
    -------
    InvasibilityOutput
        The ``AdaptiveAnalysis`` and the paths written.
    """
    if not isinstance(model, EffortModel):
        raise TypeError(f"invasibility needs an analysis.adaptive.EffortModel; got {type(model).__name__}")
    analysis = analyse_effort(model, grid=grid)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = {}
    for stem, paths in (
        ("pairwise_invasibility", _save(invasibility_figure(analysis), out, "pairwise_invasibility")),
        ("selection_gradient", _save(gradient_figure(analysis), out, "selection_gradient")),
    ):
        files.update({f"{stem}_{ext}": p for ext, p in paths.items()})
    table = out / "invasion_fitness.csv"
    e = analysis.invasibility.efforts
    header = "resident_effort," + ",".join(f"{y:.10g}" for y in e)
    rows = np.column_stack([e, analysis.invasibility.fitness])
    np.savetxt(table, rows, delimiter=",", header=header, comments="", fmt="%.12g")
    files["invasion_fitness_csv"] = table
    files["json"] = out / "invasibility.json"
    result = InvasibilityOutput(analysis, files)
    files["json"].write_text(json.dumps(result.as_dict(), indent=2))
    return result
