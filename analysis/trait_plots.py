"""The figure of a ``[trait]`` run: simulated mean effort over time over the singular efforts.

Drawn with matplotlib's Agg backend; written as PNG and SVG by ``plot_trait``.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from sim.store import read_point_configs, read_points, read_trait  # noqa: E402

from .trait import trait_analysis  # noqa: E402

__all__ = ["TRAIT_FIGURES", "trait_figure", "plot_trait"]

TRAIT_FIGURES = ("trait",)
_DPI = 110
_LINES = {  # kind -> (line style, colour)
    "evolutionarily stable attractor": ("-", "black"),
    "branching point": ("--", "tab:purple"),
    "Garden of Eden": ("-.", "tab:green"),
    "repeller": (":", "tab:red"),
}


def trait_figure(path, *, max_replicates: int = 8):
    """Mean effort (line) and mean +- one standard deviation (band) over seasons, per sweep point.

    Each panel is one sweep point; the first ``max_replicates`` replicates
    are drawn, and the point's singular efforts (``analysis.adaptive``:
    attractors, repellers, branching points) as horizontal lines.
    """
    trait = read_trait(path)
    configs = read_point_configs(path)
    points = read_points(path)
    n = len(configs)
    fig, axes = plt.subplots(n, 1, figsize=(7.0, 3.2 * n), squeeze=False, sharex=True)
    for ax, (_, row), config in zip(axes[:, 0], points.iterrows(), configs):
        point = int(row["point"])
        here = trait[(trait["point"] == point) & (trait["replicate"] < max_replicates)]
        for k, (_, run) in enumerate(here.groupby("replicate")):
            colour = f"C{k % 10}"
            mean, sd = run["mean_effort"].to_numpy(), run["sd_effort"].to_numpy()
            ax.fill_between(run["step"], mean - sd, mean + sd, color=colour, alpha=0.15, linewidth=0)
            ax.plot(run["step"], mean, color=colour, linewidth=1.0,
                    label="simulated mean effort (band: +- 1 sd)" if k == 0 else None)
        seen = set()
        for s in trait_analysis(config).singular:  # (a [trait] template: the theory covers it)
            if s.kind not in _LINES:
                continue
            style, colour = _LINES[s.kind]
            ax.axhline(s.effort, linestyle=style, color=colour, linewidth=1.2,
                       label=None if s.kind in seen else f"{s.kind} (theory)")
            seen.add(s.kind)
        where = ", ".join(f"{k} = {row[k]:g}" if isinstance(row[k], (int, float, np.number)) else f"{k} = {row[k]}"
                          for k in points.columns if k != "point")
        if where or n > 1:  # one point and no sweep: nothing to tell panels apart by
            ax.set_title(f"point {point}" + (f": {where}" if where else ""), fontsize=9)
        ax.set_ylim(-0.02, 1.02)
        ax.set_ylabel("effort (share put into breeding)")
        ax.legend(fontsize=7, frameon=False, loc="best")
    axes[-1, 0].set_xlabel("season")
    fig.suptitle("Trait substitution: mean effort over time against the singular efforts", fontsize=10)
    fig.tight_layout()
    return fig


def plot_trait(path, out_dir) -> dict:
    """Write ``trait.png`` and ``trait.svg`` into ``out_dir``; return {"trait": {"png": ..., "svg": ...}}."""
    fig = trait_figure(path)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)  # once the figure is drawn: a damaged file leaves no folder
    files = {}
    for ext in ("png", "svg"):
        files[ext] = out / f"trait.{ext}"
        fig.savefig(files[ext], dpi=_DPI)
    plt.close(fig)
    return {"trait": files}
