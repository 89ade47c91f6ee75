"""The one random draw every design shares: which units are treated."""

from __future__ import annotations

import numpy as np

from spillgauge.schedule import RANDOMIZATIONS
from spillgauge.seeding import check_rng

__all__ = ["draw_treated_units"]


def draw_treated_units(n_units: int, *, share: float, randomization: str,
                       rng: np.random.Generator) -> np.ndarray:
    """Return which of ``n_units`` units are treated, shape ``(n_units,)``.

    ``"complete"`` treats exactly ``round(share * n_units)`` units, at least one
    and at most ``n_units - 1`` when there are two or more units;
    ``"bernoulli"`` treats each unit independently with probability ``share``.

    >>> draw_treated_units(4, share=0.5, randomization="complete",
    ...                    rng=np.random.default_rng(1)).sum()
    np.int64(2)
    """
    check_rng(rng)
    if randomization == "bernoulli":
        return rng.random(n_units) < share
    if randomization not in RANDOMIZATIONS:
        raise ValueError(f"randomization must be one of {RANDOMIZATIONS}; got {randomization!r}")
    n_treated = int(round(share * n_units))
    if n_units >= 2:
        n_treated = min(max(n_treated, 1), n_units - 1)
    treated = np.zeros(n_units, dtype=bool)
    treated[rng.permutation(n_units)[:n_treated]] = True
    return treated
