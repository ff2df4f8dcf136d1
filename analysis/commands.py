"""The analysis commands: ``threshold``, ``compare``, ``plot`` and ``report``.

Each is a thin layer over a Python function of this package; ``register``
adds them to the ``broodline`` parser (``sim.cli.COMMANDS`` names it, so sim
never imports this package except in its command-line entry).
Heavy imports (matplotlib) happen inside the commands.
"""

from __future__ import annotations

import json
from pathlib import Path

from sim.bench_scaling import SCALING_KEYS
from sim.errors import UserError
from sim.outputs import free_outputs

from .jsonable import jsonable

__all__ = ["register", "finish_demo", "threshold_report", "jsonable"]


def _records(table) -> list[dict]:
    return [jsonable(r) for r in table.to_dict(orient="records")]


def _results(path) -> Path:
    """Check a results file exists and is ours before any work (clear message, exit 2)."""
    from sim.store import read_attrs

    path = Path(path)
    try:
        read_attrs(path)
    except FileNotFoundError:
        raise
    except ValueError as err:  # the reader's message names the file and the reason already
        raise UserError(str(err)) from None
    except (OSError, KeyError) as err:
        raise UserError(
            f"{str(path)!r} cannot be read as a broodline results file ({err})"
        ) from None
    return path


# -- what --json writes ---------------------------------------------------------------
# Every key `threshold --json` and `compare --json` write, with its meaning, as data: the
# documentation's tables are generated from it (docs/_ext/broodline_docs.py) and
# tests/test_docs.py checks it against the keys the commands write. SWEPT stands for one key
# per swept path (e.g. "allele.one-shot.fecundity"), holding the point's value.
SWEPT = "<swept path>"
JSON_KEYS = {
    "threshold": {
        "": {
            "resident": "name of the resident allele",
            "mutant": "name of the mutant allele",
            "points": "list, one object per sweep point",
            "thresholds": "list, one object per swept parameter and combination of the other swept values",
            "sensitivities": "only with --sensitivities: list, one object per sweep point and vital rate "
            "of the mutant",
        },
        "points": {
            "point": "index of the sweep point",
            SWEPT: "the point's value of that swept path",
            "density_index": "D*, the density index at the resident's equilibrium",
            "census_size": "the resident's equilibrium census (age 1 and older)",
            "resident_growth_rate": "1 at an equilibrium, else the resident's density-free lambda",
            "mutant_growth_rate": "the mutant's dominant eigenvalue where the resident sets the density",
            "invasion_fitness": "the mutant's growth rate in the resident's environment (ratio of "
            "density-free lambdas without density dependence)",
            "verdict": "invades, does not invade, neutral, or undefined (no resident equilibrium)",
            "establishment_probability": "probability that the introduced mutants escape early loss "
            "(multitype branching process)",
            "neutral_expectation": "the mutants' share of reproductive value at the start: the "
            "fixation probability of a neutral allele",
            "problem": "empty, or why a value is missing",
            "fixation_probability": "finite-N fixation probability of the introduced mutants "
            "(diffusion of the reproductive-value share, Gillespie 1974; docs/finite-population.md)",
            "fixation_probability_valid": "true where the diffusion's assumptions hold (weak selection, "
            "a regulated census of 10 or more, density acting alike on both schedules)",
            "fixation_probability_note": "the assumptions and where they fail, in words",
            "effective_size": "the resident's effective size in the diffusion",
            "selection_coefficient": "selection per season in the diffusion (log invasion fitness)",
            "selection_coefficient_per_generation": "selection per generation",
            "demographic_variance_resident": "the resident's demographic variance (Engen, Lande & "
            "Saether 2005)",
            "demographic_variance_mutant": "the mutant's demographic variance",
        },
        "thresholds": {
            "parameter": "the sweep path (a linked group's axis)",
            "value": "the threshold, where invasion fitness is 1 (null when none is in range)",
            "converged": "true when a crossing was found and polished",
            "bracket": "[low, high], the range searched",
            "fitness_at_bracket": "invasion fitness at both ends (null where the resident has no equilibrium)",
            "invades_above": "true: the mutant invades above the threshold; false: below; null: no threshold",
            "crossings": "sign changes of fitness - 1 seen on the scan grid (more than one: the first is given)",
            "message": "the finding in words",
            "at": "the other swept parameters, held at these values",
            "linked": "only along a [[sweep.linked]] group: the other members' values at the threshold",
        },
        "sensitivities": {
            "point": "index of the sweep point",
            SWEPT: "the point's value of that swept path",
            "rate": "the mutant's vital rate: m(a) or s(a) at census age a, c, or c_o (orphan survival, "
                    "where the mutant has one)",
            "kind": "fecundity, survival, juvenile_survival or orphan_survival",
            "age": "the census age (null for c and c_o)",
            "value": "the rate's value in the schedule (before density factors)",
            "sensitivity": "d(invasion fitness) / d(rate) (Caswell 2001, ch. 9)",
            "elasticity": "d ln(invasion fitness) / d ln(rate)",
            "selection_gradient": "d ln(invasion fitness) / d(rate) (Lande 1982)",
            "problem": "empty, or why the values are missing (no resident equilibrium)",
        },
    },
    "compare": {
        "": {
            "points": "list, one object per sweep point (also the CSV's columns)",
            "thresholds": "list, one object per swept numeric parameter and combination of the others",
        },
        "points": {
            "point": "index of the sweep point",
            SWEPT: "the point's value of that swept path",
            "replicates": "replicates in the results file at this point",
            "mutant-fixed": "replicates that ended mutant-fixed",
            "mutant-lost": "replicates that ended mutant-lost",
            "extinct": "replicates in which everyone died (the mutant did not fix)",
            "undecided": "replicates that reached max_steps with both alleles present",
            "capped": "replicates that passed max_population",
            "capped_rising": "capped replicates whose mutant share was rising (counted as established)",
            "counted": "replicates that resolved (mutant-fixed, mutant-lost, extinct, capped_rising)",
            "established": "mutant-fixed plus capped_rising",
            "left_out": "undecided and other capped replicates: never counted as losses",
            "missing": "replicates planned but not in the file (a stopped run)",
            "fixed_fraction": "established / counted",
            "fixed_low": "lower end of the 95% Wilson interval of fixed_fraction",
            "fixed_high": "upper end of the 95% Wilson interval of fixed_fraction",
            "invasion_fitness": "as in threshold",
            "verdict": "as in threshold",
            "establishment_probability": "as in threshold",
            "neutral_expectation": "as in threshold",
            "agreement": "agrees, inconclusive, disagrees, or no prediction (the agreement rule)",
            "reason": "why, in words",
            "prediction": "the prediction judged against: the finite-N fixation probability where "
            "valid, else the side of the neutral expectation",
            "density_index": "as in threshold",
            "census_size": "as in threshold",
            "resident_growth_rate": "as in threshold",
            "mutant_growth_rate": "as in threshold",
            "problem": "as in threshold",
            "fixation_probability": "as in threshold",
            "fixation_probability_valid": "as in threshold",
            "fixation_probability_note": "as in threshold",
            "effective_size": "as in threshold",
            "selection_coefficient": "as in threshold",
            "selection_coefficient_per_generation": "as in threshold",
            "demographic_variance_resident": "as in threshold",
            "demographic_variance_mutant": "as in threshold",
        },
        "thresholds": {
            "parameter": "the sweep path (a linked group's axis)",
            "at": "JSON text of the other swept values",
            "analytic": "the analytic threshold (null if none in the swept range)",
            "analytic_message": "the analytic finding in words",
            "observed": "where the observed fixed fraction crosses the neutral expectation",
            "observed_low": "lower end of its 95% profile-likelihood interval (null: beyond the range)",
            "observed_high": "upper end of its 95% profile-likelihood interval (null: beyond the range)",
            "observed_message": "the observed finding in words",
            "observed_add_points": "sweep values to add where the points are too far apart",
            "analytic_in_interval": "true when the analytic threshold lies within the observed interval",
            "replacement": "variable environment with density dependence: where the resident stops invading "
                           "back (between it and the analytic threshold the two coexist; null elsewhere)",
            "replacement_in_interval": "true when the replacement threshold lies within the observed interval",
        },
    },
}
# With [environment] (year types) a point's prediction is the stochastic theory's
# (docs/environments.md): the finite-N keys (analysis.fixation.COLUMNS) are absent, and these
# are added to each object of `points` (in threshold and compare alike; `prediction` is
# compare's own key already) and, in threshold, to each object of `thresholds`.
_ENVIRONMENT_POINT_KEYS = {
    "environment": "the year types, their probabilities and how years are drawn, in words",
    "resident_invades_back": "true where the resident, rare, invades the mutant's environment back "
    "(then the two coexist)",
    "resident_return_fitness": "the resident's invasion fitness in the mutant's fluctuating "
    "environment (the same years), where the mutant invades; null elsewhere",
    "resident_return_census": "the mutant's mean census as resident, where the mutant invades: "
    "with resident_return_fitness w, N |log w| < 1 puts the resident's return within drift",
    "invasion_fitness_se": "standard error of invasion_fitness (delta method)",
    "log_invasion_fitness_se": "batch-means standard error of log(invasion_fitness)",
    "establishment_probability_se": "standard error of establishment_probability",
    "neutral_expectation_se": "standard error of neutral_expectation",
    "stochastic_growth_rate": "the mutant's density-free log lambda_s: the long-run mean of "
    "log(N_t+1 / N_t), by simulation of the random matrix product",
    "stochastic_growth_rate_se": "its batch-means standard error",
    "small_noise_approximation": "Tuljapurkar's (1982) approximation of the mutant's log lambda_s "
    "(null for Markov switching)",
    "resident_stochastic_growth_rate": "the resident's density-free log lambda_s",
    "resident_stochastic_growth_rate_se": "its batch-means standard error",
    "resident_small_noise_approximation": "Tuljapurkar's approximation of the resident's log lambda_s",
}
JSON_KEYS["threshold"]["points, with [environment]"] = _ENVIRONMENT_POINT_KEYS | {
    "prediction": '"stochastic": the stochastic theory gave the values'}
JSON_KEYS["threshold"]["thresholds, with [environment]"] = {
    "standard_error": "standard error of value (from the stochastic invasion fitness's)",
    "replacement": "where the resident stops invading back (between it and value the two coexist; "
    "null where it does not)",
    "replacement_standard_error": "standard error of replacement",
}
JSON_KEYS["compare"]["points, with [environment]"] = _ENVIRONMENT_POINT_KEYS

# `broodline bench --scaling --json` prints a list of these objects (sim.bench_scaling states them)
JSON_KEYS["bench-scaling"] = {"[]": SCALING_KEYS}


def _show_table(table) -> None:
    import pandas as pd

    with pd.option_context("display.width", 160, "display.max_columns", 30,
                           "display.float_format", "{:.4g}".format):
        print(table.to_string(index=False))


def _trait_run(path) -> bool:
    from .trait import is_trait_run

    return is_trait_run(path)


# -- threshold ------------------------------------------------------------------------
def threshold_report(config, *, parameters=None, bracket=None, sensitivities=False) -> dict:
    """What ``broodline threshold`` prints: predictions per sweep point and thresholds.

    Returns a dict with ``resident``, ``mutant``, ``points`` (a DataFrame,
    see ``analysis.predict_sweep``) and ``thresholds`` (ThresholdResult list,
    see ``analysis.sweep_thresholds``).
    """
    from .sweep import predict_sweep, sweep_thresholds

    points = predict_sweep(config)
    thresholds = sweep_thresholds(config, parameters=parameters, bracket=bracket)
    out = {
        "resident": config.invasion.resident,
        "mutant": config.invasion.mutant,
        "points": points,
        "thresholds": thresholds,
    }
    if sensitivities:  # issue 12
        from .sensitivity import sweep_sensitivities

        out["sensitivities"] = sweep_sensitivities(config)
    return out


# The random-years theory's columns in `threshold`'s table, in short (every column is in --json)
_YEARS_SHOWN = {"invasion_fitness_se": "fitness SE", "resident_invades_back": "resident returns",
                "resident_return_fitness": "return fitness"}
YEARS_LEGEND = (
    "fitness SE: the invasion fitness's standard error; resident returns: whether the resident, "
    "rare, invades the mutant back, with its invasion fitness there (return fitness). The other "
    "standard errors, the stochastic growth rates and their small-noise approximations: --json."
)


def _years_columns_shown(points):
    """``threshold``'s table with year types: the columns of ``_YEARS_SHOWN`` in words, the
    rest of the random-years theory's left to --json; and the legend for them."""
    import textwrap

    from .varying_years import STOCHASTIC_COLUMNS

    hidden = [c for c in STOCHASTIC_COLUMNS if c in points and c not in _YEARS_SHOWN]
    if points["density_index"].isna().all():  # no equilibrium density index when years vary
        hidden.append("density_index")
    shown = points.drop(columns=hidden)
    shown["invasion_fitness_se"] = shown["invasion_fitness_se"].map(lambda v: f"{v:.2g}")
    shown["resident_invades_back"] = shown["resident_invades_back"].map(lambda v: "yes" if v else "no")
    shown["resident_return_fitness"] = shown["resident_return_fitness"].map(
        lambda v: f"{v:.4g}" if v == v else "-")
    return shown.rename(columns=_YEARS_SHOWN), "\n".join(textwrap.wrap(YEARS_LEGEND, width=100))


def cmd_threshold(args) -> int:
    from sim.config import load_config

    config = load_config(args.config)
    if config.invasion is None:
        evolving = (" (this config evolves a trait, [trait]: its prediction is `broodline invasibility "
                    f"{args.config} -o DIR`)" if config.trait is not None else "")
        raise UserError(f"{args.config}: needs an [invasion] table naming the resident and the mutant{evolving}")
    result = threshold_report(
        config,
        parameters=args.parameter or None,
        bracket=tuple(args.bracket) if args.bracket else None,
        sensitivities=args.sensitivities,
    )
    extra = {"sensitivities": _records(result["sensitivities"])} if args.sensitivities else {}
    if args.json:
        print(
            json.dumps(
                {
                    "resident": result["resident"],
                    "mutant": result["mutant"],
                    "points": _records(result["points"]),
                    "thresholds": [jsonable(t.as_dict()) for t in result["thresholds"]],
                    **extra,
                },
                indent=2,
            )
        )
        return 0
    print(f"resident {result['resident']!r}, mutant {result['mutant']!r}")
    from .comparison import theory_table_text, threshold_lines
    from .fixation import shown_finite_columns  # the finite-N columns in short, notes below

    points = result["points"]
    if "environment" in points:  # year types: say once what they are and which theory spoke
        print(f"environment: {points['environment'].iloc[0]}")
        print("prediction: stochastic theory (invasion fitness = exp of the mutant's long-run "
              "growth rate in the resident's fluctuating environment; SE from batch means)")
        points = points.drop(columns=["environment", "prediction"])
        points, years_note = _years_columns_shown(points)
    else:
        years_note = ""
    points, notes = shown_finite_columns(points)
    print(theory_table_text(points))
    for note in (years_note, notes):
        if note:
            print(note)
    if result["thresholds"]:
        print("\nthresholds:")
        for line in threshold_lines(config, result["thresholds"]):
            print(f"  {line}")
    if args.sensitivities:
        print("\nsensitivities of the mutant's invasion fitness (Caswell 2001, ch. 9):")
        import pandas as pd

        with pd.option_context("display.width", 160, "display.max_columns", 30,
                               "display.float_format", "{:.4g}".format):
            print(result["sensitivities"].to_string(index=False))
    return 0


# -- compare --------------------------------------------------------------------------
def _warn_incomplete(command: str, path) -> None:
    """One plain warning line on stderr for a results file that is not complete."""
    import sys

    from .comparison import incomplete_message

    message = incomplete_message(path)
    if message:
        print(f"broodline {command}: warning: {message}", file=sys.stderr)


def cmd_compare(args) -> int:
    import warnings

    from .comparison import IncompleteResultsWarning, compare, compare_thresholds

    path = _results(args.results)
    if _trait_run(path):
        from .trait_commands import compare_trait_run

        return compare_trait_run(args, show=_show_table, records=_records)
    if args.csv:
        free_outputs([args.csv], args.overwrite, inputs=[path], option="--csv")
    _warn_incomplete("compare", path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IncompleteResultsWarning)
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
    from .comparison import compare_text
    from .varying_years import STOCHASTIC_COLUMNS

    if "environment" in table:  # year types: said once; their standard errors are in --json
        print(f"environment: {table['environment'].iloc[0]}\nprediction: stochastic theory")
        table = table.drop(columns=[c for c in STOCHASTIC_COLUMNS if c in table])

    print(compare_text(table, thresholds))


# -- plot and report --------------------------------------------------------------------
def cmd_plot(args) -> int:
    from .plots import FIGURES, plot

    path = _results(args.results)
    out = Path(args.output)
    if out.exists() and not out.is_dir():
        raise UserError(f"-o {out}: exists and is not a folder")
    if _trait_run(path):
        from .trait_commands import plot_trait_run

        return plot_trait_run(args, )
    free_outputs(
        [out / f"{n}.{e}" for n in FIGURES for e in ("png", "svg")] if out.is_dir() else [],
        args.overwrite, inputs=[path],
    )
    figs = plot(path, out)
    for name, files in figs.files.items():
        print(f"{name}: {files['png']}  {files['svg']}")
    return 0


def cmd_report(args) -> int:
    import warnings

    from .comparison import IncompleteResultsWarning
    from .reporting import report

    path = _results(args.results)
    free_outputs([args.output], args.overwrite, inputs=[path])
    _warn_incomplete("report", path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IncompleteResultsWarning)
        written = report(path, args.output)
    print(f"report written to {written}")
    return 0


def cmd_export(args) -> int:
    from .export import export

    path = _results(args.results)
    try:
        written = export(path, args.what, args.output, overwrite=args.overwrite)
    except FileExistsError:
        raise
    except ValueError as err:
        raise UserError(str(err)) from None
    print(f"{args.what} written to {written}")
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
    names = ", ".join(f"{p.name}" for p in sorted(out_dir.glob("*.png")))
    print(f"\nFigures: {out_dir}/ {names} (and .svg)")
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
    p.add_argument("--json", action="store_true", help="print JSON (keys: docs/commands.md)")
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
    p.add_argument(
        "--sensitivities",
        action="store_true",
        help="also the sensitivity, elasticity and selection gradient of the mutant's "
        "invasion fitness to each vital rate",
    )
    p.set_defaults(func=cmd_threshold)
    from .locate_commands import register_locate, register_locate_bench

    register_locate(sub)
    register_locate_bench(sub)

    p = sub.add_parser("compare", help="observed fixation in a results file against the prediction")
    p.add_argument("results", help="results file (.h5) of an invasion experiment")
    p.add_argument("--json", action="store_true", help="print JSON (keys: docs/commands.md)")
    p.add_argument("--csv", metavar="FILE", help="also write the per-point table as CSV")
    p.add_argument("--overwrite", action="store_true", help="replace an existing CSV file")
    p.set_defaults(func=cmd_compare)

    p = sub.add_parser("plot", help="figures of a results file (PNG and SVG)")
    p.add_argument("results", help="results file (.h5), with or without [invasion]")
    p.add_argument("-o", "--output", required=True, help="folder for the figures")
    p.add_argument("--overwrite", action="store_true", help="replace existing figures")
    p.set_defaults(func=cmd_plot)

    p = sub.add_parser("report", help="a self-contained HTML report of a results file")
    p.add_argument("results", help="results file (.h5), with or without [invasion]")
    p.add_argument("-o", "--output", required=True, help="HTML file to write")
    p.add_argument("--overwrite", action="store_true", help="replace an existing report")
    p.set_defaults(func=cmd_report)

    p = sub.add_parser("export", help="a table of a results file as CSV (or Parquet with pyarrow)")
    p.add_argument("results", help="results file (.h5)")
    p.add_argument("--what", required=True, choices=("replicates", "trajectories", "points"),
                   help="one row per replicate, per recorded census (long form), or per sweep point")
    p.add_argument("-o", "--output", required=True, help="file to write: NAME.csv or NAME.parquet")
    p.add_argument("--overwrite", action="store_true", help="replace an existing file")
    p.set_defaults(func=cmd_export)

    from .lab import register as register_lab  # `broodline lab` (analysis/lab/command.py)

    register_lab(sub)
