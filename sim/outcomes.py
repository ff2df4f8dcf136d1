"""Outcomes of a replicate: the state of a census, and the per-point count of outcomes.

The outcome names are declared once, in ``sim.vocabulary.OUTCOMES``; here a
census's state is coded as an index into that tuple, so the stop rule works
on arrays of codes (``classify``) and names appear only when results are made.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .vocabulary import DECIDED, DECIDED_WITH_WINNER, OUTCOMES

if TYPE_CHECKING:  # pandas, where a table is made, and pydantic: a worker process needs neither
    import pandas as pd

    from .config import Config

__all__ = ["OUTCOMES", "DECIDED", "DECIDED_WITH_WINNER", "CODES", "classify", "mutant_index",
           "census_states", "fixed_outcome", "Summary", "summary_of", "summarize"]

CODES = {name: code for code, name in enumerate(OUTCOMES)}  # outcome name -> code
_MUTANT_FIXED, _MUTANT_LOST, _FIXED, _EXTINCT, _UNDECIDED = (
    CODES[n] for n in ("mutant-fixed", "mutant-lost", "fixed", "extinct", "undecided"))


def classify(totals: np.ndarray, config: Config) -> tuple[np.ndarray, np.ndarray]:
    """The state of each census given as counts by allele: codes into ``OUTCOMES`` and winners.

    With ``[invasion]``: mutant-fixed when only the mutant is left, mutant-lost
    when the mutant is gone; otherwise ``fixed`` when one allele is left.
    Extinct when no one is left; undecided while several alleles remain.

    Parameters
    ----------
    totals : ndarray, shape (n, n_alleles)
        Counts by allele, one row per census.

    Returns
    -------
    states : ndarray of int
        Index into ``OUTCOMES``.
    winners : ndarray of int
        The only allele present, or -1.
    """
    return census_states(totals, mutant_index(config))


def mutant_index(config: Config) -> int | None:
    """The invasion's mutant allele index, or None for an experiment without ``[invasion]``."""
    return None if config.invasion is None else config.allele_index(config.invasion.mutant)


def census_states(totals: np.ndarray, mutant: int | None) -> tuple[np.ndarray, np.ndarray]:
    """``classify`` with the mutant's index (``mutant_index``) known: what the stop rule calls
    in a season where the alleles present change."""
    totals = np.asarray(totals)
    present = totals > 0
    n_present = present.sum(axis=1)
    one = n_present == 1
    winners = np.where(one, present.argmax(axis=1), -1)
    states = np.where(one, _FIXED if mutant is None else _MUTANT_FIXED, _UNDECIDED)
    if mutant is not None:
        states[totals[:, mutant] == 0] = _MUTANT_LOST
    states[n_present == 0] = _EXTINCT
    return states, winners


def fixed_outcome(config: Config) -> str:
    """The outcome counted as "fixed": the mutant's with ``[invasion]``, else ``fixed``."""
    return "mutant-fixed" if config.invasion is not None else "fixed"


@dataclass(frozen=True)
class Summary:
    """The per-point summary of an experiment, as plain columns (``frame()`` makes the
    pandas table; the command line prints ``text()`` and needs no pandas).

    ``columns`` maps each column's name to its values, one per point: ``point``, the
    swept keys, ``replicates``, the count of each outcome that occurred (the fixed
    outcome always, and ``mutant-lost`` with ``[invasion]``), ``resolved`` and
    ``fixed_fraction``.
    """

    columns: dict[str, list]

    def frame(self) -> pd.DataFrame:
        """The summary as a pandas DataFrame, a row per point."""
        import pandas as pd

        return pd.DataFrame(self.columns)

    def text(self) -> str:
        """The table as the command line prints it: right-aligned, the fraction to 3 decimals,
        swept values as given (to 6 significant digits)."""
        cells = {name: [_cell(v, "{:.3f}" if name == "fixed_fraction" else "{:.6g}") for v in values]
                 for name, values in self.columns.items()}
        widths = {name: max(len(name), *map(len, column)) for name, column in cells.items()}
        n = len(self.columns["point"])
        rows = [[name.rjust(widths[name]) for name in cells]]
        rows += [[cells[name][i].rjust(widths[name]) for name in cells] for i in range(n)]
        return "\n".join("  ".join(row) for row in rows)


def _cell(value, float_format: str) -> str:
    if isinstance(value, float | np.floating):
        return float_format.format(value)
    return str(value)


def summary_of(counts: Mapping[tuple[int, str], int], values: Mapping[int, Mapping] | None = None, *,
               fixed: str = "mutant-fixed") -> Summary:
    """Per sweep point: replicates, the count of each outcome, and the fraction ``fixed``.

    ``fixed_fraction`` is taken over the resolved replicates (those whose outcome
    is in ``DECIDED``): a capped or undecided replicate is not a loss, so it is
    left out, as ``compare`` leaves it out (NaN where none resolved).

    Parameters
    ----------
    counts : mapping
        Replicates per (point, outcome name); a row for each point with any.
    values : mapping, optional
        Each point's swept values (``{point: {key: value}}``), as columns after ``point``.
    fixed : str
        The outcome ``fixed_fraction`` counts: ``fixed_outcome(config)``
        ("fixed" for an experiment without ``[invasion]``).
    """
    points = sorted({p for (p, _), k in counts.items() if k})
    rows = range(len(points))
    n = {name: [int(counts.get((p, name), 0)) for p in points] for name in OUTCOMES}
    swept = [(values or {}).get(p, {}) for p in points]
    columns: dict[str, list] = {"point": points}
    for key in dict.fromkeys(key for point in swept for key in point):
        columns[key] = [point.get(key) for point in swept]
    columns["replicates"] = [sum(n[name][i] for name in OUTCOMES) for i in rows]
    always = ("mutant-fixed", "mutant-lost") if fixed == "mutant-fixed" else (fixed,)
    for name in OUTCOMES:
        if any(n[name]) or name in always:
            columns[name] = n[name]
    resolved = [sum(n[name][i] for name in DECIDED) for i in rows]
    columns["resolved"] = resolved
    columns["fixed_fraction"] = [k / r if r else math.nan for k, r in zip(n[fixed], resolved, strict=True)]
    return Summary(columns)


def summarize(replicates: pd.DataFrame, points: pd.DataFrame | None = None, *,
              fixed: str = "mutant-fixed") -> pd.DataFrame:
    """``summary_of`` for tables read from a results file, as a pandas DataFrame.

    Parameters
    ----------
    replicates : DataFrame
        At least ``point`` and ``outcome`` (``sim.store.read_outcomes``), one row per
        replicate; or with a ``count`` column, one row per (point, outcome)
        (``sim.store.count_outcomes``, which streams).
    points : DataFrame, optional
        The sweep points (``sim.store.read_points``): their swept values become columns.
    fixed : str
        As for ``summary_of``.
    """
    groups = replicates.groupby(["point", "outcome"])
    pairs = groups["count"].sum() if "count" in replicates else groups.size()
    counts = {(int(p), str(o)): int(k) for (p, o), k in pairs.items()}
    values = None
    if points is not None:
        values = {int(row.pop("point")): row for row in points.to_dict("records")}
    return summary_of(counts, values, fixed=fixed).frame()
