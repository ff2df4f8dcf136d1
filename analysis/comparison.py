"""Observed fixation in a results file set against a prediction.

Which replicates count (also in the README). A replicate counts when it
resolved: the mutant fixed, was lost, or everyone died (extinct: the mutant
did not fix). A replicate that passed ``max_population`` (capped) counts as
**established**, with the fixed ones, when the mutant's share of the census
was rising: higher at its last record than at the start and at the record
nearest half its seasons; once a growing lineage is far past its first
seasons it escapes loss with near certainty, and a rising share means it was
outgrowing the resident (the branching-process establishment probability is
tested against this rule). Other capped replicates and undecided ones
(``max_steps`` reached with both alleles present) are **left out**: never
counted as losses. Replicates not run yet (a stopped file) are **missing**;
they are a random sample of the planned ones, so they only shrink the sample.

The agreement rule. The observation is the 95% Wilson interval of
established / counted. The default prediction is the side of the neutral
expectation on which the mutant's fixation probability should fall: above it
where the mutant invades, below where it does not, at it where it is
neutral. The point **agrees** when the interval lies wholly on the predicted
side (neutral: contains the neutral expectation), **disagrees** when it lies
wholly on the other side (neutral: excludes it), and is **inconclusive** when
it contains the neutral expectation, when no replicate counted, or when the
left-out replicates could change the result: counting all of them as
established, or all as not, would give another result. ``reason`` says which.
Another prediction (a finite-population fixation probability, say) plugs in
through ``compare(..., prediction=...)``; ``prediction`` names the one used.
"""

from __future__ import annotations

import json
import textwrap
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sim.config import Config, ConfigError
from sim.status import resume_command
from sim.store import read_attrs, read_point_configs, read_points, read_replicates, read_trajectories
from sim.vocabulary import outcome_name

from .closedform import closed_form
from .estimates import ObservedThreshold, observed_threshold, wilson_interval
from .fixation import note_lines
from .sweep import predict_configs, sweep_thresholds
from .thresholds import more_crossings_words

__all__ = [
    "COMPARE_COLUMNS",
    "SHOWN_COLUMNS",
    "IncompleteResultsWarning",
    "SideOfNeutral",
    "PredictedFixation",
    "Judgement",
    "DRIFT_BAND",
    "drift_note",
    "judge",
    "agreement",
    "outcome_name",
    "capped_rising",
    "experiment_config",
    "compare",
    "observed_along",
    "compare_thresholds",
    "compare_text",
]


FIXED, LOST, EXTINCT, UNDECIDED, CAPPED = (
    outcome_name(o) for o in ("mutant-fixed", "mutant-lost", "extinct", "undecided", "capped")
)

COMPARE_COLUMNS = [
    "point",
    "replicates",
    FIXED,
    LOST,
    EXTINCT,
    UNDECIDED,
    CAPPED,
    "capped_rising",
    "counted",
    "established",
    "left_out",
    "missing",
    "fixed_fraction",
    "fixed_low",
    "fixed_high",
    "invasion_fitness",
    "verdict",
    "establishment_probability",
    "neutral_expectation",
    "agreement",
    "reason",
    "prediction",
]
# the columns a person reads (printed table, report): the counts that enter the verdict on
SHOWN_COLUMNS = [
    c for c in COMPARE_COLUMNS[COMPARE_COLUMNS.index("counted") :]
    if c not in ("missing", "reason", "prediction")
]


class IncompleteResultsWarning(UserWarning):
    """The results file is not complete (the run was stopped, or is still going)."""


# -- predictions and the verdict ---------------------------------------------------------
@dataclass(frozen=True)
class SideOfNeutral:
    """The invasion verdict as a prediction: fixation above, below or at the neutral expectation."""

    verdict: str
    neutral: float
    name: str = "side of the neutral expectation (invasion fitness)"

    def assess(self, low: float, high: float) -> tuple[str, str]:
        """Agreement of the interval [low, high] and the reason in words."""
        if self.verdict not in ("invades", "does not invade", "neutral") or not np.isfinite(self.neutral):
            return "no prediction", f"no prediction ({self.verdict})"
        above, below = low > self.neutral, high < self.neutral
        if self.verdict == "neutral":
            if above or below:
                return "disagrees", "the interval excludes the neutral expectation"
            return "agrees", "the interval contains the neutral expectation"
        if not (above or below):
            return "inconclusive", "the interval contains the neutral expectation"
        where = "above" if above else "below"
        ok = above == (self.verdict == "invades")
        return ("agrees" if ok else "disagrees"), f"the interval lies {where} the neutral expectation"


@dataclass(frozen=True)
class PredictedFixation:
    """A predicted fixation probability (e.g. of a finite population): agrees when inside the interval."""

    value: float
    name: str = "predicted fixation probability"

    def assess(self, low: float, high: float) -> tuple[str, str]:
        if not np.isfinite(self.value):
            return "no prediction", "no predicted value"
        if low <= self.value <= high:
            return "agrees", f"the interval contains the predicted {self.value:.3g}"
        return "disagrees", f"the interval excludes the predicted {self.value:.3g}"


@dataclass(frozen=True)
class Judgement:
    """A point's verdict: ``agreement``, its ``reason``, the ``prediction`` named, and the estimate."""

    agreement: str
    reason: str
    prediction: str
    fraction: float
    low: float
    high: float


def judge(established: int, counted: int, prediction, *, left_out: int = 0, left_out_kinds: str = "",
          level: float = 0.95) -> Judgement:
    """Judge one point: the Wilson interval of established / counted against ``prediction``.

    Parameters
    ----------
    established, counted : int
        Replicates counted as the mutant established (fixed, or capped while
        rising) and replicates counted.
    prediction : SideOfNeutral, PredictedFixation or any object with ``name``
        and ``assess(low, high) -> (agreement, reason)``.
    left_out : int, optional
        Replicates that did not resolve; the point is inconclusive when
        counting them all as established, or all as not, changes the result.
    left_out_kinds : str, optional
        What they were, for the reason (e.g. "12 undecided, 3 capped").
    level : float, optional
        Coverage of the Wilson interval.
    """
    est = wilson_interval(established, counted, level=level)
    if counted == 0:
        why = "no replicate resolved" if left_out else "no replicates saved"
        return Judgement("inconclusive", why, prediction.name, est.fraction, est.low, est.high)
    verdict, reason = prediction.assess(est.low, est.high)
    if left_out and verdict in ("agrees", "disagrees"):
        total = counted + left_out
        extremes = (wilson_interval(established + left_out, total, level=level),
                    wilson_interval(established, total, level=level))
        if any(prediction.assess(e.low, e.high)[0] != verdict for e in extremes):
            kinds = f" ({left_out_kinds})" if left_out_kinds else ""
            verdict = "inconclusive"
            reason = (f"{left_out} replicate{'s' if left_out != 1 else ''} left out{kinds} could "
                      f"change it: {reason}")
    return Judgement(verdict, reason, prediction.name, est.fraction, est.low, est.high)


def agreement(verdict: str, low: float, high: float, neutral: float) -> str:
    """Agrees, disagrees or inconclusive: the Wilson interval [low, high] against a verdict.

    See the module notes for the rule (``SideOfNeutral``).
    """
    return SideOfNeutral(verdict, neutral).assess(low, high)[0]


def experiment_config(path) -> Config:
    """The experiment's config as written in the results file (with its sweep)."""
    return Config.model_validate(read_attrs(path)["config"])


def _require_invasion(config: Config, path) -> None:
    if config.invasion is None:
        raise ConfigError(
            f"{str(path)!r}: the experiment has no [invasion] table, so there is no "
            "mutant to compare with theory"
        )


def incomplete_message(path) -> str:
    """Empty for a complete results file; else what is missing and how to finish it, in words."""
    attrs = read_attrs(path)
    if attrs.get("complete", True):
        return ""
    planned = int(attrs.get("n_points", 0)) * int(attrs.get("replicates", 0))
    saved = len(read_replicates(path))
    return (
        f"{str(path)!r} is incomplete: {saved} of {planned} replicates saved (the run was "
        f"stopped, or is still going); finish it with `{resume_command(path, attrs)}`. "
        "Points without all their replicates are judged on those saved."
    )


def warn_if_incomplete(path) -> str:
    """Warn (IncompleteResultsWarning) when the results file is not complete; return the message."""
    message = incomplete_message(path)
    if message:
        warnings.warn(message, IncompleteResultsWarning, stacklevel=3)
    return message


def capped_rising(path, replicates: pd.DataFrame, mutant: str) -> pd.Series:
    """For each replicate: capped while the mutant's share of the census was rising.

    Rising: the share at the replicate's last record is above both its share
    at the start and at the record nearest half its seasons. A
    replicate with one record, or a file without trajectories, is not
    classed (False).
    """
    rising = pd.Series(False, index=replicates.index)
    capped = replicates[replicates["outcome"] == CAPPED]
    if capped.empty or read_attrs(path).get("trajectory") == "none":
        return rising
    for point, sub in capped.groupby("point"):
        traj = read_trajectories(path, points=[int(point)], replicates=sub["replicate"].tolist(), by_age=False)
        wide = traj.pivot_table(index=["replicate", "step"], columns="allele", values="count", aggfunc="sum")
        total = wide.sum(axis=1)
        share = (wide[mutant] / total.where(total > 0)).fillna(0.0) if mutant in wide else total * 0.0
        for idx, rep in zip(sub.index, sub["replicate"]):
            if rep not in share.index.get_level_values(0):
                continue
            one = share.loc[rep]
            steps = one.index.to_numpy()
            if steps.size < 2:
                continue
            earlier = steps[:-1]
            ref = earlier[np.argmin(np.abs(earlier - steps[-1] / 2.0))]
            rising[idx] = bool(one.iloc[-1] > max(one.loc[ref], one.iloc[0]))
    return rising


FINITE_PREDICTION = "finite-N fixation probability (diffusion)"
FINITE_NOT_VALID = (
    "side of the neutral expectation (invasion fitness); the finite-N diffusion is not valid "
    "here, fixation_probability_note says why"
)


# Selection of strength s in a population of N is effectively neutral where N |s| < 1: drift
# then decides the fate of an allele (Kimura 1983, The Neutral Theory of Molecular Evolution;
# Ohta 1973 for the nearly neutral; from memory; the bound 1 is common practice)
DRIFT_BAND = 1.0


def drift_note(row: dict) -> str:
    """Why a point of a random-years sweep may disagree although the large-population theory
    holds: just past the replacement threshold the resident's return is within drift (N |log w|
    below ``DRIFT_BAND``, w the resident's invasion fitness against the mutant and N the
    mutant's census as resident), so a finite population need not fix the mutant more often
    than a neutral allele, as a large one would. Empty elsewhere."""
    back = row.get("resident_return_fitness", float("nan"))
    census = row.get("resident_return_census", float("nan"))
    if not (np.isfinite(back) and np.isfinite(census) and 0 < back <= 1):
        return ""
    drift = census * abs(np.log(back))
    if drift >= DRIFT_BAND:
        return ""
    return (f"just past the replacement threshold: the resident's invasion fitness against the "
            f"mutant, {back:.4g}, is within drift of 1 at the mutant's census of {census:.3g} "
            f"(N |log w| = {drift:.2g} < {DRIFT_BAND:g}), so this population need not fix the "
            f"mutant more often than a neutral allele, as a large one would")


def _default_prediction(row: dict):
    """The finite-N fixation probability where it is valid (so a point at the threshold is
    judged against the variance-corrected value, Gillespie 1974, not the neutral share);
    elsewhere the side of the neutral expectation."""
    u = row.get("fixation_probability", float("nan"))
    if bool(row.get("fixation_probability_valid", False)) and np.isfinite(u):
        return PredictedFixation(float(u), name=FINITE_PREDICTION)
    if row.get("prediction") == "stochastic":  # year types: the verdict of the stochastic theory
        if bool(row.get("resident_invades_back", False)):  # each invades the other: no fixation side
            return SideOfNeutral("each invades the other", row["neutral_expectation"],
                                 name="side of the neutral expectation (stochastic invasion fitness)")
        return SideOfNeutral(row["verdict"], row["neutral_expectation"],
                             name="side of the neutral expectation (stochastic invasion fitness)")
    if np.isfinite(u):  # computed but not valid here (e.g. Beverton-Holt on recruitment): say so
        return SideOfNeutral(row["verdict"], row["neutral_expectation"], name=FINITE_NOT_VALID)
    return SideOfNeutral(row["verdict"], row["neutral_expectation"])


def compare(path, *, level: float = 0.95, prediction=None) -> pd.DataFrame:
    """One row per sweep point: observed fixation with its Wilson interval beside a prediction.

    Parameters
    ----------
    path : path-like
        A results file written by ``broodline run``.
    level : float, optional
        Coverage of the Wilson intervals.
    prediction : callable, optional
        ``prediction(row) -> object`` with ``name`` and ``assess(low, high)``
        (see ``SideOfNeutral``, ``PredictedFixation``), given the point's row
        (swept values and theory columns as a dict). By default
        ``SideOfNeutral(row["verdict"], row["neutral_expectation"])``.

    Returns
    -------
    DataFrame
        ``point``, one column per swept path, then ``COMPARE_COLUMNS`` (after
        ``point``) and the remaining theory columns (``density_index``,
        ``census_size``, ``resident_growth_rate``, ``mutant_growth_rate``,
        ``problem``). One count per outcome; ``capped_rising`` of the capped;
        ``counted`` = fixed + lost + extinct + capped_rising; ``established``
        = fixed + capped_rising; ``left_out`` = undecided + the other capped;
        ``missing`` = planned replicates not saved. ``fixed_fraction`` is
        established / counted (the module notes give the rule).
        A file that is not complete gives an ``IncompleteResultsWarning``.
    """
    config = experiment_config(path)
    _require_invasion(config, path)
    warn_if_incomplete(path)
    points = read_points(path)
    reps = read_replicates(path)
    rising = capped_rising(path, reps, config.invasion.mutant)
    theory = predict_configs(read_point_configs(path))
    make = _default_prediction if prediction is None else prediction
    planned = config.experiment.replicates
    rows = []
    for i, point in enumerate(points["point"]):
        here = reps["point"] == point
        counts = reps.loc[here, "outcome"].value_counts()
        c = {o: int(counts.get(o, 0)) for o in (FIXED, LOST, EXTINCT, UNDECIDED, CAPPED)}
        up = int(rising[here].sum())
        established = c[FIXED] + up
        counted = established + c[LOST] + c[EXTINCT]
        left_out = c[UNDECIDED] + c[CAPPED] - up
        kinds = ", ".join(
            f"{v} {k}" for k, v in ((UNDECIDED, c[UNDECIDED]), (CAPPED, c[CAPPED] - up)) if v
        )
        t = theory.iloc[i].to_dict()
        swept = points.iloc[i].drop("point").to_dict()
        j = judge(established, counted, make({"point": int(point), **swept, **t}), left_out=left_out,
                  left_out_kinds=kinds + (" with the mutant's share not rising" if c[CAPPED] - up else ""),
                  level=level)
        reason = j.reason
        if j.agreement == "disagrees" and (note := drift_note(t)):
            reason = f"{reason}; {note}"
        rows.append(
            {
                "point": int(point),
                "replicates": int(here.sum()),
                **c,
                "capped_rising": up,
                "counted": counted,
                "established": established,
                "left_out": left_out,
                "missing": max(planned - int(here.sum()), 0),
                "fixed_fraction": j.fraction,
                "fixed_low": j.low,
                "fixed_high": j.high,
                **t,
                "agreement": j.agreement,
                "reason": reason,
                "prediction": j.prediction,
            }
        )
    table = pd.DataFrame(rows)
    rest = [c for c in table.columns if c not in COMPARE_COLUMNS]
    table = table[[*COMPARE_COLUMNS, *rest]]
    swept = points.drop(columns="point")
    return pd.concat(
        [table[["point"]], swept.reset_index(drop=True), table.drop(columns="point")], axis=1
    )


def _analytic_words(res, formula: str) -> str:
    """The analytic threshold in words, rounded, with its closed form where one applies."""
    if not np.isfinite(res.value) or res.invades_above is None:
        return res.message
    side = "above" if res.invades_above else "below"
    value = f"{float(f'{res.value:.4g}'):g}"
    where = f" ({formula})" if formula else ""
    linked = getattr(res, "linked", None)
    along = ""
    if linked:
        along = (f" (along the linked group, axis {res.parameter}: there "
                 + ", ".join(f"{p} = {float(f'{v:.4g}'):g}" for p, v in linked.items()) + ")")
    back = getattr(res, "replacement", float("nan"))
    if np.isfinite(back) and back != res.value:
        along += (f"; the resident invades back {'below' if res.invades_above else 'above'} "
                  f"{float(f'{back:.4g}'):g}, so in between the two coexist and fixation is expected "
                  "only past that replacement threshold")
    along += more_crossings_words(getattr(res, "crossings", 1) or 1, res.bracket)
    return f"{res.parameter} = {value}{where}: the mutant invades {side} it{along}"


THRESHOLD_COLUMNS = [
    "parameter",
    "at",
    "analytic",
    "analytic_message",
    "observed",
    "observed_low",
    "observed_high",
    "observed_message",
    "observed_add_points",
    "analytic_in_interval",
    "replacement",
    "replacement_in_interval",
]


def observed_along(res, values, established, counted, neutral, *, level: float = 0.95,
                   link: str = "logit") -> ObservedThreshold:
    """The observed threshold of one sweep line as ``compare`` reads it.

    Parameters
    ----------
    res : ThresholdResult
        The analytic threshold along the line (``sweep_thresholds``): its
        parameter, and the direction fixation rises in, which the fitted slope keeps.
    values, established, counted, neutral : array-like
        Per point: the swept value, replicates counted as established and
        counted (see ``compare``), the neutral expectation.
    level, link
        As for ``compare_thresholds``.
    """
    return observed_threshold(res.parameter, values, established, counted, neutral,
                              increasing=res.invades_above, level=level, link=link)


def compare_thresholds(path, table: pd.DataFrame | None = None, *, level: float = 0.95,
                       link: str = "logit") -> pd.DataFrame:
    """The observed threshold along each numeric swept parameter beside the analytic one.

    Parameters
    ----------
    path : path-like
        A results file.
    table : DataFrame, optional
        ``compare(path)``, if already computed.
    level : float, optional
        Coverage of the profile-likelihood interval.
    link : {"logit", "cloglog"}, optional
        Link of the fitted dose-response curve (``analysis.estimates.observed_threshold``).

    Returns
    -------
    DataFrame
        One row per swept parameter (and per combination of the other swept
        values, given in ``at`` as JSON): ``parameter``, ``at``,
        ``analytic`` (nan if none in the range), ``analytic_message``,
        ``observed``, ``observed_low``, ``observed_high``,
        ``observed_message``, ``observed_add_points`` (sweep values to add
        where the points near the crossing are too far apart; a list), and
        ``analytic_in_interval`` (True when the analytic threshold lies
        within the observed interval, an open bound counting as the range's
        end and beyond); in a density-regulated variable environment also
        ``replacement`` (where the resident stops invading back,
        ``ThresholdResult.replacement``: past the invasion threshold and
        before it each allele invades the other, so fixation crosses the
        neutral expectation there, not at ``analytic``; nan elsewhere) and
        ``replacement_in_interval``.
    """
    config = experiment_config(path)
    _require_invasion(config, path)
    if table is None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", IncompleteResultsWarning)  # compare() warned once
            table = compare(path, level=level)
    rows = []
    for res in sweep_thresholds(config):
        formula = closed_form(config, res.parameter, res.at)
        sel = np.ones(len(table), dtype=bool)
        for k, v in res.at.items():
            sel &= table[k].to_numpy() == v
        sub = table[sel & (table["counted"].to_numpy() > 0)]
        obs = observed_along(res, sub[res.parameter], sub["established"], sub["counted"],
                             sub["neutral_expectation"], level=level, link=link)
        lo = obs.low if np.isfinite(obs.low) else -np.inf
        hi = obs.high if np.isfinite(obs.high) else np.inf
        bounded = np.isfinite(obs.value) or np.isfinite(obs.low) or np.isfinite(obs.high)
        rows.append(
            {
                "parameter": res.parameter,
                "at": json.dumps(res.at),
                "analytic": res.value,
                "analytic_message": _analytic_words(res, formula),
                "observed": obs.value,
                "observed_low": obs.low,
                "observed_high": obs.high,
                "observed_message": obs.message,
                "observed_add_points": list(obs.add_points),
                "analytic_in_interval": bool(bounded and np.isfinite(res.value) and lo <= res.value <= hi),
                "replacement": res.replacement,
                "replacement_in_interval": bool(bounded and np.isfinite(res.replacement)
                                                and lo <= res.replacement <= hi),
            }
        )
    return pd.DataFrame(rows, columns=THRESHOLD_COLUMNS)


# -- the printed comparison --------------------------------------------------------------
_HEADERS = {
    "counted": "counted",
    "established": "fixed",
    "left_out": "left out",
    "fixed_fraction": "share fixed",
    "interval": "95% interval",
    "invasion_fitness": "invasion fitness",
    "verdict": "theory says",
    "establishment_probability": "establishment",
    "neutral_expectation": "neutral",
    "agreement": "agreement",
}
LEGEND = (
    "fixed: mutant fixed, or capped while its share rose; left out: undecided or otherwise "
    "capped, never counted as losses; establishment, neutral: the fixation probability the "
    "branching process predicts, and a neutral mutant's."
)


def _at_words(at: dict) -> str:
    return ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}" for k, v in at.items())


def _point_list(points) -> str:
    return ("point " if len(points) == 1 else "points ") + ", ".join(str(p) for p in points)


def _judged_against(table: pd.DataFrame, *, width: int) -> list[str]:
    """Which prediction judged which points; why the finite-N one was not used where it was not."""
    if "prediction" not in table:
        return []
    lines = [""]
    for name, rows in table.groupby("prediction", sort=False):
        lines += textwrap.wrap(f"judged against the {name}: {_point_list(rows['point'].tolist())}", width=width)
    if "fixation_probability_note" in table:
        invalid = table[table["prediction"] == FINITE_NOT_VALID]
        lines += note_lines(invalid["point"].tolist(), invalid["fixation_probability_note"].tolist(),
                            width=width)
    return lines


def compare_text(table: pd.DataFrame, thresholds: pd.DataFrame, *, width: int = 160) -> str:
    """The comparison as printed by ``broodline compare``: table, legend, reasons, thresholds."""
    swept = [c for c in table.columns[1 : table.columns.get_loc("replicates")]]
    shown = table.assign(
        interval=[f"{lo:.3g}-{hi:.3g}" if np.isfinite(lo) else "-"
                  for lo, hi in zip(table["fixed_low"], table["fixed_high"])]
    )[["point", *swept, *_HEADERS]].rename(columns=_HEADERS)
    for c in ("share fixed", "invasion fitness", "establishment", "neutral"):
        shown[c] = shown[c].map(lambda v: f"{v:.3g}" if np.isfinite(v) else "-")
    for c in swept:
        shown[c] = shown[c].map(lambda v: f"{v:g}" if isinstance(v, float) else str(v))
    lines = [shown.to_string(index=False)]
    lines += textwrap.wrap(LEGEND, width=min(width, 100))
    lines += _judged_against(table, width=min(width, 100))
    notes = table[table["agreement"] != "agrees"]
    if len(notes):
        lines.append("")
        for _, r in notes.iterrows():
            lines.append(f"point {r['point']}: {r['agreement']}: {r['reason']}")
    for r in thresholds.itertuples():
        at = json.loads(r.at)
        lines.append("")
        lines.append(f"along {r.parameter}" + (f" (at {_at_words(at)})" if at else "") + ":")
        lines.append(f"  analytic: {r.analytic_message}")
        lines.append(f"  observed: {r.observed_message}")
    return "\n".join(lines)


_THEORY_HEADERS = {
    "density_index": "D*",
    "census_size": "census",
    "resident_growth_rate": "lambda res",
    "mutant_growth_rate": "lambda mut",
    "invasion_fitness": "invasion fitness",
    "verdict": "theory says",
    "establishment_probability": "establishment",
    "neutral_expectation": "neutral",
}
THEORY_LEGEND = (
    "D*: the resident's equilibrium density index; census: its census size; lambda res, lambda "
    "mut: growth rates there; establishment: the branching-process chance that the mutants "
    "escape early loss; neutral: a neutral mutant's fixation probability."
)


def theory_table_text(points: pd.DataFrame, *, width: int = 100) -> str:
    """The ``threshold`` command's table of predictions, with plain headers and a legend."""
    shown = points.rename(columns=_THEORY_HEADERS)
    if shown["problem"].eq("").all():
        shown = shown.drop(columns="problem")
    for c in _THEORY_HEADERS.values():
        if c in shown and shown[c].dtype.kind == "f":
            shown[c] = shown[c].map(lambda v: f"{v:.4g}" if np.isfinite(v) else "-")
    swept = [c for c in points.columns[1:] if c not in _THEORY_HEADERS and c != "problem"]
    for c in swept:
        shown[c] = shown[c].map(lambda v: f"{v:g}" if isinstance(v, float) else str(v))
    legend = THEORY_LEGEND if "D*" in shown else (  # years vary: no equilibrium, a mean census
        "census: the resident's mean census size; " + THEORY_LEGEND.split("census size; ", 1)[1])
    return "\n".join([shown.to_string(index=False), *textwrap.wrap(legend, width=width)])


def threshold_lines(config: Config, results) -> list[str]:
    """Each analytic threshold in words, rounded, with its closed form and the other swept values."""
    out = []
    for t in results:
        at = f" (at {_at_words(t.at)})" if t.at else ""
        # a closed form holds for the parameter moved alone, not along a linked group
        formula = "" if getattr(t, "linked", None) else closed_form(config, t.parameter, t.at)
        out.append(_analytic_words(t, formula) + at)
    return out
