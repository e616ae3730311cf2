"""A batch fits with the compiled CIEDE2000 at every size: what that guarantees.

Inputs are scikit-image's sample photos (astronaut, chelsea, coffee,
rocket), scaled down with Pillow so that each fit stays below the size from
which a single file would load the compiled loops; the palettes are read
back from the files the batch wrote (the palette JSON, parsed with the
standard library, and the images, decoded with Pillow).  CIEDE2000
references: Sharma, Wu & Dalal (2005) through colour-science's
``delta_E(method="CIE 2000")``.

Guaranteed, and checked here: a batch's palettes depend on the images, the
settings and the seed alone -- the same files bit for bit with one worker
process, two, or in the calling process (timing, load and cores do not
enter), for per-image and shared palettes -- and each equals
``fit_palette(..., compiled_always=True)``.  Not guaranteed: that a batch
and ``reduce`` (numpy CIEDE2000 below the size threshold) give the same
palette bit for bit: the two paths round ΔE00 differently, so a near tie
can go either way (shown below on a constructed tie); they agree in mean
ΔE00 within the quality goal of issue #13.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import colour
import numpy as np
import pytest
import skimage.data
from PIL import Image

from quantize.batch.run import SHARED_PALETTE, run_batch
from quantize.fit.engine import fit_palette
from quantize.fit.settings import FitSettings
from quantize.io.read import load_image
from quantize.kernels.nearest import COMPILED_FROM, CiedeColumns, nearest_ciede2000

PHOTOS = ("astronaut", "chelsea", "coffee", "rocket")


@pytest.fixture(scope="module")
def photos(tmp_path_factory) -> Path:
    """The four sample photos at about 0.05 MP, as PNG files in one folder."""
    root = tmp_path_factory.mktemp("photos")
    for name in PHOTOS:
        img = Image.fromarray(getattr(skimage.data, name)()[..., :3])
        img.resize((img.width * 2 // 5, img.height * 2 // 5), Image.LANCZOS).save(root / f"{name}.png")
    return root


def _files(folder: Path) -> dict:
    """sha256 of every output file but the manifests (which record times)."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file() and not p.name.startswith("manifest.")}


def _hex(path: Path) -> list:
    doc = json.loads(path.read_text())
    return [c["hex"] if isinstance(c, dict) else c for c in doc["colours"]]


@pytest.mark.filterwarnings("ignore::quantize.fit.clustering.PaletteSizeWarning")
@pytest.mark.parametrize("shared", [False, True])
def test_a_batch_writes_the_same_files_with_one_and_two_workers(photos, tmp_path, shared):
    # One worker fits with a second thread, two without: neither the threads
    # nor the number of processes may change a palette or an image.
    runs = {w: run_batch(photos, tmp_path / f"w{w}", workers=w, k=8, seed=5, shared=shared) for w in (1, 2)}
    for res in runs.values():
        assert res.summary["ok"] == len(PHOTOS)
    one, two = _files(tmp_path / "w1"), _files(tmp_path / "w2")
    assert one == two
    assert len(one) == (len(PHOTOS) + 2 if shared else 2 * len(PHOTOS))  # shared: + palette, + report page
    # The images decode to the same pixels (Pillow), not only the same bytes.
    for name in PHOTOS:
        a = np.asarray(Image.open(tmp_path / "w1" / f"{name}.png").convert("RGB"))
        b = np.asarray(Image.open(tmp_path / "w2" / f"{name}.png").convert("RGB"))
        assert np.array_equal(a, b)
    if shared:
        assert _hex(tmp_path / "w1" / SHARED_PALETTE) == _hex(tmp_path / "w2" / SHARED_PALETTE)


@pytest.mark.filterwarnings("ignore::quantize.fit.clustering.PaletteSizeWarning")
def test_a_batch_palette_is_the_library_fit_with_compiled_kernels(photos, tmp_path):
    res = run_batch(photos, tmp_path / "out", workers=0, k=8, seed=5)
    assert res.summary["ok"] == len(PHOTOS)
    for name in PHOTOS:
        pic = load_image(photos / f"{name}.png")
        # Small enough that the default fit never runs the compiled CIEDE2000.
        assert pic.rgb.shape[0] * pic.rgb.shape[1] * 8 < COMPILED_FROM
        library = fit_palette(pic, 8, seed=5, compiled_always=True)
        assert _hex(tmp_path / "out" / f"{name}.palette.json") == list(library.hex)
        # Against the default (numpy) path: the same quality, to the issue's
        # 0.5 % goal, measured with colour-science's CIEDE2000 on every pixel.
        default = fit_palette(pic, 8, seed=5)
        lab = colour.XYZ_to_Lab(colour.sRGB_to_XYZ(pic.rgb.reshape(-1, 3) / 255.0))

        def mean_de(pal):
            pal_lab = colour.XYZ_to_Lab(colour.sRGB_to_XYZ(pal.rgb8 / 255.0))
            de = colour.delta_E(lab[:, None, :], pal_lab[None, :, :], method="CIE 2000")
            return float(de.min(axis=1).mean())

        assert mean_de(library) == pytest.approx(mean_de(default), rel=5e-3)


def test_the_setting_is_checked():
    with pytest.raises(ValueError, match="compiled_always must be True or False"):
        FitSettings(compiled_always="yes")


def test_the_two_ciede2000_paths_can_part_on_a_near_tie():
    # Why a batch and reduce are not bit-identical by construction: two
    # centres 3 and 3 + 1e-7 lightness units from a grey.  In float64 the
    # second is nearer; the numpy k-medians path holds colours in float32,
    # where 53 + 1e-7 rounds to 53 and the two tie (the lowest index wins).
    grey = np.array([[50.0, 0.0, 0.0]])
    centres = np.array([[53.0 + 1e-7, 0.0, 0.0], [47.0, 0.0, 0.0]])
    ref = colour.delta_E(grey, centres, method="CIE 2000")
    assert ref[1] < ref[0] < ref[1] + 1e-6
    numpy_label = CiedeColumns(grey).nearest(centres)[0][0]
    compiled_label = CiedeColumns(grey, compiled_always=True).nearest(centres)[0][0]
    assert (numpy_label, compiled_label) == (0, 1)
    # Both are nearest to within 1e-6 ΔE00, and the float64 paths agree here.
    assert nearest_ciede2000(grey, centres)[0][0] == 1
    assert nearest_ciede2000(grey, centres, compiled_always=True)[0][0] == 1


def test_a_large_sample_fits_compiled_whatever_the_setting(monkeypatch):
    # From 2^18 distinct colours (SAMPLE_COMPILED_FROM, moved down here to
    # 1000 so that a small photo stands for a 12 MP one) a
    # fit runs every CIEDE2000 compiled, as compiled_always does: no numpy
    # CIEDE2000 runs, the palette is compiled_always's bit for bit, and a
    # size fitted alone equals it fitted in a range.  A sample below the
    # floor still runs numpy (which shows that the count sees the calls).
    from quantize import sweep
    from quantize.kernels import nearest, vectorised

    calls = []
    for name in ("nearest_ciede2000", "nearest_ciede2000_columns", "ciede2000_to_columns", "ciede2000_pairs"):
        def counted(*args, _f=getattr(vectorised, name), **kwargs):
            calls.append(1)
            return _f(*args, **kwargs)

        monkeypatch.setattr(vectorised, name, counted)
    monkeypatch.setattr(nearest, "SAMPLE_COMPILED_FROM", 1000)
    img = Image.fromarray(skimage.data.coffee())
    big = np.asarray(img.resize((img.width // 4, img.height // 4), Image.LANCZOS))
    assert len(np.unique(big.reshape(-1, 3), axis=0)) >= 1000
    alone = fit_palette(big, 4, seed=11)
    assert calls == []
    assert alone.rgb8.tobytes() == fit_palette(big, 4, seed=11, compiled_always=True).rgb8.tobytes()
    assert sweep(big, (3, 6), seed=11).row(4).palette.rgb8.tobytes() == alone.rgb8.tobytes()
    small = big[:20, :20]
    assert len(np.unique(small.reshape(-1, 3), axis=0)) < 1000
    fit_palette(small, 4, seed=11)
    assert calls


def test_a_batch_palette_file_refits_the_same_palette_on_the_same_path(photos, tmp_path):
    # The file records the compiled path (FitRecord.compiled_always), so the
    # settings read back from it refit the palette bit for bit; a reduce's
    # file does not carry the key.  The palettes are read back from the JSON
    # files with the standard library.
    from quantize.palette import Palette

    res = run_batch(photos, tmp_path / "out", workers=0, k=6, seed=3)
    assert res.summary["ok"] == len(PHOTOS)
    path = tmp_path / "out" / "coffee.palette.json"
    assert json.loads(path.read_text())["fit"]["compiled_always"] is True
    settings = FitSettings.from_record(Palette.load(path).fit)
    assert settings.compiled_always is True
    refit = fit_palette(load_image(photos / "coffee.png"), 6, settings=settings)
    assert list(refit.hex) == _hex(path)
    alone = tmp_path / "alone.json"
    fit_palette(load_image(photos / "coffee.png"), 6, seed=3).save(alone)
    assert "compiled_always" not in json.loads(alone.read_text())["fit"]
