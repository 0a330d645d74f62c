"""One pool of threads for the compiled kernels that release the GIL (one thread per core)."""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from functools import lru_cache

#: Threads that share a kernel's work (the machine's cores).
THREADS = max(1, os.cpu_count() or 1)


@lru_cache(maxsize=1)
def pool():
    """The process's shared pool (created on first use)."""
    return ThreadPoolExecutor(max_workers=THREADS, thread_name_prefix="corealign-kernel")


def blocks(size, minimum):
    """Bounds ``[b_0, ..., b_k]`` splitting ``range(size)`` into at most ``THREADS`` blocks of
    at least ``minimum`` items (one block when the work is small)."""
    parts = max(1, min(THREADS, size // max(minimum, 1)))
    return [size * k // parts for k in range(parts + 1)]
