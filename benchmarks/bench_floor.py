"""How close is each result to the best palette a wide search can find?

For each scikit-image photo and palette size this script runs a broad
multi-start search for the palette with the lowest mean CIEDE2000 under
nearest-colour mapping (the same mapping ``quantize`` and the measurements
of ``bench_engine.py`` use), and prints that *best-known* figure beside
``quantize``, the two contenders of ``bench_engine.py`` and the engine
issue's goal (3 % below the better contender).

The search: ``--starts`` starting palettes, a third each from

* k distinct colours drawn at random, weighted by pixel count,
* k points drawn uniformly in the bounding box of the image's colours,
* D-sampling under CIEDE2000 (k-means++'s rule with ΔE00 for distance),

each run to convergence by the CIEDE2000 k-medians of
:func:`quantize.fit.refine.ciede2000_medians` on the binned colours; the eight
best are then refined again on every distinct colour with its true weight,
rounded to 8-bit sRGB and measured.  The result is an upper bound on the
best possible mean ΔE00 for that palette size, not a proof of optimality:
a goal below it is not known to be impossible, only not found.

Usage: python benchmarks/bench_floor.py [--images rocket chelsea] [-k 4 8]
       [--starts 300] [--out bench-out]
"""

from __future__ import annotations

import argparse
import time
import warnings
from pathlib import Path

import numpy as np
from bench_engine import RUNNERS, mean_de, run_contender, table


def search(name: str, k: int, starts: int, seed: int = 1):
    """Best mean ΔE00 found for one photo and palette size."""
    from skimage import data

    from quantize.colour.spaces import clip_to_gamut, from_space, srgb8_to_space
    from quantize.core.sampling import sample_picture
    from quantize.fit.refine import ciede2000_medians
    from quantize.io.read import as_picture
    from quantize.kernels.nearest import nearest_ciede2000

    def written(c):
        rgb = np.round(clip_to_gamut(from_space(c, "lab")) * 255).astype(np.uint8)
        return srgb8_to_space(rgb, "lab")

    def mean(x, w, c):
        return float((w * nearest_ciede2000(x, written(c))[1]).sum() / w.sum())

    smp = sample_picture(as_picture(getattr(data, name)()))
    full, fw = smp.points("lab"), smp.weights
    cells, cw = smp.binned("lab", bits=None)
    p = cw / cw.sum()
    rng = np.random.default_rng(seed)
    lo, hi = cells.min(0), cells.max(0)
    found = []
    for r in range(starts):
        if r % 3 == 0:
            c = cells[rng.choice(len(cells), k, replace=False, p=p)]
        elif r % 3 == 1:
            c = lo + rng.random((k, 3)) * (hi - lo)
        else:
            c = [cells[rng.choice(len(cells), p=p)]]
            for _ in range(k - 1):
                de = nearest_ciede2000(cells, np.array(c))[1] * cw
                c.append(cells[rng.choice(len(cells), p=de / de.sum())])
            c = np.array(c)
        c = ciede2000_medians(cells, cw, c, iters=30)
        found.append((mean(cells, cw, c), r, c))
    found.sort(key=lambda f: f[0])
    return min(mean(full, fw, ciede2000_medians(full, fw, c, iters=8)) for _, _, c in found[:8])


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--images", nargs="+", default=["astronaut", "chelsea", "coffee", "rocket"])
    ap.add_argument("-k", nargs="+", type=int, default=[4])
    ap.add_argument("--starts", type=int, default=300)
    ap.add_argument("--out", default="bench-out")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    out = Path(args.out)
    out.mkdir(exist_ok=True)
    from PIL import Image
    from skimage import data

    rows = []
    for name in args.images:
        src = out / f"sk-{name}.png"
        Image.fromarray(getattr(data, name)()).convert("RGB").save(src)
        for k in args.k:
            row = {"image": name, "k": k}
            for c in RUNNERS:
                dst = out / f"floor-{name}-{c}-{k}.png"
                run_contender(c, src, dst, k)
                row[c] = round(mean_de(src, dst), 3)
            t0 = time.perf_counter()
            best = search(name, k, args.starts)
            row["search seconds"] = round(time.perf_counter() - t0)
            row["best known"] = round(best, 3)
            goal = 0.97 * min(row["median-cut"], row["sklearn-lab"])
            row["goal (3 % below)"] = round(goal, 3)
            row["quantize above best known"] = f"{100 * (row['quantize'] / best - 1):+.1f} %"
            row["goal below best known"] = "yes" if goal < best else "no"
            rows.append(row)
            print(f"{name} k={k}: best known {best:.3f}, quantize {row['quantize']}", flush=True)
    print(f"\n## Best-known mean ΔE00 ({args.starts} starts per case; lower is better)\n")
    print(table(rows, ["image", "k", "best known", "quantize", "quantize above best known", "median-cut",
                       "sklearn-lab", "goal (3 % below)", "goal below best known", "search seconds"]))


if __name__ == "__main__":
    main()
