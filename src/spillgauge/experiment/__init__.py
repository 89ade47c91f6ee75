"""From the recommendation to the real experiment: assign, simulate, analyse.

:mod:`.assignment` (the design's own draw for the team's market),
:mod:`.folder` (the assignment files), :mod:`.balance` (pre-period balance by arm),
:mod:`.simulate` (one synthetic experiment with its truth), :mod:`.orders`
(the experiment's orders into an outcome panel) and :mod:`.analyze` (the
design's estimator on it). The package sits above designs, estimators and the
study, and below the command line.
"""

from spillgauge.experiment.analyze import ExperimentAnalysis, analyze_experiment
from spillgauge.experiment.assignment import Assignment, assign_design
from spillgauge.experiment.simulate import SimulatedExperiment, simulate_experiment

__all__ = ["Assignment", "assign_design", "SimulatedExperiment", "simulate_experiment",
           "ExperimentAnalysis", "analyze_experiment"]
