"""The ``quantize`` program's entry point.

Python raises Ctrl-C as a KeyboardInterrupt wherever it lands.  Once a
command runs, the command group turns it into one line and exit 130
(:mod:`quantize.cli.main`); this module does the same for the moment before,
while click and the commands are still being imported, so that an interrupt
at any moment of a run ends with one line and never a traceback.  Kept free
of imports so that nothing runs before the handler is in place.

The program (not the library) also decides one thing about its own process
before numpy is imported: numpy asks Linux for transparent huge pages for
every large array (``NUMPY_MADVISE_HUGEPAGE``, on by default), and where the
kernel then defragments memory on demand (``defrag`` set to ``madvise``, the
usual setting), the first touch of the 128 MB colour histogram of an 8-bit
image costs 0.2 to 0.5 s of kernel time at random.  Measured on a 12 MP photo
at ``-k 8``, whole process, four runs each, alternating (see
docs/benchmarks.md): system time 0.39-0.63 s with huge pages against 0.27-0.30
without, peak memory 357 MiB against 278, user time equal within noise.  So
the ``quantize`` command turns them off for itself and the worker processes it
starts, unless the user has set the variable.  A program that imports the
library keeps numpy's setting, whatever it is.
"""

from __future__ import annotations

import os
import sys

__all__ = ["run"]


def run() -> None:
    """Load the command line and run it (the ``quantize`` console script and ``python -m quantize``)."""
    os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")
    try:
        from quantize.cli.main import main
    except KeyboardInterrupt:
        sys.stderr.write("quantize: interrupted; nothing half-written is left\n")
        raise SystemExit(130) from None
    main(prog_name="quantize")
