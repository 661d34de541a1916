"""How many threads the numerical libraries may use inside a step.

On small matrices the BLAS and OpenMP threads of numpy and scikit-learn mostly wait on each
other, and on a busy laptop the waiting can cost many times the work itself; on large ones
they pay. Steps wrap such work in :func:`threads_for`, which allows one thread below
``SMALL_ROWS`` rows and leaves the libraries' own choice above it.
"""

from __future__ import annotations

import contextlib

# Rows below which one thread is faster or as fast (measured with bench/run.py on 2 cores:
# k-means and isolation forests gain nothing from a second thread below about this size).
SMALL_ROWS = 50_000


def threads_for(n_rows: int):
    """A context in which the numerical libraries use one thread for a small matrix."""
    if n_rows >= SMALL_ROWS:
        return contextlib.nullcontext()
    from threadpoolctl import threadpool_limits

    return threadpool_limits(1)


def refit_workers() -> int:
    """Threads that refit a model at once in a permutation test: every core, at most four.

    The solvers (liblinear, libsvm, numpy) release Python's lock while they work, so threads
    share the cores without copying the data; each refit then runs its own work on one
    thread (see :func:`one_thread_each`).
    """
    import os

    # the cores this process may run on (a task set or container may allow fewer than the
    # machine has)
    usable = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else None
    return max(1, min(4, usable or os.cpu_count() or 1))


def one_thread_each(workers: int):
    """A context in which each of ``workers`` parallel refits uses one library thread."""
    if workers <= 1:
        return contextlib.nullcontext()
    from threadpoolctl import threadpool_limits

    return threadpool_limits(1)


__all__ = ["SMALL_ROWS", "one_thread_each", "refit_workers", "threads_for"]
