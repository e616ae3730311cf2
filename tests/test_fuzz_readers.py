"""A generated hostile corpus and a bounded byte-level fuzz of every reader.

Every input kind the tool reads is made here from scratch: images of each mode
and depth Pillow and tifffile write, palette JSON, ink libraries in each format
(JSON, CSV, CGATS.17), batch manifests, and command arguments. Each valid file
is then damaged byte by byte (hypothesis chooses positions, values and
truncations from a fixed, derandomised sequence, so CI runs the same small set
of cases every time).

The oracle is the project's rule for bad input (docs/batch.md "Bad input"): the reader
either reads the file or raises a QuantizeError whose message is one line
naming the file; the command line exits 0, 1 or 2 with no traceback; the input
is never changed; nothing partial is left on disk; earlier outputs stay intact.
"""

from __future__ import annotations

import functools
import hashlib
import io
import json
import os
import tempfile
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.cli.main import main
from quantize.errors import QuantizeError
from quantize.io.read import load_image
from quantize.palette import Palette
from quantize.separation.inks import load_ink_library

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

# A fixed, small number of cases per reader: derandomised, no per-case time limit (the machine is shared).
# QUANTIZE_FUZZ_SCALE multiplies the counts for a deeper run by hand (CI leaves it at 1).
_SCALE = max(1, int(os.environ.get("QUANTIZE_FUZZ_SCALE", "1")))
FUZZ = settings(max_examples=80 * _SCALE, derandomize=True, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
FUZZ_CLI = settings(FUZZ, max_examples=12 * _SCALE)
FUZZ_ARGS = settings(FUZZ, max_examples=30 * _SCALE)


def _art(h=12, w=16, channels=3, seed=0) -> np.ndarray:
    """Invented pixels, only to have an image: three colour bands with a little noise."""
    rng = np.random.default_rng(seed)
    band = (np.arange(w) * 3 // w)[None, :].repeat(h, axis=0)
    inks = np.array([[200, 16, 46, 255], [31, 58, 147, 128], [242, 242, 236, 255]])[:, :channels]
    return np.clip(inks[band] + rng.integers(-4, 5, (h, w, channels)), 0, 255).astype(np.uint8)


def _pillow(mode: str, fmt: str, **options):
    def make() -> bytes:
        rgba = Image.fromarray(_art(channels=4), "RGBA")
        if mode in ("PA", "P-tRNS"):
            img = rgba.convert("RGB").convert("P", palette=Image.Palette.ADAPTIVE, colors=8)
            # tRNS with one alpha per entry (palette alpha, read as PA) or a single transparent entry.
            options.setdefault("transparency", bytes([0, 64, 128, 192, 255, 255, 255, 255]) if mode == "PA" else 0)
        elif mode in ("I;16", "I", "F"):
            grey = _art(channels=1)[..., 0].astype(np.float32) * 257
            img = Image.fromarray(grey.astype({"I;16": np.uint16, "I": np.int32, "F": np.float32}[mode]))
            if mode == "I;16":
                img = Image.fromarray(grey.astype(np.uint16), "I;16") if img.mode != "I;16" else img
        elif mode == "LAB":
            img = rgba.convert("RGB").convert("LAB")
        else:
            img = rgba.convert(mode)
        buf = io.BytesIO()
        img.save(buf, fmt, **options)
        return buf.getvalue()
    return make


def _animated(fmt: str):
    def make() -> bytes:
        frames = [Image.fromarray(_art(seed=s)) for s in range(3)]
        if fmt == "GIF":
            frames = [f.convert("P") for f in frames]
        buf = io.BytesIO()
        frames[0].save(buf, fmt, save_all=True, append_images=frames[1:], duration=40)
        return buf.getvalue()
    return make


def _tiff(dtype, channels: int, **options):
    def make() -> bytes:
        import tifffile

        rng = np.random.default_rng(1)
        shape = (12, 16) if channels == 1 else (12, 16, channels)
        if np.dtype(dtype).kind == "f":
            data = rng.random(shape).astype(dtype)
        else:
            data = rng.integers(0, np.iinfo(dtype).max, shape, dtype=dtype)
        buf = io.BytesIO()
        tifffile.imwrite(buf, data, **options)
        return buf.getvalue()
    return make


def _png16() -> bytes:
    # 16-bit RGB PNG through Pillow's raw writer is not offered; tifffile has no PNG: build it from the spec
    # (ISO/IEC 15948:2004: signature, IHDR, IDAT of filter-0 rows, IEND).
    import struct
    import zlib

    def chunk(kind, data):
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
    rows = np.random.default_rng(2).integers(0, 65535, (12, 16, 3), dtype=np.uint16).astype(">u2")
    raw = b"".join(b"\0" + rows[y].tobytes() for y in range(12))
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", 16, 12, 16, 2, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(raw)) + chunk(b"IEND", b""))


# Every mode and depth the readers meet: name -> (suffix, maker).
IMAGE_SEEDS = {
    "mode-1.png": _pillow("1", "PNG"), "mode-L.png": _pillow("L", "PNG"), "mode-LA.png": _pillow("LA", "PNG"),
    "mode-P.png": _pillow("P", "PNG"), "palette-alpha.png": _pillow("PA", "PNG"),
    "palette-trns.png": _pillow("P-tRNS", "PNG"),
    "mode-RGB.png": _pillow("RGB", "PNG"), "mode-RGBA.png": _pillow("RGBA", "PNG"),
    "mode-I16.png": _pillow("I;16", "PNG"), "mode-I.tif": _pillow("I", "TIFF"), "mode-F.tif": _pillow("F", "TIFF"),
    "mode-CMYK.tif": _pillow("CMYK", "TIFF"), "mode-CMYK.jpg": _pillow("CMYK", "JPEG"),
    "mode-LAB.tif": _pillow("LAB", "TIFF"),
    "rgb16.tif": _tiff(np.uint16, 3, photometric="rgb"),
    "rgba16.tif": _tiff(np.uint16, 4, photometric="rgb", extrasamples=[2]),
    "la16.tif": _tiff(np.uint16, 2, photometric="minisblack", extrasamples=[2]),
    "float.tif": _tiff(np.float32, 1),
    "cielab8.tif": _tiff(np.uint8, 3, photometric="cielab"),
    "cielab16.tif": _tiff(np.uint16, 3, photometric="cielab"),
    "rgb16.png": _png16,
    "animated.png": _animated("PNG"), "animated.gif": _animated("GIF"),
    "lossless.webp": _pillow("RGBA", "WEBP", lossless=True), "photo.jpg": _pillow("RGB", "JPEG", quality=90),
}


@functools.lru_cache(maxsize=1)
def _image_seeds() -> dict[str, bytes]:
    # Cached, not a fixture: hypothesis would print a fixture's value (every seed file) with a failing case.
    return {name: make() for name, make in IMAGE_SEEDS.items()}


@pytest.fixture(scope="module")
def image_seeds() -> dict[str, bytes]:
    return _image_seeds()


def _mutate(data: bytes, edits, cut) -> bytes:
    """Set the bytes at ``edits`` (position as a fraction of the length, value), then cut the file at ``cut``
    (a fraction; None keeps it whole). Most positions are drawn near the start, where headers and tags are."""
    b = bytearray(data)
    for where, value in edits:
        b[min(int(where * len(b)), len(b) - 1)] = value
    if cut is not None:
        b = b[:max(1, int(cut * len(b)))]
    return bytes(b)


_where = st.one_of(st.floats(0, 0.05), st.floats(0, 1, exclude_max=True))
EDITS = st.lists(st.tuples(_where, st.integers(0, 255)), min_size=1, max_size=6)
CUTS = st.one_of(st.none(), st.none(), st.floats(0.01, 0.99))


def _check_refusal(exc: QuantizeError, path: Path) -> None:
    text = str(exc)
    assert "\n" not in text and text.startswith(str(path)), text


#: The most that reading one of these small files (16 x 12-pixel images, palettes and ink libraries of a
#: few colours), however damaged, may allocate as traced by tracemalloc, which sees Python objects and
#: numpy arrays (not Pillow's own decoder buffers: tests/test_memory_bound.py measures resident memory, C
#: buffers included, for a fixed set of bombs through every reader and command). The issue asks that a
#: hostile file must not make the tool take gigabytes; an honest read of these files takes kilobytes, so
#: 256 MiB is a wide margin.
_MAX_TRACED = 256 << 20


def _read_or_refuse(read, path: Path) -> None:
    """``read(path)`` either succeeds or raises a QuantizeError naming ``path`` on one line; the file is
    unchanged, and what the read allocated stays under :data:`_MAX_TRACED`."""
    before = path.read_bytes()
    tracing = tracemalloc.is_tracing()
    if tracing:
        tracemalloc.reset_peak()
    else:
        tracemalloc.start()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                read(path)
            except QuantizeError as exc:
                _check_refusal(exc, path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        if not tracing:
            tracemalloc.stop()
    assert peak <= _MAX_TRACED, f"{path.name}: reading it allocated {peak / 2**20:.0f} MiB"
    assert path.read_bytes() == before


# --------------------------------------------------------------------------- the corpus itself

def test_every_image_of_the_corpus_reads_or_is_refused_in_one_line(tmp_path, image_seeds):
    read = 0
    for name, data in image_seeds.items():
        path = tmp_path / name
        path.write_bytes(data)
        _read_or_refuse(load_image, path)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                pic = load_image(path)
            except QuantizeError:
                continue
        assert pic.rgb.shape[:2] == (12, 16), name  # every seed is 16 x 12 pixels
        read += 1
    assert read == len(image_seeds)  # every mode and depth of the corpus is read (Lab too, since it is decoded)


# --------------------------------------------------------------------------- byte-level fuzz, per reader

@FUZZ
@given(seed=st.sampled_from(sorted(IMAGE_SEEDS)), edits=EDITS, cut=CUTS)
def test_fuzz_image_reader(seed, edits, cut):
    image_seeds = _image_seeds()
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"mutant-{seed}"
        path.write_bytes(_mutate(image_seeds[seed], edits, cut))
        _read_or_refuse(load_image, path)


@FUZZ
@given(seed=st.sampled_from(["rgb16.tif", "rgba16.tif", "la16.tif", "float.tif", "mode-CMYK.tif",
                             "mode-LAB.tif", "cielab8.tif", "cielab16.tif", "mode-I.tif", "rgb16.png"]),
       edits=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(0, 255)), min_size=1, max_size=3))
def test_fuzz_deep_tiff_and_png_tags(seed, edits):
    image_seeds = _image_seeds()
    # Damage only the header and tag area of 16-bit, float, CMYK and Lab files (where the tags are).
    data = image_seeds[seed]
    head = min(len(data), 64 if seed.endswith(".png") else 400)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"mutant-{seed}"
        b = bytearray(data)
        for where, value in edits:
            b[int(where * head)] = value
        path.write_bytes(bytes(b))
        _read_or_refuse(load_image, path)


def _palette_json() -> bytes:
    # The palette file format in quantize/palette.py's module docstring.
    doc = {"format": "quantize.palette", "version": 1, "space": "lab",
           "colours": [{"hex": h, "locked": i == 0, "name": f"ink {i}"} for i, h in
                       enumerate(("#c8102e", "#1f3a93", "#f2f2ec"))], "fit": {}}
    return json.dumps(doc, indent=1).encode()


INK_SEEDS = {
    "inks.json": json.dumps({"format": "quantize.separation.inks", "version": 1, "illuminant": "D50",
                             "inks": [{"name": "Dune", "lab": [80.0, 5.0, 30.0]},
                                      {"name": "Night", "hex": "#101820"}]}).encode(),
    "inks.csv": b"# invented demo shelf\nname,colour\nHarbour Red,#c8102e\nSlate,40.5,-3.2,-12\n",
    "inks.txt": (b'CGATS.17\nORIGINATOR "invented"\nNUMBER_OF_FIELDS 5\nBEGIN_DATA_FORMAT\n'
                 b"SAMPLE_ID SAMPLE_NAME LAB_L LAB_A LAB_B\nEND_DATA_FORMAT\nNUMBER_OF_SETS 2\nBEGIN_DATA\n"
                 b'1 "Quay Red" 45.1 62.0 38.5\n2 Slate 40.5 -3.2 -12.0\nEND_DATA\n'),
}


@FUZZ
@given(edits=EDITS, cut=CUTS)
def test_fuzz_palette_json_reader(edits, cut):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "mutant.palette.json"
        path.write_bytes(_mutate(_palette_json(), edits, cut))
        _read_or_refuse(Palette.load, path)


@FUZZ
@given(seed=st.sampled_from(sorted(INK_SEEDS)), edits=EDITS, cut=CUTS)
def test_fuzz_ink_library_reader(seed, edits, cut):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"mutant-{seed}"
        path.write_bytes(_mutate(INK_SEEDS[seed], edits, cut))
        _read_or_refuse(load_ink_library, path)


# --------------------------------------------------------------------------- the command line

def _snapshot(root: Path) -> dict:
    return {p.relative_to(root).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def _one_line_or_success(res, *names: str) -> None:
    assert isinstance(res.exception, (SystemExit, type(None))), repr(res.exception)  # anything else: a traceback
    assert res.exit_code in (0, 1, 2) and "Traceback" not in res.output, res.output
    if res.exit_code == 1:
        errors = [ln for ln in res.stderr.splitlines() if ln.startswith("quantize: error:")]
        assert len(errors) == 1 and (not names or any(n in errors[0] for n in names)), res.stderr


@FUZZ_CLI
@given(seed=st.sampled_from(sorted(IMAGE_SEEDS)), edits=EDITS, cut=CUTS)
def test_fuzz_reduce_leaves_nothing_partial_and_earlier_outputs_intact(seed, edits, cut):
    image_seeds = _image_seeds()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        Image.fromarray(_art()).save(tmp / "earlier.png")  # an earlier output, to be left alone
        src = tmp / f"mutant-{seed}"
        src.write_bytes(_mutate(image_seeds[seed], edits, cut))
        before = _snapshot(tmp)
        res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp / "out.png"), "-k", "3",
                                        "--restarts", "1", "--keep-palette"])
        _one_line_or_success(res, src.name)
        after = _snapshot(tmp)
        assert {k: v for k, v in after.items() if k in before} == before  # input and earlier output unchanged
        new = set(after) - set(before)
        # All or nothing: the image and its palette, or neither; never a temporary file.
        assert new in (set(), {"out.png", "out.palette.json"}), new


@FUZZ_CLI
@given(which=st.sampled_from(["manifest.json", "manifest.csv"]), edits=EDITS, cut=CUTS)
def test_fuzz_batch_manifest_reader(tmp_path_factory, which, edits, cut):
    base = tmp_path_factory.mktemp("batch")
    (base / "in").mkdir()
    for s in range(2):
        Image.fromarray(_art(seed=s)).save(base / "in" / f"im{s}.png")
    out = base / "out"
    args = ["batch", str(base / "in"), "-o", str(out), "-k", "3", "--restarts", "1", "--workers", "1"]
    assert CliRunner().invoke(main, args).exit_code == 0
    manifest = out / which
    manifest.write_bytes(_mutate(manifest.read_bytes(), edits, cut))
    images = {k: v for k, v in _snapshot(out).items() if not k.startswith("manifest")}
    res = CliRunner().invoke(main, args)
    _one_line_or_success(res, which, "manifest", str(out))
    after = _snapshot(out)
    # An image is replaced only by a complete new one: each is there, and still a readable PNG.
    for name in images:
        assert name in after, name
        if name.endswith(".png"):
            with Image.open(out / name) as im:
                im.load()
    assert not [p for p in out.iterdir() if p.name.endswith(".part")]


_OPTION_VALUES = st.sampled_from(["0", "-1", "1", "3", "256", "1e308", "nan", "inf", "-inf", "", "x", "2-",
                                  "3-2", "#zzzzzz", "1e6", "99999999999999999999", "\x00", "é", "--", "-k"])
_REDUCE_OPTIONS = ["-k", "--colours", "--seed", "--restarts", "--max-pixels", "--space", "--lock", "--dither",
                   "--dither-strength", "--nearest", "--view-dpi", "--view-distance", "--target", "--weighting"]


@FUZZ_ARGS
@given(args=st.lists(st.tuples(st.sampled_from(_REDUCE_OPTIONS), _OPTION_VALUES), max_size=4))
def test_fuzz_command_arguments(args):
    image_seeds = _image_seeds()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        src = tmp / "art.png"
        src.write_bytes(image_seeds["mode-RGB.png"])
        before = _snapshot(tmp)
        flat = [part for pair in args for part in pair]
        res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp / "o.png"), "--restarts", "1", *flat])
        # A bad value is named in the message (not always a file): one line, exit 1 or 2, no traceback.
        _one_line_or_success(res)
        after = _snapshot(tmp)
        assert after["art.png"] == before["art.png"]
        assert set(after) - set(before) <= {"o.png"}
        if res.exit_code != 0:
            assert "o.png" not in after


_SEPARATE_OPTIONS = ["--ink-count", "--dpi", "--print-width", "--film-dpi", "--min-feature-mm", "--min-line-mm",
                     "--choke-mm", "--margin-mm", "--trap", "--lpi", "--angles", "--min-dot-mm", "--mesh",
                     "--index-dpi", "--keep-fraction", "--base-min-l", "--substrate", "--seed"]


@FUZZ_CLI
@given(args=st.lists(st.tuples(st.sampled_from(_SEPARATE_OPTIONS), _OPTION_VALUES), min_size=1, max_size=3))
def test_fuzz_separate_arguments(args):
    # Numbers without bounds ended in memory errors and overflows here (--margin-mm 1e7, --choke-mm 1e308).
    image_seeds = _image_seeds()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        src = tmp / "art.png"
        src.write_bytes(image_seeds["mode-RGB.png"])
        flat = [part for pair in args for part in pair]
        res = CliRunner().invoke(main, ["separate", str(src), "-o", str(tmp / "films"), "-n", "2",
                                        "--substrate", "none", "--no-pdf", *flat])
        _one_line_or_success(res)
        assert src.read_bytes() == image_seeds["mode-RGB.png"]
        if res.exit_code != 0:  # a refused run leaves no half-made set of films
            assert not (tmp / "films").exists() or not any((tmp / "films").iterdir())
        assert not [p for p in tmp.rglob("*") if p.name.endswith(".part")]


@functools.lru_cache(maxsize=1)
def _cmyk_seed() -> tuple[bytes, bytes]:
    """(a CMYK TIFF without a profile, a CMYK ICC profile written from the ICC spec by test_images)."""
    from test_images import _cmyk_profile

    with tempfile.TemporaryDirectory() as tmp:
        profile = _cmyk_profile(Path(tmp) / "press.icc").read_bytes()
    buf = io.BytesIO()
    Image.fromarray(np.random.default_rng(4).integers(0, 255, (8, 8, 4), dtype=np.uint8), "CMYK").save(buf, "TIFF")
    return buf.getvalue(), profile


@FUZZ
@given(edits=st.lists(st.tuples(st.one_of(st.floats(0, 0.2), st.floats(0, 1, exclude_max=True)),
                                st.integers(0, 255)), min_size=1, max_size=5), cut=CUTS)
def test_fuzz_cmyk_profile_reader(edits, cut):
    image, profile = _cmyk_seed()
    with tempfile.TemporaryDirectory() as tmp:
        src, icc = Path(tmp) / "art.tif", Path(tmp) / "press.icc"
        src.write_bytes(image)
        icc.write_bytes(_mutate(profile, edits, cut))
        before = icc.read_bytes()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                load_image(src, cmyk_profile=icc)
            except QuantizeError as exc:
                assert "\n" not in str(exc) and str(exc).startswith((str(icc), str(src))), str(exc)
        assert icc.read_bytes() == before and src.read_bytes() == image
