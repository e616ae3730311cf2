"""The installed distribution: its own name on the package index, one version, the licence it claims.

Sources: the core metadata specification (packaging.python.org, "Core metadata
specifications", version 2.4: ``Name``, ``Version``, ``License-Expression``)
and the SPDX licence list for the identifier "BSD-3-Clause".
"""

from importlib import metadata
from pathlib import Path

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
    assert script.value == "quantize.cli.main:main"


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
