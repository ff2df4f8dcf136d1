"""broodline's analysis layer: analytic invasion theory and its comparison with simulations.

Theory (pure functions of sim's schedules, density objects and configs):
``schedule_demography`` (Caswell 2001), ``resident_environment``,
``invasion_fitness`` and ``predict`` (Metz, Nisbet & Geritz 1992),
``threshold``, ``extinction_probabilities`` / ``establishment_probability``
(branching processes), ``neutral_expectation``. Results files:
``compare``, ``compare_thresholds``, ``plot``, ``report``.

``plot`` and ``report`` load matplotlib on first use, so importing the
package stays light.
"""

from .branching import Extinction, establishment_probability, extinction_probabilities
from .comparison import PredictedFixation, SideOfNeutral, agreement, compare, compare_thresholds, judge
from .demography import Demography, dominant_eigen, schedule_demography
from .environment import ResidentEnvironment, resident_environment
from .estimates import FixationEstimate, ObservedThreshold, observed_threshold, wilson_interval
from .invasion import Prediction, invasion_fitness, neutral_expectation, predict
from .sweep import predict_sweep, sweep_thresholds
from .adaptive import AdaptiveAnalysis, EffortModel, SingularStrategy, analyse_effort, pairwise_invasibility
from .adaptive import selection_gradient, singular_strategies
from .trait import compare_trait, effort_model, trait_analysis
from .thresholds import ThresholdResult, threshold, with_values

__all__ = [
    "AdaptiveAnalysis",
    "EffortModel",
    "SingularStrategy",
    "analyse_effort",
    "compare_trait",
    "effort_model",
    "invasibility",
    "pairwise_invasibility",
    "selection_gradient",
    "singular_strategies",
    "trait_analysis",
    "Demography",
    "Extinction",
    "FixationEstimate",
    "ObservedThreshold",
    "PredictedFixation",
    "Prediction",
    "ResidentEnvironment",
    "SideOfNeutral",
    "ThresholdResult",
    "agreement",
    "compare",
    "compare_thresholds",
    "dominant_eigen",
    "establishment_probability",
    "extinction_probabilities",
    "invasion_fitness",
    "judge",
    "neutral_expectation",
    "observed_threshold",
    "plot",
    "predict",
    "predict_sweep",
    "report",
    "resident_environment",
    "schedule_demography",
    "sweep_thresholds",
    "threshold",
    "wilson_interval",
    "with_values",
]


def __getattr__(name):
    if name == "plot":
        from .plots import plot

        return plot
    if name == "invasibility":
        from .invasibility import invasibility

        return invasibility
    if name == "report":
        from .reporting import report

        return report
    raise AttributeError(f"module 'analysis' has no attribute {name!r}")
