"""The one random draw every design shares: which units are treated."""

from __future__ import annotations

import numpy as np

from spillgauge.schedule import RANDOMIZATIONS
from spillgauge.seeding import check_rng

__all__ = ["draw_treated_units", "draw_treated_within_strata"]


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


def draw_treated_within_strata(strata: np.ndarray, *, share: float, rng: np.random.Generator
                               ) -> np.ndarray:
    """Return which units are treated when exactly ``round(share * n_s)`` of each stratum are.

    Blocked (stratified) complete randomization: within every stratum ``s`` of
    ``n_s`` units, a uniformly random ``round(share * n_s)`` are treated (kept
    in ``[1, n_s - 1]`` when ``n_s >= 2``), independently across strata
    (Imbens & Rubin 2015, ch. 9). ``strata`` holds one code per unit.

    >>> t = draw_treated_within_strata(np.array([0, 0, 0, 0, 1, 1]), share=0.5,
    ...                                rng=np.random.default_rng(1))
    >>> int(t[:4].sum()), int(t[4:].sum())
    (2, 1)
    """
    check_rng(rng)
    strata = np.asarray(strata)
    _, stratum, sizes = np.unique(strata, return_inverse=True, return_counts=True)
    n_treated = np.rint(share * sizes).astype(np.int64)
    n_treated = np.where(sizes >= 2, np.clip(n_treated, 1, sizes - 1), n_treated)
    order = np.lexsort((rng.random(strata.size), stratum))  # each stratum's units, shuffled
    first = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    rank = np.arange(strata.size) - first[stratum[order]]
    treated = np.zeros(strata.size, dtype=bool)
    treated[order] = rank < n_treated[stratum[order]]
    return treated
