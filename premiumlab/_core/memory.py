"""Memory freed between the chunks of a pass handed back to the system at once, so that a pass's
peak follows its live data rather than the allocators' holes.

pyarrow's default pool (mimalloc) and glibc's malloc keep freed memory for reuse. With arrays kept
from every chunk lying among each chunk's short-lived buffers, those kept holes grow with the book
(measured on `load_book(compact=True)` at 5,000,000 policies: 2.09 GB peak, 1.49 GB with this).
`returning_freed_memory` makes pyarrow allocate through the C allocator and, where the C library is
glibc, fixes its mmap threshold (mallopt M_MMAP_THRESHOLD) at `PASS_MMAP_THRESHOLD` for the pass:
every buffer of that size or more is mapped on its own and unmapped when freed. After the pass the
threshold is `AFTER_MMAP_THRESHOLD`, the most glibc's own sliding threshold reaches: mapping every
megabyte afresh costs page faults on each large temporary array of the numerical steps that follow
(on `fit --models glm` at 1,000,000 policies the GLM step took 18.7 s with the 1 MiB threshold kept
and 14.0 s with it lifted, one run each on a loaded machine: a sign, not a measurement).
"""

from __future__ import annotations

import ctypes
import ctypes.util
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

#: During a pass, blocks of this many bytes or more are mapped on their own (a 500,000-row float64
#: column is 4 MB).
PASS_MMAP_THRESHOLD = 1 << 20
#: After it: glibc's DEFAULT_MMAP_THRESHOLD_MAX on 64-bit systems (32 MiB).
AFTER_MMAP_THRESHOLD = 32 << 20
#: mallopt's parameter number for the mmap threshold (glibc malloc.h).
_M_MMAP_THRESHOLD = -3


def _mallopt() -> Any:
    """glibc's mallopt, or None where the C library is not glibc."""
    name = ctypes.util.find_library("c")
    if name is None:
        return None
    try:
        return ctypes.CDLL(name).mallopt
    except (OSError, AttributeError):
        return None


@contextmanager
def returning_freed_memory() -> Iterator[None]:
    """Within: glibc maps every block of `PASS_MMAP_THRESHOLD` bytes or more on its own; for the
    rest of the process: pyarrow allocates through the C allocator, and glibc's mmap threshold is
    `AFTER_MMAP_THRESHOLD` (nothing is changed in the C allocator where it is not glibc).
    """
    import pyarrow

    pyarrow.set_memory_pool(pyarrow.system_memory_pool())
    mallopt = _mallopt()
    if mallopt is not None:
        mallopt(_M_MMAP_THRESHOLD, PASS_MMAP_THRESHOLD)
    try:
        yield
    finally:
        if mallopt is not None:
            mallopt(_M_MMAP_THRESHOLD, AFTER_MMAP_THRESHOLD)
