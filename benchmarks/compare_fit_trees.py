"""Two or more checkouts side by side: the library's fit and mapping, as the engine and batch benchmarks use them.

Each checkout runs in fresh processes, alternating, so a change in the
machine's load hits all alike; the table gives medians of CPU seconds (all
threads) and wall seconds.  Cases:

* **engine**: ``fit_palette`` and ``Palette.apply`` on bench_sweep's 12 MP
  photo at k = 16 (the engine benchmark's fit, without its decode and write);
* **batch**: the same on ten of bench_batch's 2 MP product photos at k = 8
  with 4 restarts (a batch worker's fit, without its decode and write).

Decoding and writing are left out on purpose: later sessions made every
write durable (fsync, see docs/benchmarks.md), which this compares apart.
Either layout of the package is accepted (the stage packages, or the flat
modules of the first three sessions).

    python benchmarks/compare_fit_trees.py OLD_CHECKOUT:NEW_CHECKOUT[:...] [REPEATS]
"""
import statistics
import subprocess
import sys

CODE = r'''
import sys, time, warnings
tree = sys.argv[1]
sys.path.insert(0, tree); sys.path.insert(0, tree + "/benchmarks")
warnings.simplefilter("ignore")
import numpy as np
import quantize
assert quantize.__file__.startswith(tree)
from bench_sweep import photo_12mp
from bench_batch import product_photo
big = photo_12mp()
small = [product_photo(i, 1632, 1224) for i in range(10)]
quantize.fit_palette(small[0][:64, :64], 3).apply(small[0][:64, :64])  # imports and first use
out = []
c = time.process_time(); w = time.perf_counter()
quantize.fit_palette(big, 16).apply(big)
out += [time.process_time() - c, time.perf_counter() - w]
c = time.process_time(); w = time.perf_counter()
for img in small:
    quantize.fit_palette(img, 8, restarts=4).apply(img)
out += [time.process_time() - c, time.perf_counter() - w]
print(*out)
'''


def main() -> None:
    trees = sys.argv[1].split(":")
    reps = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    res = {t: [] for t in trees}
    for _ in range(reps):
        for t in trees:
            r = subprocess.run([sys.executable, "-c", CODE, t], capture_output=True, text=True, cwd="/tmp")
            if r.returncode:
                print(r.stderr[-2000:])
                sys.exit(1)
            res[t].append([float(x) for x in r.stdout.split()])
    print(f"medians of {reps} fresh processes per checkout, alternating")
    for t in trees:
        m = [statistics.median(r[i] for r in res[t]) for i in range(4)]
        print(f"{t:14s} engine 12 MP k=16: cpu {m[0]:.2f} wall {m[1]:.2f} | "
              f"batch 10 x 2 MP k=8: cpu {m[2]:.2f} wall {m[3]:.2f}")


if __name__ == "__main__":
    main()
