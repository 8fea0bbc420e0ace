"""Process-wide thread settings for running many solves side by side.

Studies run one solver process per core; a multi-threaded BLAS competing with them for the same
cores is many times slower (measured: a 736-unknown LU took 0.2 s with two BLAS threads on a
loaded 2-core machine, 0.016 s with one). Entry points (the CLI, pool and Dask workers, the test
session) call :func:`limit_blas_threads` once; importing the library never does.
"""

from __future__ import annotations

import os


def blas_thread_count() -> int:
    """Threads per process for BLAS: ``ELOPT_BLAS_THREADS`` or 1."""
    return int(os.environ.get("ELOPT_BLAS_THREADS", "1"))


def limit_blas_threads() -> int:
    """Limit BLAS/OpenMP to :func:`blas_thread_count` threads in this process and its children.

    Sets the usual environment variables (for child processes and libraries not yet loaded) and
    limits the already-loaded BLAS through threadpoolctl. Returns the thread count.
    """
    threads = blas_thread_count()
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, str(threads))
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=threads, user_api="blas")
    return threads
