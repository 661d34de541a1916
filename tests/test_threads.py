"""Threads allowed to the numerical libraries inside a step (analysis.threads)."""

from threadpoolctl import threadpool_info

from analysis.threads import SMALL_ROWS, threads_for


def _counts() -> list[int]:
    return [pool["num_threads"] for pool in threadpool_info()]


def test_small_matrices_get_one_thread():
    with threads_for(SMALL_ROWS - 1):
        assert _counts() and all(count == 1 for count in _counts())


def test_large_matrices_keep_the_libraries_choice():
    before = _counts()
    with threads_for(SMALL_ROWS):
        assert _counts() == before
    with threads_for(SMALL_ROWS - 1):
        pass
    assert _counts() == before
