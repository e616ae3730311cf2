"""Batch runs over real folders: discovery, manifest, resuming, one palette for a set, Dask."""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path, PurePosixPath

import numpy as np
import pytest
from artwork import flat_artwork
from click.testing import CliRunner
from PIL import Image

from quantize.batch.files import discover_images
from quantize.batch.manifest import MANIFEST_CSV, MANIFEST_JSON
from quantize.batch.run import SHARED_PALETTE, _Pool, run_batch
from quantize.batch.settings import BatchSettings
from quantize.cli.batch import batch
from quantize.errors import PaletteFileError, QuantizeError

FAST = dict(k=3, restarts=1)  # small, fixed palettes keep each run to a fraction of a second


def _write(path: Path, rgb) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.fromarray(np.asarray(rgb, np.uint8)).save(path)
    return path


@pytest.fixture
def tree(tmp_path):
    """in/ with nested folders, a TIFF, a corrupt PNG, a non-image and a hidden file."""
    root = tmp_path / "in"
    _write(root / "a.png", flat_artwork(3, 1, size=48)[0])
    _write(root / "sub" / "b.png", flat_artwork(4, 2, size=40)[0])
    _write(root / "sub" / "deep" / "c.tif", flat_artwork(3, 3, size=32)[0])
    (root / "sub" / "corrupt.png").write_bytes(b"\x89PNG\r\n\x1a\n this is not really a PNG")
    (root / "notes.txt").write_text("not an image")
    _write(root / ".hidden.png", np.zeros((4, 4, 3)))
    return root


def _snapshot(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _outputs(out: Path) -> dict:
    return {k: v for k, v in _snapshot(out).items() if not k.startswith("manifest.")}


def _manifest(out: Path) -> dict:
    return json.loads((out / MANIFEST_JSON).read_text())


def _rows(out: Path) -> dict:
    return {r["input"]: r for r in _manifest(out)["images"]}


def _comparable(rows):
    # Time and memory differ from run to run; everything else must not.
    return [{k: v for k, v in r.items() if k not in ("seconds", "peak_rss_mb")} for r in rows]


# --------------------------------------------------------------------------- discovery

def test_discovery_recursive_sorted_and_hidden_skipped(tree):
    found = discover_images(tree)
    assert found == [PurePosixPath(p) for p in ("a.png", "sub/b.png", "sub/corrupt.png", "sub/deep/c.tif")]


def test_include_and_exclude_patterns(tree):
    assert discover_images(tree, include=["*.TIF"]) == [PurePosixPath("sub/deep/c.tif")]  # case ignored
    assert discover_images(tree, include=["sub/*"]) == [PurePosixPath(p) for p in
                                                        ("sub/b.png", "sub/corrupt.png", "sub/deep/c.tif")]
    assert discover_images(tree, exclude=["deep"]) == [PurePosixPath(p) for p in
                                                       ("a.png", "sub/b.png", "sub/corrupt.png")]
    assert discover_images(tree, exclude=["sub/deep", "corrupt*"]) == [PurePosixPath(p) for p in
                                                                        ("a.png", "sub/b.png")]
    with pytest.raises(ValueError, match="empty"):
        discover_images(tree, exclude=[""])


# --------------------------------------------------------------------------- a per-image run

def test_per_image_run_manifest_outputs_and_bad_file(tree, tmp_path):
    from skimage.color import deltaE_ciede2000, rgb2lab

    out = tmp_path / "out"
    before_in = _snapshot(tree)
    before_tmp = {p for p in tmp_path.rglob("*")}
    seen = []
    res = run_batch(tree, out, workers=0, progress=lambda d, t, x: seen.append((d, t, x)), **FAST)
    assert _snapshot(tree) == before_in  # inputs are never modified
    new = {p for p in tmp_path.rglob("*")} - before_tmp
    assert all(p == out or out in p.parents for p in new)  # nothing written outside OUTPUT_DIR
    assert res.summary == {"total": 4, "ok": 3, "skipped": 0, "failed": 1, "not_run": 0}
    assert [d for d, _, _ in seen] == [1, 2, 3, 4] and {t for _, t, _ in seen} == {4}

    rows = _rows(out)
    bad = rows["sub/corrupt.png"]
    assert bad["status"] == "failed" and "corrupt.png" in bad["error"] and bad["outputs"] == []
    # The output tree mirrors the input tree.
    assert rows["sub/deep/c.tif"]["outputs"] == ["sub/deep/c.png", "sub/deep/c.palette.json"]
    for rel in ("a.png", "sub/b.png", "sub/deep/c.tif"):
        r = rows[rel]
        assert r["status"] == "ok" and r["k"] == 3 and r["seconds"] >= 0
        src = np.asarray(Image.open(tree / rel).convert("RGB"))
        got = np.asarray(Image.open(out / r["outputs"][0]).convert("RGB"))
        pal = json.loads((out / r["outputs"][1]).read_text())
        hexes = {"#%02x%02x%02x" % tuple(c) for c in got.reshape(-1, 3)}
        assert hexes <= {c["hex"] for c in pal["colours"]}
        assert sorted(hexes) == sorted(pal["colours"][i]["hex"] for i in r["entries_used"])
        # Mean ΔE00 recorded in the manifest equals a per-pixel CIEDE2000 (Sharma et al. 2005, as
        # implemented by scikit-image) between input and written output.
        de = deltaE_ciede2000(rgb2lab(src / 255.0), rgb2lab(got / 255.0))
        assert r["delta_e"]["mean"] == pytest.approx(de.mean(), abs=0.02)
        assert r["delta_e"]["max"] == pytest.approx(de.max(), abs=0.05)

    # The CSV says the same as the JSON.
    with open(out / MANIFEST_CSV, newline="") as fh:
        table = list(csv.DictReader(fh))
    assert [t["input"] for t in table] == list(rows)
    assert [t["status"] for t in table] == [r["status"] for r in rows.values()]
    assert float(table[0]["de_mean"]) == pytest.approx(rows["a.png"]["delta_e"]["mean"], abs=1e-4)
    assert table[2]["error"] == bad["error"]
    assert table[1]["outputs"] == "sub/b.png;sub/b.palette.json"


def test_unreadable_files_fail_and_the_run_goes_on(tmp_path):
    root = tmp_path / "in"
    _write(root / "good.png", flat_artwork(3, 4, size=32)[0])
    (root / "empty.png").write_bytes(b"")
    os.symlink(root / "missing.png", root / "dangling.png")
    res = run_batch(root, tmp_path / "out", workers=0, **FAST)
    rows = {r["input"]: r for r in res.rows}
    assert rows["good.png"]["status"] == "ok"
    assert rows["empty.png"]["status"] == rows["dangling.png"]["status"] == "failed"
    assert "empty.png" in rows["empty.png"]["error"] and "dangling.png" in rows["dangling.png"]["error"]


def test_nothing_is_written_through_a_link_out_of_the_output_folder(tree, tmp_path):
    out, elsewhere = tmp_path / "out", tmp_path / "elsewhere"
    out.mkdir()
    elsewhere.mkdir()
    os.symlink(elsewhere, out / "sub")
    res = run_batch(tree, out, workers=0, **FAST)
    rows = {r["input"]: r for r in res.rows}
    assert rows["a.png"]["status"] == "ok"
    assert rows["sub/b.png"]["status"] == "failed" and "outside the output folder" in rows["sub/b.png"]["error"]
    assert rows["sub/deep/c.tif"]["status"] == "failed"
    assert list(elsewhere.iterdir()) == []  # not even a folder


def test_colliding_output_names_fail_both(tmp_path):
    root = tmp_path / "in"
    _write(root / "x.png", flat_artwork(3, 5, size=32)[0])
    Image.fromarray(flat_artwork(3, 6, size=32)[0]).save(root / "x.jpg")
    _write(root / "y.png", flat_artwork(3, 7, size=32)[0])
    res = run_batch(root, tmp_path / "out", workers=0, **FAST)
    rows = {r["input"]: r for r in res.rows}
    assert rows["y.png"]["status"] == "ok"
    for rel in ("x.png", "x.jpg"):
        assert rows[rel]["status"] == "failed" and "x.png" in rows[rel]["error"] and "x.jpg" in rows[rel]["error"]


def test_a_foreign_file_in_the_way_is_not_replaced_without_force(tree, tmp_path):
    out = tmp_path / "out"
    (out).mkdir()
    (out / "a.png").write_bytes(b"someone else's file")
    res = run_batch(tree, out, workers=0, **FAST)
    row = next(r for r in res.rows if r["input"] == "a.png")
    assert row["status"] == "failed" and "already exists" in row["error"]
    assert (out / "a.png").read_bytes() == b"someone else's file"
    run_batch(tree, out, workers=0, force=True, **FAST)
    assert (out / "a.png").read_bytes()[:4] == b"\x89PNG"


# --------------------------------------------------------------------------- resuming

def test_rerun_skips_up_to_date_and_redoes_the_rest(tree, tmp_path):
    out = tmp_path / "out"
    run_batch(tree, out, workers=0, **FAST)
    first = _rows(out)
    stamp = {rel: (out / r["outputs"][0]).stat().st_mtime_ns for rel, r in first.items() if r["outputs"]}

    res = run_batch(tree, out, workers=0, **FAST)
    assert res.summary["skipped"] == 3 and res.summary["failed"] == 1  # a failed image is tried again
    again = _rows(out)
    assert all((out / r["outputs"][0]).stat().st_mtime_ns == stamp[rel] for rel, r in again.items() if r["outputs"])
    assert again["a.png"]["delta_e"] == first["a.png"]["delta_e"]  # a skipped row keeps its results

    # An input newer than its output is redone; so is one whose output was deleted.
    t = (tree / "a.png").stat().st_mtime - 100
    os.utime(out / "a.png", (t, t))
    (out / "sub" / "b.palette.json").unlink()
    res = run_batch(tree, out, workers=0, **FAST)
    status = {r["input"]: r["status"] for r in res.rows}
    assert status == {"a.png": "ok", "sub/b.png": "ok", "sub/corrupt.png": "failed", "sub/deep/c.tif": "skipped"}

    # Changed settings redo everything; so does force.
    res = run_batch(tree, out, workers=0, k=2, restarts=1)
    assert res.summary["ok"] == 3 and all(r["k"] == 2 for r in res.rows if r["status"] == "ok")
    assert run_batch(tree, out, workers=0, k=2, restarts=1).summary["skipped"] == 3
    assert run_batch(tree, out, workers=0, k=2, restarts=1, force=True).summary["ok"] == 3


# --------------------------------------------------------------------------- settings and jobs

@pytest.mark.parametrize("bad, message", [
    (dict(shared=True, palette="p.palette.json"), "not both"),
    (dict(shared_weighting="area"), "'area'"),
    (dict(space="xyz"), "'xyz'"),
    (dict(restarts=0), "at least 1, got 0"),
    (dict(fmt="bmp"), "'bmp'"),
    (dict(workers=-1), "got -1"),
    (dict(worst=-2), "got -2"),
    (dict(k="12-2"), "12-2"),
    (dict(include=["*.png", ""]), "include pattern '' is empty"),
    (dict(exclude=["/"]), "exclude pattern '/' is empty"),
])
def test_bad_settings_are_refused_before_anything_is_written(tree, tmp_path, bad, message):
    with pytest.raises(ValueError, match=message):
        BatchSettings(**bad)
    out = tmp_path / "out"
    with pytest.raises(ValueError, match=message):
        run_batch(tree, out, **bad)
    with pytest.raises(ValueError, match=message):  # replacing a field checks it again
        dataclasses.replace(BatchSettings(), **bad)
    assert not out.exists()


def test_a_settings_object_and_keyword_options_make_the_same_run(tree, tmp_path):
    by_keywords = run_batch(tree, tmp_path / "a", workers=0, **FAST)
    # A keyword given beside the settings object replaces its value.
    by_object = run_batch(tree, tmp_path / "b", BatchSettings(workers=0, k=7, restarts=1), k=3)
    assert by_object.manifest["settings"] == by_keywords.manifest["settings"]
    assert _comparable(by_object.rows) == _comparable(by_keywords.rows)
    assert _outputs(tmp_path / "a") == _outputs(tmp_path / "b")
    with pytest.raises(TypeError, match="colours"):
        run_batch(tree, tmp_path / "c", colours=3)


def test_a_job_pickles_whole_for_worker_processes_and_dask(tmp_path):
    import pickle

    from quantize.batch.jobs import BatchJob

    from quantize.fit.settings import FitSettings

    fit = FitSettings(space="oklab", seed=5, restarts=2, locked=["navy"], rule="target", target=2.0)
    job = BatchJob(path=str(tmp_path / "in" / "a.png"), rel="sub/a.png", output_dir=str(tmp_path / "out"),
                   outputs_rel=("sub/a.png", "sub/a.palette.json"), replace=False, k="2-12", max_pixels=1000,
                   fit=BatchJob.fit_fields(fit), threads=False, dither="stucki", dither_strength=0.5)
    back = pickle.loads(pickle.dumps(job))
    assert back == job
    assert back.fit_settings() == dataclasses.replace(fit, threads=False)
    assert back.outputs == (str(tmp_path / "out" / "sub" / "a.png"), str(tmp_path / "out" / "sub" / "a.palette.json"))


# --------------------------------------------------------------------------- one palette for a set

@pytest.mark.parametrize("merge_rows", [4_000_000, 1])
def test_pool_matches_the_engine_pooling(tmp_path, monkeypatch, merge_rows):
    # The batch pool merges images as they arrive, from what the workers send back; it must equal
    # quantize.core.sampling.pool_samples over the images' own samples.
    from quantize.batch.jobs import BatchJob, sample_image
    from quantize.core.sampling import pool_samples, sample_picture
    from quantize.io.read import load_image

    monkeypatch.setattr(_Pool, "MERGE_ROWS", merge_rows)  # 1: merged after every image, as a huge set is
    rng = np.random.default_rng(0)
    paths = []
    for i, h in enumerate((3, 11, 20)):
        paths.append(tmp_path / f"im{i}.png")
        Image.fromarray(rng.integers(0, 6, (h, 9, 3)).astype(np.uint8) * 40).save(paths[-1])
    jobs = [BatchJob(path=str(p), rel=p.name, output_dir=str(tmp_path), outputs_rel=(), replace=False, k=2,
                     max_pixels=10_000) for p in paths]
    for weighting in ("equal", "pixels"):
        ref = pool_samples([sample_picture(load_image(p)) for p in paths], weighting=weighting)
        pool = _Pool(weighting)
        for job in jobs:
            got = sample_image(job)
            assert got.error is None and got.sample.inverse is None  # no per-pixel data crosses back
            pool.add(got.sample)
        got = pool.sample()
        np.testing.assert_array_equal(got.codes, ref.codes)
        np.testing.assert_allclose(got.weights, ref.weights, rtol=1e-12)
        assert got.n_pixels == ref.n_pixels == sum(9 * h for h in (3, 11, 20))


def test_shared_weighting_equal_versus_pixels(tmp_path):
    # One large red image and two small blue ones, k=1.  Counted equally, blue holds 2/3 of the
    # pooled weight; counted by pixels, red holds 3600/4400.  The one colour must follow the weight.
    from quantize.colour.spaces import delta_e_ciede2000, srgb_to_lab

    root = tmp_path / "in"
    red, blue = np.array([200, 30, 40], np.uint8), np.array([30, 40, 200], np.uint8)
    _write(root / "big.png", np.tile(red, (60, 60, 1)))
    _write(root / "small1.png", np.tile(blue, (20, 20, 1)))
    _write(root / "small2.png", np.tile(blue, (20, 20, 1)))
    for weighting, nearer in (("equal", blue), ("pixels", red)):
        res = run_batch(root, tmp_path / weighting, workers=0, shared=True, shared_weighting=weighting,
                        k=1, restarts=1)
        pal = json.loads((tmp_path / weighting / SHARED_PALETTE).read_text())
        lab = np.array(pal["colours"][0]["lab"])
        other = blue if nearer is red else red
        assert (delta_e_ciede2000(lab, srgb_to_lab(nearer / 255.0))
                < delta_e_ciede2000(lab, srgb_to_lab(other / 255.0)))
        assert res.manifest["settings"]["weighting"] == weighting == pal["fit"]["weighting"]


def test_shared_palette_report_and_resume(tree, tmp_path):
    out = tmp_path / "out"
    seen = []
    res = run_batch(tree, out, workers=0, shared=True, worst=2, progress=lambda d, t, x: seen.append((d, t)), **FAST)
    assert seen[0] == (1, 8) and seen[-1][0] == seen[-1][1] == 7  # sampling 4, then mapping the 3 readable
    pal = json.loads((out / SHARED_PALETTE).read_text())
    hexes = [c["hex"] for c in pal["colours"]]
    rows = _rows(out)
    assert rows["sub/corrupt.png"]["status"] == "failed"
    ok = [r for r in rows.values() if r["status"] == "ok"]
    assert len(ok) == 3
    for r in ok:
        assert r["k"] == len(hexes) and r["outputs"] == [str(PurePosixPath(r["input"]).with_suffix(".png"))]
        got = np.asarray(Image.open(out / r["outputs"][0]).convert("RGB")).reshape(-1, 3)
        used = sorted({"#%02x%02x%02x" % tuple(c) for c in got})
        assert used == sorted(hexes[i] for i in r["entries_used"])  # which shared entries each image uses
        assert sum(r["coverage"]) == pytest.approx(100.0, abs=1e-2)
    rep = res.manifest["palette_report"]
    assert rep["hex"] == hexes and len(rep["worst"]) == 2
    means = sorted((r["delta_e"]["mean"] for r in ok), reverse=True)
    assert [w["delta_e"]["mean"] for w in rep["worst"]] == means[:2]
    assert rep["images_using_entry"] == [sum(i in r["entries_used"] for r in ok) for i in range(len(hexes))]
    assert res.manifest["shared"]["reused"] is False

    # Rerun: the saved shared palette is reused (no refit) and every image is up to date.
    res = run_batch(tree, out, workers=0, shared=True, worst=2, **FAST)
    assert res.manifest["shared"]["reused"] is True and res.summary["skipped"] == 3
    # A touched input changes the set, so the palette is refitted; the same palette comes back, so
    # images with newer outputs stay up to date and the one with an older output is redone.
    t = (tree / "a.png").stat().st_mtime - 100
    os.utime(tree / "a.png", (t - 50, t - 50))
    os.utime(out / "sub" / "b.png", (t - 100, t - 100))
    res = run_batch(tree, out, workers=0, shared=True, worst=2, **FAST)
    assert res.manifest["shared"]["reused"] is False
    assert {r["input"]: r["status"] for r in res.rows}["sub/b.png"] == "ok" and res.summary["skipped"] == 2
    # A different palette size is a different palette: every image is redone.
    res = run_batch(tree, out, workers=0, shared=True, k=2, restarts=1)
    assert res.summary["ok"] == 3 and all(r["k"] == 2 for r in res.rows if r["status"] == "ok")


def test_saved_palette_for_all_and_bad_palette_file(tree, tmp_path):
    from quantize import fit_palette

    pal = fit_palette(tree / "a.png", 3, restarts=1)
    pfile = pal.save(tmp_path / "house.palette.json")
    res = run_batch(tree, tmp_path / "out", workers=0, palette=pfile)
    ok = [r for r in res.rows if r["status"] == "ok"]
    assert len(ok) == 3 and all(r["k"] == 3 and len(r["outputs"]) == 1 for r in ok)
    for r in ok:
        got = np.asarray(Image.open(tmp_path / "out" / r["outputs"][0]).convert("RGB")).reshape(-1, 3)
        assert {"#%02x%02x%02x" % tuple(c) for c in got} <= set(pal.hex)
    assert res.manifest["palette_report"]["hex"] == pal.hex

    bad = tmp_path / "broken.palette.json"
    bad.write_text("{ not json")
    with pytest.raises(PaletteFileError, match="broken.palette.json"):
        run_batch(tree, tmp_path / "out2", workers=0, palette=bad)
    doc = _manifest(tmp_path / "out2")  # the manifest is still written, for nothing done
    assert "broken.palette.json" in doc["error"] and {r["status"] for r in doc["images"]} == {"not run"}


def test_an_interrupted_run_still_writes_its_manifest(tree, tmp_path):
    def stop_after_two(done, total, item):
        if done == 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_batch(tree, tmp_path / "out", workers=0, progress=stop_after_two, **FAST)
    doc = _manifest(tmp_path / "out")
    assert doc["error"] == "interrupted"
    assert [r["status"] for r in doc["images"]] == ["ok", "ok", "not run", "not run"]
    # The rerun picks up where it stopped.
    res = run_batch(tree, tmp_path / "out", workers=0, **FAST)
    assert [r["status"] for r in res.rows] == ["skipped", "skipped", "failed", "ok"]


def test_images_still_in_the_workers_when_a_run_stops_are_listed_and_redone(tmp_path):
    # Two worker processes: when the run stops after the first result, the
    # other worker is still busy with an image and finishes it.  The manifest
    # must list that image's files, so that the rerun may replace them rather
    # than fail on them as someone else's.
    _stop_at_first_result_then_rerun(tmp_path, seed=10, workers=2)


def _stop_at_first_result_then_rerun(tmp_path, *, seed, **where):
    """Stop a run at its first result; every file on disk must be in the manifest, and a rerun complete."""
    root = tmp_path / "in"
    for i in range(6):
        _write(root / f"p{i}.png", flat_artwork(3, seed + i, size=40)[0])

    def stop_at_first(done, total, item):
        raise KeyboardInterrupt

    out = tmp_path / "out"
    with pytest.raises(KeyboardInterrupt):
        run_batch(root, out, progress=stop_at_first, **where, **FAST)
    doc = _manifest(out)
    written = {p.name for p in out.iterdir()} - {MANIFEST_JSON, MANIFEST_CSV}
    assert written and written <= {o for r in doc["images"] for o in r["outputs"]}
    res = run_batch(root, out, **where, **FAST)
    assert res.failed == 0
    assert {r["status"] for r in res.rows} <= {"ok", "skipped"}


# --------------------------------------------------------------------------- bad folders

def test_empty_folder(tmp_path):
    (tmp_path / "in").mkdir()
    (tmp_path / "in" / "readme.txt").write_text("no images here")
    with pytest.raises(QuantizeError, match="no images found"):
        run_batch(tmp_path / "in", tmp_path / "out", workers=0)
    assert "no images found" in _manifest(tmp_path / "out")["error"]


def test_output_inside_input_is_refused_unless_excluded(tree, tmp_path):
    with pytest.raises(QuantizeError, match="inside the input folder.*--exclude 'renders'"):
        run_batch(tree, tree / "renders", workers=0, **FAST)
    assert not (tree / "renders").exists()  # refused before anything is written
    with pytest.raises(QuantizeError, match="is the input folder"):
        run_batch(tree, tree, workers=0, **FAST)
    with pytest.raises(QuantizeError, match="contains the input folder"):
        run_batch(tree, tmp_path, workers=0, **FAST)
    with pytest.raises(QuantizeError, match="no such folder"):
        run_batch(tmp_path / "nope", tmp_path / "out", workers=0)

    run_batch(tree, tree / "renders", exclude=["renders"], workers=0, **FAST)
    res = run_batch(tree, tree / "renders", exclude=["renders"], workers=0, **FAST)
    assert res.summary["total"] == 4 and res.summary["skipped"] == 3  # its own outputs were not read back


# --------------------------------------------------------------------------- command line

def test_cli_summary_and_exit_code(tree, tmp_path):
    runner = CliRunner()
    out = tmp_path / "out"
    r = runner.invoke(batch, [str(tree), "-o", str(out), "-k", "3", "--restarts", "1", "--workers", "0",
                              "--exclude", "corrupt.png"])
    assert r.exit_code == 0, r.output
    assert "3 images: 3 done, 0 up to date, 0 failed" in r.stdout
    r = runner.invoke(batch, [str(tree), "-o", str(out), "-k", "3", "--restarts", "1", "--workers", "0",
                              "--json", "--shared"])
    assert r.exit_code == 1
    doc = json.loads(r.stdout)
    assert doc["summary"]["failed"] == 1 and doc["failed"][0]["input"] == "sub/corrupt.png"
    assert doc["palette_report"]["worst"] and doc["mode"] == "shared"
    assert "1 of 4 images failed" in r.stderr
    r = runner.invoke(batch, [str(tree), "-o", str(tree / "x"), "--workers", "0"])
    assert r.exit_code == 1 and r.stderr.startswith("quantize: error:") and len(r.stderr.splitlines()) == 1
    r = runner.invoke(batch, [str(tree), "-o", str(out), "--shared", "--palette", "p.json"])
    assert r.exit_code == 2


def test_cli_subprocess_one_line_error(tmp_path):
    (tmp_path / "in").mkdir()
    code = "from quantize.cli.batch import batch; batch()"
    p = subprocess.run([sys.executable, "-c", code, str(tmp_path / "in"), "-o", str(tmp_path / "out")],
                       capture_output=True, text=True, cwd=Path(__file__).resolve().parents[1])
    assert p.returncode == 1
    assert p.stderr.strip().splitlines() == [p.stderr.strip()] and "no images found" in p.stderr


# --------------------------------------------------------------------------- processes and Dask

def test_process_pool_matches_in_process_run(tree, tmp_path):
    run_batch(tree, tmp_path / "here", workers=0, **FAST)
    run_batch(tree, tmp_path / "pool", workers=2, **FAST)
    a, b = _manifest(tmp_path / "here"), _manifest(tmp_path / "pool")
    assert _comparable(a["images"]) == _comparable(b["images"])
    assert all(r["peak_rss_mb"] > 0 for r in b["images"])
    assert _outputs(tmp_path / "here") == _outputs(tmp_path / "pool") and len(_outputs(tmp_path / "pool")) == 6


@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("distributed", reason="dask.distributed is not installed (quantize[dask])")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None)
    yield cluster
    cluster.close()


@pytest.mark.parametrize("shared", [False, True])
def test_dask_cluster_gives_the_local_result(tree, tmp_path, dask_cluster, shared):
    local = run_batch(tree, tmp_path / "local", workers=0, shared=shared, **FAST)
    remote = run_batch(tree, tmp_path / "dask", cluster=dask_cluster.scheduler_address, shared=shared, **FAST)
    assert _comparable(local.rows) == _comparable(remote.rows)
    assert local.manifest["palette_report"] == remote.manifest["palette_report"]
    outs_local, outs_dask = _outputs(tmp_path / "local"), _outputs(tmp_path / "dask")
    assert outs_local == outs_dask and len(outs_local) == (5 if shared else 6)  # shared: + palette-report.html


def test_dask_missing_gives_a_clear_message(tree, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import now raises ImportError
    with pytest.raises(QuantizeError, match=r"pip install 'quantize-palette\[dask\]'"):
        run_batch(tree, tmp_path / "out", cluster="tcp://127.0.0.1:1", **FAST)


def test_more_than_256_colours_are_refused_for_png_as_reduce_refuses_them(tree, tmp_path):
    # An indexed PNG holds at most 256 colours (PNG specification, PLTE chunk).
    res = CliRunner().invoke(batch, [str(tree), "-o", str(tmp_path / "out"), "-k", "300"])
    assert res.exit_code == 2
    assert "300 colours do not fit an indexed PNG (at most 256)" in res.output
    assert not (tmp_path / "out").exists()


def test_images_still_on_dask_workers_when_a_run_stops_are_listed_and_redone(tmp_path, dask_cluster):
    # As with local workers: the images already on the cluster finish before the manifest is
    # written, so every file on disk after the stop is in it, and the rerun completes.  Without
    # the wait the race is lost only now and then (about one run in eight here).
    _stop_at_first_result_then_rerun(tmp_path, seed=20, cluster=dask_cluster.scheduler_address)


def test_batch_settings_are_checked_by_the_fit_settings_with_the_same_messages():
    from quantize.batch.settings import BatchSettings
    from quantize.fit.settings import FitSettings

    for bad in ({"restarts": 2.5}, {"restarts": 0}, {"space": "bogus"}):
        with pytest.raises(ValueError) as fit_err:
            FitSettings(**bad)
        with pytest.raises(ValueError) as batch_err:
            BatchSettings(**bad)
        assert str(batch_err.value) == str(fit_err.value)


# --------------------------------------------------------------------------- reduce's options in batch

def _set(tmp_path, n=7) -> Path:
    """n small images: flat artwork and one smooth gradient, for the fitting and dithering options."""
    root = tmp_path / "set"
    for i in range(n - 1):
        _write(root / f"art{i}.png", flat_artwork(3 + i % 3, 10 + i, size=32)[0])
    x = np.linspace(0, 1, 48)
    grad = np.stack([np.broadcast_to(40 + 200 * x, (48, 48)), np.full((48, 48), 90.0), np.full((48, 48), 170.0)],
                    axis=-1)
    _write(root / "gradient.png", np.round(grad))
    return root


def _rgb(path: Path) -> np.ndarray:
    return np.asarray(Image.open(path).convert("RGB"))


def _mean_de00(a, b) -> float:
    # The error measured from the files: sRGB -> CIELAB by scikit-image (IEC 61966-2-1, D65), CIEDE2000
    # by colour-science (Sharma, Wu & Dalal 2005), both outside the project.
    from colour import delta_E
    from skimage.color import rgb2lab

    return float(np.mean(delta_E(rgb2lab(a / 255.0), rgb2lab(b / 255.0), method="CIE 2000")))


def test_worst_lists_as_many_images_as_asked(tmp_path):
    src = _set(tmp_path)
    for worst, listed in ((6, 6), (9, 7)):  # 7 images: 9 asked lists all of them
        out = tmp_path / f"out{worst}"
        r = CliRunner().invoke(batch, [str(src), "-o", str(out), "--shared", "-k", "3", "--restarts", "1",
                                       "--workers", "0", "--worst", str(worst)])
        assert r.exit_code == 0, r.output
        assert r.stdout.count("fits worst:") == listed
        assert len(_manifest(out)["palette_report"]["worst"]) == listed


def test_a_shared_batch_without_k_uses_the_default_range(tmp_path):
    # "-k" left out once failed: the manifest's "auto" was handed to the fit as a size.
    src = _set(tmp_path, n=3)
    res = run_batch(src, tmp_path / "out", workers=0, shared=True, restarts=1)
    assert res.summary["ok"] == 3
    assert 2 <= res.manifest["palette_report"]["k"] <= 12


def test_target_lock_rule_and_dither_reach_every_image_as_reduce_does(tmp_path):
    """batch with reduce's fitting and dithering options writes, image by image, what reduce writes."""
    import quantize
    from quantize.cli.main import main

    src = _set(tmp_path, n=4)
    opts = ["--restarts", "2", "--lock", "white", "--lock", "#c8102e", "--dither", "floyd-steinberg",
            "--dither-strength", "0.8"]
    target = ["-k", "3-12", "--target", "3"]
    out = tmp_path / "out"
    r = CliRunner().invoke(batch, [str(src), "-o", str(out), "--workers", "0", *opts, *target])
    assert r.exit_code == 0, r.output
    m = _manifest(out)["settings"]
    assert (m["rule"], m["target"], m["locked"], m["dither"]) == ("target", 3.0, ["#ffffff", "#c8102e"],
                                                                  "floyd-steinberg")
    for rel in sorted(p.name for p in src.iterdir()):
        pal = json.loads((out / rel).with_suffix(".palette.json").read_text())
        assert [c["hex"] for c in pal["colours"][:2]] == ["#ffffff", "#c8102e"]
        assert pal["colours"][0]["locked"] and pal["colours"][1]["locked"]
        assert pal["fit"]["rule"] == "target"
        one = tmp_path / f"reduce-{rel}"
        r = CliRunner().invoke(main, ["reduce", str(src / rel), "-o", str(one), *opts, *target])
        assert r.exit_code == 0, r.output
        np.testing.assert_array_equal(_rgb(out / rel), _rgb(one))
    # The locked colours are written exactly: the gradient's output holds no colour outside the palette.
    used = {tuple(c) for c in _rgb(out / "gradient.png").reshape(-1, 3)}
    pal = json.loads((out / "gradient.palette.json").read_text())
    assert used <= {tuple(int(c["hex"][i:i + 2], 16) for i in (1, 3, 5)) for c in pal["colours"]}
    # Without a dither the target is met as measured from the files (not from the tool's own report).
    plain = tmp_path / "plain"
    r = CliRunner().invoke(batch, [str(src), "-o", str(plain), "--workers", "0", "--restarts", "2", *target])
    assert r.exit_code == 0, r.output
    for rel in sorted(p.name for p in src.iterdir()):
        assert _mean_de00(_rgb(src / rel).astype(float), _rgb(plain / rel).astype(float)) <= 3.0 + 0.05
    # ... and with one colour fewer it is not: the gradient's size is the smallest that meets it.
    k = _rows(plain)["gradient.png"]["k"]
    fewer = quantize.fit_palette(src / "gradient.png", k - 1, restarts=2).apply(src / "gradient.png")
    assert k > 3 and _mean_de00(_rgb(src / "gradient.png").astype(float), fewer.rgb.astype(float)) > 3.0


def test_workers_rebuild_the_fit_and_the_dither(tmp_path):
    src = _set(tmp_path, n=3)
    from quantize.fit.settings import FitSettings

    fit = FitSettings(rule="bic", locked=["#fff"], seeding="farthest", restarts=1)
    kw = dict(k="2-6", fit=fit, dither="bayer4", dither_strength=0.7, nearest="space")
    here = run_batch(src, tmp_path / "here", workers=0, **kw)
    pool = run_batch(src, tmp_path / "pool", workers=1, **kw)
    assert here.summary["ok"] == pool.summary["ok"] == 3
    assert _outputs(tmp_path / "here") == _outputs(tmp_path / "pool")
    pal = json.loads((tmp_path / "pool" / "art0.palette.json").read_text())
    assert pal["colours"][0]["hex"] == "#ffffff" and pal["fit"]["rule"] == "bic" and pal["fit"]["seeding"] == "farthest"
    # A different dither is a different setting: a rerun redoes every image.
    again = run_batch(src, tmp_path / "here", workers=0, **dict(kw, dither="none"))
    assert again.summary["ok"] == 3 and again.summary["skipped"] == 0
    assert _outputs(tmp_path / "here") != _outputs(tmp_path / "pool")


def test_batch_settings_carry_one_fit_settings(tmp_path):
    from quantize.batch.run import _settings
    from quantize.fit.settings import FitSettings

    s = BatchSettings(space="oklab", fit=FitSettings(rule="bic", restarts=3))
    assert s.fit.space == "oklab" and s.fit.rule == "bic" and (s.space, s.restarts, s.seed) == ("oklab", 3, 0)
    assert BatchSettings().fit == FitSettings()
    assert BatchSettings(nearest="space").fit.nearest == "space"
    assert dataclasses.replace(s, k=4).fit == s.fit
    for bad, message in ((dict(dither="wiggle"), "wiggle"), (dict(dither_strength=1.5), "1.5"),
                         (dict(nearest="closest"), "closest"), (dict(k=2, fit=FitSettings(locked=["red", "blue",
                                                                                                    "lime"])),
                                                                "3 locked colours")):
        with pytest.raises(ValueError, match=message):
            BatchSettings(**bad)
    with pytest.raises(TypeError, match="FitSettings"):
        BatchSettings(fit={"rule": "bic"})
    # run_batch(settings, fit=...): the new fit's space, seed and restarts, not the old settings' copies.
    assert _settings(BatchSettings(), {"fit": FitSettings(space="oklab", seed=4)}).fit.space == "oklab"
    assert _settings(BatchSettings(), {"fit": FitSettings(seed=4), "space": "cam16ucs"}).fit == \
        FitSettings(seed=4, space="cam16ucs")


def test_batch_weighting_has_fit_and_sweeps_name(tmp_path):
    src = _set(tmp_path, n=2)
    for flag in ("--weighting", "--shared-weighting"):
        out = tmp_path / flag.strip("-")
        r = CliRunner().invoke(batch, [str(src), "-o", str(out), "--shared", "-k", "2", "--restarts", "1",
                                       "--workers", "0", flag, "pixels"])
        assert r.exit_code == 0, r.output
        assert _manifest(out)["settings"]["weighting"] == "pixels"
