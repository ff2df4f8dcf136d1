"""Thresholds in closed form, where the textbook cases apply (for printing beside the solver's).

The semelparous-against-iteroparous comparison with maturity at age 1 and
one juvenile survival c: an iteroparous resident (fecundity B_i, adult
survival P) and a semelparous mutant (fecundity B_s). The threshold of B_s
depends on where density dependence acts (Mylius & Diekmann 1995):

- recruitment or fecundity: the resident's equilibrium sets B_i c f = 1 - P,
  and the mutant needs B_s c f = 1: B_s = B_i / (1 - P);
- all survival (or a ceiling on everyone), or no density dependence (the
  growth rates compared, Cole 1954; Charnov & Schaffer 1973):
  B_s = B_i + P / c.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sim.config import Config

from .thresholds import with_values

__all__ = ["ClosedForm", "closed_form_threshold", "closed_form"]


def _number(v: float) -> str:
    """A value as a person writes it: 4, 0.5, 12.53 (four significant digits at most)."""
    return f"{float(f'{v:.4g}'):g}"


@dataclass(frozen=True)
class ClosedForm:
    """A threshold of the mutant's fecundity written out: formula, its numbers, value, source."""

    formula: str
    worked: str
    value: float
    source: str

    def text(self) -> str:
        """For example ``"B_s = B_i / (1 - P) = 2 / (1 - 0.5) = 4"``."""
        return f"{self.formula} = {self.worked} = {_number(self.value)}"


def closed_form_threshold(config: Config, parameter: str | None = None,
                          at: dict | None = None) -> ClosedForm | None:
    """The semelparous mutant's threshold fecundity in closed form, or None where none applies.

    Parameters
    ----------
    config : Config
        An invasion config.
    parameter : str, optional
        A sweep path (default: the mutant's fecundity, the only one with a
        closed form here).
    at : dict, optional
        Other swept values to set first.

    Notes
    -----
    An iteroparous resident (B_i, P, c, maturity at 1) against a semelparous
    mutant maturing at 1 with the same c, in a constant environment, without
    parental care or a brood effect. At the resident's equilibrium its growth
    rate is 1; the mutant's is B_s c times the density factor it meets there:

    - on recruitment or fecundity (a ceiling on recruits included):
      B_s = B_i / (1 - P) (Mylius & Diekmann 1995);
    - on all survival (or a ceiling on everyone): B_s = B_i + P / c (Mylius &
      Diekmann 1995); without density dependence the same, from the growth
      rates B_s c / (P + B_i c) (Charnov & Schaffer 1973; Cole 1954 with
      c = P = 1);
    - on adult survival only: B_s = 1 / c (the mutant meets no density
      factor; the resident has an equilibrium only where B_i c < 1).
    """
    if config.invasion is None or config.environment is not None:
        return None  # the formulas are a constant environment's: with year types the threshold is stochastic
    base = with_values(config, at) if at else config
    alleles = {a.name: a for a in base.allele}
    res, mut = alleles[base.invasion.resident], alleles[base.invasion.mutant]
    if parameter is not None and parameter != f"allele.{mut.name}.fecundity":
        return None
    if (res.breeding, mut.breeding) != ("iteroparous", "semelparous"):
        return None
    if res.maturity_age != 1 or mut.maturity_age != 1 or res.juvenile_survival != mut.juvenile_survival:
        return None
    if any(a.orphan_survival is not None or a.brood_effect != "none" for a in (res, mut)):
        return None  # parental care or a brood effect: not the textbook case (docs/care.md)
    bi, p, c = float(res.fecundity), float(res.adult_survival), float(res.juvenile_survival)
    if not math.isfinite(bi):
        return None
    d = base.density
    where = "none" if d.form == "none" else d.placement
    if where in ("recruitment", "fecundity"):
        if p >= 1:
            return None
        return ClosedForm("B_s = B_i / (1 - P)", f"{_number(bi)} / (1 - {_number(p)})", bi / (1 - p),
                          "Mylius & Diekmann 1995")
    if c <= 0:
        return None
    if where == "adult-survival":
        if bi * c >= 1:  # the resident grows without bound: no equilibrium to invade
            return None
        return ClosedForm("B_s = 1 / c", f"1 / {_number(c)}", 1 / c, "the mutant meets no density factor")
    if where in ("none", "all-survival"):
        source = "Charnov & Schaffer 1973" if where == "none" else "Mylius & Diekmann 1995"
        return ClosedForm("B_s = B_i + P / c", f"{_number(bi)} + {_number(p)} / {_number(c)}", bi + p / c, source)
    return None


def closed_form(config: Config, parameter: str, at: dict | None = None) -> str:
    """The threshold of ``parameter`` as a formula with its numbers (``ClosedForm.text``), or ""
    where none applies (see ``closed_form_threshold``)."""
    form = closed_form_threshold(config, parameter, at)
    return "" if form is None else form.text()
