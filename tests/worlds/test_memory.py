"""The engine keeps freed memory for the next replication (glibc's mallopt), and numbers do not move."""

from __future__ import annotations

import resource
import sys

import numpy as np
import pytest

from spillgauge.worlds.memory import keep_freed_memory


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt (Linux)")
def test_a_freed_block_is_reused_without_new_pages():
    if not keep_freed_memory():
        pytest.skip("the C library is not glibc")
    size = 64 * 2**20 // 8  # 64 MiB, above glibc's default limit (32 MiB) for heap blocks
    block = np.ones(size)
    del block
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    block = np.ones(size)  # served from the kept heap: its pages are already the process's
    faults = resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before
    del block
    # Fresh pages would cost one fault per 4 KiB page (16,384) or per 2 MiB huge page (32);
    # a few faults are left for the interpreter's own allocations.
    assert faults < 16


def test_it_asks_once_and_answers_the_same():
    assert keep_freed_memory() is keep_freed_memory()
