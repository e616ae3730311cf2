"""Ink libraries: reading CSV / JSON / CGATS.17, Bradford adaptation, ink choice and snapping.

Every ink library in this file is invented test data (no real ink maker's
colours).
"""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from artwork import flat_artwork

from quantize.colour.adaptation import adapt_lab, bradford_matrix
from quantize.palette import Palette
from quantize.separation.choice import choose_inks, snap_palette, subset_cost
from quantize.separation.inks import InkLibraryError, load_ink_library, parse_ink_library

# An invented CGATS file in the style instruments write: a file identifier,
# standard and declared keywords, comments, extra fields (CMYK and a
# spectral value) and a quoted name with spaces.
CGATS_DEMO = """CGATS.17
ORIGINATOR\t"invented test data"
DESCRIPTOR\t"demo shelf of a fictional print studio"
CREATED\t"2026-01-15"
KEYWORD "SHELF_CODE"
SHELF_CODE "B-7"
# a comment line
NUMBER_OF_FIELDS 8
BEGIN_DATA_FORMAT
SAMPLE_ID SAMPLE_NAME CMYK_C CMYK_M
CMYK_Y CMYK_K LAB_L LAB_A
END_DATA_FORMAT
"""


def _cgats(rows, *, fields="SAMPLE_ID\tSAMPLE_NAME\tLAB_L\tLAB_A\tLAB_B", keywords="", n_sets=None):
    head = f"CGATS.17\nORIGINATOR \"invented\"\n{keywords}BEGIN_DATA_FORMAT\n{fields}\nEND_DATA_FORMAT\n"
    if n_sets is not None:
        head += f"NUMBER_OF_SETS {n_sets}\n"
    return head + "BEGIN_DATA\n" + "".join(r + "\n" for r in rows) + "END_DATA\n"


# --------------------------------------------------------------------------- reading


def test_csv_hex_and_lab_rows_with_header_and_comments(tmp_path):
    p = tmp_path / "shelf.csv"
    p.write_text("# invented demo shelf\nname,colour\nHarbour Red,#c8102e\n\nSlate,40.5,-3.2,-12\n")
    lib = load_ink_library(p)
    assert lib.names == ["Harbour Red", "Slate"]
    assert lib.file_format == "csv" and lib.illuminant == "D50"
    # A hex ink is sRGB (D65) already: written back exactly.
    assert lib.inks[0].hex == "#c8102e" and lib.inks[0].measured is None
    # A Lab ink is taken as D50 and adapted.
    np.testing.assert_allclose(lib.inks[1].lab, adapt_lab([40.5, -3.2, -12]), atol=1e-12)
    assert lib.inks[1].measured == (40.5, -3.2, -12.0)
    assert lib.inks[1].line == 5


def test_csv_illuminant_comment_is_honoured():
    lib = parse_ink_library("# illuminant: D65\nSlate,40.5,-3.2,-12\n")
    assert lib.illuminant == "D65"
    np.testing.assert_allclose(lib.inks[0].lab, [40.5, -3.2, -12.0])


@pytest.mark.parametrize("line, problem", [
    ("Slate,40.5,x,-12", "a* 'x' is not a number"),
    ("Slate,140,0,0", "L* 140 is outside 0-100"),
    ("Slate,#12345", "neither sRGB hex"),
    ("Slate,1,2", "got 3 field(s)"),
])
def test_csv_malformed_line_names_file_and_line(tmp_path, line, problem):
    p = tmp_path / "bad.csv"
    p.write_text(f"name,hex\nHarbour Red,#c8102e\n{line}\n")
    with pytest.raises(InkLibraryError) as err:
        load_ink_library(p)
    msg = str(err.value)
    assert msg.startswith(f"{p}: line 3: ") and problem in msg and "\n" not in msg


def test_duplicate_ink_names_give_a_clear_message():
    with pytest.raises(InkLibraryError, match=r"line 3: ink name 'harbour red' is already used at line 1"):
        parse_ink_library("Harbour Red,#c8102e\nSlate,#334455\nharbour red,#c8102f\n", source="x.csv")


def test_json_library(tmp_path):
    doc = {"format": "quantize.separation.inks", "version": 1, "illuminant": "D65",
           "inks": [{"name": "Dune", "lab": [80.0, 5.0, 30.0]}, {"name": "Night", "hex": "#101820"}]}
    p = tmp_path / "shelf.json"
    p.write_text(json.dumps(doc))
    lib = load_ink_library(p)
    assert lib.names == ["Dune", "Night"] and lib.illuminant == "D65" and lib.file_format == "json"
    np.testing.assert_allclose(lib.inks[0].lab, [80.0, 5.0, 30.0])
    assert lib.inks[1].hex == "#101820"


def test_json_errors_name_the_place(tmp_path):
    p = tmp_path / "shelf.json"
    p.write_text('{"inks": [\n {"name": "Dune", "lab": [80, 5]}\n]}')
    with pytest.raises(InkLibraryError, match=r"shelf.json: inks\[0\]: lab: expected \[L, a, b\]"):
        load_ink_library(p)
    p.write_text('{"inks": [\n {"name": "Dune" "lab": [80, 5, 3]}\n]}')
    with pytest.raises(InkLibraryError, match=r"shelf.json: line 2: not JSON"):
        load_ink_library(p)


def test_cgats_with_comments_keywords_and_extra_fields():
    text = CGATS_DEMO.replace("LAB_L LAB_A\n", "LAB_L LAB_A\nLAB_B\n").replace(
        "NUMBER_OF_FIELDS 8", "NUMBER_OF_FIELDS 9") + (
        "NUMBER_OF_SETS 3\n"
        "BEGIN_DATA\n"
        '1\t"Harbour Red"\t0\t95\t85\t5\t45.0\t65.2\t40.1\n'
        "2 Slate 70 40 30 20 40.5 -3.2 -12.0   # trailing comment\n"
        '3 "Sail ""White"""  0 0 0 0 95.1 0.4 2.2\n'
        "END_DATA\n")
    lib = parse_ink_library(text, source="shelf.cgats")
    assert lib.file_format == "cgats" and lib.illuminant == "D50"
    assert lib.names == ["Harbour Red", "Slate", 'Sail "White"']
    assert [i.sample_id for i in lib.inks] == ["1", "2", "3"]
    assert lib.inks[1].measured == (40.5, -3.2, -12.0)
    assert [i.line for i in lib.inks] == [16, 17, 18]  # counted by hand


def test_cgats_sample_id_names_inks_when_there_is_no_sample_name():
    lib = parse_ink_library(_cgats(["R-01 45 60 40", "B-02 30 10 -50"], fields="SAMPLE_ID LAB_L LAB_A LAB_B"))
    assert lib.names == ["R-01", "B-02"]


@pytest.mark.parametrize("keywords, illuminant, observer", [
    ('ILLUMINATION_NAME "D65"\nOBSERVER_ANGLE "10"\n', "D65", 10),
    ('MEASUREMENT_SOURCE "Illumination=D65\tObserverAngle=2\tWhiteBase=Abs"\n', "D65", 2),
    ("", "D50", 2),
])
def test_cgats_illuminant_from_keywords(keywords, illuminant, observer):
    lib = parse_ink_library(_cgats(['1 "A" 50 10 10'], keywords=keywords))
    assert (lib.illuminant, lib.observer) == (illuminant, observer)
    np.testing.assert_allclose(lib.inks[0].lab, adapt_lab([50, 10, 10], illuminant=illuminant, observer=observer))


@pytest.mark.parametrize("rows, n_sets, kw, fields, where, problem", [
    # line numbers counted by hand in the text _cgats() builds
    (['1 A 50 10', '2 B 40 0 0'], None, "", None, "line 7", "expected 5 values"),
    (['1 A 50 10 10', '2 B 40 zero 0'], None, "", None, "line 8", "a* 'zero' is not a number"),
    (['1 A 50 10 10'], 2, "", None, "line 9", "NUMBER_OF_SETS is 2 but the table has 1"),
    (['1 A 50 10 10'], None, "NUMBER_OF_FIELDS 4\n", None, "line 6", "NUMBER_OF_FIELDS is 4"),
    (['1 A 50 10'], None, "", "SAMPLE_ID SAMPLE_NAME LAB_L LAB_A", "line 6", "no LAB_B field"),
])
def test_cgats_malformed_names_file_and_line(tmp_path, rows, n_sets, kw, fields, where, problem):
    text = _cgats(rows, keywords=kw, n_sets=n_sets, **({"fields": fields} if fields else {}))
    p = tmp_path / "shelf.txt"
    p.write_text(text)
    with pytest.raises(InkLibraryError) as err:
        load_ink_library(p)
    msg = str(err.value)
    assert msg.startswith(f"{p}: {where}: ") and problem in msg


def test_cgats_unclosed_data_block():
    with pytest.raises(InkLibraryError, match="BEGIN_DATA is never closed"):
        parse_ink_library(_cgats(['1 A 50 10 10']).replace("END_DATA\n", "").replace("END_DATA_FORMAT", "END_DATA_FORMAT"))


def test_missing_and_empty_files(tmp_path):
    with pytest.raises(InkLibraryError, match="no such ink library file"):
        load_ink_library(tmp_path / "nope.csv")
    (tmp_path / "empty.csv").write_text("# nothing\n")
    with pytest.raises(InkLibraryError, match="no inks found"):
        load_ink_library(tmp_path / "empty.csv")


# --------------------------------------------------------------------------- adaptation


def test_bradford_matrix_equals_lindbloom_published_d50_to_d65():
    # B. J. Lindbloom, "Chromatic Adaptation", brucelindbloom.com: the Bradford
    # D50 -> D65 matrix for his whites D50 (0.96422, 1, 0.82521) and
    # D65 (0.95047, 1, 1.08883), printed to 7 decimals (values from memory).
    published = np.array([[0.9555766, -0.0230393, 0.0631636],
                          [-0.0282895, 1.0099416, 0.0210077],
                          [0.0122982, -0.0204830, 1.3299098]])
    m = bradford_matrix([0.96422, 1.0, 0.82521], [0.95047, 1.0, 1.08883])
    np.testing.assert_allclose(m, published, atol=6e-8)


def test_adaptation_matrix_equals_css_color_4_published_matrix():
    # W3C CSS Color Module Level 4, sample code "D50_to_D65" (Bradford, whites
    # from the CIE 15:2004 chromaticities D50 (0.3457, 0.3585), D65 (0.3127, 0.3290)).
    published = np.array([[0.9554734527042182, -0.023098536874261423, 0.0632593086610217],
                          [-0.028369706963208136, 1.0099954580058226, 0.021041398966943008],
                          [0.012314001688319899, -0.020507696433477912, 1.3303659366080753]])
    from quantize.colour.adaptation import _white_xyz
    from quantize.colour.spaces import D65_WHITE_XYZ

    m = bradford_matrix(_white_xyz("D50", 2), D65_WHITE_XYZ)
    # The spec's matrix was computed with rounded intermediate matrices: agreement to 1e-6.
    np.testing.assert_allclose(m, published, atol=1e-6)


def test_adapt_lab_equals_colour_science_pipeline():
    import colour

    rng = np.random.default_rng(5)
    lab50 = np.column_stack([rng.uniform(5, 95, 50), rng.uniform(-60, 60, 50), rng.uniform(-60, 60, 50)])
    cie = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]
    xyz50 = colour.Lab_to_XYZ(lab50, illuminant=cie["D50"])
    xyz65 = colour.adaptation.chromatic_adaptation_VonKries(
        xyz50, colour.xy_to_XYZ(cie["D50"]), colour.xy_to_XYZ([0.3127, 0.3290]), transform="Bradford")
    expected = colour.XYZ_to_Lab(xyz65, illuminant=np.array([0.3127, 0.3290]))
    np.testing.assert_allclose(adapt_lab(lab50), expected, atol=1e-9)


def test_adapt_lab_maps_d50_white_to_d65_white_and_keeps_d65():
    np.testing.assert_allclose(adapt_lab([100.0, 0.0, 0.0]), [100.0, 0.0, 0.0], atol=1e-9)
    np.testing.assert_allclose(adapt_lab([[50.0, 0.0, 0.0]]), [[50.0, 0.0, 0.0]], atol=1e-9)  # neutrals stay
    np.testing.assert_array_equal(adapt_lab([40.0, 20.0, -5.0], illuminant="D65"), [40.0, 20.0, -5.0])
    assert not np.allclose(adapt_lab([40.0, 20.0, -5.0]), [40.0, 20.0, -5.0], atol=0.05)
    with pytest.raises(ValueError, match="unknown illuminant 'F99'"):
        adapt_lab([50, 0, 0], illuminant="F99")


# --------------------------------------------------------------------------- choosing inks


def _library(colours, prefix="Ink"):
    text = "".join(f"{prefix}{i},#{c[0]:02x}{c[1]:02x}{c[2]:02x}\n" for i, c in enumerate(colours))
    return parse_ink_library(text, source="demo.csv")


def _brute_force_cost(img, lib, n, substrate_rgb):
    """Independent twin: every subset, every pixel, ΔE00 from scikit-image."""
    from skimage.color import deltaE_ciede2000, rgb2lab

    px = rgb2lab(img.reshape(-1, 1, 3) / 255.0)[:, 0]
    inks = rgb2lab(lib.rgb8[None] / 255.0)[0]
    sub = rgb2lab(np.asarray(substrate_rgb, float)[None, None] / 255.0)[0, 0]
    d = np.stack([deltaE_ciede2000(px, np.broadcast_to(c, px.shape)) for c in inks], axis=1)
    base = deltaE_ciede2000(px, np.broadcast_to(sub, px.shape))
    best = min((np.minimum(d[:, list(s)].min(axis=1), base).mean(), s)
               for s in itertools.combinations(range(len(lib)), n))
    return best


@pytest.mark.parametrize("seed, m, n", [(0, 8, 3), (1, 9, 4), (2, 10, 2), (3, 10, 5), (4, 7, 3)])
def test_search_matches_brute_force_on_small_libraries(seed, m, n):
    img, inks = flat_artwork(4, seed, size=48, jpeg_quality=60)
    rng = np.random.default_rng(seed)
    # Half the library near the artwork's inks, half random: a realistic shelf with decoys.
    near = np.clip(inks[1:].astype(int) + rng.integers(-25, 26, (3, 3)), 0, 255)
    lib_rgb = np.vstack([near, rng.integers(0, 256, (m - 3, 3))]).astype(np.uint8)
    lib = _library(lib_rgb)
    sub = inks[0]
    sub_hex = "#{:02x}{:02x}{:02x}".format(*map(int, sub))
    best_cost, best_set = _brute_force_cost(img, lib, n, sub)
    sel = choose_inks(img, lib, n, substrate=sub_hex, method="search", seed=seed)
    assert sel.method == "search"
    assert sel.cost <= best_cost * 1.01 + 1e-9, (sel.chosen, best_set)
    exact = choose_inks(img, lib, n, substrate=sub_hex, method="exact")
    # scikit-image's sRGB -> Lab uses the 4-decimal IEC matrix, ours the exact one: costs agree to 1e-3.
    assert exact.cost == pytest.approx(best_cost, rel=1e-3)
    assert sorted(exact.chosen) == sorted(best_set)


def test_selection_cost_is_the_error_of_the_image_mapped_onto_the_inks():
    from quantize.render.mapping import map_picture

    img, inks = flat_artwork(4, 7, size=64, jpeg_quality=70)
    rng = np.random.default_rng(7)
    lib = _library(np.vstack([inks[1:], rng.integers(0, 256, (5, 3))]).astype(np.uint8))
    sel = choose_inks(img, lib, 3, substrate="#{:02x}{:02x}{:02x}".format(*map(int, inks[0])))
    mapped = map_picture(img, sel.palette, nearest="ciede2000")
    assert sel.cost == pytest.approx(mapped.delta_e["mean"], rel=1e-9)
    # The artwork's own inks are in the library: they are the ones chosen.
    assert sorted(lib.names[i] for i in sel.chosen) == ["Ink0", "Ink1", "Ink2"]
    assert sel.palette.locked.tolist() == [True, False, False, False]
    assert sel.palette.names[0] == "substrate"


def test_substrate_named_from_the_library_is_not_a_candidate():
    lib = _library(np.array([[255, 255, 255], [200, 16, 46], [30, 60, 150]], np.uint8))
    img = np.full((8, 8, 3), 255, np.uint8)
    img[:4] = (200, 16, 46)
    sel = choose_inks(img, lib, 2, substrate="Ink0")
    assert 0 not in sel.chosen and sel.palette.names[0] == "Ink0"
    with pytest.raises(InkLibraryError, match=r"demo.csv: asked for 3 inks but the library has only 2 besides"):
        choose_inks(img, lib, 3, substrate="Ink0")


def test_fewer_inks_than_requested():
    lib = _library(np.array([[200, 16, 46], [30, 60, 150]], np.uint8))
    with pytest.raises(InkLibraryError, match="asked for 3 inks but the library has only 2"):
        choose_inks(np.zeros((4, 4, 3), np.uint8), lib, 3)


def test_subset_cost_hand_worked():
    d = np.array([[1.0, 4.0, 9.0], [6.0, 2.0, 3.0], [5.0, 5.0, 0.5]])
    w = np.array([1.0, 2.0, 1.0])
    # {0, 2}: rows take 1, 3, 0.5 -> (1 + 6 + 0.5) / 4
    assert subset_cost(d, w, [0, 2]) == pytest.approx(7.5 / 4)
    assert subset_cost(d, w, [1], base=np.array([0.0, 9.0, 9.0])) == pytest.approx((0 + 4 + 5) / 4)


def test_snap_reports_delta_e_and_uses_each_ink_once():
    from quantize.colour.spaces import delta_e_ciede2000, srgb8_to_space

    lib = parse_ink_library("Harbour Red,50,70,45\nBay Blue,35,10,-55\nReed,60,-40,35\n", source="s.csv")
    # Two fitted colours both nearest to the red: the assignment gives them different inks.
    pal = Palette(np.array([[255, 255, 255], [205, 30, 40], [190, 40, 60]], np.uint8),
                  np.array([True, False, False]), names=("paper", None, None))
    out, snaps = snap_palette(pal, lib)
    assert out.names[0] == "paper" and out.hex[0] == "#ffffff" and out.locked.tolist() == [True, False, False]
    assert len({s["ink"] for s in snaps}) == 2 and "Harbour Red" in {s["ink"] for s in snaps}
    for s, fitted in zip(snaps, pal.rgb8[1:]):
        ink = lib.inks[lib.find(s["ink"])]
        assert s["delta_e"] == pytest.approx(float(delta_e_ciede2000(srgb8_to_space(fitted, "lab"), ink.lab)),
                                             abs=1e-3)
    with pytest.raises(InkLibraryError, match="3 colours to snap but the library has only 2"):
        snap_palette(Palette(np.array([[1, 2, 3], [4, 5, 6], [7, 8, 9]], np.uint8), None),
                     parse_ink_library("A,#000000\nB,#ffffff\n"))


def test_out_of_gamut_ink_is_noted():
    lib = parse_ink_library("# illuminant: D65\nGlacier,70,-70,-30\nGrey,50,0,0\n")
    assert lib.inks[0].gamut_de > 5 and lib.inks[1].gamut_de < 0.5
    assert any("outside sRGB" in n and "Glacier" in n for n in lib.notes)


def test_swap_search_repairs_a_greedy_start():
    # Hand-worked: half the pixels dark grey, half light grey; inks dark, mid and light grey.
    # Greedy takes the mid grey first (best single ink), then can only add one end;
    # one swap (mid -> the other end) reaches cost 0, the optimum.
    from quantize.colour.spaces import srgb8_to_space
    from quantize.separation.choice import _distance_matrix, _greedy

    img = np.zeros((4, 4, 3), np.uint8)
    img[:2], img[2:] = 50, 200
    lib = _library(np.array([[50, 50, 50], [125, 125, 125], [200, 200, 200]], np.uint8))
    px = srgb8_to_space(np.array([[50, 50, 50], [200, 200, 200]], np.uint8), "lab")
    d = _distance_matrix(px, srgb8_to_space(lib.rgb8, "lab"))
    assert {1} <= set(_greedy(d, np.array([8.0, 8.0]), 2, None))  # the greedy start holds the mid grey
    sel = choose_inks(img, lib, 2, method="search", restarts=1)
    assert sorted(sel.chosen) == [0, 2] and sel.cost == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("seed", range(6))
def test_plain_greedy_plus_swap_is_within_one_percent_of_brute_force(seed):
    # No random restarts: the greedy start and the swap search alone, M = 12 inks.
    img, inks = flat_artwork(5, 20 + seed, size=40, jpeg_quality=50)
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 6))
    near = np.clip(inks[1:].astype(int) + rng.integers(-30, 31, (4, 3)), 0, 255)
    lib = _library(np.vstack([near, rng.integers(0, 256, (8, 3))]).astype(np.uint8))
    sub = "#{:02x}{:02x}{:02x}".format(*map(int, inks[0]))
    best_cost, _ = _brute_force_cost(img, lib, n, inks[0])
    sel = choose_inks(img, lib, n, substrate=sub, method="search", restarts=1)
    assert sel.cost <= best_cost * 1.01


def test_cgats_with_two_tables_reads_both():
    table = _cgats(['1 "Kelp" 45 -30 20'])
    second = ("NUMBER_OF_FIELDS 4\nBEGIN_DATA_FORMAT\nSAMPLE_NAME LAB_L LAB_A LAB_B\nEND_DATA_FORMAT\n"
              "NUMBER_OF_SETS 1\nBEGIN_DATA\nDusk 30 20 -30\nEND_DATA\n")
    lib = parse_ink_library(table + second)
    assert lib.names == ["Kelp", "Dusk"] and lib.inks[1].line == 15  # counted by hand


def test_cgats_data_before_format_is_reported():
    text = 'CGATS.17\nBEGIN_DATA\n1 A 50 10 10\nEND_DATA\nBEGIN_DATA_FORMAT\nSAMPLE_ID\nEND_DATA_FORMAT\n'
    with pytest.raises(InkLibraryError, match=r"x.txt: line 2: BEGIN_DATA before any BEGIN_DATA_FORMAT"):
        parse_ink_library(text, source="x.txt")


def test_illuminant_whites_equal_colour_science_table():
    # colour-science ships the CIE 15:2004 chromaticities; the package carries its own copy
    # so that adapting Lab never imports colour-science (whose import changes numpy's print options).
    import colour

    from quantize.colour.adaptation import ILLUMINANTS, WHITE_XY, _white_xyz

    names = {2: "CIE 1931 2 Degree Standard Observer", 10: "CIE 1964 10 Degree Standard Observer"}
    for obs, name in names.items():
        for ill in ILLUMINANTS:
            np.testing.assert_allclose(WHITE_XY[obs][ill], colour.CCS_ILLUMINANTS[name][ill], atol=0)
            np.testing.assert_allclose(_white_xyz(ill, obs), colour.xy_to_XYZ(colour.CCS_ILLUMINANTS[name][ill]),
                                       rtol=1e-15)
