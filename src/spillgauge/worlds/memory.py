"""Keep the memory a replication frees for the next one, instead of handing it back to the system.

A replication of a large market allocates and frees arrays of hundreds of
megabytes (the candidate events and what the worlds compute from them). The C
library hands blocks that large straight back to the operating system when they
are freed and asks for fresh ones at the next allocation, whose every page the
kernel must then clear again; on a virtual machine that gives memory back to its
host this costs more than the arithmetic done on the array. The engine therefore
asks the C library (glibc's ``mallopt``) to serve large blocks from its heap and
never to shrink the heap: a process that simulates many replications clears its
pages once. The process keeps its peak memory until it ends (a study's worker
processes end with the study). Elsewhere (another C library, another system)
nothing changes.
"""

from __future__ import annotations

import ctypes

__all__ = ["keep_freed_memory"]

# glibc's mallopt parameters (malloc.h).
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3
# Blocks up to this size come from the heap (the largest value mallopt takes is a C int).
_HEAP_BLOCKS_UP_TO = 1 << 30

_state = {"done": False}


def keep_freed_memory() -> bool:
    """Ask the C library to keep freed memory for reuse (once per process).

    Returns
    -------
    bool
        True when the C library took both settings (glibc), False otherwise.
    """
    if _state["done"]:
        return _state["kept"]
    _state["done"] = True
    _state["kept"] = False
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError, TypeError):  # no C library symbols, or not glibc
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    mallopt.restype = ctypes.c_int
    # -1 as the trim threshold is the largest size: the heap is never trimmed.
    _state["kept"] = bool(mallopt(_M_MMAP_THRESHOLD, _HEAP_BLOCKS_UP_TO)
                          and mallopt(_M_TRIM_THRESHOLD, -1))
    return _state["kept"]
