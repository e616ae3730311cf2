"""The public API: names importable from ``quantize`` and stable."""

import importlib
import inspect

import quantize


def test_every_public_name_resolves_after_all_submodules_are_imported():
    # A submodule named like a public function would shadow it once imported
    # (quantize.kmeans once did); import everything first, then check.
    for mod in ("clustering", "fitting", "palette", "mapping", "images", "sampling", "colourspace",
                "sweep", "inks", "ink_choice", "cleanup", "separation", "selection", "refine", "measure", "output",
                "dither", "perception", "errormap", "batch"):
        importlib.import_module(f"quantize.{mod}")
    for name in quantize.__all__:
        obj = getattr(quantize, name)
        assert not inspect.ismodule(obj), name


def test_documented_signatures():
    sig = inspect.signature(quantize.kmeans)
    assert list(sig.parameters)[:2] == ["points", "k"]
    for kw in ("weights", "restarts", "seed", "fixed"):
        assert sig.parameters[kw].kind is inspect.Parameter.KEYWORD_ONLY
    assert sig.parameters["restarts"].default == 8 and sig.parameters["seed"].default == 0
    fp = inspect.signature(quantize.fit_palette)
    assert fp.parameters["k"].default == 16
    for kw in ("space", "restarts", "seed", "locked", "rule", "target"):
        assert fp.parameters[kw].kind is inspect.Parameter.KEYWORD_ONLY
    assert inspect.signature(quantize.Palette.apply).parameters["dither"].default == "none"
    assert callable(quantize.Palette.save) and callable(quantize.Palette.load)
