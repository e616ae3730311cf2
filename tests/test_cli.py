"""The command line through click's CliRunner, plus real subprocess calls."""

import json
import os
import subprocess
import sys

import numpy as np
import pytest
from artwork import flat_artwork
from click.testing import CliRunner
from PIL import Image

from quantize import Palette
from quantize.cli.main import main


@pytest.fixture()
def art(tmp_path):
    rgb, _ = flat_artwork(4, seed=11, jpeg_quality=85)
    p = tmp_path / "art.png"
    Image.fromarray(rgb).save(p, dpi=(300, 300))
    return p


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def test_reduce_indexed_png_with_palette_and_json(art, tmp_path):
    out = tmp_path / "out.png"
    r = run("reduce", art, "-o", out, "-k", "2-8", "--keep-palette", "--json")
    assert r.exit_code == 0, r.output
    summary = json.loads(r.stdout)
    assert summary["k"] == 4 and summary["rule"] == "auto"
    # The art has 4 inks (tests/artwork.py): judged artwork, nothing lost.
    assert summary["kind"] == "artwork" and summary["lost"] == []
    assert set(summary["delta_e"]) == {"mean", "median", "p95", "max"}
    assert sum(c["coverage"] for c in summary["palette"]) == pytest.approx(100, abs=0.01)
    with Image.open(out) as im:
        assert im.mode == "P"
        assert round(im.info["dpi"][0]) == 300
        assert len(im.getcolors()) <= 4
    pal = Palette.load(tmp_path / "out.palette.json")
    assert pal.k == 4


def test_reduce_human_summary_and_formats(art, tmp_path):
    for ext, mode in [("tif", "RGB"), ("jpg", "RGB")]:
        out = tmp_path / f"o.{ext}"
        r = run("reduce", art, "-o", out, "-k", "3", "--lock", "#ffffff", "--space", "oklab",
                "--seed", "2", "--restarts", "2", "--seeding", "farthest", "--nearest", "ciede2000")
        assert r.exit_code == 0, r.output
        assert "3 colours" in r.output and "ΔE00: mean" in r.output and "locked" in r.output
        with Image.open(out) as im:
            assert im.mode == mode


def test_reduce_target_rule(art, tmp_path):
    r = run("reduce", art, "-o", tmp_path / "t.png", "--target", "3", "--json")
    assert r.exit_code == 0, r.output
    s = json.loads(r.stdout)
    assert s["rule"] == "target" and s["delta_e"]["mean"] <= 3


def test_refuses_existing_output_and_input(art, tmp_path):
    out = tmp_path / "out.png"
    out.write_bytes(b"precious")
    r = run("reduce", art, "-o", out, "-k", "3")
    assert r.exit_code == 1 and "already exists" in r.output
    assert out.read_bytes() == b"precious"
    r = run("reduce", art, "-o", art, "-k", "3", "--force")
    assert r.exit_code == 1 and "input" in r.output
    assert run("reduce", art, "-o", out, "-k", "3", "--force").exit_code == 0


def test_fit_then_apply(art, tmp_path):
    other, _ = flat_artwork(4, seed=12)
    p2 = tmp_path / "second.png"
    Image.fromarray(other).save(p2)
    pj = tmp_path / "shared.json"
    r = run("fit", art, p2, "-o", pj, "-k", "6", "--weighting", "pixels", "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["k"] == 6
    outdir = tmp_path / "mapped"
    r = run("apply", pj, art, p2, "-o", outdir, "--json")
    assert r.exit_code == 0, r.output
    s = json.loads(r.stdout)
    assert [os.path.basename(o) for o in s["outputs"]] == ["art.png", "second.png"]
    pal = Palette.load(pj)
    with Image.open(outdir / "art.png") as im:
        used = {tuple(c) for _, c in im.convert("RGB").getcolors()}
    assert used <= {tuple(map(int, c)) for c in pal.rgb8}
    r = run("apply", pj, art, "-o", outdir, "--format", "tif")
    assert r.exit_code == 0 and (outdir / "art.tif").exists()


def test_apply_stops_before_any_output_when_an_input_is_not_an_image(art, tmp_path):
    pj = tmp_path / "p.json"
    assert run("fit", art, "-o", pj, "-k", "4").exit_code == 0
    bad = tmp_path / "notes.png"
    bad.write_text("not an image")
    outdir = tmp_path / "mapped"
    r = run("apply", pj, art, bad, "-o", outdir)
    assert r.exit_code == 1
    assert f"{bad}: not an image file" in r.output
    assert not outdir.exists()


def test_apply_says_which_outputs_were_written_before_damage_found_in_decoding(art, tmp_path):
    # A JPEG cut short after its header: only decoding finds the damage.
    # scikit-image's "chelsea" sample photo.
    from skimage import data

    pj = tmp_path / "p.json"
    assert run("fit", art, "-o", pj, "-k", "4").exit_code == 0
    whole = tmp_path / "cat.jpg"
    Image.fromarray(data.chelsea()).save(whole, quality=90)
    cut = tmp_path / "cut.jpg"
    cut.write_bytes(whole.read_bytes()[: whole.stat().st_size // 2])
    outdir = tmp_path / "mapped"
    r = run("apply", pj, art, cut, "-o", outdir)
    assert r.exit_code == 1
    line = r.output.strip().splitlines()[-1]
    assert f"{cut}: file is truncated or damaged" in line
    assert f"written before it (1 of 2): {outdir / 'art.png'}" in line
    assert sorted(p.name for p in outdir.iterdir()) == ["art.png"]


def _file(name, data):
    def make(d):
        p = d / name
        p.write_bytes(data)
        return p
    return make


@pytest.mark.parametrize("make, code, words", [
    (lambda d: d / "missing.png", 2, "does not exist"),
    (lambda d: d, 2, "directory"),
    (_file("bad.png", b"\x89PNG\r\n\x1a\nbroken"), 1, "bad.png"),
    (_file("empty.jpg", b""), 1, "empty.jpg"),
    (_file("notes.png", b"hello, not an image"), 1, "notes.png"),
])
def test_bad_inputs_one_line_and_nothing_written(tmp_path, make, code, words):
    src = make(tmp_path)
    out = tmp_path / "o" / "out.png"
    out.parent.mkdir()
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "3"])
    assert r.exit_code == code, r.output
    assert words in r.output
    assert "Traceback" not in r.output
    assert len([ln for ln in r.output.strip().splitlines() if ln.strip()]) <= 3
    assert not any(out.parent.iterdir())


def test_unwritable_or_missing_output_folder(art, tmp_path):
    r = run("reduce", art, "-o", tmp_path / "nope" / "o.png", "-k", "3")
    assert r.exit_code == 1 and "does not exist" in r.output
    # /proc refuses new files even to root, so this holds whoever runs the tests.
    r = run("reduce", art, "-o", "/proc/quantize-test-out.png", "-k", "3")
    assert r.exit_code == 1 and "Traceback" not in r.output
    assert "quantize-test-out.png" in r.output
    assert not os.path.exists("/proc/quantize-test-out.png")


@pytest.mark.parametrize("args, words", [
    (["-k", "9-3"], "MIN is larger"),
    (["-k", "0"], "at least 1"),
    (["-k", "300"], "256"),
    (["-k", "\u0663"], "is not N or MIN-MAX"),  # ARABIC-INDIC DIGIT THREE, which int() reads as 3
    (["-k", "2-\u00b9\u00b2"], "is not N or MIN-MAX"),  # superscript digits
    (["--space", "hsv"], "hsv"),
    (["--rule", "target"], "--target"),
    (["--lock", "purplish"], "purplish"),
])
def test_bad_option_values(art, tmp_path, args, words):
    r = CliRunner().invoke(main, ["reduce", str(art), "-o", str(tmp_path / "o.png"), *args])
    assert r.exit_code in (1, 2), r.output
    assert words in r.output and "Traceback" not in r.output
    assert not (tmp_path / "o.png").exists()


def test_apply_bad_palette_file(art, tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "other"}')
    r = run("apply", bad, art, "-o", tmp_path / "out")
    assert r.exit_code == 1 and "bad.json" in r.output and "format" in r.output


def test_debug_shows_traceback(tmp_path):
    bad = tmp_path / "bad.png"
    bad.write_bytes(b"junk")
    r = CliRunner().invoke(main, ["--debug", "reduce", str(bad), "-o", str(tmp_path / "o.png")])
    assert r.exit_code != 0 and r.exc_info is not None


def test_real_subprocess_entry_points(art, tmp_path):
    out = tmp_path / "sub.png"
    p = subprocess.run([sys.executable, "-m", "quantize", "reduce", str(art), "-o", str(out), "-k", "4", "--json"],
                       capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    assert json.loads(p.stdout)["k"] == 4
    p = subprocess.run([sys.executable, "-m", "quantize", "reduce", str(tmp_path / "nope.png"), "-o", str(out)],
                       capture_output=True, text=True)
    assert p.returncode == 2 and "Traceback" not in p.stderr
    exe = os.path.join(os.path.dirname(sys.executable), "quantize")
    if not os.path.exists(exe):
        pytest.skip("console script not installed in this environment (pip install . creates it)")
    p = subprocess.run([exe, "--help"], capture_output=True, text=True)
    assert p.returncode == 0 and "reduce" in p.stdout


@pytest.mark.parametrize("user_value, expected", [(None, "False"), ("1", "True")])
def test_the_program_turns_numpys_huge_pages_off_unless_the_user_chose(user_value, expected):
    # quantize.cli.entry: numpy reads NUMPY_MADVISE_HUGEPAGE once, at import; the program sets it to 0
    # before numpy loads unless the user set it.  Measured from numpy itself: its setter returns the
    # setting in force (numpy's own API; private, but the only way to read it back).
    code = ("import sys; from quantize.cli import entry; sys.argv = ['quantize', '--help']\n"
            "try:\n    entry.run()\nexcept SystemExit:\n    pass\n"
            "import numpy as np; core = getattr(np, '_core', None) or np.core\n"
            "sys.stderr.write(str(core.multiarray._set_madvise_hugepage(True)))")
    env = {k: v for k, v in os.environ.items() if k != "NUMPY_MADVISE_HUGEPAGE"}
    if user_value is not None:
        env["NUMPY_MADVISE_HUGEPAGE"] = user_value
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env)
    assert p.returncode == 0, p.stderr
    assert p.stderr.strip() == expected


def test_importing_the_library_leaves_numpys_huge_pages_alone():
    code = ("import os, quantize, quantize.fit.engine; "
            "print(os.environ.get('NUMPY_MADVISE_HUGEPAGE'))")
    env = {k: v for k, v in os.environ.items() if k != "NUMPY_MADVISE_HUGEPAGE"}
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env)
    assert p.returncode == 0, p.stderr
    assert p.stdout.strip() == "None"


def test_help_does_not_import_heavy_modules():
    code = ("import sys; from click.testing import CliRunner; from quantize.cli.main import main; "
            "CliRunner().invoke(main, ['--help']); "
            "print(sorted(m for m in ('numpy', 'colour', 'skimage', 'numba', 'matplotlib') if m in sys.modules))")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    assert p.stdout.strip() == "[]"


def test_reduce_range_explains_choice_and_writes_report(art, tmp_path):
    import re

    rep = tmp_path / "report"
    r = run("reduce", art, "-o", tmp_path / "r.png", "-k", "2-6", "--report", rep)
    assert r.exit_code == 0, r.output
    # the candidates table, with the chosen row marked
    assert re.search(r"^>\s*4\b", r.stdout, flags=re.M), r.stdout
    page = (rep / "index.html").read_text()
    srcs = re.findall(r'<img[^>]+src="([^"]+)"', page)
    assert srcs and all(s.startswith("data:image/") for s in srcs)  # one self-contained page


def test_apply_report(art, tmp_path):
    pj = tmp_path / "p.json"
    assert run("fit", art, "-o", pj, "-k", "4").exit_code == 0
    rep = tmp_path / "rep"
    r = run("apply", pj, art, "-o", tmp_path / "out", "--report", rep)
    assert r.exit_code == 0, r.output
    assert (rep / "index.html").exists()


def test_reduce_with_dither_filtered_report_and_error_map(tmp_path):
    from PIL import Image as PILImage

    # a smooth ramp: the case dithering exists for
    ramp = np.tile(np.linspace(0, 255, 256).astype(np.uint8)[None, :, None], (64, 1, 3))
    src = tmp_path / "ramp.png"
    PILImage.fromarray(ramp).save(src)
    out, emap = tmp_path / "r.png", tmp_path / "err.png"
    r = run("reduce", src, "-o", out, "-k", "4", "--dither", "floyd-steinberg", "--view-dpi", "150",
            "--view-distance", "400", "--error-map", emap, "--json")
    assert r.exit_code == 0, r.output
    s = json.loads(r.stdout)
    assert s["dither"]["method"] == "floyd-steinberg"
    assert set(s["delta_e_filtered"]) >= {"mean", "p95"} and s["viewing"]["dpi"] == 150
    assert s["delta_e_filtered"]["mean"] < s["delta_e"]["mean"]
    # both sets in .delta_e, each named for what it is
    assert s["delta_e"]["filtered_mean"] == s["delta_e_filtered"]["mean"]
    assert {"mean", "median", "p95", "max"} <= set(s["delta_e"])
    assert emap.exists() and str(emap) in s["outputs"]
    r = run("reduce", src, "-o", tmp_path / "h.png", "-k", "4", "--dither", "bayer4")
    assert r.exit_code == 0 and "dither: bayer4" in r.stdout


def test_apply_with_dither(art, tmp_path):
    pj = tmp_path / "p.json"
    assert run("fit", art, "-o", pj, "-k", "4").exit_code == 0
    r = run("apply", pj, art, "-o", tmp_path / "out", "--dither", "blue-noise", "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["images"][0]["dither"]["method"] == "blue-noise"


@pytest.mark.parametrize("args, words", [
    (["--dither", "sparkle"], "floyd-steinberg"),
    (["--dither-strength", "1.5"], "1.5"),
    (["--view-dpi", "-3", "--view-distance", "300"], "-3"),
    (["--view-dpi", "300"], "--view-distance"),
])
def test_bad_dither_options(art, tmp_path, args, words):
    r = CliRunner().invoke(main, ["reduce", str(art), "-o", str(tmp_path / "o.png"), *args])
    assert r.exit_code == 2, r.output
    assert words in r.output and "Traceback" not in r.output
    assert not (tmp_path / "o.png").exists()


def test_target_stat_p95_and_pixel_limit(art, tmp_path):
    r = run("reduce", art, "-o", tmp_path / "p.png", "--target", "6", "--target-stat", "p95", "--json")
    assert r.exit_code == 0, r.output
    s = json.loads(r.stdout)
    assert s["rule"] == "target" and s["delta_e"]["p95"] <= 6
    # the decompression-bomb guard: the 320 x 320 artwork is over a 1000-pixel limit
    r = CliRunner().invoke(main, ["reduce", str(art), "-o", str(tmp_path / "b.png"), "--max-pixels", "1000"])
    assert r.exit_code == 1 and "art.png" in r.output and "Traceback" not in r.output
    assert not (tmp_path / "b.png").exists()


@pytest.mark.parametrize("args, settings, code", [
    (["--restarts", "0"], dict(restarts=0), 2),
    (["--seed", "-1"], dict(seed=-1), 2),
    (["--lock", "purplish"], dict(locked=["purplish"]), 1),
    (["--lock", "#000000", "--lock", "000000"], dict(locked=["#000000", "000000"]), 1),
])
@pytest.mark.parametrize("command", ["reduce", "fit", "sweep"])
def test_fit_settings_errors_carry_the_library_message(art, tmp_path, args, settings, code, command):
    # The commands validate through FitSettings, so each error reads as the library's, on one line.
    from quantize import FitSettings

    with pytest.raises(ValueError) as exc:
        FitSettings(**settings)
    out = ["-o", str(tmp_path / "o.png")] if command == "reduce" else (
        ["-o", str(tmp_path / "p.json")] if command == "fit" else [])
    r = CliRunner().invoke(main, [command, str(art), *out, "-k", "3", *args])
    assert r.exit_code == code, r.output
    lines = [line for line in r.output.splitlines() if str(exc.value) in line]
    assert len(lines) == 1 and "Traceback" not in r.output
    assert not list(tmp_path.glob("o.png")) and not list(tmp_path.glob("p.json"))


def test_every_command_defaults_to_the_library_size_range(art, tmp_path):
    from quantize.fit.settings import DEFAULT_K

    for command, extra in (("reduce", ["-o", tmp_path / "o.png"]), ("fit", ["-o", tmp_path / "p.json"]),
                           ("sweep", [])):
        r = run(command, art, *extra, "--json")
        assert r.exit_code == 0, r.output
        s = json.loads(r.stdout)
        if command == "sweep":
            assert s["k_range"] == list(DEFAULT_K)
        else:
            assert s["k"] <= DEFAULT_K[1]
    assert Palette.load(tmp_path / "p.json").fit.k_requested == DEFAULT_K


def test_the_command_line_lists_the_names_the_library_knows():
    # The CLI keeps its own copy of the names so that --help needs no numpy: it must not drift.
    from quantize.cli._common import SEEDINGS, SPACE_NAMES
    from quantize.colour.spaces import SPACES
    from quantize.fit.clustering import INITS

    assert set(SPACE_NAMES) == set(SPACES)
    assert set(SEEDINGS) == set(INITS)


# -- one option set -------------------------------------------------------------------------------

def _params(command) -> dict:
    return {p.name: p for p in main.commands[command].params}


def _same(a, b) -> bool:
    return (a.opts, a.secondary_opts, a.default, getattr(a.type, "choices", None), a.multiple, a.help) == \
        (b.opts, b.secondary_opts, b.default, getattr(b.type, "choices", None), b.multiple, b.help)


def test_reduces_options_work_in_every_command_where_they_make_sense():
    from quantize.cli._common import _fit_option_list

    fitting = set(_fit_option_list())
    mapping = {"nearest", "dither", "dither_strength", "serpentine"}
    reduce = _params("reduce")
    wanted = {"fit": fitting, "batch": fitting | mapping, "sweep": fitting - {"colours"},
              "apply": mapping | {"max_pixels", "view_dpi", "view_distance", "error_map", "error_map_kind"}}
    for command, names in wanted.items():
        got = _params(command)
        missing = names - set(got)
        assert not missing, f"{command} lacks {sorted(missing)}"
        for n in names:  # one definition: the same flags, choices, default and help as reduce's
            assert _same(got[n], reduce[n]), f"{command} --{n} differs from reduce's"


def test_sweep_takes_seeding_nearest_and_css_locks(art, tmp_path):
    table = tmp_path / "t.json"
    r = run("sweep", art, "-k", "3-4", "--restarts", "1", "--seeding", "farthest", "--nearest", "space",
            "--lock", "#fff", "--table-json", table)
    assert r.exit_code == 0, r.output
    s = json.loads(table.read_text())["settings"]
    assert (s["seeding"], s["nearest"], s["locked"]) == ("farthest", "space", ["#ffffff"])


def test_locked_is_the_option_name_and_lock_still_works(art, tmp_path):
    """--locked is named as FitSettings.locked and the palette file's key; the older --lock is the same option."""
    docs = []
    for flag in ("--locked", "--lock"):
        out = tmp_path / f"{flag[2:]}.png"
        r = run("reduce", art, "-o", out, "-k", "3", "--restarts", "1", flag, "#fff", flag, "teal", "--keep-palette")
        assert r.exit_code == 0, r.output
        docs.append(json.loads(out.with_name(out.stem + ".palette.json").read_text()))
    assert docs[0]["colours"] == docs[1]["colours"]
    assert docs[0]["fit"]["locked"] == ["#ffffff", "#008080"]  # teal: CSS Color 4's #008080
    assert [c["locked"] for c in docs[0]["colours"]] == [True, True, False]


def test_batch_defaults_to_the_library_size_range(art, tmp_path):
    from quantize.fit.settings import DEFAULT_K

    out = tmp_path / "out"
    r = run("batch", art.parent, "-o", out, "--exclude", "out", "--workers", "0", "--restarts", "1")
    assert r.exit_code == 0, r.output
    assert Palette.load(out / "art.palette.json").fit.k_requested == DEFAULT_K


@pytest.mark.parametrize("method, says, never", [
    ("bayer4", "Bayer matrix", ("serpentine", "raster", "error in")),
    ("floyd-steinberg", "serpentine scan (error in linear light)", ("matrix",)),
])
def test_the_dither_line_describes_the_method_it_ran(art, tmp_path, method, says, never):
    # Ordered dithers have no scan order and diffuse no error: their summary line once said both.
    r = run("reduce", art, "-o", tmp_path / "o.png", "-k", "4", "--restarts", "1", "--dither", method)
    assert r.exit_code == 0, r.output
    line = next(x for x in r.stdout.splitlines() if x.startswith("dither:"))
    assert says in line and not any(w in line for w in never)


@pytest.mark.parametrize("method, scan", [("bayer4", None), ("none", None), ("floyd-steinberg", True)])
def test_the_json_and_the_manifest_record_a_scan_only_for_error_diffusion(art, tmp_path, method, scan):
    # An ordered dither scans nothing: its records once said "serpentine": true, the option's default.
    r = run("reduce", art, "-o", tmp_path / "o.png", "-k", "4", "--restarts", "1", "--dither", method, "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["dither"]["serpentine"] is scan
    out = tmp_path / "batch"
    r = run("batch", art.parent, "-o", out, "--exclude", "o.png", "--exclude", "batch", "--workers", "0",
            "-k", "4", "--restarts", "1", "--dither", method)
    assert r.exit_code == 0, r.output
    assert json.loads((out / "manifest.json").read_text())["settings"]["serpentine"] is scan


@pytest.mark.skipif(sys.platform == "win32", reason="a pseudo-terminal needs POSIX")
@pytest.mark.parametrize("env, flag, coloured", [({}, [], True), ({"NO_COLOR": "1"}, [], False),
                                                 ({"NO_COLOR": "1"}, ["--color", "always"], True),
                                                 ({}, ["--color", "never"], False)])
def test_colour_follows_no_color_and_the_color_option_on_a_terminal(tmp_path, env, flag, coloured):
    # no-color.org: a non-empty NO_COLOR turns colour off; an explicit --color wins.
    import os
    import pty
    import subprocess

    src = tmp_path / "a.png"
    img = np.full((20, 30, 3), 240, np.uint8)
    img[5:15, 5:25] = (200, 30, 40)
    Image.fromarray(img).save(src)
    leader, follower = pty.openpty()
    run_env = {k: v for k, v in os.environ.items() if k != "NO_COLOR"} | env
    proc = subprocess.run([sys.executable, "-m", "quantize", *flag, "reduce", str(src), "-o", str(tmp_path / "o.png"),
                           "-k", "2"], stdout=follower, stderr=subprocess.PIPE, env=run_env, timeout=300)
    os.close(follower)
    out = b""
    while True:
        try:
            chunk = os.read(leader, 65536)
        except OSError:
            break
        if not chunk:
            break
        out += chunk
    os.close(leader)
    assert proc.returncode == 0, proc.stderr
    assert b"#c81e28" in out
    assert (b"\x1b[" in out) == coloured


def test_every_json_summary_names_its_schema_and_version(tmp_path):
    # Like the palette and manifest files: a reader can tell which layout it has.
    src = tmp_path / "a.png"
    img = np.full((20, 30, 3), 240, np.uint8)
    img[5:15, 5:25] = (200, 30, 40)
    Image.fromarray(img).save(src)
    runs = {"reduce": ["reduce", str(src), "-o", str(tmp_path / "r.png"), "-k", "2", "--keep-palette"],
            "fit": ["fit", str(src), "-o", str(tmp_path / "f.json"), "-k", "2"],
            "sweep": ["sweep", str(src), "-k", "2-3"]}
    for name, args in runs.items():
        res = CliRunner().invoke(main, [*args, "--json"])
        assert res.exit_code == 0, res.output
        doc = json.loads(res.stdout)
        assert doc["format"] == f"quantize.{name}.summary" and doc["version"] == 1
    res = CliRunner().invoke(main, ["apply", str(tmp_path / "r.palette.json"), str(src), "-o", str(tmp_path / "ap"),
                                    "--json"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["format"] == "quantize.apply.summary"
    (tmp_path / "in").mkdir()
    Image.fromarray(img).save(tmp_path / "in" / "a.png")
    res = CliRunner().invoke(main, ["batch", str(tmp_path / "in"), "-o", str(tmp_path / "bo"), "-k", "2", "--workers", "0",
                                    "--json"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["format"] == "quantize.batch.summary"


def test_quiet_prints_no_summary_and_verbose_logs_to_stderr(tmp_path):
    import logging

    src = tmp_path / "a.png"
    img = np.full((20, 30, 3), 240, np.uint8)
    img[5:15, 5:25] = (200, 30, 40)
    Image.fromarray(img).save(src)
    quiet = CliRunner().invoke(main, ["-q", "reduce", str(src), "-o", str(tmp_path / "q.png"), "-k", "2"])
    assert quiet.exit_code == 0 and quiet.stdout == "" and (tmp_path / "q.png").exists()
    loud = CliRunner().invoke(main, ["-v", "reduce", str(src), "-o", str(tmp_path / "v.png"), "-k", "2"])
    assert loud.exit_code == 0
    assert f"read {src}" in loud.stderr and f"wrote {tmp_path / 'v.png'}" in loud.stderr
    assert "#c81e28" in loud.stdout  # the summary still prints
    # The command leaves the logging set-up as it found it.
    assert not logging.getLogger("quantize").handlers
    plain = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / "p.png"), "-k", "2"])
    assert "wrote" not in plain.stderr
