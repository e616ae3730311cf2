"""A run stopped by SIGTERM (a job scheduler, ``kill``) while it writes an output.

The child process slows down the moment of publishing the finished
temporary file and says when it got there; the test then sends SIGTERM.
The run must stop with one line, remove its temporary file, and leave a
file already at the output path as it was.
"""

from __future__ import annotations

import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from PIL import Image

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")

_SLOW_PUBLISH = (
    "import pathlib, runpy, sys, time\n"
    "import quantize.io.write as out\n"
    "ready = pathlib.Path(sys.argv.pop(1))\n"
    "real = out._publish\n"
    "def slow(tmp, target, name, force):\n"
    "    ready.write_text(tmp)\n"
    "    time.sleep(60)\n"
    "    real(tmp, target, name, force)\n"
    "out._publish = slow\n"
    "sys.argv = ['quantize'] + sys.argv[1:]\n"
    "runpy.run_module('quantize', run_name='__main__')\n"
)


def test_sigterm_while_writing_leaves_no_temporary_file_and_keeps_the_old_output(tmp_path):
    # scikit-image's "coffee" sample photo as input.
    from skimage import data

    src = tmp_path / "coffee.png"
    Image.fromarray(data.coffee()).save(src)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    out = out_dir / "coffee-4.png"
    out.write_bytes(b"the previous proof")
    ready = tmp_path / "ready"
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_PUBLISH, str(ready), "reduce", str(src), "-o", str(out),
                             "-k", "4", "--force"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        for _ in range(1200):  # the run reaches the write within a minute
            if ready.exists() or proc.poll() is not None:
                break
            time.sleep(0.05)
        assert ready.exists(), proc.communicate()[1]
        part = ready.read_text()
        assert part.endswith(".part") and (out_dir / part.split("/")[-1]).exists()
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 143  # 128 + SIGTERM, as shells report a terminated job
    assert "Traceback" not in err
    assert err.strip().splitlines()[-1].startswith("quantize: terminated")
    assert out.read_bytes() == b"the previous proof"
    assert sorted(p.name for p in out_dir.iterdir()) == [out.name]


def test_ctrl_c_while_writing_exits_130_with_one_line(tmp_path):
    # POSIX shells report a job ended by SIGINT (2) as 128 + 2.
    src = tmp_path / "art.png"
    img = np.full((40, 60, 3), 240, np.uint8)
    img[10:30, 10:50] = (200, 30, 40)
    Image.fromarray(img).save(src)
    out = tmp_path / "art-2.png"
    ready = tmp_path / "ready"
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_PUBLISH, str(ready), "reduce", str(src), "-o", str(out),
                             "-k", "2"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        for _ in range(1200):
            if ready.exists() or proc.poll() is not None:
                break
            time.sleep(0.05)
        assert ready.exists(), proc.communicate()[1]
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130
    assert "Traceback" not in err and err.strip().splitlines()[-1].startswith("quantize: interrupted")
    assert not out.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["art.png", "ready"]
