"""Parental care and brood size: a young's survival given its parent's fate and its brood.

A young of an allele recruits with probability c_care (its parent lives
through the season) or c_orphan (its parent dies), times exp(-(b - 1) / h)
in a brood of b under the exponential brood effect, times the density
factor on recruitment. The season kernel (``sim.kernel.SeasonKernel``) reads
these per-allele numbers from a ``ParentalCare``; the schema
(``AlleleSection``) states their constraints.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ParentalCare"]


@dataclass(frozen=True)
class ParentalCare:
    """Per-allele parental effects on recruitment.

    Attributes
    ----------
    orphan : ndarray, shape (n_alleles,)
        c_orphan of each allele (its c where the allele has no care).
    decay : ndarray, shape (n_alleles,)
        x = exp(-1 / h) of each allele's brood effect (1 where it has none):
        a young of a brood of b survives x^(b - 1) times as often.
    """

    orphan: np.ndarray
    decay: np.ndarray

    @classmethod
    def from_schedules(cls, schedules) -> ParentalCare | None:
        """The parental effects of these schedules; None where no allele has any (the model of
        version 0.2, whose random draws stay untouched)."""
        if all(s.orphan_survival is None and s.brood_scale is None for s in schedules):
            return None
        orphan = [s.juvenile_survival if s.orphan_survival is None else s.orphan_survival
                  for s in schedules]
        decay = [1.0 if s.brood_scale is None else np.exp(-1.0 / s.brood_scale) for s in schedules]
        return cls(np.array(orphan, dtype=float), np.array(decay, dtype=float))

    @property
    def brood_effect(self) -> bool:
        """True where some allele's young survive less in larger broods."""
        return bool(np.any(self.decay < 1.0))
