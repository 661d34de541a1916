"""Hiding UMAP's start-up cost: a lasting compile cache and a warm-up fit in the background.

UMAP and its nearest-neighbour library are written with numba, which compiles their code the
first time it runs in a process: 15 s or more before the first picture. Two things hide it:

* :func:`configure_numba_cache` points numba's disk cache (``NUMBA_CACHE_DIR``) at a writable
  folder of the user's cache (``~/.cache/invariant-scout/numba`` on Linux, or under
  ``$XDG_CACHE_HOME``), and :func:`import_umap` also turns the cache on for UMAP's own
  compiled functions, which the package does not cache itself. Later processes then load the
  compiled code from disk instead of compiling it again.
* :func:`start_umap_warmup` runs a tiny UMAP projection in a background thread, once per
  process, so that the compiling is done (or well under way) by the time someone asks for a
  UMAP picture. The app calls it when it starts; it never raises.

Nothing here is needed for correct results: without a writable cache folder numba compiles
as before, and a failed warm-up only means the first real UMAP call pays the compile cost.

Example::

    from analysis.warmup import start_umap_warmup, umap_warmup_status

    start_umap_warmup()          # returns at once
    umap_warmup_status()         # "running", later "done"
"""

from __future__ import annotations

import os
import sys
import tempfile
import threading
import time
from pathlib import Path

APP_NAME = "invariant-scout"
# The folder under the cache home that holds numba's compiled code.
NUMBA_FOLDER = "numba"
# Packages whose compiled functions get a disk cache when they do not ask for one.
_UMAP_PACKAGES = ("umap",)

_lock = threading.Lock()
_thread: threading.Thread | None = None
_status = "not started"
_error: str | None = None
_seconds: float | None = None


def default_numba_cache_dir() -> Path:
    """The folder numba's compiled code goes to unless ``NUMBA_CACHE_DIR`` says otherwise.

    The user's cache folder (platformdirs' ``user_cache_dir`` when that package is installed,
    else ``$XDG_CACHE_HOME`` or ``~/.cache``), then ``invariant-scout/numba``.
    """
    try:
        import platformdirs

        home = Path(platformdirs.user_cache_dir(APP_NAME, appauthor=False))
    except ImportError:
        base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
        home = Path(base) / APP_NAME
    return home / NUMBA_FOLDER


def _fallback_dir() -> Path:
    # per user, so two users of one machine never share (or fight over) compiled code
    user = getattr(os, "getuid", lambda: "user")()
    return Path(tempfile.gettempdir()) / f"{APP_NAME}-{user}" / NUMBA_FOLDER


def _writable(folder: Path) -> bool:
    """Whether ``folder`` exists (creating it if needed) and a file can be written in it."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=folder, prefix=".write-test-"):
            pass
        return True
    except OSError:
        return False


def configure_numba_cache() -> Path | None:
    """Set ``NUMBA_CACHE_DIR`` to a writable folder, before numba is imported if possible.

    A value the user has set already is kept. Otherwise the first writable folder of
    :func:`default_numba_cache_dir` and a per-user folder under the system's temporary
    folder is used. If numba is already imported its settings are reloaded, so that
    functions compiled from now on are cached there. Returns the folder in use, or None when
    none is writable (numba then works as if this had not been called). Never raises.
    """
    try:
        chosen = os.environ.get("NUMBA_CACHE_DIR")
        if chosen:
            return Path(chosen) if _writable(Path(chosen)) else None
        for folder in (default_numba_cache_dir(), _fallback_dir()):
            if _writable(folder):
                os.environ["NUMBA_CACHE_DIR"] = str(folder)
                if "numba" in sys.modules:
                    from numba.core import config

                    config.reload_config()
                return folder
        return None
    except Exception:  # noqa: BLE001 - a cache is an optimisation; never fail the caller
        return None


def enable_umap_caching() -> int:
    """Give every compiled function of the imported ``umap`` package a disk cache.

    umap-learn compiles most of its functions without numba's ``cache=True``, so each new
    process compiles them again; a dispatcher's ``enable_caching()`` makes the compiled code
    go to (and come back from) ``NUMBA_CACHE_DIR``. Numba keys the cache by the function's
    source file and its modification time, so an upgraded package compiles afresh. Returns
    how many functions were switched on; 0 if umap or numba is not imported. Never raises.
    """
    try:
        from numba.core.caching import NullCache
        from numba.core.registry import CPUDispatcher
    except Exception:  # noqa: BLE001 - numba missing or changed: nothing to switch on
        return 0
    switched = 0
    for name, module in list(sys.modules.items()):
        if module is None or name.split(".")[0] not in _UMAP_PACKAGES:
            continue
        for value in list(vars(module).values()):
            try:
                if isinstance(value, CPUDispatcher) and isinstance(value._cache, NullCache):
                    value.enable_caching()
                    switched += 1
            except Exception:  # noqa: BLE001 - one function without a cache is harmless
                continue
    return switched


def import_umap():
    """Import ``umap`` with numba's disk cache set up; raises ImportError if it is missing."""
    configure_numba_cache()
    import umap

    enable_umap_caching()
    return umap


def start_umap_warmup() -> threading.Thread | None:
    """Start one tiny UMAP projection in a background thread, once per process.

    Later calls return the same thread. The projection goes through the projection step
    itself, so it compiles exactly the code a real UMAP picture runs. Returns the thread, or
    None if no thread could be started. Never raises; :func:`umap_warmup_status` says how it
    went.
    """
    global _thread, _status, _error
    try:
        with _lock:
            if _thread is None:
                configure_numba_cache()
                thread = threading.Thread(target=_warm_up, name="umap-warmup", daemon=True)
                _status = "running"
                thread.start()
                _thread = thread
            return _thread
    except Exception as exc:  # noqa: BLE001 - e.g. no thread can be started
        _status, _error = "failed", f"{type(exc).__name__}: {exc}"
        return None


def umap_warmup_status() -> str:
    """"not started", "running", "done (N.N s)" or "failed: reason"."""
    if _status == "done" and _seconds is not None:
        return f"done ({_seconds:.1f} s)"
    if _status == "failed":
        return f"failed: {_error}"
    return _status


def wait_for_umap_warmup(timeout: float | None = None) -> bool:
    """Wait for the warm-up to end (at most ``timeout`` seconds); True if it succeeded."""
    thread = _thread
    if thread is not None:
        thread.join(timeout)
    return _status == "done"


def _warm_up() -> None:
    global _status, _error, _seconds
    started = time.perf_counter()
    try:
        _tiny_projection()
    except BaseException as exc:  # noqa: BLE001 - the warm-up must never take the app down
        _status, _error = "failed", f"{type(exc).__name__}: {exc}"
        return
    _seconds = time.perf_counter() - started
    _status = "done"


def _tiny_projection() -> None:
    """A UMAP projection of a small seeded integer table, through the projection step."""
    import numpy as np

    from analysis.projection import ProjectionStep
    from analysis.table import read_table

    rng = np.random.default_rng(0)
    rows = 300
    # two clouds of small integers, so the neighbour graph has structure and every column
    # is an ordinary integer invariant (no 0/1 column, which would become a flag)
    centre = np.where(np.arange(rows)[:, None] < rows // 2, 5, 20)
    values = centre + rng.integers(-4, 5, size=(rows, 4))
    lines = ["a,b,c,d"] + [",".join(str(v) for v in row) for row in values.tolist()]
    table = read_table(("\n".join(lines) + "\n").encode(), "umap-warmup.csv")
    ProjectionStep(method="umap", seed=0).run(table)


__all__ = [
    "configure_numba_cache",
    "default_numba_cache_dir",
    "enable_umap_caching",
    "import_umap",
    "start_umap_warmup",
    "umap_warmup_status",
    "wait_for_umap_warmup",
]
