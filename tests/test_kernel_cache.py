"""Faults in numba's on-disk cache of the compiled kernels.

Each test runs the command line in a fresh process with the cache in a
folder of its own (``NUMBA_CACHE_DIR``), so the first run compiles.  The
cases are the faults a studio machine can have: a cache file that cannot be
read back, and an install where numba finds no writable cache folder.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX permissions")


def _image(path: Path) -> Path:
    rng = np.random.default_rng(5)
    Image.fromarray(rng.integers(0, 256, (24, 32, 3)).astype(np.uint8)).save(path)
    return path


def _reduce(src: Path, out: Path, env: dict, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "quantize", "reduce", str(src), "-o", str(out), "-k", "4",
                           "--force", *extra], capture_output=True, text=True, env=env, check=False)


def _env(**changes) -> dict:
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env.update(changes)
    return env


def test_a_damaged_cache_is_compiled_afresh_with_the_same_result(tmp_path):
    src = _image(tmp_path / "in.png")
    env = _env(NUMBA_CACHE_DIR=str(tmp_path / "cache"))
    first = _reduce(src, tmp_path / "a.png", env, "--dither", "floyd-steinberg")
    assert first.returncode == 0, first.stderr
    files = [p for p in (tmp_path / "cache").rglob("*") if p.suffix in (".nbi", ".nbc")]
    assert any(p.name.startswith("engine_loops") for p in files)
    assert any(p.name.startswith("dither_loops") for p in files)
    # Index files that are not pickles, data files cut short.
    for p in files:
        p.write_bytes(b"garbage\n" if p.suffix == ".nbi" else p.read_bytes()[:40])
    again = _reduce(src, tmp_path / "b.png", env, "--dither", "floyd-steinberg")
    assert again.returncode == 0, again.stderr
    assert "Traceback" not in again.stderr
    a, b = Image.open(tmp_path / "a.png"), Image.open(tmp_path / "b.png")
    assert np.array_equal(np.asarray(a), np.asarray(b)) and a.getpalette() == b.getpalette()
    # The cache was written anew: a third run reads it back.
    third = _reduce(src, tmp_path / "c.png", env, "--dither", "floyd-steinberg")
    assert third.returncode == 0, third.stderr
    assert Image.open(tmp_path / "c.png").getpalette() == a.getpalette()


_NO_LOCATOR = (
    # Stands in for a read-only install run by a user without a writable
    # home: numba then finds no folder to cache in.  (Tests run as root on CI,
    # where file permissions cannot make a folder read-only.)
    "import runpy, sys\n"
    "from numba.core import caching\n"
    "caching.CacheImpl._locator_classes = [caching.UserProvidedCacheLocator]\n"
    "sys.argv = ['quantize'] + sys.argv[1:]\n"
    "runpy.run_module('quantize', run_name='__main__')\n"
)


def _reduce_without_locator(src, out, env):
    caching = pytest.importorskip("numba.core.caching")
    if not hasattr(getattr(caching, "CacheImpl", None), "_locator_classes"):
        pytest.skip("this numba keeps its cache locators elsewhere")
    return subprocess.run([sys.executable, "-c", _NO_LOCATOR, "reduce", str(src), "-o", str(out), "-k", "4",
                           "--force"], capture_output=True, text=True, env=env, check=False)


def test_with_no_writable_cache_folder_the_kernels_cache_in_a_private_temporary_folder(tmp_path):
    src = _image(tmp_path / "in.png")
    env = _env(TMPDIR=str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    res = _reduce_without_locator(src, tmp_path / "out.png", env)
    assert res.returncode == 0, res.stderr
    folders = list((tmp_path / "tmp").glob("quantize-numba-*"))
    assert len(folders) == 1
    assert folders[0].stat().st_mode & 0o077 == 0
    assert any(p.suffix == ".nbi" for p in folders[0].rglob("*"))


def test_a_temporary_cache_folder_others_can_write_is_refused(tmp_path):
    src = _image(tmp_path / "in.png")
    tmp = tmp_path / "tmp"
    shared = tmp / f"quantize-numba-{os.getuid()}"
    shared.mkdir(parents=True)
    shared.chmod(0o777)
    res = _reduce_without_locator(src, tmp_path / "out.png", _env(TMPDIR=str(tmp)))
    assert res.returncode == 1
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in res.stderr
    assert f"{shared} is not a private folder" in lines[0] and "NUMBA_CACHE_DIR" in lines[0]
    assert "reinstall" not in lines[0]
    assert not (tmp_path / "out.png").exists()
    assert list(shared.iterdir()) == []


def test_a_failure_that_is_not_the_cache_is_not_retried(monkeypatch):
    # Recompiling cannot fix a fault in the kernel's own work: only a cache
    # that numba could not read back earns a second run.
    from quantize.kernels import loading

    emptied, calls = [], []
    monkeypatch.setattr(loading, "forget_cached", lambda *names: emptied.append(names) or True)

    def fails():
        calls.append(1)
        raise ValueError("a kernel fault")

    with pytest.raises(ValueError, match="a kernel fault"):
        loading.with_fresh_cache(fails)
    assert calls == [1] and emptied == []
