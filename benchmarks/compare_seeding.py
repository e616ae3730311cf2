"""Cost reached by each seeding method, after restarts, on the sample images.

For each image (the bundled demo images and scikit-image's sample photos)
and each k, every seeding method runs with 1 and with 8 restarts over 5
seeds.  The table gives the median k-means cost (weighted squared CIELAB
error per pixel) relative to the lowest cost any method reached on that
image and k.  The clustering sees the binned colour sample, exactly as the
restarts inside ``fit_palette`` do.

Usage: python benchmarks/compare_seeding.py > docs/seeding-table.md
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from quantize.core.sampling import sample_picture
from quantize.fit.clustering import INITS, kmeans
from quantize.io.read import as_picture, load_image


def images():
    root = Path(__file__).resolve().parents[1] / "sample_images"
    for name in ("poster_six_inks.png", "mug_oxblood.jpg", "dusk_sky.png"):
        yield name, load_image(root / name)
    from skimage import data

    for name in ("astronaut", "coffee"):
        yield f"skimage {name}", as_picture(getattr(data, name)())


def main():
    print(f"Seeding comparison, {time.strftime('%Y-%m-%d')}: median cost over 5 seeds "
          "relative to the best cost found (1.000 = best)\n")
    print("| image | k | " + " | ".join(f"{m} ×{r}" for m in INITS for r in (1, 8)) + " |")
    print("|---|---|" + "---|" * (2 * len(INITS)))
    for name, pic in images():
        smp = sample_picture(pic)
        pts, w = smp.binned("lab")
        for k in (8, 16):
            costs = {}
            for m in INITS:
                for r in (1, 8):
                    costs[m, r] = np.median([kmeans(pts, k, weights=w, restarts=r, seed=s, init=m).inertia
                                             for s in range(5)])
            best = min(costs.values())
            row = " | ".join(f"{costs[m, r] / best:.3f}" for m in INITS for r in (1, 8))
            print(f"| {name} | {k} | {row} |")


if __name__ == "__main__":
    main()
