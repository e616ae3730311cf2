"""The Examples sections of the package's docstrings run and give what they show.

The source is each docstring itself: an example that no longer matches the
code fails here.
"""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import numpy as np
import pytest

import quantize

# quantize.__main__ runs the command line when imported.
# walk_packages finds the modules of every stage package too.
MODULES = sorted(m.name for m in pkgutil.walk_packages(quantize.__path__, "quantize.") if m.name != "quantize.__main__")

#: Modules whose examples are part of their documentation.
MIN_EXAMPLES = {"quantize.colour.spaces": 15}


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # an example that writes a file writes it here
    module = importlib.import_module(name)
    # Another library imported by the suite may switch numpy to its legacy
    # print format; the examples are written in the current one.
    with np.printoptions(legacy=False):
        result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE,
                                 verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples in {name} failed"
    # The colour-space conversions document themselves by example.
    assert result.attempted >= MIN_EXAMPLES.get(name, 0)
