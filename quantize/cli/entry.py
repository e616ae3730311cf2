"""The ``quantize`` program's entry point.

Python raises Ctrl-C as a KeyboardInterrupt wherever it lands.  Once a
command runs, the command group turns it into one line and exit 130
(:mod:`quantize.cli.main`); this module does the same for the moment before,
while click and the commands are still being imported, so that an interrupt
at any moment of a run ends with one line and never a traceback.  Kept free
of imports so that nothing runs before the handler is in place.
"""

from __future__ import annotations

import sys

__all__ = ["run"]


def run() -> None:
    """Load the command line and run it (the ``quantize`` console script and ``python -m quantize``)."""
    try:
        from quantize.cli.main import main
    except KeyboardInterrupt:
        sys.stderr.write("quantize: interrupted; nothing half-written is left\n")
        raise SystemExit(130) from None
    main(prog_name="quantize")
