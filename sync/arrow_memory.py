"""Which memory pool Arrow allocates from while fieldmark reads logs.

A filtered read of a partitioned dataset decodes one row group at a time (tens of MB),
keeps a few rows and frees the rest.  jemalloc keeps freed pages for the next row group;
the default pool of the Linux wheels (mimalloc) hands them back sooner, so the next row
group faults them in again: the first export of a 100M-event dataset took about 15 %
longer (fresh processes alternated, tests/perf/test_dataset_export_perf.py).
"""
from __future__ import annotations

import os

import pyarrow as pa


def prefer_jemalloc() -> str:
    """Make jemalloc Arrow's default pool, unless ARROW_DEFAULT_MEMORY_POOL chose one or this
    build has no jemalloc (Windows wheels); returns the pool in use.  For entry points only:
    a library must not change its host's allocator."""
    if not os.environ.get("ARROW_DEFAULT_MEMORY_POOL"):
        try:
            pa.set_memory_pool(pa.jemalloc_memory_pool())
        except NotImplementedError:
            pass
    return pa.default_memory_pool().backend_name
