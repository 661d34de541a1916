"""Tests for analysis/warmup.py: numba's cache folder and the UMAP warm-up thread.

Settings that must be in place before numba is imported are checked in a fresh Python
process, so that what this test process has imported already does not matter. No test
here measures time (speed is measured by bench/run.py).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from analysis import warmup

ROOT = Path(__file__).resolve().parent.parent
# the user's cache home is $XDG_CACHE_HOME on Linux (platformdirs, and the fallback, read it)
on_linux = pytest.mark.skipif(not sys.platform.startswith("linux"),
                              reason="the cache home follows XDG_CACHE_HOME on Linux only")


def _fresh_python(code: str, env: dict[str, str], timeout: float = 60) -> dict:
    """Run ``code`` in a new interpreter with ``env`` added; it prints one JSON line."""
    full = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    full.update(env)
    full["PYTHONPATH"] = str(ROOT)
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=full,
                          capture_output=True, text=True, timeout=timeout)
    assert done.returncode == 0, done.stderr[-2000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


_CONFIGURE = """
import json, os, sys, tempfile
from pathlib import Path
before = "numba" in sys.modules
from analysis.warmup import configure_numba_cache
folder = configure_numba_cache()
import numba
probe = Path(os.environ["NUMBA_CACHE_DIR"]) / "probe.txt"
probe.write_text("x")
print(json.dumps({"returned": str(folder), "env": os.environ["NUMBA_CACHE_DIR"],
                  "numba_cache_dir": numba.config.CACHE_DIR, "numba_before": before,
                  "probe": probe.read_text(), "temp": tempfile.gettempdir()}))
"""


@on_linux
def test_cache_folder_is_set_under_the_user_cache_home(tmp_path):
    home = tmp_path / "cache-home"
    found = _fresh_python(_CONFIGURE, {"XDG_CACHE_HOME": str(home)})
    expected = home / "invariant-scout" / "numba"
    assert found["numba_before"] is False, "importing analysis.warmup must not import numba"
    assert Path(found["returned"]) == expected
    assert Path(found["env"]) == expected
    # numba, imported afterwards, caches there; and the folder takes files
    assert Path(found["numba_cache_dir"]) == expected
    assert found["probe"] == "x"


def test_a_cache_folder_the_user_chose_is_kept(tmp_path):
    chosen = tmp_path / "mine"
    found = _fresh_python(_CONFIGURE, {"NUMBA_CACHE_DIR": str(chosen),
                                       "XDG_CACHE_HOME": str(tmp_path / "other")})
    assert Path(found["returned"]) == chosen
    assert Path(found["numba_cache_dir"]) == chosen
    assert not (tmp_path / "other").exists()


@on_linux
def test_an_unwritable_cache_home_falls_back_to_the_temporary_folder(tmp_path):
    # a regular file where the cache home should be: no folder can be made under it, even
    # by the superuser
    blocked = tmp_path / "not-a-folder"
    blocked.write_text("")
    temp = tmp_path / "tmp"
    temp.mkdir()
    found = _fresh_python(_CONFIGURE, {"XDG_CACHE_HOME": str(blocked), "TMPDIR": str(temp)})
    folder = Path(found["returned"])
    assert folder.parent.parent == temp
    assert folder.name == "numba"
    assert Path(found["numba_cache_dir"]) == folder
    assert found["probe"] == "x"


@on_linux
def test_numba_imported_first_still_gets_the_folder(tmp_path):
    code = "import numba\n" + _CONFIGURE
    found = _fresh_python(code, {"XDG_CACHE_HOME": str(tmp_path)})
    assert found["numba_before"] is True
    assert Path(found["numba_cache_dir"]) == tmp_path / "invariant-scout" / "numba"


# ----------------------------------------------------------------------------------------
# The warm-up thread


@pytest.fixture
def fresh_state(monkeypatch):
    """The module as in a process that has not started a warm-up yet."""
    monkeypatch.setattr(warmup, "_thread", None)
    monkeypatch.setattr(warmup, "_status", "not started")
    monkeypatch.setattr(warmup, "_error", None)
    monkeypatch.setattr(warmup, "_seconds", None)
    # keep this process's numba settings as they are
    monkeypatch.setattr(warmup, "configure_numba_cache", lambda: None)
    return warmup


def test_warmup_starts_once_and_later_calls_return_the_same_thread(fresh_state, monkeypatch):
    calls = []
    release = threading.Event()

    def tiny():
        calls.append(1)
        release.wait(10)

    monkeypatch.setattr(warmup, "_tiny_projection", tiny)
    assert warmup.umap_warmup_status() == "not started"
    first = warmup.start_umap_warmup()
    second = warmup.start_umap_warmup()
    assert first is second
    assert warmup.umap_warmup_status() == "running"
    release.set()
    assert warmup.wait_for_umap_warmup(10) is True
    assert warmup.start_umap_warmup() is first
    assert calls == [1]
    assert warmup.umap_warmup_status().startswith("done (")


def test_a_failing_warmup_is_reported_not_raised(fresh_state, monkeypatch):
    def broken():
        raise RuntimeError("no UMAP here")

    monkeypatch.setattr(warmup, "_tiny_projection", broken)
    thread = warmup.start_umap_warmup()
    assert thread is not None
    assert warmup.wait_for_umap_warmup(10) is False
    assert warmup.umap_warmup_status() == "failed: RuntimeError: no UMAP here"


def test_a_thread_that_cannot_start_is_reported_not_raised(fresh_state, monkeypatch):
    def refuse(self):
        raise RuntimeError("can't start new thread")

    monkeypatch.setattr(threading.Thread, "start", refuse)
    assert warmup.start_umap_warmup() is None
    assert warmup.umap_warmup_status().startswith("failed: RuntimeError")
    assert warmup.wait_for_umap_warmup(1) is False


_REAL_WARMUP = """
import json, os
from pathlib import Path
from analysis.warmup import start_umap_warmup, umap_warmup_status, wait_for_umap_warmup
first = start_umap_warmup()
second = start_umap_warmup()
ok = wait_for_umap_warmup(1200)
third = start_umap_warmup()
folder = Path(os.environ["NUMBA_CACHE_DIR"])
cached = sorted({p.name.split("-")[0] for p in folder.rglob("*.nbi")})
print(json.dumps({"same": first is second is third, "ok": ok, "status": umap_warmup_status(),
                  "cached": cached}))
"""


@pytest.mark.slow
def test_the_real_warmup_runs_umap_and_fills_the_cache(tmp_path):
    pytest.importorskip("umap")
    found = _fresh_python(_REAL_WARMUP, {"XDG_CACHE_HOME": str(tmp_path)}, timeout=1500)
    assert found["same"], "repeated calls must return the one warm-up thread"
    assert found["ok"], f"warm-up did not succeed: {found['status']}"
    # UMAP's own layout code, which the package does not cache itself, is now on disk
    assert any(name.startswith("layouts.") for name in found["cached"]), found["cached"]
