"""The Palette object, its colour parsing and its JSON file."""

import json

import numpy as np
import pytest

from quantize import Palette, PaletteFileError, parse_colour
from quantize.colour.spaces import srgb_to_lab


def test_parse_hex_and_lab():
    np.testing.assert_array_equal(parse_colour("#c8102e"), [200, 16, 46])
    np.testing.assert_array_equal(parse_colour("C8102E"), [200, 16, 46])
    # L*=100, a*=b*=0 is the D65 white of sRGB (IEC 61966-2-1): #ffffff.
    np.testing.assert_array_equal(parse_colour("100,0,0"), [255, 255, 255])
    np.testing.assert_array_equal(parse_colour((0, 0, 0)), [0, 0, 0])


@pytest.mark.parametrize("bad", ["#12345", "reddish", "1,2", "120,0,0", "a,b,c", "#ffff", "fff", "#ggg",
                                 "\uff52ed", "light blue"])
def test_parse_rejects(bad):
    # "fff": the short form needs its "#"; "\uff52ed" (a full-width r): CSS folds ASCII case only.
    with pytest.raises(ValueError, match="colour|L\\*"):
        parse_colour(bad)


@pytest.mark.parametrize("short, long", [("#fff", "#ffffff"), ("#000", "#000000"), ("#FA0", "#ffaa00"),
                                         ("#1e9", "#11ee99")])
def test_parse_short_hex_doubles_each_digit(short, long):
    # CSS Color Module Level 4, section 5.2 (the hex notation): "#rgb" is "#rrggbb" with each digit doubled.
    np.testing.assert_array_equal(parse_colour(short), parse_colour(long))


# Values as the W3C's CSS Color Module Level 4, section 6.1 "Named Colors", lists them.
@pytest.mark.parametrize("name, rgb", [
    ("rebeccapurple", (102, 51, 153)), ("cornflowerblue", (100, 149, 237)), ("papayawhip", (255, 239, 213)),
    ("darkgoldenrod", (184, 134, 11)), ("lightslategray", (119, 136, 153)), ("lightslategrey", (119, 136, 153)),
    ("teal", (0, 128, 128)), ("white", (255, 255, 255)), ("black", (0, 0, 0)), ("red", (255, 0, 0)),
    ("orange", (255, 165, 0)), ("mediumspringgreen", (0, 250, 154)),
])
def test_css_colour_names_give_the_specifications_values(name, rgb):
    np.testing.assert_array_equal(parse_colour(name), rgb)
    np.testing.assert_array_equal(parse_colour(f" {name.upper()} "), rgb)  # ASCII case-insensitive, as CSS


def test_the_css_table_holds_the_specifications_148_names():
    from PIL import ImageColor

    from quantize.colour.css_names import CSS_COLOURS

    # CSS Color Module Level 4 lists 148 named colours (gray/grey spellings counted apart; "transparent"
    # and "currentcolor" are keywords, not named colours).  Pillow's ImageColor carries its own copy of
    # the list: a second reader of the same standard, checked name by name.
    assert len(CSS_COLOURS) == 148
    # (Pillow replaces its table's entries by tuples once read: compare through getrgb.)
    assert set(CSS_COLOURS) == set(ImageColor.colormap)
    assert all(parse_colour(n).tolist() == list(ImageColor.getrgb(n)) for n in CSS_COLOURS)


def make_palette():
    rgb = np.array([[244, 239, 225], [200, 16, 46], [31, 58, 92]], np.uint8)
    return Palette(rgb, locked=[True, False, False], names=("paper", None, "navy"),
                   fit={"k": 3, "seed": np.int64(4), "scores": np.array([1.5, 2.5])})


def test_json_round_trip(tmp_path):
    pal = make_palette()
    p = pal.save(tmp_path / "p.json")
    doc = json.loads(p.read_text())
    assert doc["format"] == "quantize.palette" and doc["version"] == 1
    assert [c["hex"] for c in doc["colours"]] == ["#f4efe1", "#c8102e", "#1f3a5c"]
    # Lab stored beside hex agrees with an independent sRGB->Lab conversion.
    np.testing.assert_allclose(doc["colours"][1]["lab"], srgb_to_lab(np.array([200, 16, 46]) / 255), atol=1e-3)
    back = Palette.load(p)
    np.testing.assert_array_equal(back.rgb8, pal.rgb8)
    np.testing.assert_array_equal(back.locked, pal.locked)
    assert back.names == pal.names and back.space == "lab"
    assert back.fit.extra["scores"] == [1.5, 2.5]


def test_save_refuses_existing_without_force(tmp_path):
    from quantize.errors import OutputError

    pal = make_palette()
    p = tmp_path / "p.json"
    p.write_text("keep me")
    with pytest.raises(OutputError):
        pal.save(p)
    assert p.read_text() == "keep me"
    pal.save(p, force=True)
    assert Palette.load(p).k == 3


def _write(tmp_path, doc):
    p = tmp_path / "bad.json"
    p.write_text(doc if isinstance(doc, str) else json.dumps(doc))
    return p


GOOD = {"format": "quantize.palette", "version": 1, "space": "lab",
        "colours": [{"hex": "#000000", "lab": [0, 0, 0], "locked": False}]}


@pytest.mark.parametrize("mutate, where", [
    (lambda d: "{not json", "line 1"),
    (lambda d: {**d, "format": "something-else"}, "format"),
    (lambda d: {**d, "version": 9}, "version 9"),
    (lambda d: {**d, "space": "hsv"}, "space"),
    (lambda d: {**d, "colours": []}, "colours"),
    (lambda d: {**d, "colours": [{"hex": "#zz0000"}]}, "colours\\[0\\].hex"),
    (lambda d: {**d, "colours": [{"hex": "#000000", "locked": "yes"}]}, "colours\\[0\\].locked"),
    (lambda d: {**d, "colours": [{"hex": "#000000", "lab": [50, 0, 0]}]}, "disagrees"),
    (lambda d: {**d, "colours": [{"hex": "#000000"}, {"hex": "#000000"}]}, "twice"),
])
def test_bad_files_name_file_and_place(tmp_path, mutate, where):
    p = _write(tmp_path, mutate(GOOD))
    with pytest.raises(PaletteFileError, match=where) as info:
        Palette.load(p)
    assert str(p) in str(info.value)


def test_missing_and_folder(tmp_path):
    with pytest.raises(PaletteFileError, match="no such"):
        Palette.load(tmp_path / "nope.json")
    with pytest.raises(PaletteFileError, match="folder"):
        Palette.load(tmp_path)


def test_one_locked_colour_may_be_given_on_its_own():
    # A bare hex string or one L, a, b triple is one colour, not a sequence
    # of characters or numbers.  Lab of sRGB white (IEC 61966-2-1): L* = 100.
    from quantize.palette import parse_locked

    assert parse_locked("#f0e6d2", 3).tolist() == [[240, 230, 210]]
    assert parse_locked((100.0, 0.0, 0.0), 3).tolist() == [[255, 255, 255]]
    assert parse_locked(["#f0e6d2", (100, 0, 0)], 3).tolist() == [[240, 230, 210], [255, 255, 255]]
    with pytest.raises(ValueError, match="given twice"):
        parse_locked(["#FFFFFF", (100, 0, 0)], 3)
    with pytest.raises(ValueError, match="do not fit in a palette of 1"):
        parse_locked(["#000000", "#ffffff"], 1)


def test_fit_palette_takes_a_bare_locked_colour_and_checks_it_before_reading(tmp_path):
    from quantize import fit_palette

    rgb = np.zeros((8, 8, 3), np.uint8)
    rgb[:, 4:] = [200, 30, 40]
    pal = fit_palette(rgb, 3, locked="#f0e6d2")
    assert pal.hex[0] == "#f0e6d2" and bool(pal.locked[0])
    # A bad lock fails before the (missing) image is opened.
    with pytest.raises(ValueError, match="neither sRGB hex"):
        fit_palette(tmp_path / "missing.png", 3, locked="not a colour")


# -- the fit record --------------------------------------------------------------

def _old_format_doc():
    """A palette file as the previous release wrote it (its ``fit`` keys and value types, by hand)."""
    cand = {"k": 2, "inertia": 10.5, "delta_e": {"mean": 3.0, "median": 2.5, "p95": 7.0, "max": 9.0},
            "robust_error": 8.0, "score": 400.0}
    return {
        "format": "quantize.palette", "version": 1, "space": "lab",
        "colours": [{"hex": "#f4efe1", "lab": None, "locked": False, "name": None},
                    {"hex": "#c8102e", "locked": False, "name": None}],
        "fit": {"k": 2, "rule": "bic", "reason": "penalised score 400.0, the lowest over k = 2..3",
                "k_requested": [2, 3], "space": "lab", "restarts": 8, "seed": None, "init": "k-means++",
                "weighting": "equal", "metric": "ciede2000", "refine": "robust", "target": None,
                "target_stat": "mean", "images": ["poster.png"], "n_pixels": 100, "n_distinct": 40,
                "inertia": 10.5, "refined": "robust", "delta_e": cand["delta_e"],
                "candidates": [cand, dict(cand, k=3, score=410.0)], "notes": []},
    }


def test_a_file_written_by_the_previous_release_loads_and_writes_back_its_keys(tmp_path):
    doc = _old_format_doc()
    p = tmp_path / "old.json"
    p.write_text(json.dumps(doc))
    pal = Palette.load(p)
    fit = pal.fit
    assert fit.k == 2 and fit.rule == "bic" and fit.k_requested == (2, 3) and fit.seed is None
    assert [c.k for c in fit.candidates] == [2, 3] and fit.candidates[1].score == 410.0
    assert fit.images == ("poster.png",) and fit.notes == () and fit.extra == {}
    # The settings once written as "init" and "metric" load under the command line's names ...
    assert (fit.seeding, fit.nearest) == ("k-means++", "ciede2000") and "init" not in fit.extra
    from quantize.fit.settings import FitSettings

    again = FitSettings.from_record(fit)  # the palette can be refitted as it was
    assert (again.seeding, again.nearest, again.rule) == ("k-means++", "ciede2000", "bic")
    # ... and written back, the fit object has the file's keys and values, those two renamed.
    renamed = {{"init": "seeding", "metric": "nearest"}.get(k, k): v for k, v in doc["fit"].items()}
    assert pal.to_dict()["fit"] == renamed


def test_unfitted_palettes_have_no_record_and_write_an_empty_fit(tmp_path):
    pal = Palette(np.array([[1, 2, 3]], np.uint8), None)
    assert pal.fit is None and pal.to_dict()["fit"] == {}
    doc = _old_format_doc()
    del doc["fit"]
    p = tmp_path / "hand.json"
    p.write_text(json.dumps(doc))
    assert Palette.load(p).fit is None


def test_a_record_cannot_be_changed_after_construction():
    import dataclasses

    from quantize.palette import FitRecord

    rec = FitRecord(k=3, notes=["a"])
    assert rec.notes == ("a",)
    with pytest.raises(dataclasses.FrozenInstanceError):
        rec.k = 4


def test_bad_candidate_rows_are_refused_with_the_place(tmp_path):
    doc = _old_format_doc()
    doc["fit"]["candidates"] = [{"k": 2}]
    p = tmp_path / "bad.json"
    p.write_text(json.dumps(doc))
    with pytest.raises(PaletteFileError, match=r"fit.candidates\[0\]"):
        Palette.load(p)


def test_unknown_space_is_refused():
    with pytest.raises(ValueError, match="unknown colour space 'bogus'"):
        Palette(np.array([[1, 2, 3]], np.uint8), None, space="bogus")
