"""A self-contained HTML report of a results file (figures embedded as base64 PNG).

An invasion experiment is compared with the invasion theory (the stochastic one
where years vary, ``[environment]``); a trait run (``[trait]``) with the singular
efforts of adaptive dynamics (``analysis.trait``); any other run gets its outcomes.
"""

from __future__ import annotations

import base64
import html
import json
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from sim.config import sweep_factors, swept_paths, swept_values
from sim.describe import describe_environment
from sim.store import read_attrs, read_point_configs, read_points, read_replicates

from .comparison import (
    FIXED,
    LOST,
    SHOWN_COLUMNS,
    IncompleteResultsWarning,
    compare,
    compare_thresholds,
    experiment_config,
    incomplete_message,
    warn_if_incomplete,
)
from .plots import parameter_words, plot

__all__ = ["CAUTIONS", "report", "describe_allele", "verdict_text", "trait_verdict_text"]

CAUTIONS = (
    "broodline is a conceptual modelling tool for exploring life-history theory. This report "
    "describes the model as configured, not any real population or species. It is not advice for "
    "managing real populations: harvest, conservation or pest-control decisions need field data, "
    "models fitted to them, and the local regulations and authorities that apply; defer to them."
)

_LIMITS = (
    "The theory assumes a resident at its deterministic equilibrium and mutants rare enough not "
    "to change it. Finite populations drift: near a threshold, observed fixation falls between "
    "the neutral expectation and the establishment probability, points there are expected to be "
    "inconclusive, and small populations can depart from the prediction."
)

_LIMITS_IN_YEARS = (
    "The theory assumes an infinite resident following its mean-field dynamics through the "
    "years (it has no fixed equilibrium when years vary), years independent of the population, "
    "and mutants rare enough not to change the resident; its long-run growth rates are time "
    "averages over a finite number of simulated years, with the standard errors they report. "
    "Between the invasion threshold and the replacement threshold (where the resident invades "
    "back) the two alleles invade each other and a point there has no prediction. Finite "
    "populations drift: near a threshold, observed fixation falls between the neutral "
    "expectation and the establishment probability, points there are expected to be "
    "inconclusive, and small populations can depart from the prediction (no finite-population "
    "prediction exists yet for random years)."
)

_LIMITS_TRAIT = (
    "The theory (adaptive dynamics) assumes a resident at its deterministic equilibrium, rare "
    "mutants, and mutations rare enough that one substitution is over before the next arises; "
    "its singular efforts are read off the grid of efforts the run uses. A finite population "
    "with mutation keeps some spread of efforts and wanders around an attractor, so a replicate "
    "is called at the attractor when its mean effort over the closing tenth of the run lies "
    "within one grid step of it: the grid's resolution, not a statistical test."
)

_COUNTED = {
    "census": "everyone at the census",
    "breeders": "the breeders",
    "offspring": "the offspring born",
}

_STYLE = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; max-width: 1100px;
       margin: 2em auto; padding: 0 1em; color: #222; line-height: 1.45; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 1.6em; border-bottom: 1px solid #ddd; }
table { border-collapse: collapse; font-size: 0.8em; margin: 0.8em 0; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.35em; text-align: right; }
th { background: #f2f2f2; } td.text { text-align: left; }
td.agrees { background: #e3f4e3; } td.disagrees { background: #f8dcdc; }
td.inconclusive { background: #f6f1dc; }
td.agrees, td.disagrees, td.inconclusive { white-space: nowrap; }
div.scroll { overflow-x: auto; }
figure { margin: 1em 0; } figure img { max-width: 100%; border: 1px solid #eee; }
figcaption { font-size: 0.9em; color: #555; }
.caution { background: #fff6e0; border-left: 4px solid #e0a800; padding: 0.6em 1em; }
.verdict { background: #eef4fb; border-left: 4px solid #3a78c2; padding: 0.6em 1em; }
footer { margin-top: 2em; font-size: 0.8em; color: #666; }
"""


def _g(v) -> str:
    return f"{v:g}" if isinstance(v, (int, float)) else html.escape(str(v))


def _care_words(a) -> str:
    """An allele's parental effects in words (``orphan_survival``, ``brood_effect``); "" without."""
    out = []
    orphan = getattr(a, "orphan_survival", None)
    if orphan is not None and a.breeding == "semelparous":
        out.append(f"its young are all orphaned and survive {_g(orphan)} (orphan survival)")
    elif orphan is not None:
        out.append(f"young whose parent survives the season survive {_g(a.juvenile_survival)} "
                   f"(parental care), orphans {_g(orphan)}")
    if getattr(a, "brood_effect", "none") == "exponential" and getattr(a, "brood_scale", None) is not None:
        out.append(f"in a brood of b, each young's survival is multiplied by exp(-(b - 1) / "
                   f"{_g(a.brood_scale)}): larger broods, less per head")
    return "; " + "; ".join(out) if out else ""


def _tradeoff_words(tradeoff) -> str:
    """The effort trade-off's two curves, as formulas in words."""
    if tradeoff is None:
        return "on the [tradeoff] curve"
    t = tradeoff
    return (
        f"on the trade-off fecundity B(E) = {_g(t.max_fecundity)} E^{_g(t.fecundity_shape)} and "
        f"survival of a breeder P(E) = {_g(t.max_adult_survival)} (1 - E)^{_g(t.survival_shape)}"
    )


def describe_allele(a, tradeoff=None) -> str:
    """One allele's schedule in words (from its config section), with its parental effects.

    ``tradeoff`` (the config's ``[tradeoff]``) spells out an effort allele's curves.
    """
    care = _care_words(a)
    if a.breeding == "table":
        return (
            f"an age table: fecundity {_g(a.fecundity)} and survival {_g(a.adult_survival)} by "
            f"census age, juvenile survival {_g(a.juvenile_survival)}{care}"
        )
    if a.breeding == "effort":
        return (
            f"reproductive effort E = {_g(a.effort)}: each season from age {a.maturity_age} it puts "
            f"that share of its resources into breeding, {_tradeoff_words(tradeoff)} (E = 1 breeds "
            f"once); juvenile survival {_g(a.juvenile_survival)}{care}"
        )
    if a.breeding == "semelparous":
        at = f" at age {a.maturity_age}" if a.maturity_age > 1 else " at age 1"
        return (
            f"semelparous: breeds once{at} with mean fecundity {_g(a.fecundity)}, then dies; "
            f"juvenile survival {_g(a.juvenile_survival)}{care}"
        )
    at = f" from age {a.maturity_age}"
    return (
        f"iteroparous: breeds every season{at} with mean fecundity {_g(a.fecundity)}, adult "
        f"survival {_g(a.adult_survival)}, juvenile survival {_g(a.juvenile_survival)}{care}"
    )


# config words as prose spells them (the names of published laws capitalised)
_PROSE = {"beverton-holt": "Beverton-Holt", "ricker": "Ricker", "poisson": "Poisson",
          "negative-binomial": "negative binomial"}


# where density dependence acts (``density.acts_on``), in words
_PLACEMENT_WORDS = {
    "recruitment": "recruitment (the survival of young to age 1)",
    "fecundity": "fecundity",
    "adult-survival": "adult survival",
    "all-survival": "all survival (adults' and young's)",
}


def _path_words(path: str) -> str:
    """A config path in words (as the figures label it), the path itself on hover."""
    return f'<span title="{html.escape(path)}">{html.escape(parameter_words(path))}</span>'


def _plain_paths(text: str, config) -> str:
    """Escaped ``text`` with every swept config path in it replaced by its words."""
    out = html.escape(text)
    for path in sorted(swept_paths(config) if config is not None else [], key=len, reverse=True):
        out = out.replace(html.escape(path), _path_words(path))
    return out


def _density_words(config) -> str:
    d = config.density
    if d.form == "none":
        return "no density dependence (the alleles grow without limit; the model has no equilibrium)"
    swept = swept_values(config, "density.capacity")
    k = f"capacity K swept over {', '.join(_g(v) for v in swept)}" if swept else f"capacity K = {d.capacity:g}"
    return (
        f"{_PROSE.get(d.form, d.form)} density dependence with {k}, acting on "
        f"{_PLACEMENT_WORDS.get(d.placement, d.placement)}, the density index counting "
        f"{_COUNTED[d.counted]}"
    )


def _sweep_words(config) -> str:
    if not swept_paths(config):
        return ""
    return (
        " The experiment sweeps "
        + "; ".join(
            f"the {_path_words(k)} over {', '.join(_g(x) for x in v)}"
            for f in sweep_factors(config)
            for k, v in f.values.items()
        )
        + "."
    )


def _environment_text(config) -> str:
    """The year types in words (as ``broodline check`` says them); "" in a constant environment."""
    if config.environment is None:
        return ""
    return (
        "<p>Years vary: each season is a year of one of several types, and a year multiplies "
        "every allele's fecundity, adult survival and juvenile survival by its own factors (1 "
        "where none is given) before density dependence acts. The environment: "
        f"{html.escape(describe_environment(config))}.</p>"
    )


def _experiment_text(config) -> str:
    inv, exp = config.invasion, config.experiment
    alleles = {a.name: a for a in config.allele}
    start = (
        "at its equilibrium"
        if inv.resident_count == "equilibrium"
        else f"at {inv.resident_count} individuals"
    )
    density = _density_words(config)
    offspring = _PROSE.get(config.offspring.distribution, config.offspring.distribution) + (
        f" (dispersion {config.offspring.dispersion:g})" if config.offspring.dispersion else ""
    )
    sweep = _sweep_words(config)
    stop = "until one allele is left" if exp.stop == "fixation" else "for a fixed number of seasons"
    return (
        f"<p>A resident <b>{html.escape(inv.resident)}</b> "
        f"({describe_allele(alleles[inv.resident], config.tradeoff)}) "
        f"starts {start}. Into it, {inv.mutant_count} mutant"
        f"{'s' if inv.mutant_count > 1 else ''} <b>{html.escape(inv.mutant)}</b> "
        f"({describe_allele(alleles[inv.mutant], config.tradeoff)}) {'are' if inv.mutant_count > 1 else 'is'} "
        f"introduced at age 1. The population has {density}; offspring numbers are {offspring}."
        f"{sweep}</p>{_environment_text(config)}"
        f"<p>Each sweep point was run {exp.replicates} times ({exp.engine} engine), "
        f"{stop}, at most {exp.max_steps} seasons, from seed {exp.seed}.</p>"
    )


_CONSTANT_THEORY = (
    "<p>A rare mutant invades when its invasion fitness, the dominant eigenvalue of its "
    "projection matrix in the resident's equilibrium environment, exceeds 1 (Metz, Nisbet "
    "&amp; Geritz 1992). Where it invades, the chance that the introduced mutants escape "
    "early loss is the survival probability of their branching process; where it does "
    "not, it should fix less often than a neutral allele, whose chance is its share of "
    "reproductive value.</p>"
)
_STOCHASTIC_THEORY = (
    "<p>The years vary, so the prediction is the stochastic theory's. A rare mutant invades "
    "when its invasion fitness exceeds 1: exp of its long-run growth rate (Lyapunov exponent) "
    "in the resident's fluctuating environment, the resident following its mean-field dynamics "
    "through the years (Metz, Nisbet &amp; Geritz 1992; Ferriere &amp; Gatto 1995); without "
    "density dependence, exp of the difference of the two alleles' stochastic growth rates "
    "(Tuljapurkar 1990). The chance that the introduced mutants escape early loss is the "
    "survival probability of their branching process in random years; a neutral allele's chance "
    "is its mean share of the random environment's reproductive values. Each is a time average "
    "over simulated years (the same years for every sweep point), with a standard error.</p>"
    "<p>With density dependence the roles are also swapped on the same years: the replacement "
    "threshold is where the resident, rare, stops invading the mutant back. Between the invasion "
    "and the replacement thresholds each invades the other, a point there has no prediction, and "
    "a large population fixes the mutant more often than a neutral allele only past the "
    "replacement threshold.</p>"
)


def _threshold_item(r, config) -> str:
    """One analytic threshold of ``compare_thresholds`` in words (swept paths as words)."""
    at = json.loads(r.at) if isinstance(r.at, str) else {}
    where = f" (with {_at_text(at)})" if at else ""
    # with density dependence in varying years the message also names the replacement threshold
    return f"<li>{_plain_paths(r.analytic_message, config)}{where}</li>"


def _at_text(at: dict) -> str:
    return html.escape(", ").join(
        f"{_path_words(k)} = {_g(v)}" for k, v in at.items()
    )


def _prediction_text(table: pd.DataFrame, thresholds: pd.DataFrame, config) -> str:
    parts = [_STOCHASTIC_THEORY if config.environment is not None else _CONSTANT_THEORY]
    if config.density.form == "none":
        parts.append(
            "<p>Without density dependence the resident has no equilibrium: the invasion "
            "fitness shown is the ratio of the mutant's to the resident's growth rate, and "
            "both alleles grow, so few replicates can end with the mutant fixed.</p>"
        )
    if not table["problem"].eq("").all():
        parts.append(
            "<p>Some points have no prediction: "
            + "; ".join(html.escape(p) for p in table["problem"].unique() if p)
            + ".</p>"
        )
    if len(thresholds):
        items = "".join(_threshold_item(r, config) for r in thresholds.itertuples())
        head = "Thresholds of the stochastic theory" if config.environment is not None else "Analytic thresholds"
        parts.append(f"<p>{head}:</p><ul>{items}</ul>")
    return "".join(parts)


def _capacity_words(config) -> str:
    """Which K the verdict is for: the capacity, or "at each K" where it is swept."""
    if config is None or config.density.form == "none":
        return ""
    if swept_values(config, "density.capacity"):
        return " (K swept: see the table for each K)"
    return f" at K = {config.density.capacity:g}"


def _plural(count: int, one: str, many: str) -> str:
    return f"{count} {one if count == 1 else many}"


def verdict_text(table: pd.DataFrame, thresholds: pd.DataFrame, config=None) -> str:
    """The experiment's verdict in words: agreement counts and the thresholds side by side."""
    counts = table["agreement"].value_counts()
    n = len(table)
    words = [
        f"Of {_plural(n, 'sweep point', 'sweep points')}{_capacity_words(config)}, "
        + ", ".join(
            _plural(int(counts.get(k, 0)), one, many)
            for k, one, many in (
                ("agrees", "agrees", "agree"),
                ("inconclusive", "is inconclusive", "are inconclusive"),
                ("disagrees", "disagrees", "disagree"),
            )
        )
        + " with the prediction (the 95% Wilson interval of the observed fixation against the "
        "neutral expectation, on the side the invasion fitness predicts; replicates that did "
        "not resolve are left out, never counted as losses)."
    ]
    if counts.get("disagrees", 0):
        bad = table.loc[table["agreement"] == "disagrees", "point"].tolist()
        words.append(
            f"Points that disagree: {bad}. Look at their replicates, the number of "
            "replicates and the population size before drawing conclusions."
        )
    theory = "stochastic invasion" if config is not None and config.environment is not None else "analytic"
    for r in thresholds.itertuples():
        at = json.loads(r.at)
        where = f" (at {_at_text(at)})" if at else ""
        along = _path_words(r.parameter) if config is None or r.parameter in swept_paths(config) \
            else html.escape(r.parameter)
        if np.isfinite(r.analytic) and (np.isfinite(r.observed_low) or np.isfinite(r.observed_high)
                                        or np.isfinite(r.observed)):
            inside = "lies inside" if r.analytic_in_interval else "lies outside"
            back = ""
            if np.isfinite(r.replacement) and r.replacement != r.analytic:
                back = (f" The replacement threshold {float(f'{r.replacement:.4g}'):g} (where the resident "
                        "stops invading back; the two coexist in between) "
                        f"{'lies inside' if r.replacement_in_interval else 'lies outside'} it.")
            words.append(
                f"Along the {along}{where}: "
                f"{_plain_paths(r.observed_message, config)}. The {theory} threshold "
                f"{float(f'{r.analytic:.4g}'):g} {inside} that interval.{back}"
            )
        else:
            words.append(
                f"Along the {along}{where}: "
                f"{_plain_paths(r.observed_message, config)}; {_plain_paths(r.analytic_message, config)}."
            )
    return " ".join(words)


def _header(c: str, swept: list[str]) -> str:
    if c in swept:
        return _path_words(c)
    return html.escape(c.replace("_", " "))


def _reasons_html(table: pd.DataFrame) -> str:
    """Why each point got its agreement, under the table (one line per agreement and reason)."""
    if "reason" not in table:
        return ""
    items = []
    for (agreement, reason), rows in table.groupby(["agreement", "reason"], sort=False):
        points = rows["point"].tolist()
        which = ("Point " if len(points) == 1 else "Points ") + ", ".join(str(p) for p in points)
        items.append(f"<li>{which}: {html.escape(str(agreement))}, {html.escape(str(reason))}.</li>")
    return f'<p>Why each point agrees or not:</p><ul class="reasons">{"".join(items)}</ul>'


def _table_html(table: pd.DataFrame, swept: list[str]) -> str:
    """The results table, narrow enough for the page; the reasons follow it as a list."""
    cols = ["point", *swept, *SHOWN_COLUMNS]

    def cell(c, v):
        if c in ("verdict", "agreement"):
            return f'<td class="{f"text {v}" if c == "agreement" else "text"}">{html.escape(str(v))}</td>'
        return None

    return _html_table(table, cols, [_header(c, swept) for c in cols], cell) + _reasons_html(table)


def _html_table(table: pd.DataFrame, cols: list[str], headers: list[str], cell, *, missing: str | None = None) -> str:
    """``cols`` of ``table`` as an HTML table under ``headers`` (already HTML): ``cell(column, value)``
    gives a cell's HTML, or None for the plain one (numbers to 4 significant digits; a
    non-finite number as ``missing``, if given)."""
    rows = []
    for _, r in table.iterrows():
        cells = []
        for c in cols:
            v = r[c]
            special = cell(c, v)
            if special is not None:
                cells.append(special)
            elif isinstance(v, (float, np.floating)):
                shown = missing if missing is not None and not np.isfinite(v) else f"{v:.4g}"
                cells.append(f"<td>{shown}</td>")
            else:
                cells.append(f"<td>{html.escape(str(v))}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    head = "".join(f"<th>{h}</th>" for h in headers)
    return (f'<div class="scroll"><table><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")


def _figure(png: Path, caption: str) -> str:
    data = base64.b64encode(Path(png).read_bytes()).decode("ascii")
    return (
        f'<figure><img alt="{html.escape(caption)}" src="data:image/png;base64,{data}">'
        f"<figcaption>{html.escape(caption)}</figcaption></figure>"
    )


_CAPTIONS = {
    "fixation": "Observed fixation fraction of the mutant at each sweep point (95% Wilson "
    "intervals), the branching-process establishment probability, the neutral "
    "expectation, and the analytic and observed thresholds.",
    "trajectories": "Share of {tracked} in a sample of replicates at a few sweep points, coloured "
    "by how each ended, and their census "
    "size below.",
    "outcomes": "How the replicates ended at each sweep point.",
    "invasion_fitness": "Invasion fitness of the mutant along the swept parameter; it invades "
    "where the curve is above 1.",
    "invasion_map": "Observed fixation on the plane of the two swept parameters (colour), with "
    "the analytic invasion boundary, where invasion fitness is 1, drawn over it.",
}


def _figures_html(path, figures_dir, **tables) -> str:
    with tempfile.TemporaryDirectory() as tmp:
        figs = plot(path, figures_dir or tmp, **tables)
        tracked = "the mutant" if experiment_config(path).invasion is not None else "the first allele"
        return "".join(_figure(figs.png(name), _CAPTIONS[name].format(tracked=tracked))
                       for name in _CAPTIONS if name in figs.files)


def _cautions(limits: str = _LIMITS) -> tuple:
    esc = html.escape
    return ("Cautions", f'<p class="caution">{esc(CAUTIONS)}</p><p>{esc(limits)}</p>')


def _invasion_sections(path, config, figures_dir, incomplete, table, thresholds) -> dict:
    if table is None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", IncompleteResultsWarning)  # warned once already
            table = compare(path)
    thresholds = compare_thresholds(path, table) if thresholds is None else thresholds
    swept = swept_paths(config)
    figures = _figures_html(path, figures_dir, table=table, thresholds=thresholds)
    mutation = (
        ""
        if not config.mutation_model().active
        else ("<p>Mutation is on in this experiment; the invasion theory above ignores it.</p>")
    )
    left_out, rising = int(table["left_out"].sum()), int(table["capped_rising"].sum())
    notes = []
    if incomplete:
        notes.append(f'<p class="caution">{html.escape(incomplete)}</p>')
    if left_out:
        notes.append(
            f"<p>{_plural(left_out, 'replicate', 'replicates')} did not resolve (undecided, or "
            "capped without a rising mutant share): they are left out of the fractions, never "
            "counted as losses, and a point whose verdict they could change is inconclusive.</p>"
        )
    if rising:
        notes.append(
            f"<p>{_plural(rising, 'replicate', 'replicates')} passed the population cap while "
            "the mutant's share rose; they count as established.</p>"
        )
    return {
        "experiment": ("The experiment", _experiment_text(config)),
        "prediction": ("The prediction", _prediction_text(table, thresholds, config) + mutation),
        "results": ("Results", _table_html(table, swept) + "".join(notes)),
        "figures": ("Figures", figures),
        "verdict": ("Verdict", f'<p class="verdict">{verdict_text(table, thresholds, config)}</p>'),
        "cautions": _cautions(_LIMITS if config.environment is None else _LIMITS_IN_YEARS),
    }


def outcome_counts(path) -> pd.DataFrame:
    """Replicates per sweep point by outcome, for any results file (a fixed one by its winner)."""
    reps = read_replicates(path)
    label = np.where(reps["winner"].astype(str) != "", reps["winner"].astype(str) + " fixed", reps["outcome"])
    label = np.where(reps["outcome"].isin([FIXED, LOST]), reps["outcome"], label)
    points = read_points(path)
    counts = pd.crosstab(reps["point"], label).reindex(points["point"], fill_value=0)
    counts.columns.name = None
    counts = counts.reset_index(drop=True)
    counts.insert(0, "replicates", counts.sum(axis=1))
    return pd.concat([points.reset_index(drop=True), counts], axis=1)


def _plain_sections(path, config, figures_dir, incomplete) -> dict:
    exp = config.experiment
    alleles = "".join(
        f"<li><b>{html.escape(a.name)}</b>: {describe_allele(a, config.tradeoff)}; {a.initial_count} at the start</li>"
        for a in config.allele
    )
    stop = "until one allele is left" if exp.stop == "fixation" else "for a fixed number of seasons"
    text = (
        f"<p>Alleles, without an invasion table (no theory to compare with):</p><ul>{alleles}</ul>"
        f"<p>The population has {_density_words(config)}.{_sweep_words(config)}</p>"
        f"<p>Each sweep point was run {exp.replicates} times ({exp.engine} engine), {stop}, at "
        f"most {exp.max_steps} seasons, from seed {exp.seed}.</p>"
    )
    counts = outcome_counts(path)
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in counts.columns)
    rows = "".join(
        "<tr>" + "".join(f"<td>{html.escape(_g(v) if isinstance(v, float) else str(v))}</td>" for v in r) + "</tr>"
        for r in counts.itertuples(index=False)
    )
    table = f'<div class="scroll"><table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table></div>'
    note = f'<p class="caution">{html.escape(incomplete)}</p>' if incomplete else ""
    return {
        "experiment": ("The experiment", text),
        "results": ("Outcomes", table + note),
        "figures": ("Figures", _figures_html(path, figures_dir)),
        "cautions": _cautions(),
    }


# -- trait runs ([trait]: effort alleles on a grid, mutating to neighbours) -----------------------
_TRAIT_CAPTION = (
    "Mean effort of each replicate's census over the seasons (a line; the band is plus and minus "
    "one standard deviation of effort among individuals; up to 8 replicates), one panel per sweep "
    "point, over horizontal lines at the point's singular efforts from the theory (solid black: "
    "evolutionarily stable attractor; dotted red: repeller; dashed purple: branching point). A run "
    "that follows the theory moves towards the solid line and stays in a band around it."
)
_TRAIT_VERDICTS = ("at attractor", "away from attractor", "extinct", "no attractor predicted")
_TRAIT_COLUMNS = {
    "point": "point", "replicate": "replicate", "final_step": "last season", "final_census": "last census",
    "final_mean_effort": "mean effort there", "final_sd_effort": "sd of effort there",
    "end_mean_effort": "mean effort, last tenth", "attractors": "attractors",
    "nearest_attractor": "nearest attractor", "distance": "distance", "grid_step": "grid step",
    "verdict": "verdict",
}


def _grid_words(grid) -> str:
    grid = np.asarray(grid, dtype=float)
    steps = np.diff(grid)
    if steps.size and np.allclose(steps, steps[0]):
        return f"{grid.size} efforts from {grid[0]:g} to {grid[-1]:g} in steps of {steps[0]:.4g}"
    return f"{grid.size} efforts: {', '.join(f'{v:g}' for v in grid)}"


def _trait_experiment_text(config) -> str:
    trait, exp = config.trait, config.experiment
    template = next(a for a in config.allele if a.name == trait.allele)
    rate = config.mutation.rate
    text = (
        f"<p>The effort allele <b>{html.escape(template.name)}</b> "
        f"({describe_allele(template, config.tradeoff)}) evolves on a grid of "
        f"{_grid_words(trait.grid())}, one allele per value. Every individual starts with effort "
        f"{trait.initial:g} ({template.initial_count} individuals at age 1); each offspring mutates to "
        f"a neighbouring grid value with probability {rate:g} (at an end of the grid, to its one "
        "neighbour), so a long run is a trait-substitution sequence.</p>"
        f"<p>The population has {_density_words(config)}.{_sweep_words(config)}</p>"
        f"{_environment_text(config)}"
        f"<p>Each sweep point was run {exp.replicates} times ({exp.engine} engine) for "
        f"{exp.max_steps} seasons, recording the census every {exp.record_every}, from seed "
        f"{exp.seed}.</p>"
    )
    return text


def _singular_words(analysis) -> str:
    kinds = [s for s in analysis.singular if s.kind != "not viable"]
    if not kinds:
        return "no singular effort on the grid"
    def effort(s):
        se = f" (SE {s.effort_se:.2g})" if np.isfinite(s.effort_se) else ""
        return f"E = {s.effort:.4g}{se}"

    return "; ".join(f"{effort(s)} ({html.escape(s.position)}): {html.escape(s.kind)}" for s in kinds)


def _years_drawn(analyses) -> str:
    """The number of recorded seasons of the theory's year draws, as words."""
    draws = analyses[0].model.year_draws
    return f"{draws.n_batches * draws.batch_length:,}"


def _trait_prediction_text(path, config) -> tuple[str, list]:
    """The adaptive-dynamics prediction per sweep point, and each point's analysis."""
    from .trait import trait_analysis

    placement = config.density.placement if config.density.form != "none" else None
    effort = next(a for a in config.alleles if a.breeding == "effort")
    cared, brood = effort.orphan_survival is not None, effort.brood_effect != "none"
    young = "B(E)"
    if brood:
        young = "the expected survivors of a brood of mean B(E), E[b x^(b - 1)]"
    if cared:
        young += " (P(E) c_care + (1 - P(E)) c_orphan)"
    if config.environment is not None:  # random years: no simple principle is claimed
        maximised = None
    elif placement is None or (placement == "all-survival" and (config.density.form == "ceiling" or not cared)):
        maximised = ("the growth rate lambda (no density dependence, or density dependence on all "
                     "survival" + (" as a ceiling's cull after the season" if cared else "") + ")")
    elif placement in ("recruitment", "fecundity"):
        maximised = (f"R0, proportional to {young} / (1 - P(E)) (density dependence on recruitment or "
                     "fecundity alone)")
    else:  # with care a factor on all survival weighs cared and orphaned young: not a common factor
        maximised = None
    configs = read_point_configs(path)
    points = read_points(path)
    analyses = [trait_analysis(c) for c in configs]
    items = []
    for (_, row), a in zip(points.iterrows(), analyses):
        where = ", ".join(f"{_path_words(k)} = {_g(row[k])}" for k in points.columns if k != "point")
        attractors = ", ".join(f"{e:.4g}" for e in a.attractors) or "none"
        items.append(
            f"<li>Point {int(row['point'])}{' (' + where + ')' if where else ''}: singular efforts "
            f"{_singular_words(a)}. Predicted attractor{'s' if len(a.attractors) != 1 else ''}: "
            f"{attractors}.</li>"
        )
    text = (
        "<p>Adaptive dynamics predicts where effort evolves. A rare mutant effort invades a resident "
        "at its equilibrium when its invasion fitness exceeds 1 (Metz, Nisbet &amp; Geritz 1992); "
        "effort moves along the selection gradient to singular efforts, where the gradient is zero, "
        "or to an end of [0, 1]. Each is classified (Geritz, Kisdi, Meszena &amp; Metz 1998): an "
        "evolutionarily stable attractor is where a run should end; a repeller is left behind; a "
        "branching point would split the population in two.</p>"
        + (f"<p>Here the winning effort maximises {maximised} (Mylius &amp; Diekmann 1995).</p>"
           if maximised else "")
        + ("<p>In random years the invasion fitness is the mutant's long-run growth in the environment "
           "the resident's fluctuating population sets (Metz, Nisbet &amp; Geritz 1992), computed on the "
           f"theory's year draws ({_years_drawn(analyses)} seasons): the singular efforts carry their "
           "sampling error.</p>" if config.environment is not None else "")
        + f"<ul>{''.join(items)}</ul>"
        + ("<p>The theory is computed on the run's grid of efforts (<code>broodline "
           "invasibility CONFIG -o DIR</code> draws its pairwise invasibility plot).</p>")
    )
    return text, analyses


def _trait_table_html(table: pd.DataFrame) -> str:
    cols = [c for c in _TRAIT_COLUMNS if c in table]

    def cell(c, v):
        if c == "attractors":
            return f"<td>{html.escape(', '.join(f'{a:.4g}' for a in v) or 'none')}</td>"
        if c == "verdict":
            cls = {"at attractor": "agrees", "away from attractor": "disagrees"}.get(v, "inconclusive")
            return f'<td class="text {cls}">{html.escape(str(v))}</td>'
        return None

    return _html_table(table, cols, [html.escape(_TRAIT_COLUMNS[c]) for c in cols], cell, missing="-")


def trait_verdict_text(table: pd.DataFrame) -> str:
    """A trait run's verdict in words: how many replicates ended at a predicted attractor."""
    counts = table["verdict"].value_counts()
    n = len(table)
    parts = [f"{int(counts[v])} {html.escape(v)}" for v in _TRAIT_VERDICTS if counts.get(v, 0)]
    parts += [f"{int(k)} {html.escape(str(v))}" for v, k in counts.items() if v not in _TRAIT_VERDICTS]
    text = (
        f"Of {_plural(n, 'replicate', 'replicates')}: {', '.join(parts)} (at attractor: the mean "
        "effort over the closing tenth of the run within one grid step of the nearest predicted "
        "evolutionarily stable attractor)."
    )
    from .trait import pooled_end_efforts, pooled_lines

    pooled = pooled_lines(pooled_end_efforts(table))
    if pooled:
        text += " Taken together: " + "; ".join(html.escape(line) for line in pooled) + "."
    away = table.loc[table["verdict"] == "away from attractor", ["point", "replicate"]]
    if len(away):
        text += (
            " Away from the attractor: "
            + ", ".join(f"point {p} replicate {r}" for p, r in away.itertuples(index=False))
            + ". A run may not have had the seasons to get there: look at its line in the figure "
            "(still moving, or settled elsewhere) before drawing conclusions."
        )
    return text


def _trait_figures_html(path, figures_dir) -> str:
    from .trait_plots import plot_trait

    with tempfile.TemporaryDirectory() as tmp:
        files = plot_trait(path, figures_dir or tmp)
        return _figure(files["trait"]["png"], _TRAIT_CAPTION)


def _trait_sections(path, config, figures_dir, incomplete) -> dict:
    from .trait import compare_trait

    note = f'<p class="caution">{html.escape(incomplete)}</p>' if incomplete else ""
    # a trait run's alleles are copies of one effort template ([trait]), which the effort theory
    # always covers (analysis.trait.effort_model refuses only effort alleles that differ)
    prediction, _ = _trait_prediction_text(path, config)
    table = compare_trait(path)
    results, verdict = _trait_table_html(table), trait_verdict_text(table)
    return {
        "experiment": ("The experiment", _trait_experiment_text(config)),
        "prediction": ("The prediction", prediction),
        "results": ("Results", results + note),
        "figures": ("Figures", _trait_figures_html(path, figures_dir)),
        "verdict": ("Verdict", f'<p class="verdict">{verdict}</p>'),
        "cautions": _cautions(_LIMITS_TRAIT),
    }


def report(
    path,
    out,
    *,
    figures_dir=None,
    table: pd.DataFrame | None = None,
    thresholds: pd.DataFrame | None = None,
) -> Path:
    """Write one self-contained HTML page about a results file.

    Parameters
    ----------
    path : path-like
        A results file of an invasion experiment.
    out : path-like
        The HTML file to write (its folder must exist).
    figures_dir : path-like, optional
        Where to keep the PNG/SVG figures; by default they are drawn in a
        temporary folder and only embedded.
    table, thresholds : DataFrame, optional
        ``compare(path)`` and ``compare_thresholds(path)``, if already computed.

    Returns
    -------
    Path
        ``out``.
    """
    out = Path(out)
    if not out.parent.exists():
        raise FileNotFoundError(f"output folder {str(out.parent)!r} does not exist")
    config = experiment_config(path)
    attrs = read_attrs(path)
    incomplete = warn_if_incomplete(path) if table is None else incomplete_message(path)
    if config.trait is not None:
        sections = _trait_sections(path, config, figures_dir, incomplete)
    elif config.invasion is None:
        sections = _plain_sections(path, config, figures_dir, incomplete)
    else:
        sections = _invasion_sections(path, config, figures_dir, incomplete, table, thresholds)
    title = f"broodline report: {html.escape(config.experiment.name)}"
    esc = html.escape
    body = "\n".join(
        f'<section id="{key}"><h2>{head}</h2>{text}</section>'
        for key, (head, text) in sections.items()
    )
    footer = (
        f"Results file {esc(str(path))}; broodline {esc(str(attrs.get('software_version')))}; "
        f"config hash {esc(str(attrs.get('config_hash', ''))[:12])}; "
        f"created {esc(str(attrs.get('created')))}."
    )
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title>
<meta name="viewport" content="width=device-width, initial-scale=1">
<style>{_STYLE}</style></head>
<body>
<h1>{title}</h1>
{body}
<footer>{footer}</footer>
</body></html>
"""
    out.write_text(page, encoding="utf-8")
    return out
