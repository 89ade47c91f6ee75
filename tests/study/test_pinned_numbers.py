"""Short runs of every bundled scenario give the pinned numbers bit for bit.

Results must be reproducible across versions: a change that is not meant to
move numbers must leave these files' values unchanged. A change that must move
them regenerates the files with ``tests/study/pinned/make_pins.py`` and says
so in its commit message.
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import pytest

PINNED = Path(__file__).parent / "pinned"
_spec = importlib.util.spec_from_file_location("make_pins", PINNED / "make_pins.py")
make_pins = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(make_pins)


@pytest.mark.parametrize("path", sorted(PINNED.glob("*.json")), ids=lambda p: p.stem)
def test_short_run_matches_the_pinned_bits(path):
    pinned = json.loads(path.read_text())
    now = make_pins.pinned_run(pinned["scenario"])
    # Every pinned number must come back bit for bit; fields added since the pins were
    # written (e.g. the relative effect) may appear beside them.
    assert len(now["rows"]) == len(pinned["rows"])
    for row, pinned_row in zip(now["rows"], pinned["rows"]):
        kept = {k: row[k] for k in pinned_row}
        if isinstance(pinned_row["truth"], dict):  # a launch's row holds its own truth
            kept["truth"] = {k: row["truth"][k] for k in pinned_row["truth"]}
        assert kept == pinned_row
    assert set(now["metrics"]) == set(pinned["metrics"])
    for label, metrics in pinned["metrics"].items():  # fields added since (n_estimates) may appear
        assert {k: now["metrics"][label][k] for k in metrics} == metrics, label
    assert now["recommendation"] == pinned["recommendation"]


def test_every_bundled_scenario_is_pinned():
    from spillgauge.bundled import bundled_scenarios

    assert {p.stem for p in bundled_scenarios()} == {p.stem for p in PINNED.glob("*.json")}
