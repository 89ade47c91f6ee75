"""From the recommendation to the real experiment: assign, simulate, analyse.

:mod:`.assignment` (the design's own draw for the team's market, as an
:class:`~.assignment.Assignment`), :mod:`.folder` (the assignment files),
:mod:`.balance` (pre-period balance by arm), :mod:`.simulate` (one synthetic
experiment with its truth), :mod:`.csv_checks` and :mod:`.orders` (the
experiment's orders into an outcome panel) and :mod:`.analyze` (the design's
estimator on it). The package sits above designs, estimators and the study, and
below the command line. ``assign_design``, ``simulate_experiment`` and
``analyze_experiment`` are exported by :mod:`spillgauge` itself; this package
imports nothing on its own, so each command loads only what it uses.
"""

__all__: list[str] = []
