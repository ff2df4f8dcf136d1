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

from sim.config import Config

from .thresholds import with_values

__all__ = ["closed_form"]


def _number(v: float) -> str:
    """A value as a person writes it: 4, 0.5, 12.53 (four significant digits at most)."""
    return f"{float(f'{v:.4g}'):g}"


def closed_form(config: Config, parameter: str, at: dict | None = None) -> str:
    """The threshold of ``parameter`` as a formula with its numbers, or "" where none applies.

    Parameters
    ----------
    config : Config
        An invasion config.
    parameter : str
        A sweep path; only the semelparous mutant's ``fecundity`` has a closed
        form here.
    at : dict, optional
        Other swept values to set first.

    Returns
    -------
    str
        For example ``"B_s = B_i / (1 - P) = 2 / (1 - 0.5) = 4"``.
    """
    if config.invasion is None or config.environment is not None:
        return ""  # the formulas are a constant environment's: with year types the threshold is stochastic
    base = with_values(config, at) if at else config
    alleles = {a.name: a for a in base.allele}
    res, mut = alleles[base.invasion.resident], alleles[base.invasion.mutant]
    if parameter != f"allele.{mut.name}.fecundity":
        return ""
    if (res.breeding, mut.breeding) != ("iteroparous", "semelparous"):
        return ""
    if res.maturity_age != 1 or mut.maturity_age != 1 or res.juvenile_survival != mut.juvenile_survival:
        return ""
    if any(a.orphan_survival is not None or a.brood_effect != "none" for a in (res, mut)):
        return ""  # parental care or a brood effect: not the textbook case (docs/care.md)
    d = base.density
    bi, p, c = float(res.fecundity), float(res.adult_survival), float(res.juvenile_survival)
    if d.form == "none" or d.placement == "all-survival":
        if c <= 0:
            return ""
        value = bi + p / c
        return f"B_s = B_i + P / c = {_number(bi)} + {_number(p)} / {_number(c)} = {_number(value)}"
    if d.placement in ("recruitment", "fecundity") and d.form != "ceiling":
        if p >= 1 or not math.isfinite(bi):
            return ""
        value = bi / (1 - p)
        return f"B_s = B_i / (1 - P) = {_number(bi)} / (1 - {_number(p)}) = {_number(value)}"
    return ""
