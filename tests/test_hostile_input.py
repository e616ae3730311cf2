"""Hostile input at the command line and the public entry points.

Each test is one class of fault found by a hostile-input audit. The project's
rule is the oracle (RULES.md, docs/batch.md "Bad input"): a one-line message
that names the file and the problem, no traceback, exit code 1 for a
QuantizeError and 2 for bad usage, and nothing already on disk lost,
changed or half-written.
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.cli.main import main
from quantize.fit.engine import parse_k
from quantize.palette import parse_colour

# /proc takes no new files, even from root (os.access says it would): a folder
# nobody can write in, whoever runs the tests.
UNWRITABLE = Path("/proc")


def _art(h=24, w=32, seed=0) -> np.ndarray:
    """Three flat colours with a little noise: invented data, only to have an image."""
    rng = np.random.default_rng(seed)
    inks = np.array([[200, 16, 46], [31, 58, 147], [242, 242, 236]])
    band = (np.arange(w) * 3 // w)[None, :].repeat(h, axis=0)
    return np.clip(inks[band] + rng.integers(-4, 5, (h, w, 3)), 0, 255).astype(np.uint8)


def _png(path: Path, rgb=None) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.fromarray(_art() if rgb is None else rgb).save(path)
    return path


def _palette_doc(**over) -> dict:
    # The file format in quantize/palette.py's module docstring.
    doc = {"format": "quantize.palette", "version": 1, "space": "lab",
           "colours": [{"hex": h, "locked": False, "name": None} for h in ("#c8102e", "#1f3a93", "#f2f2ec")],
           "fit": {}}
    doc.update(over)
    return doc


def _snapshot(root: Path) -> dict:
    return {p.relative_to(root).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def _cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _assert_one_line_failure(r, code: int, *words: str) -> str:
    """Exit ``code``, no exception escaped click, stderr one 'quantize: error:' line naming ``words``."""
    assert r.exit_code == code, r.output
    assert isinstance(r.exception, SystemExit), repr(r.exception)  # anything else is a traceback
    assert "Traceback" not in r.output
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("quantize: error:"), r.stderr
    for w in words:
        assert w in lines[0], lines[0]
    return lines[0]


# --------------------------------------------------------------------------- palette files

def _deep(path: Path) -> None:
    path.write_text("[" * 100_000 + "]" * 100_000)


def _doc(**over):
    return lambda path: path.write_text(json.dumps(_palette_doc(**over)))


def _lab(value):
    def write(path: Path):
        doc = _palette_doc()
        doc["colours"][0]["lab"] = value
        path.write_text(json.dumps(doc))  # Python's json writes NaN and Infinity as bare words
    return write


@pytest.mark.parametrize("write, words", [
    # RFC 8259 section 6: NaN and Infinity are not JSON numbers; Python's reader takes them anyway.
    (_lab([float("nan"), 0.0, 0.0]), "colours[0].lab"),
    (_lab([50.0, float("inf"), 0.0]), "colours[0].lab"),
    (_lab([10 ** 400, 0, 0]), "colours[0].lab"),
    # The palette format: "version" is a positive integer; true is a JSON boolean (RFC 8259 section 3).
    (_doc(version=True), "version"),
    # The palette format: "space" is one of the space names, never a list (was a TypeError).
    (_doc(space=["lab"]), "space"),
    # "#rrggbb" and nothing after it: a regex "$" also matched before a trailing newline.
    (_doc(colours=[{"hex": "#123456\n"}]), "colours[0].hex"),
    # Nesting deeper than the JSON reader's recursion limit (was a RecursionError).
    (_deep, "nested"),
], ids=["lab-nan", "lab-inf", "lab-huge-int", "version-true", "space-list", "hex-newline", "deep-nesting"])
def test_bad_palette_file_is_refused_naming_file_and_place(tmp_path, write, words):
    img = _png(tmp_path / "art.png")
    pal = tmp_path / "bad.palette.json"
    write(pal)
    before = _snapshot(tmp_path)
    for args in (["apply", pal, img, "-o", tmp_path / "out"],
                 ["separate", img, "-o", tmp_path / "sep", "--palette", pal]):
        r = _cli(*args)
        _assert_one_line_failure(r, 1, "bad.palette.json", words)
        assert _snapshot(tmp_path) == before  # nothing written, nothing changed
        assert not (tmp_path / "out").exists() and not (tmp_path / "sep").exists()


# --------------------------------------------------------------------------- outputs

@pytest.mark.parametrize("args, named", [
    # The error map was written first, then the output failed: a stray e.png was left.
    (["-o", UNWRITABLE / "qz-out.png", "--error-map", "{tmp}/e.png"], "qz-out.png"),
    (["-o", "{tmp}/o.png", "--error-map", UNWRITABLE / "qz-e.png"], "qz-e.png"),
    # The reduced image was written, then the report folder could not be made: o.png was left.
    (["-o", "{tmp}/o.png", "--report", UNWRITABLE / "qz-rep"], "qz-rep"),
    (["-o", "{tmp}/o.png", "--report", "{tmp}/a-file/rep"], "rep"),
], ids=["output-unwritable", "error-map-unwritable", "report-unwritable", "report-under-a-file"])
def test_reduce_refuses_an_unwritable_destination_before_any_work(tmp_path, args, named):
    img = _png(tmp_path / "art.png")
    (tmp_path / "a-file").write_bytes(b"precious")
    before = _snapshot(tmp_path)
    args = [str(a).replace("{tmp}", str(tmp_path)) for a in args]
    r = _cli("reduce", img, "-k", "2", "--restarts", "1", *args)
    _assert_one_line_failure(r, 1, named)
    assert _snapshot(tmp_path) == before  # no partial set of outputs, the file under "rep" untouched
    assert not any(p.name.startswith(".") for p in tmp_path.iterdir())  # no scratch or .part file


def test_sweep_and_apply_refuse_an_unwritable_report_folder_before_any_work(tmp_path):
    img = _png(tmp_path / "art.png")
    pal = tmp_path / "p.json"
    pal.write_text(json.dumps(_palette_doc()))
    before = _snapshot(tmp_path)
    r = _cli("sweep", img, "-k", "2-3", "--restarts", "1", "--table-csv", tmp_path / "t.csv",
             "--report", UNWRITABLE / "qz-srep")
    _assert_one_line_failure(r, 1, "qz-srep")
    r = _cli("apply", pal, img, "-o", tmp_path / "out", "--report", UNWRITABLE / "qz-arep")
    _assert_one_line_failure(r, 1, "qz-arep")
    assert _snapshot(tmp_path) == before and not (tmp_path / "out").exists()


def test_os_errors_read_as_name_and_reason(tmp_path):
    # Was "[Errno 2] No such file or directory: '/proc/...'", Python's repr of the error.
    img = _png(tmp_path / "art.png")
    pal = tmp_path / "p.json"
    pal.write_text(json.dumps(_palette_doc()))
    r = _cli("apply", pal, img, "-o", UNWRITABLE / "qz-apply")
    line = _assert_one_line_failure(r, 1, str(UNWRITABLE / "qz-apply"))
    assert "[Errno" not in line and "'" not in line


# --------------------------------------------------------------------------- batch

def test_batch_reports_bad_files_by_name_on_one_line_and_does_the_good_ones(tmp_path):
    # docs/batch.md "Bad input": a corrupt image or a dangling link fails that image, the run goes
    # on, exit code 1, `quantize: error: N of M images failed` on stderr.
    src = tmp_path / "in"
    _png(src / "good.png")
    _png(src / "sub" / "sp ace ünï.png")
    (src / "broken.png").write_bytes((src / "good.png").read_bytes()[:200])
    (src / "gone.png").symlink_to(src / "deleted-before-reading.png")  # listed, then unreadable
    before = _snapshot(src)
    r = _cli("batch", src, "-o", tmp_path / "out", "-k", "2", "--restarts", "1", "--workers", "0")
    # The progress bar's label went to stderr even when it was no terminal: a second line.
    line = _assert_one_line_failure(r, 1, "2 of 4 images failed", "broken.png", "gone.png")
    assert "good.png" not in line
    assert "failed: broken.png:" in r.stdout and "failed: gone.png:" in r.stdout
    assert (tmp_path / "out" / "good.png").is_file() and (tmp_path / "out" / "sub" / "sp ace ünï.png").is_file()
    assert _snapshot(src) == before


def _foreign_manifest_json(out: Path) -> Path:
    (out / "manifest.json").write_text('{"made by": "another program"}')
    return out / "manifest.json"


def _foreign_manifest_csv(out: Path) -> Path:
    (out / "manifest.csv").write_text("sku,colour\n1,red\n")
    return out / "manifest.csv"


def _not_json_manifest(out: Path) -> Path:
    (out / "manifest.json").write_text("shipping notes, not JSON")
    return out / "manifest.json"


def _manifest_folder(out: Path) -> Path:
    (out / "manifest.json").mkdir()
    (out / "manifest.json" / "keep.txt").write_text("mine")
    return out / "manifest.json"


def _foreign_shared(out: Path) -> Path:
    (out / "shared.palette.json").write_text(json.dumps(_palette_doc()))
    return out / "shared.palette.json"


def _shared_folder(out: Path) -> Path:
    (out / "shared.palette.json").mkdir()
    return out / "shared.palette.json"


@pytest.mark.parametrize("make, shared", [
    (_foreign_manifest_json, False),   # was replaced without --force
    (_foreign_manifest_csv, False),    # was replaced without --force
    (_not_json_manifest, False),       # was replaced without --force
    (_manifest_folder, False),         # every image was done, then the manifest failed
    (_foreign_shared, True),           # was refused only after sampling every image
    (_shared_folder, True),
], ids=["foreign-json", "foreign-csv", "not-json", "json-is-folder", "foreign-shared", "shared-is-folder"])
def test_batch_never_replaces_a_file_it_did_not_write(tmp_path, make, shared):
    src = tmp_path / "in"
    _png(src / "a.png")
    out = tmp_path / "out"
    out.mkdir()
    target = make(out)
    before = _snapshot(tmp_path)
    r = _cli("batch", src, "-o", out, "-k", "2", "--restarts", "1", "--workers", "0", *(["--shared"] * shared))
    _assert_one_line_failure(r, 1, target.name)
    assert _snapshot(tmp_path) == before  # no image written, the foreign file byte for byte as it was
    assert target.exists()


def test_batch_with_force_replaces_an_unreadable_manifest(tmp_path):
    src = tmp_path / "in"
    _png(src / "a.png")
    out = tmp_path / "out"
    out.mkdir()
    _not_json_manifest(out)
    r = _cli("batch", src, "-o", out, "-k", "2", "--restarts", "1", "--workers", "0", "--force")
    assert r.exit_code == 0, r.output
    assert json.loads((out / "manifest.json").read_text())["format"] == "quantize.batch-manifest"


def test_batch_survives_malformed_rows_in_its_own_manifest(tmp_path):
    # A hand-edited manifest of ours: rows of the wrong shape (was a TypeError traceback).
    src = tmp_path / "in"
    _png(src / "a.png")
    out = tmp_path / "out"
    out.mkdir()
    (out / "manifest.json").write_text(json.dumps({
        "format": "quantize.batch-manifest", "shared": [1],
        "images": [1, "x", {"input": 5}, {"input": "a.png", "status": "ok", "outputs": 5}]}))
    r = _cli("batch", src, "-o", out, "-k", "2", "--restarts", "1", "--workers", "0")
    assert r.exit_code == 0, r.output
    assert isinstance(r.exception, SystemExit) or r.exception is None
    assert "4 unreadable row(s)" in r.stdout and (out / "a.png").is_file()


# --------------------------------------------------------------------------- separations

def test_separate_names_the_file_when_clean_up_would_erase_it(tmp_path):
    # One pixel is smaller than the smallest printable dot at any sensible setting.
    img = _png(tmp_path / "dot.png", np.array([[[200, 16, 46]]], np.uint8))
    before = _snapshot(tmp_path)
    r = _cli("separate", img, "-o", tmp_path / "sep", "-n", "1")
    assert "Traceback" not in r.output and isinstance(r.exception, SystemExit)
    assert r.exit_code == 1
    errors = [ln for ln in r.stderr.splitlines() if ln.startswith("quantize: error:")]
    assert len(errors) == 1 and "dot.png" in errors[0] and "erase" in errors[0]
    assert _snapshot(tmp_path) == before and not (tmp_path / "sep").exists()


def test_separate_refuses_a_margin_that_is_not_a_number(tmp_path):
    # click's FloatRange lets NaN through (every comparison with NaN is false); was
    # "cannot convert float NaN to integer", naming nothing.
    img = _png(tmp_path / "art.png")
    r = _cli("separate", img, "-o", tmp_path / "sep", "-n", "2", "--marks", "--margin-mm", "nan",
             "--substrate", "#ffffff")
    _assert_one_line_failure(r, 1, "margin_mm", "nan")
    assert not (tmp_path / "sep").exists()


# --------------------------------------------------------------------------- warnings

def test_warnings_print_as_one_line_without_source_code(tmp_path):
    # A real process: inside pytest, warnings are recorded rather than printed.
    frames = [Image.fromarray(_art(seed=s)).convert("P") for s in range(3)]
    gif = tmp_path / "anim ünï.gif"
    frames[0].save(gif, save_all=True, append_images=frames[1:], duration=50)
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    p = subprocess.run([sys.executable, "-m", "quantize", "reduce", str(gif), "-o", str(tmp_path / "o.png"),
                        "-k", "2", "--restarts", "1"], capture_output=True, text=True, env=env, check=False)
    assert p.returncode == 0, p.stderr
    lines = [ln for ln in p.stderr.splitlines() if ln.strip()]
    assert lines and all(ln.startswith("quantize: warning: ") for ln in lines), p.stderr
    assert any("anim ünï.gif" in ln and "frames" in ln for ln in lines)
    assert "load_image(" not in p.stderr and ".py:" not in p.stderr


# --------------------------------------------------------------------------- library validators

@pytest.mark.parametrize("spec", [None, 5, ["a", "b", "c"], [None, 0, 0]])
def test_parse_colour_refuses_non_colours_with_a_value_error(spec):
    # Was TypeError ("'int' object is not iterable") or "could not convert string to float".
    with pytest.raises(ValueError, match="neither sRGB hex"):
        parse_colour(spec)


@pytest.mark.parametrize("k", [(1, None), (5, "x"), (2.0, 4.0), (True, 3)])
def test_parse_k_refuses_a_range_of_non_integers(k):
    # Was a TypeError from int(None), or "invalid literal for int()", naming no option.
    with pytest.raises(ValueError, match="palette size range must be two whole numbers"):
        parse_k(k)


def _png_with_chunk_changed(src: Path, dst: Path, chunk: bytes, *, flip_crc=False, drop=False) -> None:
    """Rewrite a PNG with one chunk's CRC flipped or the chunk dropped (ISO/IEC 15948:2004, 5.3: length,
    type, data, CRC-32 of type and data)."""
    import struct

    data = bytearray(src.read_bytes())
    i = data.find(chunk)
    length = struct.unpack(">I", data[i - 4:i])[0]
    if flip_crc:
        data[i + 4 + length] ^= 0xFF
    if drop:
        del data[i - 4:i + 8 + length]
    dst.write_bytes(bytes(data))


def test_damaged_pngs_are_refused_naming_the_damage(tmp_path):
    ok = tmp_path / "ok.png"
    Image.fromarray(_art()).save(ok)
    pal = tmp_path / "pal.png"
    Image.fromarray(_art()).convert("P").save(pal)
    _png_with_chunk_changed(ok, tmp_path / "crc.png", b"IDAT", flip_crc=True)
    _png_with_chunk_changed(pal, tmp_path / "noplte.png", b"PLTE", drop=True)
    (tmp_path / "cut.png").write_bytes(ok.read_bytes()[:-12])  # the IEND chunk cut off
    frames = [Image.fromarray(_art(seed=s)) for s in range(3)]
    frames[0].save(tmp_path / "anim.png", save_all=True, append_images=frames[1:])
    (tmp_path / "anim-cut.png").write_bytes((tmp_path / "anim.png").read_bytes()[:-200])
    for name, words in [("crc.png", "CRC"), ("noplte.png", "PLTE"), ("cut.png", "IEND"),
                        ("anim-cut.png", "truncated")]:
        res = CliRunner().invoke(main, ["reduce", str(tmp_path / name), "-o", str(tmp_path / f"o-{name}"), "-k", "2"])
        assert res.exit_code == 1, (name, res.output)
        line = res.output.strip().splitlines()[-1]
        assert name in line and words in line, line
        assert not (tmp_path / f"o-{name}").exists()
    assert CliRunner().invoke(main, ["reduce", str(ok), "-o", str(tmp_path / "o.png"), "-k", "2"]).exit_code == 0


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need a POSIX system")
def test_a_named_pipe_is_refused_instead_of_blocking(tmp_path):
    # Opening a FIFO with no writer blocks forever; it must be refused from its file type.
    for name, args in [("in.png", ["reduce", "{}", "-o", str(tmp_path / "o.png"), "-k", "2"]),
                       ("inks.csv", ["separate", str(tmp_path / "art.png"), "-o", str(tmp_path / "s"), "--inks", "{}",
                                     "-n", "1"])]:
        Image.fromarray(_art()).save(tmp_path / "art.png")
        fifo = tmp_path / name
        os.mkfifo(fifo)
        cmd = [sys.executable, "-m", "quantize"] + [a.format(fifo) for a in args]
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
        assert res.returncode == 1, res.stderr
        assert name in res.stderr and "regular file" in res.stderr and "Traceback" not in res.stderr


@pytest.mark.parametrize("args, words", [
    (["--dither", "floyd-steinberg", "--view-dpi", "1e6", "--view-distance", "500"], "--view-dpi"),
    (["--dither", "floyd-steinberg", "--view-dpi", "5000", "--view-distance", "5000"], "pixels per degree"),
    (["--seed", "-1"], "--seed"),
])
def test_numbers_beyond_any_job_are_usage_errors_before_any_work(tmp_path, args, words):
    # --view-dpi 1e6 once asked for 880 GiB (an S-CIELAB kernel a degree wide); --seed -1 did not name the option.
    src = tmp_path / "a.png"
    Image.fromarray(_art()).save(src)
    out = tmp_path / "o.png"
    res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "2", *args])
    assert res.exit_code == 2, res.output
    assert words in res.output and "Traceback" not in res.output
    assert not out.exists()


def test_ink_libraries_nested_too_deeply_or_with_impossible_lab_are_refused(tmp_path):
    art = tmp_path / "art.png"
    Image.fromarray(_art()).save(art)
    deep = tmp_path / "deep.json"
    deep.write_text('{"a":' * 5000 + "1" + "}" * 5000)
    huge = tmp_path / "huge.csv"
    huge.write_text("name,L,a,b\nInk1,50,1e300,0\nInk2,40,10,10\n")
    for lib, words in [(deep, "nested too deeply"), (huge, "line 2: a* 1e+300 is outside")]:
        res = CliRunner().invoke(main, ["separate", str(art), "-o", str(tmp_path / "o"), "--inks", str(lib), "-n", "1"])
        assert res.exit_code == 1, res.output
        assert lib.name in res.output and words in res.output and "Traceback" not in res.output
        assert not (tmp_path / "o").exists()


def test_a_file_name_the_system_refuses_is_one_line(tmp_path):
    src = tmp_path / "a.png"
    Image.fromarray(_art()).save(src)
    res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / ("x" * 300 + ".png")), "-k", "2"])
    assert res.exit_code == 1 and (res.exception is None or isinstance(res.exception, SystemExit))
    line = res.output.strip().splitlines()[-1]
    assert "File name too long" in line and len(line) < 300  # the name is cut short, not echoed whole


def test_a_cluster_that_is_not_an_address_is_refused_at_once(tmp_path):
    (tmp_path / "in").mkdir()
    Image.fromarray(_art()).save(tmp_path / "in" / "a.png")
    res = CliRunner().invoke(main, ["batch", str(tmp_path / "in"), "-o", str(tmp_path / "o"), "-k", "2",
                                    "--cluster", "notanaddress"])
    assert res.exit_code == 1 and "not a scheduler address" in res.output and "Traceback" not in res.output


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="needs /dev/full")
def test_standard_output_closed_early_or_full_is_not_a_traceback(tmp_path):
    src = tmp_path / "a.png"
    Image.fromarray(_art()).save(src)
    cmd = [sys.executable, "-m", "quantize", "reduce", str(src), "-o", str(tmp_path / "o.png"), "-k", "2", "--force"]
    # A reader that stops at once (as `| head -c 1` does): the work is done, so exit 0 and say nothing.
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=300) == 0, err
    assert "Traceback" not in err and "Exception ignored" not in err and (tmp_path / "o.png").exists()
    with open("/dev/full", "w") as full:
        res = subprocess.run(cmd, stdout=full, stderr=subprocess.PIPE, text=True, timeout=300)
    assert res.returncode == 1 and "standard output" in res.stderr and "Traceback" not in res.stderr


def test_messages_name_the_file_and_never_echo_huge_values(tmp_path):
    # 5000-digit numbers hit Python's integer-conversion limit; long values were echoed whole.
    art = tmp_path / "art.png"
    Image.fromarray(_art()).save(art)
    pal = tmp_path / "p.palette.json"
    assert CliRunner().invoke(main, ["fit", str(art), "-o", str(pal), "-k", "2"]).exit_code == 0
    big = tmp_path / "big.json"
    big.write_text(pal.read_text().replace('"version": 1', '"version": ' + "9" * 5000, 1))
    cg = tmp_path / "sets.txt"
    cg.write_text('CGATS.17\nNUMBER_OF_FIELDS 4\nBEGIN_DATA_FORMAT\nSAMPLE_NAME LAB_L LAB_A LAB_B\nEND_DATA_FORMAT\n'
                  "NUMBER_OF_SETS " + "9" * 5000 + '\nBEGIN_DATA\n"Red" 50 60 40\nEND_DATA\n')
    hexes = tmp_path / "hex.csv"
    hexes.write_text("name,hex\nInk,#" + "f" * 200_000 + "\n")
    runs = [(["apply", str(big), str(art), "-o", str(tmp_path / "a")], "big.json"),
            (["separate", str(art), "-o", str(tmp_path / "s1"), "--inks", str(cg), "-n", "1"], "sets.txt"),
            (["separate", str(art), "-o", str(tmp_path / "s2"), "--inks", str(hexes), "-n", "1"], "hex.csv")]
    for args, name in runs:
        res = CliRunner().invoke(main, args)
        assert res.exit_code == 1, res.output
        line = res.output.strip().splitlines()[-1]
        assert name in line and len(line) < 500 and "Traceback" not in res.output and "4300" not in line


def test_a_file_name_with_a_newline_is_shown_whole_on_one_line(tmp_path):
    src = tmp_path / "two\nlines.png"
    Image.fromarray(_art()).save(src)
    res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / "o.png"), "-k", "2",
                                    "--max-pixels", "10"])
    assert res.exit_code == 1
    assert "two\\nlines.png" in res.output.strip().splitlines()[-1]


def test_damaged_tiff_tags_are_noted_not_a_traceback(tmp_path):
    # TIFF 6.0: Orientation (274) is one SHORT 1-8; XResolution (282) a RATIONAL. Written damaged with tifffile.
    tifffile = pytest.importorskip("tifffile")
    rng = np.random.default_rng(0)
    cases = {
        "orient8.tif": (rng.integers(0, 255, (20, 30, 3), dtype=np.uint8), [(274, "H", 2, (1, 1), True)]),
        "orient16.tif": (rng.integers(0, 65535, (20, 30, 3), dtype=np.uint16), [(274, "H", 2, (1, 1), True)]),
        "res0.tif": (rng.integers(0, 255, (20, 30, 3), dtype=np.uint8),
                     [(282, "2I", 1, (0, 1), True), (283, "2I", 1, (0, 1), True)]),
    }
    for name, (data, tags) in cases.items():
        tifffile.imwrite(tmp_path / name, data, photometric="rgb", extratags=tags)
        out = tmp_path / f"{name}.png"
        res = CliRunner().invoke(main, ["reduce", str(tmp_path / name), "-o", str(out), "-k", "2"])
        assert res.exit_code == 0, (name, res.output)
        assert "Traceback" not in res.output and out.exists()
        if name == "orient16.tif":  # the 16-bit reader ended in a TypeError traceback before
            assert "damaged orientation tag" in res.output
        with Image.open(out) as im:
            assert im.size == (30, 20)  # orientation 1: as stored


def test_the_library_never_writes_over_the_image_it_read_even_with_force(tmp_path):
    from quantize import fit_palette, load_image
    from quantize.errors import OutputError

    src = tmp_path / "art.png"
    Image.fromarray(_art()).save(src)
    before = src.read_bytes()
    pic = load_image(src)
    res = fit_palette(pic, 2).apply(pic)
    for write in (res.save, res.write):
        with pytest.raises(OutputError, match="input"):
            write(src, force=True)
    assert src.read_bytes() == before


def _retag_tiff(path: Path, code: int, *, page: int = 0, count: int | None = None, value: bytes | None = None,
                new_code: int | None = None) -> None:
    """Rewrite one entry of a little-endian TIFF's IFD in place (TIFF 6.0 section 2: an IFD entry is
    tag SHORT, type SHORT, count LONG, value-or-offset 4 bytes)."""
    import struct

    b = bytearray(path.read_bytes())
    assert b[:4] == b"II*\x00"
    off = struct.unpack_from("<I", b, 4)[0]
    for _ in range(page):
        n = struct.unpack_from("<H", b, off)[0]
        off = struct.unpack_from("<I", b, off + 2 + 12 * n)[0]
    n = struct.unpack_from("<H", b, off)[0]
    entries = [off + 2 + 12 * i for i in range(n)]
    (entry,) = [e for e in entries if struct.unpack_from("<H", b, e)[0] == code]
    if new_code is not None:
        struct.pack_into("<H", b, entry, new_code)
    if count is not None:
        struct.pack_into("<I", b, entry + 4, count)
    if value is not None:
        b[entry + 8:entry + 12] = value
    path.write_bytes(bytes(b))


def test_damaged_tiff_structure_is_one_line_or_read_not_a_traceback(tmp_path):
    import struct

    tifffile = pytest.importorskip("tifffile")
    rng = np.random.default_rng(1)
    # SamplesPerPixel (277) is one SHORT; here it holds two (a TypeError inside tifffile before).
    spp = tmp_path / "spp.tif"
    tifffile.imwrite(spp, rng.integers(0, 65535, (20, 30, 3), dtype=np.uint16), photometric="rgb")
    _retag_tiff(spp, 277, count=2, value=struct.pack("<HH", 3, 3))
    # A second page whose ImageWidth/ImageLength (256/257) are gone (Pillow's TypeError "Missing dimensions").
    pages = tmp_path / "pages.tif"
    with tifffile.TiffWriter(pages) as w:
        for _ in range(2):
            w.write(rng.integers(0, 255, (20, 30, 3), dtype=np.uint8), photometric="rgb")
    _retag_tiff(pages, 256, page=1, new_code=65000)
    _retag_tiff(pages, 257, page=1, new_code=65001)
    for src in (spp, pages):
        before = src.read_bytes()
        out = tmp_path / f"{src.stem}.png"
        res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "2"])
        assert "Traceback" not in res.output and isinstance(res.exception, (SystemExit, type(None))), res.output
        if res.exit_code == 0:
            with Image.open(out) as im:
                assert im.size == (30, 20)
        else:
            _assert_one_line_failure(res, 1, src.name)
            assert not out.exists()
        assert src.read_bytes() == before


def test_tifffile_messages_become_one_note_and_its_logger_is_left_as_it_was(tmp_path):
    import logging
    import struct
    import warnings

    from quantize import load_image

    tifffile = pytest.importorskip("tifffile")
    rng = np.random.default_rng(2)
    src = tmp_path / "extra.tif"
    # ExtraSamples (338) values are 0-2 (TIFF 6.0); 9 makes tifffile log an error and skip the tag.
    tifffile.imwrite(src, rng.integers(0, 65535, (20, 30, 4), dtype=np.uint16), photometric="rgb",
                     extrasamples=[2])
    _retag_tiff(src, 338, value=struct.pack("<HH", 9, 0))
    logger = logging.getLogger("tifffile")
    state = (list(logger.filters), list(logger.handlers), logger.level, logger.propagate, logger.disabled)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        load_image(src)
    assert (list(logger.filters), list(logger.handlers), logger.level, logger.propagate, logger.disabled) == state
    assert sum("338" in str(w.message) for w in caught) == 1
    # A real process: inside pytest, warnings are recorded rather than printed, and logging is set up.
    spp = tmp_path / "spp8.tif"
    tifffile.imwrite(spp, rng.integers(0, 255, (20, 30, 3), dtype=np.uint8), photometric="rgb")
    _retag_tiff(spp, 277, count=2, value=struct.pack("<HH", 3, 3))
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    for image, tag in ((src, "338"), (spp, "277")):
        p = subprocess.run([sys.executable, "-m", "quantize", "reduce", str(image), "-o", str(image) + ".png",
                            "-k", "2", "--restarts", "1"], capture_output=True, text=True, env=env, check=False)
        assert p.returncode == 0, p.stderr
        lines = [ln for ln in p.stderr.splitlines() if ln.strip()]
        # Before: tifffile's "<tifffile.TiffTag 338 @190> raised ValueError(...)" and Pillow's "Metadata
        # Warning" printed raw, without the file's name.
        assert all(ln.startswith(f"quantize: warning: {image}: ") for ln in lines), p.stderr
        assert sum(tag in ln for ln in lines) == 1, p.stderr


# --------------------------------------------------------------------------- names and paths

def test_an_output_path_longer_than_path_max_is_one_line(tmp_path):
    # Linux's PATH_MAX is 4096 bytes (limits.h); each part stays under NAME_MAX (255).
    src = _png(tmp_path / "a.png")
    out = tmp_path.joinpath(*["d" * 200] * 25, "o.png")
    assert len(os.fsencode(out)) > 4096
    res = _cli("reduce", src, "-o", out, "-k", "2")
    line = _assert_one_line_failure(res, 1, "too long")
    assert len(line) < 500


@pytest.mark.parametrize("command", [
    ["fit", "{img}", "-k", "2"], ["reduce", "{img}", "-k", "2"], ["apply", "{pal}", "{img}"],
    ["separate", "{img}", "-n", "2"], ["batch", "{dir}", "-k", "2"]], ids=lambda c: c[0])
def test_an_empty_output_name_is_a_usage_error(tmp_path, command, monkeypatch):
    img = _png(tmp_path / "in" / "a.png")
    pal = tmp_path / "p.palette.json"
    pal.write_text(json.dumps(_palette_doc()))
    monkeypatch.chdir(tmp_path)  # '' used to mean this folder
    before = _snapshot(tmp_path)
    args = [a.format(img=img, pal=pal, dir=img.parent) for a in command] + ["-o", ""]
    res = _cli(*args)
    assert res.exit_code == 2 and "is empty" in res.output and "Traceback" not in res.output, res.output
    assert _snapshot(tmp_path) == before


@pytest.mark.parametrize("command", ["fit", "reduce"])
def test_a_file_output_ending_in_a_slash_is_refused_as_a_folder_name(tmp_path, command):
    # fit wrote a file named "pp" for "-o pp/" before; reduce said "unsupported extension".
    img = _png(tmp_path / "a.png")
    before = _snapshot(tmp_path)
    res = _cli(command, img, "-k", "2", "-o", f"{tmp_path}/pp/")
    assert res.exit_code == 2 and "names a folder" in res.output, res.output
    assert _snapshot(tmp_path) == before and not (tmp_path / "pp").exists()


def _bytes_name(folder: Path, raw: bytes) -> Path:
    """A path whose last part holds bytes that are not UTF-8, as Python spells it (PEP 383)."""
    return folder / os.fsdecode(raw)


def test_file_names_that_are_not_utf8_are_processed(tmp_path):
    src = _bytes_name(tmp_path, b"art\xff\xfe.png")
    _png(src)
    out = _bytes_name(tmp_path, b"out\xe9.png")
    res = _cli("reduce", src, "-o", out, "-k", "2", "--keep-palette")
    assert res.exit_code == 0, res.output
    assert os.path.exists(os.fsencode(out))
    # The palette JSON names its source with \udcXX escapes: json.loads and os.fsencode give the bytes back.
    raw = Path(str(out)[:-4] + ".palette.json").read_text(encoding="utf-8")
    assert "art\\udcff\\udcfe.png" in raw
    assert b"art\xff\xfe.png" in os.fsencode(json.dumps(json.loads(raw), ensure_ascii=False))
    # A real process (stdout is a pipe, strict UTF-8 before): the summary names the file.
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]), PYTHONIOENCODING="utf-8")
    p = subprocess.run([os.fsencode(sys.executable), b"-m", b"quantize", b"reduce", os.fsencode(src), b"-o",
                        os.fsencode(out), b"-k", b"2", b"--force", b"--restarts", b"1"],
                       capture_output=True, env=env, check=False)
    assert p.returncode == 0 and b"Traceback" not in p.stderr, p.stderr
    assert b"art\xff\xfe.png" in p.stdout


def test_a_batch_of_names_that_are_not_utf8_writes_its_manifest(tmp_path):
    folder = _bytes_name(tmp_path, b"in\xff")
    _png(_bytes_name(folder, b"x\xfe.png"))
    _png(folder / "good.png")
    out = tmp_path / "out"
    res = _cli("batch", folder, "-o", out, "-k", "2", "--workers", "1")
    assert res.exit_code == 0, res.output
    doc = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    names = sorted(os.fsencode(row["input"]) for row in doc["images"])
    assert names == [b"good.png", b"x\xfe.png"]  # \udcfe in the JSON: the same bytes back
    assert "x\\udcfe.png" in (out / "manifest.csv").read_text(encoding="utf-8")
    assert os.path.exists(os.fsencode(_bytes_name(out, b"x\xfe.png")))
    again = _cli("batch", folder, "-o", out, "-k", "2", "--workers", "1")
    assert again.exit_code == 0 and "2 up to date" in again.output, again.output


@pytest.mark.parametrize("code, count, value, words", [
    # TIFF 6.0: each of these tags holds one value. Found by byte-level mutants of 16-bit TIFFs (TypeError,
    # AttributeError in the 16-bit reader before).
    (262, 2, (2, 2), "PhotometricInterpretation (2 values"),
    (256, 2, (16, 16), "cannot decode"),
    (259, None, (9999, 0), "TIFF file that cannot be read"),  # a compression no reader knows
], ids=["photometric-two-values", "width-two-values", "unknown-compression"])
def test_damaged_tags_of_a_16bit_tiff_are_one_line(tmp_path, code, count, value, words):
    import struct

    tifffile = pytest.importorskip("tifffile")
    src = tmp_path / "deep.tif"
    tifffile.imwrite(src, np.random.default_rng(5).integers(0, 65535, (12, 16, 4), dtype=np.uint16),
                     photometric="rgb", extrasamples=[2])
    _retag_tiff(src, code, count=count, value=struct.pack("<HH", *value))
    before = src.read_bytes()
    res = _cli("reduce", src, "-o", tmp_path / "o.png", "-k", "2")
    _assert_one_line_failure(res, 1, "deep.tif", words)
    assert src.read_bytes() == before and not (tmp_path / "o.png").exists()


def test_batch_records_a_damaged_tiff_as_bad_input_not_an_internal_error(tmp_path):
    import struct

    tifffile = pytest.importorskip("tifffile")
    (tmp_path / "in").mkdir()
    _png(tmp_path / "in" / "good.png")
    bad = tmp_path / "in" / "bad.tif"
    tifffile.imwrite(bad, np.random.default_rng(6).integers(0, 65535, (12, 16, 3), dtype=np.uint16),
                     photometric="rgb")
    _retag_tiff(bad, 262, count=2, value=struct.pack("<HH", 2, 2))
    res = _cli("batch", tmp_path / "in", "-o", tmp_path / "out", "-k", "2", "--workers", "1")
    assert res.exit_code == 1 and "Traceback" not in res.output
    rows = {r["input"]: r for r in json.loads((tmp_path / "out" / "manifest.json").read_text())["images"]}
    assert rows["good.png"]["status"] == "ok"
    assert rows["bad.tif"]["status"] == "failed"
    assert "PhotometricInterpretation" in rows["bad.tif"]["error"] and "internal error" not in rows["bad.tif"]["error"]
