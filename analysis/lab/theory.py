"""What theory says about the page's config: invasion fitness, verdict, threshold, predictions.

Recomputed whenever a control moves. Everything comes from the analysis layer,
as ``broodline threshold`` gives it for the same config: the prediction and the
threshold (``analysis.sweep.predict_point`` and ``threshold_at``: the stochastic
theory where years vary), the closed form where one applies
(``analysis.closedform``), and the finite-population prediction through a hook.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from sim.config import Config, ConfigError
from sim.meanfield import NoEquilibriumError

from ..closedform import ClosedForm, closed_form_threshold
from ..sweep import predict_point, threshold_at

__all__ = ["ClosedForm", "FiniteN", "Theory", "closed_form_threshold", "finite_n_prediction", "page_theory"]


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
    """Invasion fitness, verdict, establishment, neutral expectation and threshold for one config
    (along the mutant's fecundity, or its effort for an effort allele)."""
    mutant = config.alleles[config.allele_index(config.invasion.mutant)]
    # the mutant's own number: its effort where the trade-off curve gives its fecundity
    parameter = f"allele.{mutant.name}.{'effort' if mutant.breeding == 'effort' else 'fecundity'}"
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
