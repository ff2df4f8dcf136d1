"""Former home of replicates and the experiment loop, kept so that old imports still work.

Replicates and the stop rule are in ``sim.replicates``, outcomes in
``sim.outcomes``, the experiment loop in ``sim.experiment``.
"""

from .experiment import ExperimentInterrupted, request_stop, run_experiment
from .outcomes import OUTCOMES, fixed_outcome, summarize
from .replicates import ReplicateResult, replicate_rng, run_replicate, run_replicates

__all__ = ["OUTCOMES", "ExperimentInterrupted", "request_stop", "fixed_outcome", "ReplicateResult",
           "replicate_rng", "run_replicate", "run_replicates", "run_experiment", "summarize"]
