"""Speed of the dithering stage, every contender side by side in one run.

A 12-megapixel photograph (scikit-image's ``astronaut`` sample, 512 x 512,
enlarged to 4000 x 3000 with bicubic resampling and given seeded sensor-like
noise of 2 codes so that it holds about as many distinct colours as a real
photo) is reduced to a 16-colour palette fitted to the original sample.
Every method runs once on a small image first, so compilation (or loading the
compiled kernels from numba's disk cache) is not timed; then each timing is
the best of ``--repeat`` runs.  ``ratio`` is the time over that of plain
nearest-colour mapping (the engine's ``map_picture`` without dither).

Run from the repository root::

    /work/venv/bin/python benchmarks/bench_dither.py            # prints the table
    /work/venv/bin/python benchmarks/bench_dither.py --write    # also docs/benchmarks_dither.md
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def _photo(width=4000, height=3000, seed=0):
    from PIL import Image
    from skimage import data

    big = np.asarray(Image.fromarray(data.astronaut()).resize((width, height), Image.BICUBIC), dtype=np.float64)
    noise = np.random.default_rng(seed).normal(0.0, 2.0, big.shape)
    return np.clip(np.rint(big + noise), 0, 255).astype(np.uint8)


def _best(fn, repeat):
    """Best wall-clock time of ``repeat`` runs, and the process CPU time of that run.

    The CPU time is what an otherwise idle machine would need for the
    sequential parts; on a shared machine the wall time can be much longer.
    """
    best = (float("inf"), float("inf"))
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        run = (time.perf_counter() - t0, time.process_time() - c0)
        best = min(best, run)
    return best


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--write", action="store_true", help="write docs/benchmarks_dither.md")
    args = parser.parse_args(argv)

    import numba
    from skimage import data

    from quantize.core.picture import Picture
    from quantize.fit.engine import fit_palette
    from quantize.io.read import as_picture
    from quantize.quality.perception import filtered_delta_e
    from quantize.render.dither import DITHERS, dither_indices

    img = _photo()
    pic = as_picture(img)
    pal = fit_palette(data.astronaut(), k=16, restarts=2, seed=0)
    small = as_picture(img[:64, :64].copy())
    for name in DITHERS:  # compile / load every kernel before timing
        pal.apply(small, dither=name)

    def fresh():
        # A new Picture per run: the engine keeps each Picture's colour sample,
        # and a run on a newly read image cannot use it.
        return Picture(rgb=img)

    rows = []
    base = _best(lambda: pal.apply(fresh()), args.repeat)
    rows.append(("none (nearest colour, engine mapping)", base))
    for name, m in DITHERS.items():
        if m.kind == "none":
            continue
        if m.kind == "diffusion":
            rows.append((f"{name}, serpentine", _best(lambda n=name: pal.apply(fresh(), dither=n), args.repeat)))
            if name == "floyd-steinberg":
                rows.append((f"{name}, raster", _best(lambda n=name: pal.apply(fresh(), dither=n, serpentine=False),
                                                      args.repeat)))
                rows.append((f"{name}, kernel only (no ΔE statistics)",
                             _best(lambda n=name: dither_indices(fresh(), pal, method=n), args.repeat)))
        else:
            rows.append((name, _best(lambda n=name: pal.apply(fresh(), dither=n), args.repeat)))
    fs = pal.apply(fresh(), dither="floyd-steinberg")
    rows.append(("filtered ΔE00 report (S-CIELAB, 300 dpi at 500 mm)",
                 _best(lambda: filtered_delta_e(pic, fs, dpi=300, distance_mm=500), 1)))

    load = ", load average {:.1f} {:.1f} {:.1f}".format(*os.getloadavg()) if hasattr(os, "getloadavg") else ""
    head = (f"{pic.shape[1]} x {pic.shape[0]} = {pic.shape[0] * pic.shape[1] / 1e6:.1f} MP, k = {pal.k}; "
            f"{os.cpu_count()} CPU(s){load}; Python {platform.python_version()}, numpy {np.__version__}, "
            f"numba {numba.__version__} ({numba.config.NUMBA_NUM_THREADS} threads); best of {args.repeat}")
    lines = ["| contender | wall s | CPU s | wall ratio to plain mapping |", "|---|---:|---:|---:|"]
    for label, (sec, cpu) in rows:
        lines.append(f"| {label} | {sec:.2f} | {cpu:.2f} | {sec / base[0]:.2f} |")
    table = "\n".join(lines)
    print(head)
    print(table)
    if args.write:
        doc = ROOT / "docs" / "benchmarks_dither.md"
        doc.parent.mkdir(exist_ok=True)
        doc.write_text(
            "# Dithering benchmark\n\n"
            "Written by `benchmarks/bench_dither.py --write` (see its docstring for the test image).  "
            "Timings after compilation; every dithered run includes the plain per-pixel ΔE00 statistics "
            "and coverage of the result, as `Palette.apply` returns them.  *CPU s* is the process CPU "
            "time of the timed run (summed over threads): error diffusion is sequential, so its kernel's "
            "CPU time is its wall time on an idle machine; the ΔE00 statistics and the ordered kernels run "
            "on all cores.  On a shared machine the wall times are inflated by the other load (see the "
            "load average in the header).\n\n"
            f"{head}\n\n{table}\n\n"
            "Targets of issue 4: Floyd-Steinberg on a 12-MP photo at k = 16 under 2 s; ordered dithers "
            "under 1 s.  The filtered report is not part of dithering; it is listed for scale.  On a "
            "2-core machine shared with other jobs, repeated runs vary by up to a factor of 2; compare "
            "rows of one run, not runs.\n",
            encoding="utf-8")
        print(f"wrote {doc}")


if __name__ == "__main__":
    main()
