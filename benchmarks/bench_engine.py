"""Engine benchmark: quantize against two contenders, side by side in one run.

Contenders, each run as a whole process (interpreter start, imports, decode,
reduction, encode of an indexed PNG), measured for wall time and peak memory:

* ``quantize``    -- this engine: ``fit_palette`` + ``Palette.apply`` + save.
* ``median-cut``  -- the imaging library's built-in median-cut reduction.
* ``sklearn-lab`` -- a plain recipe: CIELAB (scikit-image), scikit-learn
  ``KMeans`` on a 100 000-pixel sample, then ``predict`` for every pixel.

Quality is the mean CIEDE2000 of each output against its input, computed the
same way for all three.  The test photos are scikit-image's bundled photos;
the 12-megapixel photo is scikit-image's ``chelsea`` resampled to 4000 x 3000
with added sensor-like noise and saved as JPEG quality 92 (so it has a
realistic number of distinct colours).

Usage: python benchmarks/bench_engine.py [--quick] [--out bench-out]
Prints Markdown tables; paste them into docs/benchmarks.md.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from installed_bytecode import compile_installed

RUNNERS = {
    "quantize": """
import sys, quantize
src, dst, k = sys.argv[1], sys.argv[2], int(sys.argv[3])
pic = quantize.load_image(src)
pal = quantize.fit_palette(pic, k=k, seed=0)
pal.apply(pic).save(dst, force=True)
""",
    "median-cut": """
import sys
from PIL import Image
src, dst, k = sys.argv[1], sys.argv[2], int(sys.argv[3])
im = Image.open(src).convert("RGB")
im.quantize(colors=k, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE).save(dst)
""",
    "sklearn-lab": """
import sys, numpy as np
from PIL import Image
from skimage.color import rgb2lab, lab2rgb
from sklearn.cluster import KMeans
src, dst, k = sys.argv[1], sys.argv[2], int(sys.argv[3])
rgb = np.asarray(Image.open(src).convert("RGB"))
lab = rgb2lab(rgb).reshape(-1, 3)
rng = np.random.default_rng(0)
sample = lab[rng.choice(len(lab), size=min(100_000, len(lab)), replace=False)]
km = KMeans(n_clusters=k, n_init=4, random_state=0).fit(sample)
labels = km.predict(lab)
pal = np.clip(np.round(lab2rgb(km.cluster_centers_[None])[0] * 255), 0, 255).astype(np.uint8)
out = Image.fromarray(labels.reshape(rgb.shape[:2]).astype(np.uint8), "P")
out.putpalette(pal.ravel().tolist())
out.save(dst)
""",
}

PEAK = "import resource, sys; print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss, file=sys.stderr)"


def run_contender(name, src, dst, k):
    """Run one contender in a fresh process; return (seconds, peak MiB)."""
    code = RUNNERS[name]
    wrapper = (
        "import subprocess, sys, resource\n"
        f"p = subprocess.run([sys.executable, '-c', {code!r}, {str(src)!r}, {str(dst)!r}, '{k}'])\n"
        "if p.returncode: sys.exit(p.returncode)\n"
        "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)\n"
    )
    os.sync()  # not timed: each contender pays only for its own writes (see bench_everyday.run)
    t0 = time.perf_counter()
    p = subprocess.run([sys.executable, "-c", wrapper], capture_output=True, text=True)
    sec = time.perf_counter() - t0
    if p.returncode:
        raise RuntimeError(f"{name} failed: {p.stderr[-2000:]}")
    return sec, int(p.stdout.strip().splitlines()[-1]) / 1024


def mean_de(src, dst):
    from PIL import Image

    from quantize.colour.spaces import delta_e_ciede2000, srgb8_to_space

    a = np.asarray(Image.open(src).convert("RGB"))
    b = np.asarray(Image.open(dst).convert("RGB"))
    # Per distinct (input, output) pair: exact and fast.
    pair = np.concatenate([a.reshape(-1, 3), b.reshape(-1, 3)], axis=1)
    codes = pair.astype(np.int64) @ (256 ** np.arange(5, -1, -1))
    u, cnt = np.unique(codes, return_counts=True)
    cols = np.stack([(u >> (8 * s)) & 255 for s in range(5, -1, -1)], 1).astype(np.uint8)
    de = delta_e_ciede2000(srgb8_to_space(cols[:, :3], "lab"), srgb8_to_space(cols[:, 3:], "lab"))
    return float(de @ cnt / cnt.sum())


def make_photo(path: Path, width: int, height: int, seed: int = 0):
    from PIL import Image
    from skimage import data

    img = Image.fromarray(data.chelsea()).resize((width, height), Image.Resampling.LANCZOS)
    arr = np.asarray(img).astype(np.float64)
    arr += np.random.default_rng(seed).normal(0, 2.0, arr.shape)
    Image.fromarray(np.clip(np.round(arr), 0, 255).astype(np.uint8)).save(path, quality=92)


def table(rows, cols):
    out = ["| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    out += ["| " + " | ".join(str(r[c]) for c in cols) + " |" for r in rows]
    return "\n".join(out)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default="bench-out")
    ap.add_argument("--quick", action="store_true", help="smaller photos, fewer repeats")
    args = ap.parse_args()
    compile_installed()  # time what an installed copy runs (installed_bytecode.py)
    out = Path(args.out)
    out.mkdir(exist_ok=True)
    repeats = 1 if args.quick else 5
    print(f"# quantize engine benchmark, {time.strftime('%Y-%m-%d')}, "
          f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}\n")

    # Warm numba's on-disk cache so the timed runs measure steady state.
    tiny = out / "tiny.png"
    make_photo(tiny, 64, 48)
    run_contender("quantize", tiny, out / "tiny-q.png", 4)

    w, h = (2000, 1500) if args.quick else (4000, 3000)
    photo = out / f"photo-{w}x{h}.jpg"
    if not photo.exists():
        make_photo(photo, w, h)
    # Contenders take turns, so that a change in the machine's load hits all alike.
    runs = {name: [] for name in RUNNERS}
    for _ in range(repeats):
        for name in RUNNERS:
            runs[name].append(run_contender(name, photo, out / f"{name}-16.png", 16))
    rows = []
    for name, got in runs.items():
        secs, peaks = zip(*got)
        rows.append({"contender": name, "seconds (median)": round(float(np.median(secs)), 2),
                     "peak MiB": round(max(peaks)), "mean ΔE00": round(mean_de(photo, out / f"{name}-16.png"), 3)})
    base = next(r for r in rows if r["contender"] == "median-cut")
    for r in rows:
        r["time / median-cut"] = round(r["seconds (median)"] / base["seconds (median)"], 2)
    print(f"## {w * h / 1e6:.0f}-megapixel photo, k = 16 (whole process)\n")
    print(table(rows, ["contender", "seconds (median)", "time / median-cut", "peak MiB", "mean ΔE00"]))

    from PIL import Image
    from skimage import data

    qrows = []
    for name in ("astronaut", "chelsea", "coffee", "rocket"):
        src = out / f"sk-{name}.png"
        Image.fromarray(getattr(data, name)()).convert("RGB").save(src)
        for k in (4, 8, 16):
            row = {"image": name, "k": k}
            for c in RUNNERS:
                dst = out / f"sk-{name}-{c}-{k}.png"
                run_contender(c, src, dst, k)
                row[c] = round(mean_de(src, dst), 3)
            best_other = min(row["median-cut"], row["sklearn-lab"])
            row["quantize vs better contender"] = f"{100 * (1 - row['quantize'] / best_other):+.1f} %"
            qrows.append(row)
    print("\n## Mean ΔE00 on scikit-image's sample photos (lower is better)\n")
    print(table(qrows, ["image", "k", "quantize", "median-cut", "sklearn-lab", "quantize vs better contender"]))

    srows = []
    sizes = [(1000, 1000), (2000, 2000), (4000, 3000), (6000, 4000)]
    if args.quick:
        sizes = sizes[:3]
    for sw, sh in sizes:
        src = out / f"scale-{sw}x{sh}.jpg"
        if not src.exists():
            make_photo(src, sw, sh, seed=1)
        secs = [run_contender("quantize", src, out / "scale-q.png", 16)[0] for _ in range(repeats)]
        srows.append({"megapixels": round(sw * sh / 1e6), "seconds": round(float(np.median(secs)), 2)})
    for r in srows:
        r["seconds per MP"] = round(r["seconds"] / r["megapixels"], 3)
    print("\n## quantize reduce, k = 16: time against image size\n")
    print(table(srows, ["megapixels", "seconds", "seconds per MP"]))
    # The command line, whole process, on a 1-megapixel photo at -k 8.
    src = out / "cli-1000x1000.jpg"
    if not src.exists():
        make_photo(src, 1000, 1000, seed=2)
    crows = []
    cli_secs, mc_secs = [], []
    for _ in range(max(repeats, 3)):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "quantize", "reduce", str(src), "-o", str(out / "cli.png"),
                        "-k", "8", "--force"], check=True, capture_output=True)
        cli_secs.append(time.perf_counter() - t0)
        mc_secs.append(run_contender("median-cut", src, out / "cli-mc.png", 8)[0])
    crows.append({"command": "quantize reduce IMAGE -o OUT -k 8", "seconds (median)": round(float(np.median(cli_secs)), 2),
                  "time / median-cut": round(float(np.median(cli_secs) / np.median(mc_secs)), 2)})
    crows.append({"command": "median-cut, same image and k", "seconds (median)": round(float(np.median(mc_secs)), 2),
                  "time / median-cut": 1.0})
    print("\n## Command line, 1-megapixel photo, k = 8 (whole process)\n")
    print(table(crows, ["command", "seconds (median)", "time / median-cut"]))
    json.dump({"main": rows, "quality": qrows, "scaling": srows, "cli": crows},
              open(out / "bench_engine.json", "w"), indent=1)


if __name__ == "__main__":
    main()
