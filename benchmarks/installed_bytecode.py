"""Give the package under test the compiled bytecode an installed copy has.

``pip install`` compiles every module to bytecode (``__pycache__``) as it
installs, so a user's first run already starts from it.  A checkout, an
editable install, or a shell with ``PYTHONDONTWRITEBYTECODE`` set (as some
containers set it) has no current bytecode, and then every process compiles
each module it imports from source: for ``quantize reduce`` about 60 modules
and, on the benchmark machine, 60-120 ms of a run, more than the colour work
on a small file.  Whole-process benchmarks call :func:`compile_installed`
first so that they time what a user runs.
"""

from __future__ import annotations

import compileall
import importlib.util
from pathlib import Path


def compile_installed(package: str = "quantize", *, root: str | Path | None = None) -> Path:
    """Write current bytecode for every module of ``package``; return the package's folder.

    ``root`` is a checkout holding the package (for benchmarks that compare
    several checkouts); by default the package the running interpreter imports.
    """
    if root is not None:
        folder = Path(root) / package
    else:
        spec = importlib.util.find_spec(package)
        if spec is None or spec.origin is None:
            raise SystemExit(f"{package} is not installed")
        folder = Path(spec.origin).parent
    # compileall writes whatever PYTHONDONTWRITEBYTECODE says; quiet=1 prints errors only.
    if not compileall.compile_dir(str(folder), quiet=1):
        raise SystemExit(f"could not compile {folder}")
    return folder
