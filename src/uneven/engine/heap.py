"""glibc's malloc thresholds while the stream plan runs (engine/stream.py).

Every batch of the stream makes a dozen numpy temporaries of its size (65,536 doubles: 512 KB each),
and frees them before the next. glibc serves a block that large by mmap, or from the heap once its
dynamic threshold has grown past it; but it then returns the heap's free top to the system whenever
it exceeds twice that threshold (about 1 MB), so the next batch faults its pages in again, 4 KB at a
time. That cost about 40 % of the stream's numpy time on 20M rows (bench/README.md, "the heap
thresholds"). Raising both thresholds once, to values glibc's own dynamic adjustment may reach
anyway (its mmap threshold grows up to 32 MB on 64-bit systems, the trim threshold to twice that),
keeps one batch's working set in the heap from batch to batch. What it costs the process: up to
TRIM_THRESHOLD bytes of freed memory kept rather than returned, and blocks up to MMAP_THRESHOLD
taken from the heap. Set ``ENABLED = False`` before the first query to leave malloc as it is; on
other C libraries nothing changes.
"""

from __future__ import annotations

import ctypes
import platform

M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3  # glibc's malloc.h
MMAP_THRESHOLD = 4 << 20  # a batch's arrays come from the heap; larger blocks are still mapped
TRIM_THRESHOLD = 64 << 20  # a batch's freed arrays stay for the next
ENABLED = True
_set = False


def keep_batch_memory() -> bool:
    """Raise the thresholds once per process (glibc only); whether they are raised."""
    global _set
    if _set or not ENABLED:
        return _set
    if platform.system() != "Linux" or platform.libc_ver()[0] != "glibc":
        return False
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):  # (a process without the symbol: nothing to tune)
        return False
    mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
    _set = bool(mallopt(M_MMAP_THRESHOLD, MMAP_THRESHOLD)) and bool(mallopt(M_TRIM_THRESHOLD, TRIM_THRESHOLD))
    return _set
