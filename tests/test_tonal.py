"""Halftone and index separations (``separate(..., tones=...)``), measured on the films written.

Sources named per check:
- the printed fraction of a halftone is the inked area of its cells (Murray
  1936, the Murray-Davies relation); a tint is made by encoding the mixture
  of ink and substrate in linear light with colour-science's sRGB
  (IEC 61966-2-1) functions, so its share is known outside the project;
- a screen of f lines per inch at angle a has its strongest spatial
  frequency at f cycles per inch in direction a (numpy.fft is the reference);
- dots are measured by scipy.ndimage.label (4-connected pieces);
- the choke of the underbase is measured with scipy's exact Euclidean
  distance transform;
- the perceived error is S-CIELAB filtered CIEDE2000 (Zhang & Wandell 1996),
  computed from the films read back from disk; the photos are scikit-image's
  sample images.
"""

import json
import math

import colour
import numpy as np
import pytest
from click.testing import CliRunner
from films import read_films
from PIL import Image
from scipy import ndimage as ndi
from skimage import data

from quantize.cli.main import main as cli
from quantize.errors import SeparationError
from quantize.palette import Palette
from quantize.quality.perception import filtered_delta_e
from quantize.separation.plates import SeparationSettings, separate
from quantize.separation.tonal import TonalSettings

PAPER = np.array([245, 242, 235], np.uint8)  # demo colours (invented)
INKS = np.array([[200, 30, 45], [25, 60, 140], [240, 190, 30]], np.uint8)


def _palette(inks=INKS, sub=PAPER):
    rgb = np.vstack([sub, inks]).astype(np.uint8)
    return Palette(rgb, np.array([True] + [False] * len(inks)), names=("paper", "red", "blue", "yellow")[:len(rgb)])


def _tint(ink, share, sub=PAPER):
    """The sRGB colour of ``share`` of ``ink`` printed on ``sub`` (Murray-Davies in linear light, colour-science)."""
    lin = colour.cctf_decoding(np.vstack([sub, ink]) / 255.0, function="sRGB")
    mixed = (1 - share) * lin[0] + share * lin[1]
    return np.round(255 * colour.cctf_encoding(mixed, function="sRGB")).astype(np.uint8)


def _settings(tones, **tonal):
    return SeparationSettings(tones=tones, tonal=TonalSettings(**tonal), print_width_mm=50.8, film_dpi=600)


@pytest.mark.parametrize("share", [0.1, 0.3, 0.5, 0.8])
def test_a_flat_tint_prints_its_share_as_dot_area(tmp_path, share):
    img = np.tile(_tint(INKS[0], share), (100, 100, 1))
    sep = separate(img, _palette(), substrate="paper", dpi=50, settings=_settings("halftone"))
    films, _ = read_films(sep, tmp_path)
    red = films["red"]
    assert red.shape == (1200, 1200)  # 50.8 mm at 600 dpi
    assert abs(red.mean() - share) <= 0.02  # within 2 points of dot area
    assert set(films) == {"red"}  # no other ink is screened for a pure tint


def _peak(film, dpi):
    """Frequency (cycles per inch) and angle (degrees, mod 90) of a film's strongest spatial frequency."""
    n = film.shape[0]
    f = film.astype(float)
    spectrum = np.abs(np.fft.fft2(f - f.mean()))
    spectrum[0, 0] = 0
    iy, ix = np.unravel_index(np.argmax(spectrum), spectrum.shape)
    fy, fx = np.fft.fftfreq(n)[iy] * dpi, np.fft.fftfreq(n)[ix] * dpi
    return math.hypot(fx, fy), math.degrees(math.atan2(fy, fx)) % 90.0


@pytest.mark.parametrize("angles", [(), (15.0, 45.0, 75.0)])
def test_every_plate_has_its_frequency_and_angle(tmp_path, angles):
    # A colour that needs all three inks: equal visible shares of 0.3.
    lin = colour.cctf_decoding(np.vstack([PAPER, INKS]) / 255.0, function="sRGB")
    mixed = 0.1 * lin[0] + 0.3 * lin[1:].sum(axis=0)
    rgb = np.round(255 * colour.cctf_encoding(mixed, function="sRGB")).astype(np.uint8)
    img = np.tile(rgb, (100, 100, 1))
    lpi = 50.0
    sep = separate(img, _palette(), substrate="paper", dpi=50,
                   settings=_settings("halftone", lpi=lpi, angles=angles))
    films, written = read_films(sep, tmp_path)
    doc = json.loads(written["manifest"].read_text())
    assert len(doc["plates"]) == 3
    for plate in doc["plates"]:
        screen = plate["screen"]
        assert screen["lpi"] == lpi and screen["dot_shape"] == "round"
        found_lpi, found_angle = _peak(films[plate["name"]], 600)
        assert found_lpi == pytest.approx(lpi, rel=0.02)
        want = screen["angle"] % 90.0
        assert min(abs(found_angle - want), 90 - abs(found_angle - want)) < 1.0
        # The coverage the manifest states is the film's inked share, counted on the file.
        assert plate["coverage_percent"] == pytest.approx(100 * films[plate["name"]].mean(), abs=0.01)
    if angles:
        assert [p["screen"]["angle"] for p in sorted(doc["plates"], key=lambda p: p["order"])] == list(angles)


def test_no_dot_or_hole_below_the_minimum_on_a_photo(tmp_path):
    img = data.astronaut()[100:300, 150:350]
    min_dot = 0.15
    sep = separate(img, _palette(), substrate="paper", dpi=100,
                   settings=_settings("halftone", min_dot_mm=min_dot, lpi=45))
    films, _ = read_films(sep, tmp_path)
    min_px = math.pi * (min_dot / 25.4 * 600 / 2) ** 2
    for name, film in films.items():
        for region in (film, ~film):
            labels, n = ndi.label(region)
            areas = np.bincount(labels.ravel())
            edge = np.unique(np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]]))
            inner = np.setdiff1d(np.arange(1, n + 1), edge)
            assert n > 10, name
            assert areas[inner].min() >= min_px, name


def test_index_plates_are_disjoint_square_and_cover_every_printed_pixel(tmp_path):
    img = data.astronaut()[::4, ::4]
    sep = separate(img, _palette(), substrate="paper", dpi=64,
                   settings=_settings("index", index_dpi=200, index_dither="floyd-steinberg"))
    films, written = read_films(sep, tmp_path)
    stack = np.stack(list(films.values()))
    assert stack.sum(axis=0).max() == 1  # never two inks on one film pixel
    h, w = stack.shape[1:]
    assert (h, w) == (1200, 1200)
    # Every index square is 3 x 3 film pixels (600 / 200 dpi) of one ink or none.
    blocks = stack.reshape(len(films), h // 3, 3, w // 3, 3)
    assert (blocks.min(axis=(2, 4)) == blocks.max(axis=(2, 4))).all()
    # Printed pixels are those whose composite colour is an ink, each counted once.
    with Image.open(written["composite"]) as im:
        preview = np.asarray(im.convert("RGB"))
    assert preview.shape[:2] == img.shape[:2]
    printed = stack.any(axis=0)
    assert 0.3 < printed.mean() < 1.0
    assert stack.sum() == printed.sum()


def _print_seen(films, order, inks, sub, shape):
    """The films printed in order on the substrate, averaged in linear light over each artwork pixel."""
    lin = colour.cctf_decoding(np.vstack([sub, inks]) / 255.0, function="sRGB")
    top = np.zeros(next(iter(films.values())).shape, int)
    for j, name in enumerate(order):
        top[films[name]] = j + 1
    fh, fw = top.shape
    h, w = shape
    out = np.zeros((h, w, 3))
    for c in range(len(order) + 1):
        frac = (top == c).reshape(h, fh // h, w, fw // w).mean(axis=(1, 3))
        out += frac[..., None] * lin[c]
    return np.round(255 * colour.cctf_encoding(out, function="sRGB")).astype(np.uint8)


@pytest.mark.parametrize("name", ["astronaut", "coffee", "chelsea"])
def test_halftone_is_seen_closer_to_a_photo_than_spot_plates_with_the_same_inks(tmp_path, name):
    img = getattr(data, name)()
    img = img[: img.shape[0] // 4 * 4: 4, : img.shape[1] // 4 * 4: 4]  # about 128 x 150 px
    h, w = img.shape[:2]
    pal = Palette(np.vstack([[255, 255, 255], [30, 25, 25], [190, 60, 40], [230, 180, 120], [70, 90, 140]])
                  .astype(np.uint8), np.array([True, False, False, False, False]),
                  names=("paper", "black", "red", "sand", "blue"))
    width_mm = w * 25.4 / 60  # films of exactly 10 x 10 film pixels per artwork pixel
    seen = {}
    for tones in ("spot", "halftone"):
        st = SeparationSettings(tones=tones, print_width_mm=width_mm, film_dpi=600, min_feature_mm=0.3)
        sep = separate(img, pal, substrate="paper", settings=st)
        films, written = read_films(sep, tmp_path / tones)
        doc = json.loads(written["manifest"].read_text())
        order = [p["name"] for p in sorted(doc["plates"], key=lambda p: p["order"])]
        inks = np.array([pal.rgb8[pal.names.index(nm)] for nm in order])
        print_ = _print_seen(films, order, inks, pal.rgb8[0], (h, w))
        seen[tones] = filtered_delta_e(img, print_, dpi=60, distance_mm=1000)["mean"]
        # The tool's own figure describes the same print.
        assert doc["perceived"]["filtered"]["mean"] == pytest.approx(seen[tones], rel=0.1, abs=0.3)
    assert seen["halftone"] < seen["spot"], seen


def test_underbase_under_halftone_is_choked_inside_the_art(tmp_path):
    navy = np.array([20, 25, 60], np.uint8)
    n = 300
    img = np.tile(navy, (n, n, 1))
    yy, xx = np.mgrid[:n, :n]
    disc = (yy - 150) ** 2 + (xx - 150) ** 2 < 100**2
    ramp = np.linspace(0.2, 1.0, n)[None, :, None]
    img[disc] = np.round(ramp * INKS[2] + (1 - ramp) * 255).astype(np.uint8).repeat(n, axis=0)[disc]
    # Film grid = artwork grid (300 dpi both), so the art's edge is known on the film exactly.
    st = SeparationSettings(tones="halftone", underbase=True, choke_mm=0.3, dpi=300, film_dpi=300,
                            tonal=TonalSettings(lpi=30))
    pal = Palette(np.vstack([navy, INKS[2]]).astype(np.uint8), np.array([True, False]), names=("navy", "yellow"))
    sep = separate(img, pal, substrate="navy", settings=st)
    films, _ = read_films(sep, tmp_path)
    base = films["underbase"]
    assert base.shape == disc.shape and sep.films()[0].name == "underbase"
    inside = ndi.distance_transform_edt(disc)
    choke_px = 0.3 / 25.4 * 300
    # Every base pixel lies at least the choke inside the art (within half a film pixel) ...
    assert base.any() and inside[base].min() >= choke_px - 0.5
    # ... and the base fills the art but for the choke.
    assert (base | (inside < choke_px + 0.5) | ~disc).all()
    # The ink is screened over the whole disc, the base only under it: the yellow's dots stay on the art.
    assert not (films["yellow"] & ~disc).any()


def test_tonal_plates_need_a_substrate_and_valid_screens():
    img = np.tile(_tint(INKS[0], 0.4), (20, 20, 1))
    with pytest.raises(SeparationError, match="substrate"):
        separate(img, _palette(), substrate="none", dpi=50, tones="halftone")
    with pytest.raises(SeparationError, match="angle"):
        separate(img, _palette(), substrate="paper", dpi=50,
                 settings=SeparationSettings(tones="halftone", tonal=TonalSettings(angles=(10.0,))))
    with pytest.raises(SeparationError, match="tones"):
        separate(img, _palette(), substrate="paper", dpi=50, tones="stipple")


def test_cli_halftone_writes_films_at_size_with_a_manifest(tmp_path):
    src = tmp_path / "tint.png"
    Image.fromarray(np.tile(_tint(INKS[1], 0.4), (60, 90, 1))).save(src)
    pal = tmp_path / "inks.json"
    _palette().save(pal)
    out = tmp_path / "films"
    res = CliRunner().invoke(cli, ["separate", str(src), "-o", str(out), "--palette", str(pal), "--tones", "halftone",
                                   "--lpi", "45", "--print-width", "3in", "--mesh", "110", "--view-distance", "50cm"])
    assert res.exit_code == 0, res.output
    assert "45 lpi" in res.output and "perceived ΔE00" in res.output
    assert "110 mesh is too coarse" in res.output  # 4 threads per line: 180 mesh needed (common practice)
    doc = json.loads((out / "tint-manifest.json").read_text())
    assert doc["tones"] == "halftone" and doc["perceived"]["distance_mm"] == 500
    (plate,) = doc["plates"]
    with Image.open(out / plate["files"][0]) as im:
        assert im.size == (1800, 1200) and im.info["dpi"][0] == pytest.approx(600)
        assert abs((~np.asarray(im)).mean() - 0.4) <= 0.02
    bad = CliRunner().invoke(cli, ["separate", str(src), "-o", str(tmp_path / "x"), "--palette", str(pal),
                                   "--tones", "halftone", "--angles", "ten"])
    assert bad.exit_code == 2 and "--angles" in bad.output
