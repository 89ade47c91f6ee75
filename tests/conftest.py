"""Shared test helpers: small scenarios built from dicts."""

from __future__ import annotations

import os
import tempfile

import numpy as np
import pytest

from spillgauge.scenario.reading import parse_scenario

# Keep the community cache of the tests out of the user's cache folder.
os.environ.setdefault("SPILLGAUGE_CACHE", tempfile.mkdtemp(prefix="spillgauge-test-cache-"))


def make_scenario(**sections):
    """Return a validated scenario from keyword sections (``users={...}`` etc.)."""
    base_dir = sections.pop("base_dir", None)
    data = {"name": sections.pop("name", "test")}
    designs = sections.pop("design", None)
    data.update(sections)
    if designs is not None:
        data["design"] = designs
    return parse_scenario(data, base_dir=base_dir)


@pytest.fixture
def scenario_factory():
    return make_scenario


@pytest.fixture
def rng():
    return np.random.default_rng(20261202)


# A market small enough for command-line tests that start real runs.
TINY = """name = "tiny"
[calendar]
days = 3
[users]
count = 120
[pools]
count = 4
[effect]
lift = 0.3
[study]
reps = 2
seed = 2
[[design]]
kind = "user"
"""


@pytest.fixture
def tiny(tmp_path):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return path
