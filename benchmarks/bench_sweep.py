"""Benchmark: the palette-size sweep 2..16 on a 12-megapixel photo, warm versus cold.

The photo is scikit-image's bundled "coffee" sample (400 x 600) enlarged to
3000 x 4000 with Lanczos resampling plus seeded sensor-like noise (sigma 2
codes), so that it has photo-like numbers of distinct colours.  Loading and
sampling the image is timed apart from the sweep's compute (fitting every
size, refining it and measuring its ΔE00), and each sweep is run with the
robust refinement that ``reduce`` applies and without it.  The warm sweep adds the warm starts from the
previous size; the cold sweep uses fresh k-means++ restarts only, as
``fit_palette`` does.

Run:  /work/venv/bin/python benchmarks/bench_sweep.py [--write docs/benchmarks_sweep.md]
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def photo_12mp(seed: int = 0) -> np.ndarray:
    from PIL import Image
    from skimage import data

    big = Image.fromarray(data.coffee()).resize((4000, 3000), Image.Resampling.LANCZOS)
    arr = np.asarray(big).astype(np.float32)
    arr += np.random.default_rng(seed).normal(0, 2.0, arr.shape).astype(np.float32)
    return np.clip(np.rint(arr), 0, 255).astype(np.uint8)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--restarts", type=int, default=8)
    ap.add_argument("--repeat", type=int, default=1, help="runs of each sweep; the fastest is reported")
    ap.add_argument("--write", type=Path, default=None, help="write the Markdown table to this file")
    args = ap.parse_args(argv)

    from quantize.core.sampling import sample_picture
    from quantize.fit.sweep import sweep_sample
    from quantize.io.read import as_picture

    img = photo_12mp()
    t0 = time.perf_counter()
    smp = sample_picture(as_picture(img))
    smp.points("lab")
    smp.binned("lab")
    t_load = time.perf_counter() - t0
    ks = list(range(2, 17))
    sweep_sample(smp, [2, 3], restarts=1)  # compile and cache the kernels outside the timing

    results = {}
    for refine in ("robust", "none"):
        for name, warm in (("warm", True), ("cold", False)):
            best = None
            for _ in range(args.repeat):
                t = time.perf_counter()
                res = sweep_sample(smp, ks, restarts=args.restarts, seed=0, warm=warm, refine=refine)
                dt = time.perf_counter() - t
                if best is None or dt < best[0]:
                    best = (dt, res)
            results[name if refine == "robust" else name + "-none"] = best

    lines = [
        f"Sweep k = 2..16 on a {img.shape[1]}x{img.shape[0]} photo ({img.shape[0] * img.shape[1] / 1e6:.1f} MP, "
        f"{smp.n_colours} distinct colours), CIELAB, {args.restarts} fresh restarts per size, seed 0.",
        f"Machine: {platform.machine()}, {os.cpu_count()} cores (shared), Python {platform.python_version()}, "
        f"numpy {np.__version__}.  Sampling the image (not in the sweep times): {t_load:.2f} s.",
        "",
        "| | warm starts (--warm) | cold (the default: fresh restarts only) |",
        "|---|---|---|",
        f"| compute seconds, whole sweep (robust refinement, as `reduce`) | {results['warm'][0]:.2f} | "
        f"{results['cold'][0]:.2f} |",
        f"| compute seconds, whole sweep, `refine=\"none\"` | {results['warm-none'][0]:.2f} | "
        f"{results['cold-none'][0]:.2f} |",
    ]
    w, c = results["warm"][1], results["cold"][1]
    wc, cc = np.array([r.cost for r in w.rows]), np.array([r.cost for r in c.rows])
    lines += [
        f"| sizes where the cost rose from k-1 | {int((np.diff(wc) > 0).sum())} | {int((np.diff(cc) > 0).sum())} |",
        f"| sizes where this sweep's cost is lower | {int((wc < cc * (1 - 1e-9)).sum())} | "
        f"{int((cc < wc * (1 - 1e-9)).sum())} |",
        f"| chosen k (bic rule) | {w.chosen.k} | {c.chosen.k} |",
        f"| rows kept from a warm start | {sum(r.start != 'fresh' for r in w.rows)} of {len(w.rows)} | — |",
        "",
        "| k | cost, warm | cost, cold | ΔE00 mean, warm | ΔE00 mean, cold |",
        "|---|---|---|---|---|",
    ]
    for rw, rc in zip(w.rows, c.rows):
        lines.append(f"| {rw.k} | {rw.cost:.6g} | {rc.cost:.6g} | {rw.delta_e['mean']:.2f} | {rc.delta_e['mean']:.2f} |")
    text = "\n".join(lines) + "\n"
    print(text)
    if args.write:
        args.write.write_text("# Benchmark: palette-size sweep\n\n" + text, encoding="utf-8")
        print(f"wrote {args.write}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
