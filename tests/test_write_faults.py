"""Outputs on a disk that fills up while they are written.

A file-size limit (``RLIMIT_FSIZE``, with ``SIGXFSZ`` ignored) makes the
kernel refuse writes past a size, as a full disk does: the first write that
crosses it is cut short, the next fails.  The limit is half the size of the
output written without it.  Each case runs the command line in
a child process with the limit set, and checks that the error is one line
naming the file, that no output or temporary file is left, and that a file
already there (replaced with ``--force``) is untouched.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

resource = pytest.importorskip("resource")

_RUN_LIMITED = (
    "import resource, runpy, signal, sys\n"
    "signal.signal(signal.SIGXFSZ, signal.SIG_IGN)\n"
    "limit = int(sys.argv.pop(1))\n"
    "resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))\n"
    "sys.argv = ['quantize'] + sys.argv[1:]\n"
    "runpy.run_module('quantize', run_name='__main__')\n"
)


@pytest.fixture(scope="module")
def photo(tmp_path_factory) -> Path:
    # scikit-image's "astronaut" sample photo at a quarter of its area: its
    # JPEG at 8 colours fits in one write of Pillow's encoder (under 64 KiB),
    # the case where a short write went unnoticed.
    from skimage import data

    path = tmp_path_factory.mktemp("src") / "astronaut.png"
    Image.fromarray(data.astronaut()[::2, ::2]).save(path)
    return path


@pytest.fixture(scope="module")
def whole_sizes(photo, tmp_path_factory) -> dict:
    """Size of each output written without a limit (the control), which reads back whole."""
    folder = tmp_path_factory.mktemp("whole")
    sizes = {}
    for ext in (".png", ".jpg", ".tif", ".webp", ".gif"):
        out = folder / f"out{ext}"
        res = subprocess.run([sys.executable, "-m", "quantize", "reduce", str(photo), "-o", str(out), "-k", "8"],
                             capture_output=True, text=True, check=False)
        assert res.returncode == 0, res.stderr
        with Image.open(out) as im:
            im.load()
            assert im.size == (256, 256)
        sizes[ext] = out.stat().st_size
    return sizes


def _limited(limit: int, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", _RUN_LIMITED, str(limit), *args], capture_output=True, text=True,
                          check=False)


@pytest.mark.parametrize("ext", [".png", ".jpg", ".tif", ".webp", ".gif"])
def test_a_full_disk_leaves_no_output_and_says_so(photo, whole_sizes, tmp_path, ext):
    out = tmp_path / f"out{ext}"
    res = _limited(whole_sizes[ext] // 2, "reduce", str(photo), "-o", str(out), "-k", "8")
    assert res.returncode == 1, res.stderr
    lines = res.stderr.strip().splitlines()
    assert "Traceback" not in res.stderr
    assert lines[-1].startswith(f"quantize: error: {out}: writing failed"), lines
    assert list(tmp_path.iterdir()) == []  # neither the output nor a temporary file


@pytest.mark.parametrize("ext", [".png", ".jpg", ".tif", ".webp", ".gif"])
def test_a_full_disk_keeps_the_file_it_would_replace(photo, whole_sizes, tmp_path, ext):
    out = tmp_path / f"out{ext}"
    out.write_bytes(b"the previous proof")
    res = _limited(whole_sizes[ext] // 2, "reduce", str(photo), "-o", str(out), "-k", "8", "--force")
    assert res.returncode == 1, res.stderr
    assert out.read_bytes() == b"the previous proof"
    assert sorted(p.name for p in tmp_path.iterdir()) == [out.name]


def _fail_on_fsync(monkeypatch, n: int):
    """Make the n-th os.fsync fail as a full disk does (ENOSPC), as the writers sync each file."""
    import errno
    import os

    real, calls = os.fsync, []

    def fsync(fd):
        calls.append(fd)
        if len(calls) == n:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    return calls


def test_an_image_and_its_palette_land_together_or_not_at_all(photo, tmp_path, monkeypatch):
    from click.testing import CliRunner

    from quantize.cli.main import main

    out = tmp_path / "poster.png"
    out.write_bytes(b"the previous proof")
    _fail_on_fsync(monkeypatch, 2)  # the image is synced, then its palette fails
    res = CliRunner().invoke(main, ["reduce", str(photo), "-o", str(out), "-k", "4", "--keep-palette", "--force"])
    assert res.exit_code == 1 and "No space left" in res.output and "Traceback" not in res.output
    assert out.read_bytes() == b"the previous proof"  # not replaced by a new image without its palette
    assert sorted(p.name for p in tmp_path.iterdir()) == ["poster.png"]  # no palette, no temporary file


def test_a_set_of_plates_lands_whole_or_not_at_all(tmp_path, monkeypatch):
    from quantize.errors import OutputError
    from quantize.palette import Palette
    from quantize.separation.plates import separate

    img = np.full((40, 60, 3), 245, np.uint8)
    img[5:20, 5:30] = (200, 30, 40)
    img[22:35, 30:55] = (30, 60, 150)
    pal = Palette(np.array([[245, 245, 245], [200, 30, 40], [30, 60, 150]], np.uint8),
                  np.array([True, False, False]))
    sep = separate(img, pal, dpi=300)
    _fail_on_fsync(monkeypatch, 3)  # two files written, the third fails
    with pytest.raises(OutputError, match="No space left"):
        sep.write(tmp_path / "films")
    assert list((tmp_path / "films").iterdir()) == []
    monkeypatch.undo()
    written = sep.write(tmp_path / "films")
    assert len(list((tmp_path / "films").iterdir())) == 2 + 1 + 1 + 1  # two films, PDF, preview, manifest
    assert written["manifest"].exists()


def test_the_next_write_removes_a_temporary_file_a_killed_run_left(photo, tmp_path):
    import os
    import time

    from click.testing import CliRunner

    from quantize.cli.main import main

    out = tmp_path / "poster.png"
    stale = tmp_path / ".poster.png.k2j4x9q1.part"  # as a SIGKILL mid-write leaves it (mkstemp's name)
    stale.write_bytes(b"half an image")
    old = time.time() - 3600
    os.utime(stale, (old, old))
    fresh = tmp_path / ".poster.png.abcdefgh.part"  # another writer's file in progress: left alone
    fresh.write_bytes(b"in progress")
    res = CliRunner().invoke(main, ["reduce", str(photo), "-o", str(out), "-k", "4"])
    assert res.exit_code == 0, res.output
    assert not stale.exists() and fresh.exists() and out.exists()
