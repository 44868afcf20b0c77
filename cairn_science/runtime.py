"""Per-process limits for the numeric libraries, so that one worker process uses one core.

Environment variables must be set before numpy, scipy or numba are first imported; the
threadpoolctl limit covers libraries already loaded.
"""

from __future__ import annotations

import os

THREAD_VARIABLES = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
    "NUMBA_NUM_THREADS",
)


def worker_threads() -> int:
    """Threads per worker process for numeric libraries (``CAIRN_WORKER_THREADS``, default 1)."""
    raw = os.environ.get("CAIRN_WORKER_THREADS", "1")
    try:
        n = int(raw)
    except ValueError as exc:
        raise ValueError(
            f"CAIRN_WORKER_THREADS must be a whole number of threads, got {raw!r}"
        ) from exc
    if n < 1:
        raise ValueError(f"CAIRN_WORKER_THREADS must be at least 1, got {n}")
    return n


def limit_numeric_threads(n_threads: int | None = None) -> int:
    """Set the thread count of BLAS, OpenMP and numba for this process; returns the count."""
    n = worker_threads() if n_threads is None else n_threads
    for name in THREAD_VARIABLES:
        os.environ[name] = str(n)
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # threadpoolctl is optional for the pure library
        return n
    threadpool_limits(limits=n)
    return n


def thread_report() -> dict:
    """What each loaded thread pool is allowed, e.g. for a worker probe."""
    from threadpoolctl import threadpool_info

    return {
        "env": {name: os.environ.get(name) for name in THREAD_VARIABLES},
        "pools": [
            {"api": p.get("internal_api"), "num_threads": p.get("num_threads")}
            for p in threadpool_info()
        ],
    }
