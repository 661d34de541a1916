"""The tests' surroundings: compiled code and scratch files go to one temporary folder.

numba's compile cache (UMAP's code) would otherwise go to the user's cache folder, and Dask's
workers leave a scratch folder in the system's temporary folder. Both are pointed here before
anything imports numba or dask, and the folder is removed when the tests end. Processes the
tests start (the app, the command line, a notebook's kernel) inherit the same settings.
"""

from __future__ import annotations

import os
import shutil
import tempfile

_SCRATCH = tempfile.mkdtemp(prefix="invariant-scout-tests-")
os.environ["NUMBA_CACHE_DIR"] = os.path.join(_SCRATCH, "numba")
# read by dask's configuration as "temporary-directory", where workers put their scratch space
os.environ["DASK_TEMPORARY_DIRECTORY"] = os.path.join(_SCRATCH, "dask")


def pytest_unconfigure(config):
    shutil.rmtree(_SCRATCH, ignore_errors=True)
