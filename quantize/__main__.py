"""``python -m quantize``: the same command line as ``quantize``."""

from quantize.cli.main import main

main(prog_name="quantize")
