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

from sim.lazy import lazy_exports

# Each name is imported from its module when first used (PEP 562), so that importing the
# package (e.g. for its command line's parser) does not load scipy.stats and the rest.
_WHERE = {
    "Extinction": "branching",
    "establishment_probability": "branching",
    "extinction_probabilities": "branching",
    "PredictedFixation": "comparison",
    "SideOfNeutral": "comparison",
    "agreement": "comparison",
    "compare": "comparison",
    "compare_thresholds": "comparison",
    "judge": "comparison",
    "Demography": "demography",
    "dominant_eigen": "demography",
    "schedule_demography": "demography",
    "ResidentEnvironment": "environment",
    "resident_environment": "environment",
    "FixationEstimate": "estimates",
    "ObservedThreshold": "estimates",
    "observed_threshold": "estimates",
    "wilson_interval": "estimates",
    "Prediction": "invasion",
    "invasion_fitness": "invasion",
    "neutral_expectation": "invasion",
    "predict": "invasion",
    "predict_sweep": "sweep",
    "sweep_thresholds": "sweep",
    "AdaptiveAnalysis": "adaptive",
    "EffortModel": "adaptive",
    "SingularStrategy": "adaptive",
    "analyse_effort": "adaptive",
    "pairwise_invasibility": "adaptive",
    "selection_gradient": "adaptive",
    "singular_strategies": "adaptive",
    "compare_trait": "trait",
    "effort_model": "trait",
    "trait_analysis": "trait",
    "ThresholdResult": "thresholds",
    "threshold": "thresholds",
    "with_values": "thresholds",
    "plot": "plots",
    "invasibility": "invasibility",
    "report": "reporting",
}

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


__getattr__, __dir__ = lazy_exports(__name__, _WHERE, globals())
