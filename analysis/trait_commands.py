"""The ``invasibility`` command, and what ``plot`` and ``compare`` do with a ``[trait]`` run.

``register`` adds ``invasibility`` to the ``broodline`` parser
(``sim.cli.COMMANDS`` names it); ``analysis.commands`` hands a trait run's
results file to ``plot_trait_run`` and ``compare_trait_run``, with its own
helpers (printing tables) so this module does not import it back.
"""

from __future__ import annotations

import json
from pathlib import Path

from sim.outputs import free_outputs

__all__ = ["register", "cmd_invasibility", "plot_trait_run", "compare_trait_run", "MAX_GRID"]

# The most efforts `invasibility` takes: it computes N x N invasion fitnesses (401 took 16 s on
# the 2-core development machine, one run; 1001, six times as many, about a minute and a half).
MAX_GRID = 1001


def cmd_invasibility(args) -> int:
    import numpy as np

    from sim.config import load_config
    from sim.errors import UserError

    from .invasibility import INVASIBILITY_FILES, invasibility
    from .trait import effort_grid, effort_model

    if args.grid is not None and not 3 <= args.grid <= MAX_GRID:
        raise UserError(f"--grid must be from 3 to {MAX_GRID} (N x N invasion fitnesses); got {args.grid}")
    config = load_config(args.config)
    model = effort_model(config)
    out = Path(args.output)
    if out.exists() and not out.is_dir():
        raise UserError(f"-o {out}: exists and is not a folder")
    grid = args.grid if args.grid is not None else effort_grid(config)
    if np.size(grid) > MAX_GRID:
        raise UserError(f"{args.config}: the [trait] grid has {np.size(grid)} efforts, more than the "
                        f"{MAX_GRID} invasibility computes (N x N invasion fitnesses); give --grid N")
    free_outputs([out / name for name in INVASIBILITY_FILES] if out.is_dir() else [], args.overwrite,
                 inputs=[args.config])
    result = invasibility(model, out, grid=grid)
    if args.json:
        print(json.dumps(result.as_dict(), indent=2))  # as_dict is JSON-ready (non-finite as null)
        return 0
    for s in result.analysis.singular:
        se = f" (SE {s.effort_se:.2g}, from the year draws)" if np.isfinite(s.effort_se) else ""
        print(f"E = {s.effort:.6g}{se} ({s.position}): {s.kind}; gradient {s.gradient:.4g}")
    print(f"attractors: {', '.join(f'{a:.6g}' for a in result.analysis.attractors) or 'none'}")
    for name, path in result.files.items():
        print(f"{name}: {path}")
    return 0


def plot_trait_run(args) -> int:
    """``broodline plot`` of a trait run: the mean effort over time over the singular efforts.

    Existing figures are replaced only with ``--overwrite``.
    """
    from .trait_plots import TRAIT_FIGURES, plot_trait

    out = Path(args.output)
    free_outputs([out / f"{n}.{e}" for n in TRAIT_FIGURES for e in ("png", "svg")] if out.is_dir() else [],
         args.overwrite, inputs=[args.results])
    for name, files in plot_trait(args.results, out).items():
        print(f"{name}: {files['png']}  {files['svg']}")
    return 0


def compare_trait_run(args, *, show, records) -> int:
    """``broodline compare`` of a trait run: each replicate's end against the predicted attractors.

    ``show`` prints a table, ``records`` makes JSON rows
    (``analysis.commands``'s).
    """
    from .trait import compare_trait, pooled_end_efforts, pooled_lines

    if args.csv:
        free_outputs([args.csv], args.overwrite, inputs=[args.results], option="--csv")
    table = compare_trait(args.results)
    pooled = pooled_end_efforts(table)
    if args.csv:
        table.to_csv(args.csv, index=False)
    if args.json:
        print(json.dumps({"replicates": records(table), "points": records(pooled)}, indent=2))
        return 0
    shown = table.assign(attractors=[", ".join(f"{a:.4g}" for a in v) for v in table["attractors"]])
    show(shown)
    counts = table["verdict"].value_counts()
    print("\n" + ", ".join(f"{n} {verdict}" for verdict, n in counts.items()) + f" (of {len(table)} replicates)")
    for line in pooled_lines(pooled):
        print(line)
    return 0


def register(sub) -> None:
    """Add ``invasibility`` to the ``broodline`` subparsers."""
    p = sub.add_parser(
        "invasibility",
        help="pairwise invasibility plot and singular efforts of a config's effort alleles",
    )
    p.add_argument("config", help="config (TOML) with effort alleles and a [tradeoff] table")
    p.add_argument("-o", "--output", required=True, help="folder for the figures, CSV and JSON")
    p.add_argument("--json", action="store_true", help="print the analysis as JSON")
    p.add_argument("--grid", type=int, metavar="N",
                   help=f"N evenly spaced efforts on [0, 1], 3 to {MAX_GRID} (default: the [trait] "
                        "values, else 101)")
    p.add_argument("--overwrite", action="store_true", help="replace the files of an earlier run in the folder")
    p.set_defaults(func=cmd_invasibility)
