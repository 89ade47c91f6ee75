"""Scenarios: the configuration types (:mod:`.config`) and their reading from TOML (:mod:`.reading`).

This package's ``__init__`` exports only the configuration types, which every
layer may use; :func:`~spillgauge.scenario.reading.load_scenario` lives one
layer up because validating ``[[design]]`` tables needs the design kinds.
"""

from spillgauge.scenario.config import (
    Calendar,
    DesignSpec,
    Effect,
    Graph,
    Pools,
    Scenario,
    Study,
    Users,
)

__all__ = ["Calendar", "Users", "Pools", "Graph", "Effect", "Study", "DesignSpec", "Scenario"]
