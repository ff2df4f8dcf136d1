"""Outcomes of a replicate: the state of a census, and the per-point count of outcomes.

The outcome names are declared once, in ``sim.vocabulary.OUTCOMES``; here a
census's state is coded as an index into that tuple, so the stop rule works
on arrays of codes (``classify``) and names appear only when results are made.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .vocabulary import DECIDED, DECIDED_WITH_WINNER, OUTCOMES

if TYPE_CHECKING:  # pandas, where a table is made, and pydantic: a worker process needs neither
    import pandas as pd

    from .config import Config

__all__ = ["OUTCOMES", "DECIDED", "DECIDED_WITH_WINNER", "CODES", "classify", "mutant_index",
           "census_states", "fixed_outcome", "summarize"]

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


def summarize(replicates: pd.DataFrame, points: pd.DataFrame | None = None, *,
              fixed: str = "mutant-fixed") -> pd.DataFrame:
    """Per sweep point: replicates, the count of each outcome, and the fraction ``fixed``.

    ``fixed_fraction`` is taken over the resolved replicates (those whose outcome
    is in ``DECIDED``): a capped or undecided replicate is not a loss, so it is
    left out, as ``compare`` leaves it out (NaN where none resolved).

    Parameters
    ----------
    replicates : DataFrame
        At least ``point`` and ``outcome`` (``sim.store.read_outcomes``), one row per
        replicate; or with a ``count`` column, one row per (point, outcome)
        (``sim.store.count_outcomes``, which streams).
    points : DataFrame, optional
        The sweep points (``sim.store.read_points``), merged in by ``point``.
    fixed : str
        The outcome ``fixed_fraction`` counts: ``fixed_outcome(config)``
        ("fixed" for an experiment without ``[invasion]``).
    """
    import pandas as pd

    if "count" in replicates:
        counts = replicates.pivot_table(index="point", columns="outcome", values="count",
                                        aggfunc="sum", fill_value=0)
        counts.columns.name = "outcome"
    else:
        counts = pd.crosstab(replicates["point"], replicates["outcome"])
    for name in OUTCOMES:
        if name not in counts:
            counts[name] = 0
    table = pd.DataFrame({"replicates": counts.sum(axis=1)})
    always = ("mutant-fixed", "mutant-lost") if fixed == "mutant-fixed" else (fixed,)
    for name in OUTCOMES:
        if counts[name].any() or name in always:
            table[name] = counts[name]
    table["resolved"] = counts[list(DECIDED)].sum(axis=1)
    table["fixed_fraction"] = counts[fixed] / table["resolved"].where(table["resolved"] > 0)
    table = table.reset_index()
    if points is not None and points.shape[1] > 1:
        table = points.merge(table, on="point", how="right")
    return table
