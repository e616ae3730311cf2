"""Each command decodes each input file once, and filters it for the perceived error once.

Every file the package reads goes through one decoder,
``quantize.io.read._read_file``; the tests wrap it to count calls per path
while a command runs in-process (click's CliRunner, a batch with
``workers=0``).  ``_filter_opponent`` is the one place the S-CIELAB filter
runs, and is counted the same way.  What a command writes is checked
elsewhere (test_cli, test_batch, test_separation, test_report); here only
the counts are.
"""

from __future__ import annotations

import json
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from artwork import flat_artwork
from click.testing import CliRunner
from PIL import Image

import quantize.io.read as read
import quantize.quality.perception as perception
from quantize.cli.main import main
from quantize.palette import Palette


@pytest.fixture()
def images(tmp_path):
    """Two small flat-colour artworks with a resolution, as PNG files."""
    paths = []
    for seed in (3, 4):
        rgb, _ = flat_artwork(3, seed=seed, size=96, jpeg_quality=90)
        p = tmp_path / f"art{seed}.png"
        Image.fromarray(rgb).save(p, dpi=(300, 300))
        paths.append(p)
    return paths


@pytest.fixture()
def decodes(monkeypatch):
    """Counter of decodes per file name, filled while the test runs."""
    counts: Counter = Counter()
    real = read._read_file

    def counting(path, max_pixels):
        counts[Path(path).name] += 1
        return real(path, max_pixels)

    monkeypatch.setattr(read, "_read_file", counting)
    return counts


@pytest.fixture()
def filterings(monkeypatch):
    """Counter of S-CIELAB filter runs, by the size of the images filtered."""
    counts: Counter = Counter()
    real = perception._filter_opponent

    def counting(planes, ppd):
        counts[planes[0].shape[:2]] += 1
        return real(planes, ppd)

    monkeypatch.setattr(perception, "_filter_opponent", counting)
    return counts


@pytest.fixture()
def palette_file(tmp_path):
    path = tmp_path / "pal.json"
    Palette(rgb8=np.array([[255, 255, 255], [200, 30, 40], [20, 40, 160]], np.uint8),
            locked=np.zeros(3, bool)).save(path)
    return path


def run(*args):
    result = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result


def once_each(paths) -> Counter:
    return Counter({Path(p).name: 1 for p in paths})


def test_reduce_with_dither_error_map_and_report(images, tmp_path, decodes, filterings):
    run("reduce", images[0], "-o", tmp_path / "out.png", "-k", "2-4", "--restarts", "1",
        "--dither", "floyd-steinberg", "--view-dpi", "300", "--view-distance", "400",
        "--error-map", tmp_path / "map.png", "--error-map-kind", "filtered", "--report", tmp_path / "report")
    assert decodes == once_each(images[:1])
    assert filterings == Counter({(96, 96): 1})
    assert (tmp_path / "report" / "index.html").is_file() and (tmp_path / "map.png").is_file()


def test_reduce_samples_once(images, tmp_path, decodes, monkeypatch):
    # The picture keeps its colour sample: fitting and mapping collapse it once.  The palette
    # file still names the input, as when the fit decoded the file itself.
    from quantize.core import sampling

    samplings = []
    real = sampling._sample
    monkeypatch.setattr(sampling, "_sample", lambda pic: samplings.append(pic.source) or real(pic))
    r = run("reduce", images[0], "-o", tmp_path / "out.png", "-k", "3", "--restarts", "1",
            "--keep-palette", "--json")
    assert decodes == once_each(images[:1])
    assert samplings == [str(images[0])]
    assert json.loads(r.stdout)["k"] == 3
    assert Palette.load(tmp_path / "out.palette.json").fit.images == (str(images[0]),)


def test_apply_two_inputs_with_viewing_error_map_and_report(images, palette_file, tmp_path, decodes,
                                                            filterings):
    run("apply", palette_file, *images, "-o", tmp_path / "out", "--view-dpi", "300", "--view-distance", "400",
        "--error-map", tmp_path / "map.png", "--error-map-kind", "filtered", "--report", tmp_path / "report")
    assert decodes == once_each(images)
    # One filtering of each input for its filtered ΔE00 figures and its filtered error map together.
    assert filterings == Counter({(96, 96): 2})
    assert sorted(p.name for p in tmp_path.glob("map-*.png")) == ["map-art3.png", "map-art4.png"]


def test_apply_plain_error_map_filters_once_for_the_figures(images, palette_file, tmp_path, filterings):
    run("apply", palette_file, images[0], "-o", tmp_path / "out", "--view-dpi", "300", "--view-distance", "400",
        "--error-map", tmp_path / "map.png")
    assert filterings == Counter({(96, 96): 1})


def test_fit_two_inputs(images, tmp_path, decodes):
    run("fit", *images, "-o", tmp_path / "pal.json", "-k", "2-4", "--restarts", "1")
    assert decodes == once_each(images)


@pytest.mark.parametrize("with_report", [False, True])
def test_sweep(images, tmp_path, decodes, with_report):
    extra = ["--report", tmp_path / "report"] if with_report else []
    r = run("sweep", *images, "-k", "2-4", "--restarts", "1", "--plot", tmp_path / "sweep.png", *extra, "--json")
    assert decodes == once_each(images)
    # The per-image rows name the files, whether the sweep decoded them or was given their samples.
    assert set(json.loads(r.stdout)["rows"][0]["per_image"]) == {str(p) for p in images}


def test_separate(images, tmp_path, decodes):
    run("separate", images[0], "-o", tmp_path / "films", "-n", "2", "--min-feature-mm", "0")
    assert decodes == once_each(images[:1])


@pytest.mark.parametrize("mode", ["per-image", "palette"])
def test_batch_in_process(images, palette_file, tmp_path, decodes, mode):
    from quantize.batch.run import run_batch

    src = tmp_path / "in"
    src.mkdir()
    for p in images:
        p.rename(src / p.name)
    palette = {"palette": str(palette_file)} if mode == "palette" else {}
    res = run_batch(src, tmp_path / "out", workers=0, k="2-3", restarts=1, **palette)
    assert res.summary["ok"] == 2
    assert decodes == once_each(images)


def test_library_entry_points_decode_a_path_once(images, palette_file, tmp_path, decodes):
    # The public functions still take paths, and convert each once at the top.
    import quantize
    from quantize.report.errormap import save_error_map

    pal = Palette.load(palette_file)
    res = pal.apply(images[0], dither="bayer4")
    assert decodes == once_each(images[:1])
    decodes.clear()
    quantize.fit_palette(images, (2, 3), restarts=1)
    assert decodes == once_each(images)
    decodes.clear()
    save_error_map(tmp_path / "map.png", images[0], res, kind="filtered", ppd=20)
    assert decodes == once_each(images[:1])


def test_mapping_onto_the_fitted_palette_reuses_the_fit_for_a_range(images, monkeypatch):
    # The fit keeps its mapping of the palette it returns, whichever size of the range was
    # chosen, so mapping the same picture onto it maps no colour again.  The reference is a
    # fresh mapping of the sample by the plain-numpy twin of the kernel (tests/naive.py).
    import naive

    import quantize.fit.assign as assign
    from quantize.core.sampling import sample_picture
    from quantize.fit.engine import fit_palette
    from quantize.io.read import load_image

    pic = load_image(images[0])
    pal = fit_palette(pic, (2, 6), restarts=1)
    calls = []
    monkeypatch.setattr(assign, "nearest_ciede2000", lambda *a: calls.append(a) or pytest.fail("mapped again"))
    res = pal.apply(pic)
    assert calls == [] and 2 <= pal.k <= 6
    smp = sample_picture(pic)
    labels, _ = naive.nearest_ciede2000(smp.points("lab"), pal.lab)
    np.testing.assert_array_equal(res.indices, smp.index_image(labels, dtype=np.uint8))
