"""Hostile files must not make the tool take gigabytes: measured as resident memory, in a child process.

tests/test_fuzz_readers.py bounds what each read allocates by tracemalloc, which sees Python objects and
numpy arrays but not Pillow's, zlib's or libtiff's C buffers, and does not cover the command line. Here a
fixed, small set of damaged files (decompression bombs that declare huge dimensions, PNG text and profile
chunks that inflate to hundreds of megabytes, TIFF strip tables and byte counts far beyond the file, palette
and ink files holding huge arrays) is read by each library reader and run through ``reduce``, ``separate``,
``apply`` and ``batch`` in one child process (tests/memory_probe.py). The child measures each case's peak
resident memory (Linux VmHWM, which counts every page touched, C buffers included) and limits its address
space so that a blow-up fails fast as a MemoryError rather than swapping the machine.

Each case must: read, or be refused with one line naming the file (library: a QuantizeError; command
line: exit 1 or 2 and one "quantize: error:" line, no traceback); never be refused for want of memory
(under the address-space limit that would mean it wanted more than a gigabyte); and grow the resident set
by no more than :data:`MAX_GROWTH`. The files are built here from the specs they damage: ISO/IEC
15948:2004 (PNG chunks, CRC-32), TIFF 6.0 (IFD entries), and the project's own palette and ink formats.
"""

from __future__ import annotations

import functools
import json
import os
import struct
import subprocess
import sys
import zlib
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

pytestmark = pytest.mark.skipif(
    sys.platform != "linux" or not os.access("/proc/self/clear_refs", os.W_OK),
    reason="per-case peak resident memory is read from Linux's /proc (VmHWM, reset through clear_refs)")

#: The most a case may grow the resident set. The files are tiny (or declare sizes they do not hold); an
#: honest refusal or a read of a 16 x 12 image takes a few megabytes. 256 MiB is a wide margin, and far
#: below the gigabytes a hostile header could ask for. (Common practice, no source: the same bound as the
#: tracemalloc check of tests/test_fuzz_readers.py.)
MAX_GROWTH = 256 << 20


def _chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def _png(width: int, height: int, extra: bytes = b"", rows: bytes | None = None) -> bytes:
    """An RGB PNG (ISO/IEC 15948:2004): IHDR, any extra chunks, IDAT of filter-0 rows, IEND."""
    if rows is None:
        rows = b"".join(b"\0" + bytes(range(3 * width)) for _ in range(height))
    return (b"\x89PNG\r\n\x1a\n" + _chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0))
            + extra + _chunk(b"IDAT", zlib.compress(rows, 9)) + _chunk(b"IEND", b""))


@functools.lru_cache(maxsize=2)
def _inflating(n_bytes: int) -> bytes:
    """zlib data that inflates to ``n_bytes`` zeros (about a thousandth of that on disk)."""
    c = zlib.compressobj(9)
    block = bytes(1 << 20)
    return b"".join(c.compress(block) for _ in range(n_bytes >> 20)) + c.flush()


def _tiff(width: int, height: int, *, strips: int = 1, strip_bytes: int | None = None,
          entries_past_end: bool = False) -> bytes:
    """A little-endian 8-bit RGB TIFF (TIFF 6.0 baseline) whose tags may lie about sizes.

    ``strips`` StripOffsets/StripByteCounts entries are declared; with ``entries_past_end`` their tables
    point past the end of the file (the file holds one strip of 16 x 12 pixels either way)."""
    pixels = bytes(range(256)) * (3 * 16 * 12 // 256)
    head = 8
    data_at = head
    ifd_at = data_at + len(pixels)
    n = 10
    extra_at = ifd_at + 2 + n * 12 + 4
    bps_at = extra_at
    tables_at = bps_at + 6
    per_strip = len(pixels) if strip_bytes is None else strip_bytes
    rows_per_strip = max(1, height // strips)
    if strips == 1:
        offsets_value, counts_value, tables = data_at, per_strip, b""
    elif entries_past_end:
        offsets_value, counts_value, tables = tables_at + 10_000_000, tables_at + 20_000_000, b""
    else:
        offsets = struct.pack(f"<{strips}I", *([data_at] * strips))
        counts = struct.pack(f"<{strips}I", *([per_strip] * strips))
        offsets_value, counts_value, tables = tables_at, tables_at + len(offsets), offsets + counts

    def entry(tag, kind, count, value):
        packed = struct.pack("<H", value) + b"\0\0" if kind == 3 and count == 1 else struct.pack("<I", value)
        return struct.pack("<HHI", tag, kind, count) + packed

    entries = [entry(256, 4, 1, width), entry(257, 4, 1, height), entry(258, 3, 3, bps_at),
               entry(259, 3, 1, 1), entry(262, 3, 1, 2), entry(273, 4, strips, offsets_value),
               entry(277, 3, 1, 3), entry(278, 4, 1, rows_per_strip), entry(279, 4, strips, counts_value),
               entry(284, 3, 1, 1)]
    ifd = struct.pack("<H", n) + b"".join(entries) + struct.pack("<I", 0)
    return (b"II*\x00" + struct.pack("<I", ifd_at) + pixels + ifd + struct.pack("<3H", 8, 8, 8) + tables)


def _palette(colours: list, fit=None) -> bytes:
    doc = {"format": "quantize.palette", "version": 1, "space": "lab", "colours": colours, "fit": fit or {}}
    return json.dumps(doc).encode()


# name -> bytes. Each is small on disk and claims (or inflates to) far more.
IMAGES = {
    "bomb-dims.png": lambda: _png(100_000, 100_000, rows=b"\0" * 1000),
    "bomb-dims.tif": lambda: _tiff(100_000, 100_000, strip_bytes=0xFFFFFFF0),
    "huge-strip-bytes.tif": lambda: _tiff(16, 12, strip_bytes=0xFFFFFFF0),
    "huge-strip-count.tif": lambda: _tiff(16, 12, strips=5_000_000, entries_past_end=True),
    "many-strips.tif": lambda: _tiff(16, 12, strips=200_000),
    "ztxt-bomb.png": lambda: _png(16, 12, _chunk(b"zTXt", b"note\0\0" + _inflating(300 << 20))),
    "iccp-bomb.png": lambda: _png(16, 12, _chunk(b"iCCP", b"press\0\0" + _inflating(300 << 20))),
    "itxt-bomb.png": lambda: _png(16, 12, _chunk(b"iTXt", b"note\0\1\0\0\0" + _inflating(300 << 20))),
}
PALETTES = {
    # Colours of the right form, just over the file-size cap and just under it (then over the count cap):
    # what a palette may hold is capped (quantize/palette.py), not built.
    "many-colours.palette.json": lambda: _palette([{"hex": "#c8102e"}] * 300_000),
    "capped-colours.palette.json": lambda: _palette([{"hex": "#c8102e"}] * 180_000),
    # A fit record holding a million numbers.
    "huge-fit.palette.json": lambda: _palette([{"hex": "#c8102e"}, {"hex": "#1f3a93"}],
                                              fit={"sizes": [1.5] * 1_000_000}),
    # JSON's most memory per byte: empty objects (a dict each), just under the cap.
    "empty-objects.palette.json": lambda: _palette([{"hex": "#c8102e"}], fit={"x": [{}] * 950_000}),
}
INKS = {
    # Ink libraries are capped on disk and in count (quantize/separation/inks.py).
    "many-inks.csv": lambda: b"name,colour\n" + b"".join(b"i%d,#%06x\n" % (i, i * 37 % 0xFFFFFF)
                                                        for i in range(1_000_000)),
    "capped-inks.csv": lambda: b"name,colour\n" + b"".join(b"i%d,#%06x\n" % (i, i * 37 % 0xFFFFFF)
                                                          for i in range(200_000)),
    "empty-objects.json": lambda: json.dumps({"format": "quantize.separation.inks", "version": 1,
                                              "illuminant": "D50", "inks": [{"name": "a", "lab": [50.0] * 3}],
                                              "notes": [{}] * 950_000}).encode(),
}


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    """Write the corpus, run every case in one child process, and return {case name: what happened}."""
    root = tmp_path_factory.mktemp("hostile")
    files = {}
    for table in (IMAGES, PALETTES, INKS):
        for name, make in table.items():
            files[name] = root / name
            files[name].write_bytes(make())
    good = root / "good.png"
    Image.fromarray(np.random.default_rng(5).integers(0, 255, (12, 16, 3), dtype=np.uint8)).save(good)
    saved = root / "good.palette.json"
    saved.write_bytes(_palette([{"hex": "#c8102e"}, {"hex": "#1f3a93"}, {"hex": "#f2f2ec"}]))
    folder = root / "folder"
    folder.mkdir()
    for name in IMAGES:
        (folder / name).write_bytes(files[name].read_bytes())
    (folder / "good.png").write_bytes(good.read_bytes())
    out = root / "out"
    cases: list[dict] = []

    def cli(name, *args, warm_up=False):
        cases.append({"name": name, "kind": "cli", "args": [str(a) for a in args], "warm_up": warm_up})

    # Warm-up: each command once on good input, so imports and caches are not counted as a case's memory.
    cli("warm-reduce", "reduce", good, "-o", out / "w.png", "-k", "3", "--restarts", "1", warm_up=True)
    cli("warm-separate", "separate", good, "-o", out / "wsep", "-n", "2", "--substrate", "none", "--no-pdf",
        warm_up=True)
    cli("warm-apply", "apply", saved, good, "-o", out / "wapply", warm_up=True)
    for name in IMAGES:
        cases.append({"name": f"load_image {name}", "kind": "read", "reader": "image", "path": str(files[name])})
        cli(f"reduce {name}", "reduce", files[name], "-o", out / f"{name}.png", "-k", "3", "--restarts", "1")
    for name in PALETTES:
        cases.append({"name": f"Palette.load {name}", "kind": "read", "reader": "palette",
                      "path": str(files[name])})
        cli(f"apply {name}", "apply", files[name], good, "-o", out / f"apply-{name}")
        cli(f"separate --palette {name}", "separate", good, "-o", out / f"sep-{name}", "--palette", files[name],
            "--substrate", "none", "--no-pdf")
    for name in INKS:
        cases.append({"name": f"load_ink_library {name}", "kind": "read", "reader": "inks",
                      "path": str(files[name])})
        cli(f"separate --inks {name}", "separate", good, "-o", out / f"inks-{name}", "--inks", files[name],
            "-n", "2", "--substrate", "none", "--no-pdf")
    cli("separate bomb-dims.png", "separate", files["bomb-dims.png"], "-o", out / "sep-bomb", "-n", "2",
        "--substrate", "none", "--no-pdf")
    cli("apply bomb-dims.tif", "apply", saved, files["bomb-dims.tif"], "-o", out / "apply-bomb")
    cli("batch of the bombs", "batch", folder, "-o", out / "batch", "-k", "3", "--restarts", "1",
        "--workers", "1")
    spec = root / "cases.json"
    spec.write_text(json.dumps(cases))
    probe = Path(__file__).with_name("memory_probe.py")
    proc = subprocess.run([sys.executable, str(probe), str(spec)], capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stderr[-3000:]
    results = {r["name"]: r for r in map(json.loads, proc.stdout.splitlines())}
    assert set(results) == {c["name"] for c in cases if not c.get("warm_up")}, proc.stderr[-3000:]
    return results, files


def _names(results, prefix):
    return sorted(n for n in results if n.startswith(prefix))


def test_every_case_is_read_or_refused_in_one_line_without_a_traceback(measured):
    results, files = measured
    problems = []
    for name, r in results.items():
        target = name.split()[-1]
        if r["result"] == "exception":
            problems.append(f"{name}: {r['message']}")
        elif r["result"] == "refused":
            text = r["message"]
            if "\n" in text or not text.startswith(str(files[target])):
                problems.append(f"{name}: refusal not one line naming the file: {text[:300]}")
        elif r["result"] == "exit":
            errors = [ln for ln in r["stderr"].splitlines() if ln.startswith("quantize: error:")]
            if r["exit_code"] not in (0, 1, 2) or "Traceback" in r["stderr"]:
                problems.append(f"{name}: exit {r['exit_code']}: {r['stderr'][-300:]}")
            elif r["exit_code"] == 1 and not name.startswith("batch") and (
                    len(errors) != 1 or target not in errors[0]):
                problems.append(f"{name}: not one error line naming {target}: {r['stderr'][-300:]}")
    assert not problems, "\n".join(problems)


def test_no_case_runs_out_of_memory_or_grows_past_the_bound(measured):
    results, _ = measured
    problems = []
    for name, r in results.items():
        text = (r.get("message") or "") + (r.get("stderr") or "")
        if "memory" in text.lower():
            problems.append(f"{name}: refused for want of memory (it asked for more than the gigabyte "
                            f"allowed): {text[-200:]}")
        if r["peak_growth"] > MAX_GROWTH:
            problems.append(f"{name}: resident memory grew by {r['peak_growth'] / 2**20:.0f} MiB")
    assert not problems, "\n".join(problems)


def test_the_bombs_are_refused(measured):
    # Declared sizes beyond the pixel limit, and strip tables the file does not hold, are refusals, not reads.
    results, _ = measured
    for name in ("bomb-dims.png", "bomb-dims.tif", "huge-strip-count.tif", "many-strips.tif"):
        assert results[f"load_image {name}"]["result"] == "refused", results[f"load_image {name}"]
        assert results[f"reduce {name}"]["exit_code"] == 1, results[f"reduce {name}"]
    assert results["batch of the bombs"]["exit_code"] == 1  # good.png is done, the bombs fail
    for name in ("many-colours", "capped-colours", "huge-fit"):
        assert results[f"Palette.load {name}.palette.json"]["result"] == "refused"
    for name in ("many-inks.csv", "capped-inks.csv"):
        assert results[f"load_ink_library {name}"]["result"] == "refused"


def test_the_probe_sees_c_buffers(tmp_path):
    """The measure itself: Pillow's decode of a 4000 x 3500 image, held only in its C buffer (4 bytes a
    pixel, 56 MB, none of it visible to tracemalloc), shows in the child's peak."""
    big = tmp_path / "big.png"
    Image.new("RGB", (4000, 3500), (200, 16, 46)).save(big)
    spec = tmp_path / "cases.json"
    spec.write_text(json.dumps([{"name": "big", "kind": "read", "reader": "pillow", "path": str(big)}]))
    proc = subprocess.run([sys.executable, str(Path(__file__).with_name("memory_probe.py")), str(spec)],
                          capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stderr[-2000:]
    (r,) = map(json.loads, proc.stdout.splitlines())
    assert r["result"] == "read" and r["peak_growth"] > 50e6, r


_OUT_OF_MEMORY = r'''
import resource, sys
from pathlib import Path
from quantize.cli.main import main

def status(field):
    line = next(ln for ln in Path("/proc/self/status").read_text().splitlines() if ln.startswith(field + ":"))
    return int(line.split()[1]) * 1024

import numpy as np
# OpenBLAS allocates its buffers on the first product (and exits the process if it cannot): do it now.
np.ones((256, 256)) @ np.ones((256, 256))
# Everything is imported; now leave the job 150 MB of address space, far less than it needs.
resource.setrlimit(resource.RLIMIT_AS, (status("VmSize") + (150 << 20), resource.getrlimit(resource.RLIMIT_AS)[1]))
main(sys.argv[1:], prog_name="quantize")
'''


def test_a_job_that_runs_out_of_memory_ends_in_one_line_naming_its_file(tmp_path):
    # A real process whose address space is limited (RLIMIT_AS) so that reducing a 2000 x 2000 noise image
    # (invented data; its colour sample alone takes hundreds of MB) fails as a MemoryError: before the fix,
    # numpy's _ArrayMemoryError ended the run in a traceback.
    src = tmp_path / "noise.png"
    Image.fromarray(np.random.default_rng(11).integers(0, 255, (2000, 2000, 3), dtype=np.uint8)).save(src)
    out = tmp_path / "out.png"
    proc = subprocess.run([sys.executable, "-c", _OUT_OF_MEMORY, "reduce", str(src), "-o", str(out), "-k", "4",
                           "--restarts", "1"], capture_output=True, text=True, check=False)
    assert proc.returncode == 1 and "Traceback" not in proc.stderr, proc.stderr[-2000:]
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("quantize: error:") and str(src) in lines[0], proc.stderr
    assert not out.exists() and not [p for p in tmp_path.iterdir() if p.name.endswith(".part")]
