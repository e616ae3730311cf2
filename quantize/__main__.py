"""``python -m quantize``: the same command line as ``quantize``."""

from quantize.cli.entry import run

run()
