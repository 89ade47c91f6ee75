"""Statistics: pure functions of estimates and truths (no market, no designs).

:mod:`.truth` (the GTE from the counterfactual worlds), :mod:`.metrics` (bias,
SD, RMSE, coverage, power, Type S/M with Monte Carlo SEs), :mod:`.trust` (the
trust rule, once), :mod:`.recommend` (the recommendation and its sentences) and
:mod:`.interference` (the test of interference over replications).
"""

__all__: list[str] = []
