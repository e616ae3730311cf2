"""Honest reports: what the summary and the manifest say is what the films hold.

Every check reads the files written (the plate TIFFs, the manifest) and
compares with the drawing or with colour-science as the reference; the ink
library is invented.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.palette import Palette

CREAM = (244, 236, 214)
NAVY_A, NAVY_B, RED, ORANGE = (35, 50, 90), (42, 44, 104), (200, 45, 55), (240, 140, 20)

# Invented library, Lab relative to D50: one navy, one red, one far green, one ink outside sRGB.
LIBRARY = """# illuminant: D50
Quay Navy,21.0,6.0,-28.0
Signal Red,45.0,62.0,40.0
Kelp Green,55.0,-45.0,30.0
Deep Violet,30.0,75.0,-115.0
"""


def _cli():
    from quantize.cli.main import main

    return lambda *a: CliRunner().invoke(main, [str(x) for x in a])


@pytest.fixture(scope="module")
def snapped(tmp_path_factory):
    """Two navies (one library navy for both), a red and an orange no library ink is near."""
    d = tmp_path_factory.mktemp("snap")
    img = np.empty((90, 120, 3), np.uint8)
    img[:] = CREAM
    regions = {"a": (slice(10, 40), slice(10, 50)), "b": (slice(50, 80), slice(10, 50)),
               "red": (slice(10, 40), slice(65, 110)), "orange": (slice(50, 80), slice(65, 110))}
    for key, colour in zip(regions, (NAVY_A, NAVY_B, RED, ORANGE)):
        img[regions[key]] = colour
    Image.fromarray(img).save(d / "art.png")
    (d / "inks.csv").write_text(LIBRARY, encoding="utf-8")
    Palette(np.array([CREAM, NAVY_A, NAVY_B, RED, ORANGE], np.uint8),
            np.array([True, False, False, False, False])).save(d / "pal.json")
    r = _cli()("separate", d / "art.png", "-o", d / "films", "--inks", d / "inks.csv", "--palette", d / "pal.json",
               "--snap", "--dpi", "300", "--film-dpi", "300", "--png", "--underbase")
    assert r.exit_code == 0, r.output
    doc = json.loads((d / "films" / "art-manifest.json").read_text(encoding="utf-8"))
    return d, img, regions, r.output, doc


def _film_over(folder, doc, region):
    """Name of the plate whose film (read from its TIFF) covers most of ``region``, and that share."""
    best = (None, 0.0)
    for p in doc["plates"]:
        film = ~np.asarray(Image.open(folder / p["files"][0]))
        share = float(film[region].mean())
        if share > best[1]:
            best = (p["name"], share)
    return best


def test_snap_table_shows_the_ink_each_colour_prints_as_on_the_films(snapped):
    d, _, regions, out, doc = snapped
    snaps = {s["fitted"]: s for s in doc["settings"]["inks_from"]["snaps"]}
    hex_of = {"a": NAVY_A, "b": NAVY_B, "red": RED, "orange": ORANGE}
    reassigned = 0
    for key, region in regions.items():
        s = snaps["#{:02x}{:02x}{:02x}".format(*hex_of[key])]
        on_film, share = _film_over(d / "films", doc, region)
        if on_film is None:  # no film prints there: the colour is left as bare substrate
            assert s["prints_as"] == "substrate"
            on_film = "substrate"
        else:
            assert share > 0.9
            assert s["prints_as"] == on_film  # the table's ink is the film that prints those pixels
        line = next(ln for ln in out.splitlines() if ln.strip().startswith(f"snap {s['fitted']}"))
        assert f"prints as {on_film}" in line
        reassigned += s["ink"] != on_film
    assert reassigned >= 1  # one navy was assigned another ink (each ink once) but prints as the navy


def test_a_snap_far_from_its_ink_is_a_warning_with_the_reference_delta_e(snapped):
    import colour

    _, _, _, out, doc = snapped
    cie = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]
    d65 = np.array([0.3127, 0.3290])
    ref_lab = {}
    for line in LIBRARY.splitlines()[1:]:
        name, *lab = line.split(",")
        xyz = colour.adaptation.chromatic_adaptation_VonKries(
            colour.Lab_to_XYZ(np.array(lab, float), illuminant=cie["D50"]), colour.xy_to_XYZ(cie["D50"]),
            colour.xy_to_XYZ(d65), transform="Bradford")
        ref_lab[name] = colour.XYZ_to_Lab(xyz, illuminant=d65)
    sub = doc["substrate"]["hex"]  # not a library ink: its preview colour is what shows
    ref_lab["substrate"] = colour.XYZ_to_Lab(colour.sRGB_to_XYZ(np.array([int(sub[i:i + 2], 16) for i in (1, 3, 5)])
                                                                / 255.0), illuminant=d65)
    warned = 0
    for s in doc["settings"]["inks_from"]["snaps"]:
        fitted = colour.XYZ_to_Lab(colour.sRGB_to_XYZ(np.array([int(s["fitted"][i:i + 2], 16) for i in (1, 3, 5)])
                                                      / 255.0), illuminant=d65)
        de = float(colour.delta_E(fitted, ref_lab[s["prints_as"]], method="CIE 2000"))
        assert s["delta_e_printed"] == pytest.approx(de, abs=0.05)
        if de > 10:
            warned += 1
            assert any(s["fitted"] in n and "ΔE00" in n for n in doc["notes"])
            assert re.search(rf"note: warning: colour {s['fitted']} prints as", out)
    assert warned >= 1  # the orange has no near ink: it is left as cream, ΔE00 about 30


def test_manifest_records_each_inks_measured_lab_beside_the_preview(snapped):
    import colour

    _, _, _, _, doc = snapped
    cie = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]
    d65 = np.array([0.3127, 0.3290])
    lib = {ln.split(",")[0]: np.array(ln.split(",")[1:], float) for ln in LIBRARY.splitlines()[1:]}
    checked = 0
    for ink in doc["inks"] + doc["plates"]:
        if ink["name"] not in lib:
            assert "lab_measured" not in ink  # the cream substrate is not a library ink
            continue
        xyz = colour.adaptation.chromatic_adaptation_VonKries(
            colour.Lab_to_XYZ(lib[ink["name"]], illuminant=cie["D50"]), colour.xy_to_XYZ(cie["D50"]),
            colour.xy_to_XYZ(d65), transform="Bradford")
        measured = colour.XYZ_to_Lab(xyz, illuminant=d65)
        assert ink["lab_measured"] == pytest.approx(measured, abs=0.02)
        preview = colour.XYZ_to_Lab(colour.sRGB_to_XYZ(np.array([int(ink["hex"][i:i + 2], 16)
                                                                 for i in (1, 3, 5)]) / 255.0), illuminant=d65)
        assert ink["lab"] == pytest.approx(preview, abs=0.02)
        assert ink["delta_e_preview_to_measured"] == pytest.approx(
            float(colour.delta_E(preview, measured, method="CIE 2000")), abs=0.02)
        checked += 1
    assert checked >= 3


def test_every_note_printed_is_in_the_manifest(snapped):
    _, _, _, out, doc = snapped
    printed = [ln[len("note: "):] for ln in out.splitlines() if ln.startswith("note: ")]
    assert printed and all(n in doc["notes"] for n in printed)
    assert any("outside sRGB" in n for n in printed)  # the library's own note, too


def test_summary_counts_match_the_files_on_disk(snapped):
    d, _, _, out, doc = snapped
    files = sorted((d / "films").iterdir())
    tifs = [f for f in files if f.suffix == ".tif"]
    m = re.search(r"(\d+) film\(s\), (\d+) ink\(s\)( \+ underbase)?", out)
    assert m and int(m.group(1)) == len(tifs)
    assert int(m.group(2)) + bool(m.group(3)) == len(tifs)
    assert int(re.search(r"wrote (\d+) file\(s\)", out).group(1)) == len(files)
    listed = re.findall(r"-> (.+)$", out, flags=re.MULTILINE)
    assert sorted(n.strip() for ln in listed for n in ln.split(",")) == sorted(
        f.name for f in files if f.suffix in (".tif", ".png") and "composite" not in f.name)
    assert len(doc["plates"]) + 1 == len(tifs)  # plus the underbase
