"""matplotlib, an optional dependency: the plots ask for it by name when it is missing.

The sweep plot (and the report page that shows it) and the error map draw with
matplotlib; nothing else in the package needs it. It is the ``plots`` extra
(``pip install "quantize-palette[plots]"``), so that an install that only
reduces images and makes films goes without it (pyproject.toml gives the
measured sizes). :func:`require_matplotlib` is called where a plot is asked
for, before any work, so that a missing matplotlib is one clear line rather
than an ImportError traceback after the sweep.
"""

from __future__ import annotations

import importlib.util

from quantize.errors import QuantizeError

__all__ = ["PLOTS_EXTRA", "PlotsUnavailable", "has_matplotlib", "require_matplotlib"]

#: What to install for the plots.
PLOTS_EXTRA = "quantize-palette[plots]"


class PlotsUnavailable(QuantizeError):
    """A plot was asked for and matplotlib is not installed."""


def has_matplotlib() -> bool:
    """True if matplotlib can be imported (it is not imported here)."""
    import sys

    if "matplotlib" in sys.modules:  # imported already, or blocked (None) as `python -X` hides a module
        return sys.modules["matplotlib"] is not None
    try:
        return importlib.util.find_spec("matplotlib") is not None
    except (ImportError, ValueError):
        return False


def require_matplotlib(what: str) -> None:
    """Raise :class:`PlotsUnavailable` naming ``what`` and the extra to install, if matplotlib is missing.

    Parameters
    ----------
    what : str
        What needs it, as the user asked for it (an option or a function), e.g. ``"--plot"``.

    Raises
    ------
    PlotsUnavailable
        matplotlib is not installed.
    """
    if not has_matplotlib():
        raise PlotsUnavailable(f"{what} draws with matplotlib, which is not installed; "
                               f"install it with: pip install \"{PLOTS_EXTRA}\"")
