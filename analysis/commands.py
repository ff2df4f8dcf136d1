"""The analysis commands: ``threshold``, ``compare``, ``plot`` and ``report``.

Each is a thin layer over a Python function of this package; ``register``
adds them to the ``broodline`` parser (``sim.cli.COMMANDS`` names it, so sim
never imports this package except in its command-line entry).
Heavy imports (matplotlib) happen inside the commands.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from sim.errors import UserError

__all__ = ["register", "finish_demo", "threshold_report", "jsonable"]


def jsonable(value):
    """Plain JSON values: nan and inf become null, numpy scalars Python numbers."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _records(table) -> list[dict]:
    return [jsonable(r) for r in table.to_dict(orient="records")]


def _print_table(table) -> None:
    import pandas as pd

    with pd.option_context(
        "display.width", 160, "display.max_columns", 30, "display.float_format", "{:.4g}".format
    ):
        print(table.to_string(index=False))


def _results(path) -> Path:
    """Check a results file exists and is ours before any work (clear message, exit 2)."""
    from sim.store import read_attrs

    path = Path(path)
    try:
        read_attrs(path)
    except FileNotFoundError:
        raise
    except (OSError, ValueError, KeyError) as err:
        raise UserError(
            f"{str(path)!r} cannot be read as a broodline results file ({err})"
        ) from None
    return path


def _free(paths, overwrite: bool) -> None:
    """Refuse to replace existing files unless asked, before anything is written."""
    taken = [str(p) for p in paths if Path(p).exists()]
    if taken and not overwrite:
        raise FileExistsError(
            f"{', '.join(taken)} exist{'s' if len(taken) == 1 else ''}; pass --overwrite to replace"
        )
    for p in paths:
        if not Path(p).parent.exists():
            raise FileNotFoundError(f"output folder {str(Path(p).parent)!r} does not exist")


def _trait_run(path) -> bool:
    from .trait import is_trait_run

    return is_trait_run(path)


# -- threshold ------------------------------------------------------------------------
def threshold_report(config, *, parameters=None, bracket=None) -> dict:
    """What ``broodline threshold`` prints: predictions per sweep point and thresholds.

    Returns a dict with ``resident``, ``mutant``, ``points`` (a DataFrame,
    see ``analysis.predict_sweep``) and ``thresholds`` (ThresholdResult list,
    see ``analysis.sweep_thresholds``).
    """
    from .sweep import predict_sweep, sweep_thresholds

    points = predict_sweep(config)
    thresholds = sweep_thresholds(config, parameters=parameters, bracket=bracket)
    return {
        "resident": config.invasion.resident,
        "mutant": config.invasion.mutant,
        "points": points,
        "thresholds": thresholds,
    }


def cmd_threshold(args) -> int:
    from sim.config import load_config

    config = load_config(args.config)
    if config.invasion is None:
        raise UserError(
            f"{args.config}: needs an [invasion] table naming the resident and the mutant"
        )
    result = threshold_report(
        config,
        parameters=args.parameter or None,
        bracket=tuple(args.bracket) if args.bracket else None,
    )
    if args.json:
        print(
            json.dumps(
                {
                    "resident": result["resident"],
                    "mutant": result["mutant"],
                    "points": _records(result["points"]),
                    "thresholds": [jsonable(t.as_dict()) for t in result["thresholds"]],
                },
                indent=2,
            )
        )
        return 0
    print(f"resident {result['resident']!r}, mutant {result['mutant']!r}")
    points = result["points"].rename(
        columns={
            "density_index": "D*",
            "census_size": "census",
            "resident_growth_rate": "lambda_res",
            "mutant_growth_rate": "lambda_mut",
            "invasion_fitness": "fitness",
            "establishment_probability": "establish",
            "neutral_expectation": "neutral",
        }
    )
    if points["problem"].eq("").all():
        points = points.drop(columns="problem")
    _print_table(points)
    if result["thresholds"]:
        print("\nthresholds:")
        for t in result["thresholds"]:
            at = f" (at {', '.join(f'{k} = {v}' for k, v in t.at.items())})" if t.at else ""
            print(f"  {t.message}{at}")
    return 0


# -- compare --------------------------------------------------------------------------
def cmd_compare(args) -> int:
    from .comparison import compare, compare_thresholds

    path = _results(args.results)
    if _trait_run(path):
        from .trait_commands import compare_trait_run

        return compare_trait_run(args, free=_free, show=_print_table, records=_records)
    if args.csv:
        _free([args.csv], args.overwrite)
    table = compare(path)
    thresholds = compare_thresholds(path, table)
    if args.csv:
        table.to_csv(args.csv, index=False)
    if args.json:
        print(json.dumps({"points": _records(table), "thresholds": _records(thresholds)}, indent=2))
        return 0
    _print_compare(table, thresholds)
    if args.csv:
        print(f"\ntable written to {args.csv}")
    return 0


def _print_compare(table, thresholds) -> None:
    from .comparison import SHOWN_COLUMNS

    swept = [
        c
        for c in table.columns[1:]
        if c not in SHOWN_COLUMNS
        and c
        not in (
            "mutant_lost",
            "unresolved",
            "density_index",
            "census_size",
            "resident_growth_rate",
            "mutant_growth_rate",
            "problem",
        )
    ]
    shown = table[["point", *swept, *SHOWN_COLUMNS]].rename(
        columns={
            "replicates": "reps",
            "mutant_fixed": "fixed",
            "fixed_fraction": "fraction",
            "fixed_low": "low95",
            "fixed_high": "high95",
            "invasion_fitness": "fitness",
            "establishment_probability": "establish",
            "neutral_expectation": "neutral",
        }
    )
    _print_table(shown)
    for r in thresholds.itertuples():
        at = f" at {r.at}" if r.at != "{}" else ""
        print(f"\n{r.parameter}{at}:")
        print(f"  analytic: {r.analytic_message}")
        print(f"  observed: {r.observed_message}")


# -- plot and report --------------------------------------------------------------------
def cmd_plot(args) -> int:
    from .plots import FIGURES, plot

    path = _results(args.results)
    out = Path(args.output)
    if out.exists() and not out.is_dir():
        raise UserError(f"-o {out}: exists and is not a folder")
    if _trait_run(path):
        from .trait_commands import plot_trait_run

        return plot_trait_run(args, free=_free)
    _free(
        [out / f"{n}.{e}" for n in FIGURES for e in ("png", "svg")] if out.is_dir() else [],
        args.overwrite,
    )
    figs = plot(path, out)
    for name, files in figs.files.items():
        print(f"{name}: {files['png']}  {files['svg']}")
    return 0


def cmd_report(args) -> int:
    from .reporting import report

    path = _results(args.results)
    _free([args.output], args.overwrite)
    print(f"report written to {report(path, args.output)}")
    return 0


def finish_demo(results, out_dir) -> Path:
    """The demo's last steps: print the compare table, write figures and the report."""
    from .comparison import compare, compare_thresholds
    from .reporting import report

    out_dir = Path(out_dir)
    table = compare(results)
    thresholds = compare_thresholds(results, table)
    print("\nObserved fixation against the prediction:")
    _print_compare(table, thresholds)
    page = report(
        results, out_dir / "report.html", figures_dir=out_dir, table=table, thresholds=thresholds
    )
    print(f"\nFigures: {out_dir}/fixation.png, trajectories.png, invasion_fitness.png (and .svg)")
    print(f"Report:  {page}")
    return page


def register(sub) -> None:
    """Add ``threshold``, ``compare``, ``plot`` and ``report`` to the ``broodline`` subparsers."""
    p = sub.add_parser(
        "threshold",
        help="analytic prediction for an invasion config: equilibrium, "
        "invasion fitness, establishment, neutral expectation, thresholds",
    )
    p.add_argument("config", help="experiment config (TOML) with an [invasion] table")
    p.add_argument("--json", action="store_true", help="print JSON (keys in the README)")
    p.add_argument(
        "--parameter",
        action="append",
        metavar="PATH",
        help="sweep path to find the threshold of (repeatable; default: each swept one)",
    )
    p.add_argument(
        "--bracket",
        nargs=2,
        type=float,
        metavar=("LOW", "HIGH"),
        help="range to search for the threshold (default: the swept range)",
    )
    p.set_defaults(func=cmd_threshold)

    p = sub.add_parser("compare", help="observed fixation in a results file against the prediction")
    p.add_argument("results", help="results file (.h5) of an invasion experiment")
    p.add_argument("--json", action="store_true", help="print JSON (keys in the README)")
    p.add_argument("--csv", metavar="FILE", help="also write the per-point table as CSV")
    p.add_argument("--overwrite", action="store_true", help="replace an existing CSV file")
    p.set_defaults(func=cmd_compare)

    p = sub.add_parser("plot", help="figures of a results file (PNG and SVG)")
    p.add_argument("results", help="results file (.h5) of an invasion experiment")
    p.add_argument("-o", "--output", required=True, help="folder for the figures")
    p.add_argument("--overwrite", action="store_true", help="replace existing figures")
    p.set_defaults(func=cmd_plot)

    p = sub.add_parser("report", help="a self-contained HTML report of a results file")
    p.add_argument("results", help="results file (.h5) of an invasion experiment")
    p.add_argument("-o", "--output", required=True, help="HTML file to write")
    p.add_argument("--overwrite", action="store_true", help="replace an existing report")
    p.set_defaults(func=cmd_report)
