"""The installed distribution: its own name on the package index, one version, the licence it claims.

Sources: the core metadata specification (packaging.python.org, "Core metadata
specifications", version 2.4: ``Name``, ``Version``, ``License-Expression``)
and the SPDX licence list for the identifier "BSD-3-Clause".
"""

import sys
from importlib import metadata
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

import quantize

DIST = "quantize-palette"


def test_the_distribution_has_its_own_name_and_one_version():
    meta = metadata.metadata(DIST)
    assert meta["Name"] == DIST
    assert meta["Version"] == quantize.__version__  # the version is defined once, in the package
    assert meta["License-Expression"] == "BSD-3-Clause"
    classifiers = meta.get_all("Classifier")
    assert "Programming Language :: Python :: 3.11" in classifiers
    # The command keeps the import name.
    (script,) = [e for e in metadata.entry_points(group="console_scripts") if e.name == "quantize"]
    assert script.value == "quantize.cli.entry:run"


def test_the_licence_file_is_the_licence_claimed():
    root = Path(__file__).resolve().parents[1]
    text = (root / "LICENSE").read_text(encoding="utf-8")
    # The three conditions of the SPDX "BSD-3-Clause" text.
    assert text.startswith("BSD 3-Clause License")
    assert "Redistributions of source code must retain" in text
    assert "Redistributions in binary form must reproduce" in text
    assert "Neither the name of the copyright holder" in text


def test_the_command_reports_the_package_version():
    from click.testing import CliRunner

    from quantize.cli.main import main

    res = CliRunner().invoke(main, ["--version"])
    assert res.exit_code == 0 and res.output.strip() == f"quantize, version {quantize.__version__}"


# --- matplotlib is the "plots" extra -------------------------------------------------------------
# What needs it must say so in one line, naming the extra, before any work (nothing written).


def _requirements(extra=None):
    """The distribution's requirement names, of the default install or of one extra."""
    import re

    out = set()
    for req in metadata.requires(DIST) or []:
        name = re.match(r"[A-Za-z0-9_.-]+", req).group(0).lower()
        in_extra = re.search(r"extra\s*==\s*['\"]([^'\"]+)['\"]", req)
        if (in_extra.group(1) if in_extra else None) == extra:
            out.add(name)
    return out


def test_matplotlib_is_an_extra_and_the_tests_install_it():
    assert "matplotlib" not in _requirements()
    assert "matplotlib" in _requirements("plots")
    assert "matplotlib" in _requirements("test")
    assert "mypy" in _requirements("test")


@pytest.fixture
def no_matplotlib(monkeypatch):
    """matplotlib as if not installed: a None entry in sys.modules makes every import of it fail
    (the entries are restored afterwards)."""
    for name in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.delitem(sys.modules, name)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(ImportError):
        import matplotlib  # noqa: F401
    yield


def _one_line_naming_the_extra(text):
    lines = [ln for ln in text.splitlines() if "matplotlib" in ln]
    assert len(lines) == 1, text
    assert 'pip install "quantize-palette[plots]"' in lines[0]
    assert "Traceback" not in text


@pytest.mark.parametrize("option", ["--plot", "--report"])
def test_a_sweep_plot_without_matplotlib_names_the_extra(no_matplotlib, tmp_path, option):
    from click.testing import CliRunner

    from quantize.cli.main import main

    src = tmp_path / "in.png"
    Image.fromarray(np.arange(48, dtype=np.uint8).reshape(4, 4, 3) * 5).save(src)
    target = tmp_path / ("plot.png" if option == "--plot" else "report")
    res = CliRunner().invoke(main, ["sweep", str(src), "-k", "2-3", option, str(target)])
    assert res.exit_code == 2, res.output
    _one_line_naming_the_extra(res.stderr)
    assert option in res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.png"]  # stopped before any work


def test_an_error_map_without_matplotlib_names_the_extra(no_matplotlib, tmp_path):
    from click.testing import CliRunner

    from quantize.cli.main import main

    src = tmp_path / "in.png"
    Image.fromarray(np.arange(48, dtype=np.uint8).reshape(4, 4, 3) * 5).save(src)
    res = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / "out.png"), "-k", "2",
                                    "--error-map", str(tmp_path / "map.png")])
    assert res.exit_code == 2, res.output
    _one_line_naming_the_extra(res.stderr)
    assert "--error-map" in res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.png"]  # not the image either


def test_the_library_plots_without_matplotlib_raise_a_clear_error(no_matplotlib, tmp_path):
    from quantize.report.errormap import save_error_map
    from quantize.report.page import plot_sweep, save_swatches
    from quantize.report.plotlib import PlotsUnavailable

    img = np.arange(48, dtype=np.uint8).reshape(4, 4, 3) * 5
    pal = quantize.fit_palette(img, 2)
    with pytest.raises(PlotsUnavailable) as err:
        save_error_map(tmp_path / "map.png", img, pal.apply(img))
    _one_line_naming_the_extra(str(err.value))
    res = quantize.sweep(img, (2, 3))
    with pytest.raises(PlotsUnavailable) as err:
        plot_sweep(res, tmp_path / "plot.png")
    _one_line_naming_the_extra(str(err.value))
    assert list(tmp_path.iterdir()) == []
    # The swatch strip draws with Pillow only: it still works, with Pillow's own font.
    save_swatches(res, tmp_path / "swatches.png")
    with Image.open(tmp_path / "swatches.png") as im:
        assert im.height >= 2 * 34  # a row per size swept (34 px each by default) under a heading


def test_the_package_ships_its_type_information():
    # PEP 561 ("Distributing and Packaging Type Information"): a py.typed marker in the package folder,
    # installed with it, tells type checkers to use the package's own annotations.
    assert (Path(quantize.__file__).parent / "py.typed").is_file()
    installed = {str(f).replace("\\", "/") for f in metadata.files(DIST) or []}
    if not any(f.startswith("quantize/") for f in installed):
        pytest.skip("an editable install lists no package files; CI installs the package (.ci/run)")
    assert "quantize/py.typed" in installed
