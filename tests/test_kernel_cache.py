"""numba's on-disk cache of the compiled kernels: the first run, and its faults.

Each test runs in a fresh process with the cache in a folder of its own
(``NUMBA_CACHE_DIR``).  The first run after install compiles every kernel
once and says so; the cases after it are the faults a studio machine can
have: a cache file that cannot be read back, and an install where numba
finds no writable cache folder.
"""

from __future__ import annotations

import os
import shutil
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


NOTICE = "compiling its kernels once after install"


@pytest.fixture(scope="module")
def first_runs(tmp_path_factory):
    """Two command-line runs on a fresh cache: (first, second, the cache folder, the input)."""
    tmp = tmp_path_factory.mktemp("first-run")
    src = _image(tmp / "in.png")
    env = _env(NUMBA_CACHE_DIR=str(tmp / "cache"))
    first = _reduce(src, tmp / "a.png", env)
    second = _reduce(src, tmp / "b.png", env, "--dither", "floyd-steinberg")
    return first, second, tmp / "cache", src


def test_the_first_run_says_it_compiles_and_later_runs_do_not(first_runs):
    first, second, cache, _ = first_runs
    assert first.returncode == 0, first.stderr
    assert first.stderr.count(NOTICE) == 1
    assert first.stderr.startswith("quantize: ")
    assert second.returncode == 0, second.stderr
    assert NOTICE not in second.stderr
    files = [p.name for p in cache.rglob("*.nbi")]
    assert any(p.startswith("engine_loops") for p in files)
    assert any(p.startswith("dither_loops.diffuse") for p in files)


def test_a_damaged_cache_is_compiled_afresh_with_the_same_result(first_runs, tmp_path):
    _, second, cache, src = first_runs
    shutil.copytree(cache, tmp_path / "cache")
    env = _env(NUMBA_CACHE_DIR=str(tmp_path / "cache"))
    # Data files cut short: numba fails reading them back.
    for p in (tmp_path / "cache").rglob("*.nbc"):
        p.write_bytes(p.read_bytes()[:40])
    again = _reduce(src, tmp_path / "b.png", env, "--dither", "floyd-steinberg")
    assert again.returncode == 0, again.stderr
    assert "Traceback" not in again.stderr
    a, b = Image.open(src.parent / "b.png"), Image.open(tmp_path / "b.png")
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
    # numba before 0.60 names the class with a leading underscore.
    "locator = getattr(caching, 'UserProvidedCacheLocator', None) or caching._UserProvidedCacheLocator\n"
    "caching.CacheImpl._locator_classes = [locator]\n"
    "if sys.argv[1] == 'kernel':\n"
    "    import numpy as np\n"
    "    from quantize.kernels.loading import compiled\n"
    "    compiled('engine_loops').assign_euclid(np.zeros((2, 3)), np.zeros((2, 3)), np.zeros(2, np.intp),\n"
    "                                           np.zeros(2))\n"
    "    sys.exit(0)\n"
    "sys.argv = ['quantize'] + sys.argv[1:]\n"
    "runpy.run_module('quantize', run_name='__main__')\n"
)


def _without_locator(env, *args):
    caching = pytest.importorskip("numba.core.caching")
    if not hasattr(getattr(caching, "CacheImpl", None), "_locator_classes"):
        pytest.skip("this numba keeps its cache locators elsewhere")
    return subprocess.run([sys.executable, "-c", _NO_LOCATOR, *args], capture_output=True, text=True, env=env,
                          check=False)


def _reduce_without_locator(src, out, env):
    return _without_locator(env, "reduce", str(src), "-o", str(out), "-k", "4", "--force", "--dither",
                            "floyd-steinberg")


def test_with_no_writable_cache_folder_the_kernels_cache_in_a_private_temporary_folder(tmp_path):
    env = _env(TMPDIR=str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    res = _without_locator(env, "kernel")
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
    # The first-run notice, then the error.
    lines = [line for line in res.stderr.strip().splitlines() if NOTICE not in line]
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
