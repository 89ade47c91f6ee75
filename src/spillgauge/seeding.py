"""Random streams: every stream is derived from (study seed, replication, purpose[, key]).

Streams never depend on run order, so results ignore worker count and order,
and adding replications or designs leaves the existing streams unchanged.
Purpose ids are appended, never renumbered.
"""

from __future__ import annotations

import zlib

import numpy as np

__all__ = [
    "ASSIGNMENT",
    "DEMAND",
    "MARKET",
    "POOL_SHOCKS",
    "RANDOMIZATION_TEST",
    "check_rng",
    "design_key",
    "side_stream",
    "stream",
]

MARKET, DEMAND, ASSIGNMENT = 0, 1, 2
RANDOMIZATION_TEST = 3  # a design's re-draws for its randomization p-value (keyed by its label)
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
        One of :data:`MARKET`, :data:`DEMAND`, :data:`ASSIGNMENT`,
        :data:`RANDOMIZATION_TEST`.
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


POOL_SHOCKS = 0  # side streams of a replication's demand stream: append, never renumber


def side_stream(rng: np.random.Generator, purpose: int) -> np.random.Generator:
    """Return a generator for one side purpose of a stream, without drawing from ``rng``.

    The side stream's seed extends the spawn key of ``rng``'s seed sequence by
    ``purpose``, so it is fixed by the stream ``rng`` was built from and leaves
    ``rng``'s own draws unchanged (a scenario that does not use the side purpose
    gives the same numbers as before it existed).

    >>> a = side_stream(np.random.default_rng(stream(7, 3, DEMAND)), POOL_SHOCKS).random()
    >>> b = side_stream(np.random.default_rng(stream(7, 3, DEMAND)), POOL_SHOCKS).random()
    >>> a == b
    True
    """
    check_rng(rng)
    seed = rng.bit_generator.seed_seq
    if not isinstance(seed, np.random.SeedSequence):
        raise TypeError("rng must be built from a numpy.random.SeedSequence")
    return np.random.default_rng(np.random.SeedSequence(
        seed.entropy, spawn_key=(*seed.spawn_key, int(purpose))))


def check_rng(rng: object) -> np.random.Generator:
    """Return ``rng`` if it is a :class:`numpy.random.Generator`, else raise TypeError."""
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}")
    return rng
