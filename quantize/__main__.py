"""``python -m quantize``: the same command line as ``quantize``."""

from .cli import main

main(prog_name="quantize")
