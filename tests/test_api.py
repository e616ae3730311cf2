"""The public API: names importable from ``quantize`` and stable."""

import importlib
import os
import pkgutil
from pathlib import Path
import dataclasses
import inspect

import pytest

import quantize


def test_every_public_name_resolves_after_all_submodules_are_imported():
    # A submodule named like a public function would shadow it once imported
    # (quantize.kmeans once did); import everything first, then check.
    for info in pkgutil.walk_packages(quantize.__path__, "quantize."):
        if not info.name.endswith("__main__"):
            importlib.import_module(info.name)
    for name in quantize.__all__:
        obj = getattr(quantize, name)
        assert not inspect.ismodule(obj), name


def test_documented_signatures():
    sig = inspect.signature(quantize.kmeans)
    assert list(sig.parameters)[:2] == ["points", "k"]
    for kw in ("weights", "restarts", "seed", "fixed"):
        assert sig.parameters[kw].kind is inspect.Parameter.KEYWORD_ONLY
    assert sig.parameters["restarts"].default == 8 and sig.parameters["seed"].default == 0
    # One default palette-size range for the library and every command.
    from quantize.cli._common import DEFAULT_K_TEXT
    from quantize.fit.settings import DEFAULT_K

    assert DEFAULT_K == (2, 12) and DEFAULT_K_TEXT == "2-12"
    # fit_palette's None means DEFAULT_K, or up to 256 colours for continuous tone under the auto rule.
    for fn, default in ((quantize.fit_palette, None), (quantize.sweep, DEFAULT_K)):
        sig = inspect.signature(fn)
        assert list(sig.parameters.values())[1].default == default
        # The fit options are fields of one settings object, passed whole or by keyword.
        assert sig.parameters["settings"].kind is inspect.Parameter.KEYWORD_ONLY
        assert sig.parameters["options"].kind is inspect.Parameter.VAR_KEYWORD
        assert len(sig.parameters) <= 10
    fields = {f.name for f in dataclasses.fields(quantize.FitSettings)}
    assert {"space", "restarts", "seed", "locked", "rule", "target", "seeding", "nearest", "refine"} <= fields
    assert not {"init", "metric"} & fields  # the old names are no fields, only deprecated keywords
    assert inspect.signature(quantize.Palette.apply).parameters["dither"].default == "none"
    assert callable(quantize.Palette.save) and callable(quantize.Palette.load)


@pytest.mark.skipif(not os.environ.get("CI"), reason="CI installs the package; a developer may use an editable install")
def test_ci_tests_the_installed_package_not_the_checkout():
    checkout = Path(__file__).resolve().parents[1]
    # The checkout's own package folder, not a copy installed (in a venv that may sit inside the checkout).
    assert Path(quantize.__file__).resolve().parent != checkout / "quantize"
    assert "site-packages" in Path(quantize.__file__).resolve().parts


# -- one vocabulary: the library's keywords are the command line's option names ------------------

def _picture():
    import numpy as np

    rgb = np.zeros((12, 12, 3), np.uint8)
    rgb[:, 6:] = (200, 30, 40)
    rgb[:4] = (250, 240, 220)
    rgb[8:, :3] = (20, 60, 160)
    return rgb


def test_reduce_options_are_library_keywords():
    """Every fitting, mapping and dithering option of ``reduce`` is a keyword of fit_palette or Palette.apply."""
    from quantize.cli.reduce import reduce

    fit_words = {f.name for f in dataclasses.fields(quantize.FitSettings)}
    fit_words |= set(inspect.signature(quantize.fit_palette).parameters)
    apply_words = set(inspect.signature(quantize.Palette.apply).parameters)
    cli_only = {"output", "force", "json", "report", "keep_palette", "view_dpi", "view_distance", "error_map",
                "error_map_kind", "help",
                "cmyk_profile"}  # how a file is read: load_image's keyword (and io.read.assume_cmyk_profile)
    # -k/--colours is the positional k; every other option's first long name is its library keyword.
    known = {"colours": "k", "serpentine": "serpentine"}
    for p in reduce.params:
        longs = [o for o in p.opts + p.secondary_opts if o.startswith("--")]
        if not longs:
            continue
        name = longs[0][2:].replace("-", "_")
        if name in cli_only:
            continue
        word = known.get(name, name)
        assert word in fit_words or word in apply_words, f"--{name} has no library keyword {word!r}"


def test_new_keywords_equal_the_old_ones_which_warn():
    import warnings

    import numpy as np

    img = _picture()
    filters = list(warnings.filters)
    new = quantize.fit_palette(img, 3, seeding="random", nearest="space", restarts=2)
    with pytest.warns(DeprecationWarning, match="'init' is now 'seeding'"):
        old = quantize.fit_palette(img, 3, init="random", metric="space", restarts=2)
    assert new.hex == old.hex and new.fit.seeding == "random" and new.fit.nearest == "space"
    with pytest.warns(DeprecationWarning, match="'metric' is now 'nearest'"):
        quantize.sweep(img, (2, 3), metric="space", restarts=1)
    s = quantize.sweep(img, (2, 3), seeding="farthest", nearest="auto", restarts=1)
    assert s.settings.seeding == "farthest" and s.settings.nearest == "ciede2000"
    a = new.apply(img, dither="floyd-steinberg", dither_strength=0.5, nearest="space")
    with pytest.warns(DeprecationWarning, match="'strength' is now 'dither_strength'"):
        b = new.apply(img, dither="floyd-steinberg", strength=0.5, metric="space")
    np.testing.assert_array_equal(a.indices, b.indices)
    # A weaker dither changes the result: the keyword reaches the dither.
    full = new.apply(img, dither="floyd-steinberg", dither_strength=1.0, nearest="space")
    none = new.apply(img, dither="floyd-steinberg", dither_strength=0.0, nearest="space")
    np.testing.assert_array_equal(none.indices, new.apply(img, nearest="space").indices)
    assert not np.array_equal(full.indices, none.indices)
    with pytest.raises(TypeError, match="give 'nearest' only"):
        new.apply(img, nearest="space", metric="space")
    with pytest.raises(TypeError, match="give 'seeding' only"):
        quantize.fit_palette(img, 3, seeding="random", init="random")
    assert warnings.filters == filters  # warned through warnings.warn; no filter was changed


def test_map_picture_speaks_the_command_line_vocabulary_and_warns_on_old_names():
    import warnings

    import numpy as np

    from quantize.palette import Palette
    from quantize.render.mapping import map_picture

    img = np.zeros((8, 8, 3), np.uint8)
    img[:, 4:] = (200, 30, 40)
    pal = Palette(np.array([[0, 0, 0], [200, 30, 40]], np.uint8), None)
    new = map_picture(img, pal, nearest="ciede2000", dither="floyd-steinberg", dither_strength=0.5)
    filters = list(warnings.filters)
    with pytest.warns(DeprecationWarning, match="metric"):
        old = map_picture(img, pal, metric="ciede2000", dither="floyd-steinberg", strength=0.5)
    assert warnings.filters == filters
    np.testing.assert_array_equal(new.indices, old.indices)
    with pytest.raises(TypeError, match="both"):
        map_picture(img, pal, metric="ciede2000", nearest="space")


def test_settings_and_record_fields_are_the_command_line_names_and_the_old_ones_warn():
    import warnings

    from quantize.palette import FitRecord

    filters = list(warnings.filters)
    new = quantize.FitSettings(seeding="farthest", nearest="space", restarts=2)
    with pytest.warns(DeprecationWarning, match="'init' is now 'seeding'"):
        old = quantize.FitSettings(init="farthest", metric="space", restarts=2)
    assert old == new and (old.seeding, old.nearest) == ("farthest", "space")
    with pytest.warns(DeprecationWarning, match="'metric' is now 'nearest'"):
        assert quantize.FitSettings.of(new, metric="ciede2000").nearest == "ciede2000"
    with pytest.warns(DeprecationWarning, match="FitSettings.init is now FitSettings.seeding"):
        assert new.init == "farthest"
    with pytest.raises(TypeError, match="give 'seeding' only"):
        quantize.FitSettings(seeding="random", init="random")
    with pytest.raises(ValueError, match="unknown seeding 'best'"), pytest.warns(DeprecationWarning):
        quantize.FitSettings(init="best")
    # "auto", the command line's default, means the default metric here too.
    assert quantize.FitSettings(nearest="auto").nearest == "ciede2000"
    with pytest.warns(DeprecationWarning, match="'metric' is now 'nearest'"):
        rec = FitRecord(init="random", metric="space")
    assert (rec.seeding, rec.nearest) == ("random", "space")
    assert rec.to_dict() == {"seeding": "random", "nearest": "space"}  # the file speaks the new names
    with pytest.warns(DeprecationWarning, match="FitRecord.metric is now FitRecord.nearest"):
        assert rec.metric == "space"
    # The settings a record was made with come back under the same names.
    assert quantize.FitSettings.from_record(rec).seeding == "random"
    assert warnings.filters == filters
