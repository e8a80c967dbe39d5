"""Memory freed between the chunks of a pass handed back to the system at once, so that a pass's
peak follows its live data rather than the allocators' holes.

pyarrow's default pool (mimalloc) and glibc's malloc keep freed memory for reuse. With arrays kept
from every chunk lying among each chunk's short-lived buffers, those kept holes grow with the book
(measured on `fit --models glm`: about 0.3 GB a million rows). `return_freed_memory` makes pyarrow
allocate through the C allocator and, where the C library is glibc, fixes its mmap threshold at
`MMAP_THRESHOLD` (mallopt M_MMAP_THRESHOLD; glibc otherwise raises it up to 32 MiB as large blocks
are freed): every buffer of that size or more is then mapped on its own and unmapped when freed.
"""

from __future__ import annotations

import ctypes
import ctypes.util

#: Blocks of this many bytes or more are mapped on their own (a 500,000-row float64 column is 4 MB).
MMAP_THRESHOLD = 1 << 20
#: mallopt's parameter number for the mmap threshold (glibc malloc.h).
_M_MMAP_THRESHOLD = -3


def return_freed_memory() -> None:
    """For the rest of the process: pyarrow allocates through the C allocator, and glibc maps every
    block of `MMAP_THRESHOLD` bytes or more on its own (nothing where the C library is not glibc).

    Costs a system call per large block; call it once before a pass over a large book.
    """
    import pyarrow

    pyarrow.set_memory_pool(pyarrow.system_memory_pool())
    name = ctypes.util.find_library("c")
    if name is None:
        return
    try:
        mallopt = ctypes.CDLL(name).mallopt
    except (OSError, AttributeError):  # not glibc
        return
    mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD)
