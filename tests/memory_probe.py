"""Run reader and command-line cases in this process and report each one's peak resident memory.

Used by tests/test_memory_bound.py in a child process: ``python memory_probe.py CASES.json``. Resident
memory (Linux's VmHWM, reset before each case through /proc/self/clear_refs) counts every page the case
touched: Python objects, numpy arrays and the C buffers of Pillow's and zlib's decoders alike, which
tracemalloc does not see. The address space is limited (RLIMIT_AS) to what the process holds after a
warm-up plus :data:`HEADROOM`, so that a blow-up fails fast as a MemoryError instead of swapping a shared
machine; a case refused for want of memory is reported as such and fails the test.

Prints one JSON line per case: name, peak growth in bytes, and what happened.
"""

from __future__ import annotations

import json
import resource
import sys
import traceback
import warnings
from pathlib import Path

#: Address space allowed beyond the warmed-up process (bytes).
HEADROOM = 1 << 30


def _status(field: str) -> int:
    """A memory field of /proc/self/status, in bytes."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) * 1024
    raise KeyError(field)


def _reset_peak() -> None:
    # Writing 5 to clear_refs resets the peak resident set size (VmHWM) to the current one (Linux 4.0+).
    Path("/proc/self/clear_refs").write_text("5")


def _pillow_decode(path: str):
    from PIL import Image

    with Image.open(path) as img:
        img.load()
        return img.size


def _read(reader: str, path: str):
    from quantize.io.read import load_image
    from quantize.palette import Palette
    from quantize.separation.inks import load_ink_library

    readers = {"image": load_image, "palette": Palette.load, "inks": load_ink_library, "pillow": _pillow_decode}
    return readers[reader](path)


def _run(case: dict) -> dict:
    from click.testing import CliRunner

    from quantize.cli.main import main
    from quantize.errors import QuantizeError

    out: dict = {"name": case["name"]}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if case["kind"] == "read":
            try:
                _read(case["reader"], case["path"])
                out["result"] = "read"
            except QuantizeError as exc:
                out["result"], out["message"] = "refused", str(exc)
            except BaseException as exc:  # noqa: BLE001 - what escapes is what the test reports
                out["result"] = "exception"
                out["message"] = "".join(traceback.format_exception_only(type(exc), exc))[-500:]
        else:
            res = CliRunner().invoke(main, case["args"])
            out["result"] = "exit"
            out["exit_code"] = res.exit_code
            out["stderr"] = res.stderr[-2000:]
            if res.exception is not None and not isinstance(res.exception, SystemExit):
                out["result"] = "exception"
                out["message"] = "".join(traceback.format_exception(
                    type(res.exception), res.exception, res.exception.__traceback__))[-1500:]
    return out


def main(cases_file: str) -> None:
    cases = json.loads(Path(cases_file).read_text())
    for case in cases:
        if case.get("warm_up"):
            _run(case)  # imports and first-use caches are not the case's memory
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    limit = _status("VmSize") + HEADROOM
    if hard == resource.RLIM_INFINITY or limit < hard:
        resource.setrlimit(resource.RLIMIT_AS, (limit, hard))
    for case in cases:
        if case.get("warm_up"):
            continue
        before = _status("VmRSS")
        _reset_peak()
        out = _run(case)
        out["peak_growth"] = _status("VmHWM") - before
        print(json.dumps(out), flush=True)


if __name__ == "__main__":
    main(sys.argv[1])
