"""One thread per model fit: thread limits set in every process that fits, before heavy imports.

Oversubscribed OpenMP/BLAS threads made fits 60–650× slower on a 2-core box (two OpenMP
runtimes live in one process: scikit-learn's vendored libgomp and LightGBM's system one), so
parallelism comes from worker processes and each process fits with exactly ``threads`` threads.
"""

from __future__ import annotations

import contextlib
import ctypes
import os
import signal

_THREAD_VARS = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
    "LOKY_MAX_CPU_COUNT",
)


def limit_threads(threads: int = 1) -> None:
    """Pin every known thread pool of this process (and its children) to ``threads``."""
    for var in _THREAD_VARS:
        os.environ[var] = str(threads)
    with contextlib.suppress(Exception):
        from threadpoolctl import threadpool_limits

        threadpool_limits(threads)


def die_with_parent(sig: int = signal.SIGKILL) -> None:
    """Ask Linux to send ``sig`` to this process when its parent dies (no orphans survive)."""
    with contextlib.suppress(Exception):
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        pr_set_pdeathsig = 1
        libc.prctl(pr_set_pdeathsig, sig, 0, 0, 0)


def return_freed_memory() -> None:
    """Make freed table-sized buffers go back to the OS, so peak RSS tracks live data.

    glibc raises its mmap threshold each time a large block is freed, after which blocks of
    that size come from the heap and stay in the process; a fixed threshold keeps every
    buffer over 128 KiB mmap-ed and returned on free. Arrow's own pool (mimalloc) keeps what
    it freed as well, so Arrow allocates through the system allocator here.
    """
    with contextlib.suppress(Exception):
        libc = ctypes.CDLL("libc.so.6")
        m_mmap_threshold = -3
        libc.mallopt(m_mmap_threshold, 128 * 1024)
    with contextlib.suppress(Exception):
        import pyarrow as pa

        pa.set_memory_pool(pa.system_memory_pool())
