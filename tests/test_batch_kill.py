"""A batch killed outright (SIGKILL: no clean-up runs) or overlapped by another run into the same folder.

The oracle is the project's rule for bad endings: nothing half-written is left
for good, the workers do not outlive the run, and the next run finishes what
is on disk instead of failing on files the killed run wrote.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

pytestmark = pytest.mark.skipif(sys.platform != "linux", reason="reads /proc for the worker processes")


def _images(folder: Path, n: int) -> None:
    # scikit-image's astronaut, shifted: invented only as far as the shift goes.
    from skimage import data

    folder.mkdir()
    img = data.astronaut()[::2, ::2]
    for i in range(n):
        Image.fromarray(np.roll(img, 11 * i, axis=1)).save(folder / f"a{i:02d}.png")


def _children(pid: int) -> list[int]:
    out = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                stat = (entry / "stat").read_text()
            except OSError:
                continue
            if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
                out.append(int(entry.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def _batch(src, dst, *extra):
    return [sys.executable, "-m", "quantize", "batch", str(src), "-o", str(dst), "-k", "4", *extra]


def test_a_killed_batch_leaves_no_workers_and_the_rerun_finishes_it(tmp_path):
    src, dst = tmp_path / "in", tmp_path / "out"
    _images(src, 16)
    proc = subprocess.Popen(_batch(src, dst, "--workers", "2"), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    journal = dst / ".quantize-batch-journal.jsonl"
    try:
        for _ in range(2400):  # until the workers have written a few images
            if journal.exists() and journal.read_text().count("\n") >= 4 or proc.poll() is not None:
                break
            time.sleep(0.05)
        assert proc.poll() is None, proc.communicate()
        workers = _children(proc.pid)
        assert workers
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    finally:
        if proc.poll() is None:
            proc.kill()
    for _ in range(200):  # the workers notice within a second or so
        if not any(_alive(w) for w in workers):
            break
        time.sleep(0.05)
    assert not any(_alive(w) for w in workers)
    assert not (dst / "manifest.json").exists()  # killed before its manifest
    (dst / ".a03.png.k2j4x9q1.part").write_bytes(b"half")  # as a kill mid-write leaves one
    res = subprocess.run(_batch(src, dst, "--workers", "0"), capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr
    doc = json.loads((dst / "manifest.json").read_text())
    assert doc["summary"]["failed"] == 0 and doc["summary"]["total"] == 16
    assert {r["status"] for r in doc["images"]} <= {"ok", "skipped"}
    left = sorted(p.name for p in dst.iterdir() if p.name.startswith("."))
    assert left == []  # no journal, lock or temporary file


def test_a_second_batch_into_the_same_folder_is_told_it_is_busy(tmp_path):
    src, dst = tmp_path / "in", tmp_path / "out"
    _images(src, 16)
    first = subprocess.Popen(_batch(src, dst, "--workers", "1"), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        for _ in range(2400):
            if (dst / ".quantize-batch.lock").exists() or first.poll() is not None:
                break
            time.sleep(0.05)
        second = subprocess.run(_batch(src, dst, "--workers", "0"), capture_output=True, text=True, timeout=600)
        still_running = first.poll() is None
        out, err = first.communicate(timeout=600)
    finally:
        if first.poll() is None:
            first.kill()
    assert first.returncode == 0, err
    assert still_running  # 16 images take the first run several seconds
    assert second.returncode == 1
    assert "another batch" in second.stderr and "Traceback" not in second.stderr
    doc = json.loads((dst / "manifest.json").read_text())
    assert doc["summary"]["failed"] == 0
    # The first run's files are intact and a rerun afterwards has nothing left to do.
    rerun = subprocess.run(_batch(src, dst, "--workers", "0"), capture_output=True, text=True, timeout=600)
    assert rerun.returncode == 0 and json.loads((dst / "manifest.json").read_text())["summary"]["skipped"] == 16


def test_ctrl_c_at_any_moment_of_a_batch_ends_it_promptly_and_a_rerun_resumes(tmp_path):
    # Interrupts at random moments (a fixed seed): while workers start, fit, write, or the manifest is written.
    import random

    src = tmp_path / "in"
    _images(src, 12)
    rng = random.Random(20261205)
    for trial in range(4):
        dst = tmp_path / f"out{trial}"
        proc = subprocess.Popen(_batch(src, dst, "--workers", "2"), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                text=True)
        # From the moment the batch holds its output folder: an interrupt while the Python interpreter
        # itself is still starting (before the program's first line runs) ends with Python's own
        # traceback, which no program can catch (README, "Interrupts").
        for _ in range(2400):
            if (dst / ".quantize-batch.lock").exists() or proc.poll() is not None:
                break
            time.sleep(0.05)
        time.sleep(rng.uniform(0.0, 2.7))
        proc.send_signal(signal.SIGINT)
        try:
            _, err = proc.communicate(timeout=120)  # a hang would be the failure; the run ends well before
        finally:
            if proc.poll() is None:
                proc.kill()
        assert proc.returncode in (0, 130), err
        assert "Traceback" not in err
        if proc.returncode == 130:
            assert err.strip().splitlines()[-1].startswith("quantize: interrupted")
        if dst.exists():
            assert not [p for p in dst.rglob("*.part")]
        rerun = subprocess.run(_batch(src, dst, "--workers", "0"), capture_output=True, text=True, timeout=600)
        assert rerun.returncode == 0, rerun.stderr
        doc = json.loads((dst / "manifest.json").read_text())
        assert doc["summary"]["failed"] == 0 and doc["summary"]["total"] == 12


def test_ctrl_c_while_the_command_line_loads_is_one_line_and_exit_130(tmp_path):
    # An interrupt that lands while click and the commands are being imported
    # (before any command runs) is simulated by an import that raises it.
    code = (
        "import builtins, sys\n"
        "real = builtins.__import__\n"
        "def interrupted(name, *a, **k):\n"
        "    if name == 'click':\n"
        "        raise KeyboardInterrupt\n"
        "    return real(name, *a, **k)\n"
        "builtins.__import__ = interrupted\n"
        "sys.argv = ['quantize', '--help']\n"
        "from quantize.cli.entry import run\n"
        "run()\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 130, proc.stderr
    assert "Traceback" not in proc.stderr
    assert proc.stderr.strip() == "quantize: interrupted; nothing half-written is left"
