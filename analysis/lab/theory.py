"""What theory says about the page's config: invasion fitness, verdict, threshold, predictions.

Recomputed whenever a control moves. The numbers come from the analysis layer
(``analysis.predict``, ``analysis.threshold``); this module only adds the
closed form of the threshold where one applies, and the hook through which a
finite-population prediction reaches the page.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from sim.config import Config, ConfigError
from sim.meanfield import NoEquilibriumError

from ..sweep import predict_point, threshold_at

__all__ = ["ClosedForm", "FiniteN", "Theory", "closed_form_threshold", "finite_n_prediction", "page_theory"]


@dataclass(frozen=True)
class ClosedForm:
    """A threshold of the mutant's fecundity written out: formula, its numbers, value, source."""

    formula: str
    worked: str
    value: float
    source: str


def closed_form_threshold(config: Config) -> ClosedForm | None:
    """The semelparous mutant's threshold fecundity B_s* in closed form, where one applies.

    Applies to an iteroparous resident (fecundity B_i, adult survival P,
    juvenile survival c, maturity at 1) against a semelparous mutant maturing
    at 1 with the same c; None otherwise.

    Notes
    -----
    At the resident's equilibrium its growth rate is 1; the mutant's is
    B_s c times the density factors it meets there. Setting it to 1:

    - no density dependence: B_s* = B_i + P / c (Charnov & Schaffer 1973;
      Cole 1954 with c = P = 1), from lambda_m / lambda_r = B_s c / (P + B_i c);
    - acting on recruitment or fecundity (any form, a ceiling on recruits
      included): B_s* = B_i / (1 - P) (Mylius & Diekmann 1995);
    - acting on all survival (or a ceiling on everyone): B_s* = B_i + P / c
      (Mylius & Diekmann 1995);
    - acting on adult survival only: B_s* = 1 / c (the mutant meets no
      density factor; the resident needs B_i c < 1 for an equilibrium).
    """
    inv = config.invasion
    if inv is None or config.environment is not None:  # year types: no closed form
        return None
    res = config.allele[config.allele_index(inv.resident)]
    mut = config.allele[config.allele_index(inv.mutant)]
    if not (res.breeding == "iteroparous" and mut.breeding == "semelparous" and res.maturity_age == 1
            and mut.maturity_age == 1 and res.juvenile_survival == mut.juvenile_survival):
        return None
    b, p, c = float(res.fecundity), float(res.adult_survival), float(res.juvenile_survival)
    d = config.density
    where = "none" if d.form == "none" else d.placement
    if where in ("recruitment", "fecundity"):
        if p >= 1:
            return None
        return ClosedForm("B_s* = B_i / (1 − P)", f"{b:g} / (1 − {p:g})", b / (1 - p), "Mylius & Diekmann 1995")
    if c == 0:
        return None
    if where == "adult-survival":
        return ClosedForm("B_s* = 1 / c", f"1 / {c:g}", 1 / c, "the mutant meets no density factor")
    source = "Charnov & Schaffer 1973" if where == "none" else "Mylius & Diekmann 1995"
    return ClosedForm("B_s* = B_i + P / c", f"{b:g} + {p:g} / {c:g}", b + p / c, source)


@dataclass(frozen=True)
class FiniteN:
    """The finite-population fixation probability, whether it may be trusted here, and why."""

    value: float
    valid: bool
    note: str


def finite_n_prediction(config: Config) -> FiniteN | None:
    """The analysis layer's finite-population prediction, where that layer provides one.

    The hook: ``analysis.fixation.finite_population_prediction(config)``
    (its ``fixation_probability``, ``valid`` and ``fixation_probability_note``).
    None where the module is absent (the page then says "not available").
    """
    if config.environment is not None:
        return FiniteN(math.nan, False, "no finite-population prediction exists yet for random years "
                       "(the stochastic theory above is that of a large population)")
    try:
        from ..fixation import finite_population_prediction
    except ImportError:
        return None
    try:
        f = finite_population_prediction(config)
    except ValueError as err:  # NoEquilibriumError among them
        return FiniteN(math.nan, False, str(err))
    return FiniteN(float(f.fixation_probability), bool(f.valid), str(f.fixation_probability_note))


@dataclass(frozen=True)
class Theory:
    """The theory panel: predictions (``analysis.Prediction`` as a dict), thresholds, problems."""

    prediction: dict | None
    parameter: str
    threshold: float
    threshold_message: str
    closed_form: ClosedForm | None
    finite_n: FiniteN | None
    problem: str = ""
    environment: str = ""  # where years vary, the year types in words (the theory is then stochastic)

    def as_dict(self) -> dict:
        return asdict(self)


def page_theory(config: Config) -> Theory:
    """Invasion fitness, verdict, establishment, neutral expectation and threshold for one config."""
    parameter = f"allele.{config.invasion.mutant}.fecundity"
    closed = closed_form_threshold(config)
    try:
        prediction = predict_point(config)  # where years vary, the stochastic theory
    except (NoEquilibriumError, ValueError) as err:
        return Theory(None, parameter, math.nan, "", closed, None, problem=str(err))
    if prediction["verdict"] == "undefined":
        return Theory(None, parameter, math.nan, "", closed, None, problem=prediction["problem"])
    try:
        found = threshold_at(config, parameter)
        value, message = found.value, found.message
    except (ConfigError, NoEquilibriumError, ValueError) as err:
        value, message = math.nan, str(err)
    return Theory(prediction, parameter, value, message, closed, finite_n_prediction(config),
                  environment=prediction.get("environment", ""))
