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
    assert {"space", "restarts", "seed", "locked", "rule", "target", "init", "metric", "refine"} <= fields
    assert inspect.signature(quantize.Palette.apply).parameters["dither"].default == "none"
    assert callable(quantize.Palette.save) and callable(quantize.Palette.load)


@pytest.mark.skipif(not os.environ.get("CI"), reason="CI installs the package; a developer may use an editable install")
def test_ci_tests_the_installed_package_not_the_checkout():
    checkout = Path(__file__).resolve().parents[1]
    # The checkout's own package folder, not a copy installed (in a venv that may sit inside the checkout).
    assert Path(quantize.__file__).resolve().parent != checkout / "quantize"
    assert "site-packages" in Path(quantize.__file__).resolve().parts
