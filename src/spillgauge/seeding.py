"""Random streams: every stream is derived from (study seed, replication, purpose[, key]).

Streams never depend on run order, so results ignore worker count and order,
and adding replications or designs leaves the existing streams unchanged.
Purpose ids are appended, never renumbered.
"""

from __future__ import annotations

import zlib

import numpy as np

__all__ = [
    "MARKET",
    "DEMAND",
    "ASSIGNMENT",
    "stream",
    "design_key",
    "check_rng",
]

MARKET, DEMAND, ASSIGNMENT = 0, 1, 2
_MARKET_REPLICATION = 2**32 - 1  # the market is built once per seed, outside the replications


def stream(study_seed: int, replication: int | None, purpose: int, *key: int
           ) -> np.random.SeedSequence:
    """Return the seed sequence of one purpose in one replication.

    Parameters
    ----------
    study_seed : int
        The study's seed.
    replication : int or None
        Replication index; ``None`` for the market, which all replications share.
    purpose : int
        One of :data:`MARKET`, :data:`DEMAND`, :data:`ASSIGNMENT`.
    *key : int
        Further keys, e.g. :func:`design_key` of a design label.

    Examples
    --------
    >>> a = np.random.default_rng(stream(7, 3, DEMAND)).random()
    >>> b = np.random.default_rng(stream(7, 3, DEMAND)).random()
    >>> a == b
    True
    """
    rep = _MARKET_REPLICATION if replication is None else int(replication)
    return np.random.SeedSequence(int(study_seed), spawn_key=(rep, int(purpose), *map(int, key)))


def design_key(label: str) -> int:
    """Return a stable integer key for a design label (CRC-32 of its UTF-8 bytes).

    >>> design_key("user")
    2375276105
    """
    return zlib.crc32(label.encode("utf-8"))


def check_rng(rng: object) -> np.random.Generator:
    """Return ``rng`` if it is a :class:`numpy.random.Generator`, else raise TypeError."""
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}")
    return rng
