"""Sampling a large 8-bit image, and spreading labels back onto its pixels: before and after.

Runs, side by side in one run, the sampling stage as it was (copied below as
the "before" contender: a dense int64 ``np.bincount``, ``np.flatnonzero``, a
filled int32 table of 2**24 rows and an eager int32 ``inverse``; labels spread
with ``np.where`` and a second gather) and as it is now
(``quantize.core.sampling``: packed codes kept, ``inverse`` built on first access,
labels spread by :meth:`ColourSample.index_image` with one lookup per pixel).
Every measurement is made in a fresh subprocess, because page faults on big
fresh tables are a large part of the cost and a warm process hides them; the
contenders are interleaved round by round so that a busy machine slows them
alike.  Medians over the rounds are printed as a Markdown table, with the
peak resident memory (``ru_maxrss``) of each child.

    /work/venv/bin/python benchmarks/bench_sampling.py                  # the 12 MP photo, 7 rounds
    /work/venv/bin/python benchmarks/bench_sampling.py --alpha          # with 30 % transparent pixels
    /work/venv/bin/python benchmarks/bench_sampling.py --image x.png --rounds 3

Before timing, one child checks that both contenders give identical codes,
weights, inverse and index image on the chosen image, with and without
transparent pixels.
"""

from __future__ import annotations

import argparse
import json
import platform
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
DEFAULT_IMAGE = ROOT / "bench-out" / "photo-4000x3000.jpg"
CONTENDERS = ("before", "after", "after+inverse")


# --------------------------------------------------------------------------- before (copied as it was)

_OLD_DENSE_FROM = 1 << 22


def _old_pack(rgb, bit_depth):
    if bit_depth == 8:
        out = rgb[..., 0].astype(np.uint32)
        out <<= 8
        out |= rgb[..., 1]
        out <<= 8
        out |= rgb[..., 2]
        return out
    rgb = rgb.astype(np.int64, copy=False)
    return (rgb[..., 0] << (2 * bit_depth)) | (rgb[..., 1] << bit_depth) | rgb[..., 2]


def _old_unpack(packed, bit_depth):
    mask = (1 << bit_depth) - 1
    dtype = np.uint8 if bit_depth == 8 else np.uint16
    out = np.empty((packed.size, 3), dtype=dtype)
    out[:, 0] = (packed >> (2 * bit_depth)) & mask
    out[:, 1] = (packed >> bit_depth) & mask
    out[:, 2] = packed & mask
    return out


def old_sample(picture):
    """The former ``quantize.core.sampling._sample``: (codes, weights, inverse, shape)."""
    h, w = picture.rgb.shape[:2]
    bits = picture.bit_depth
    opaque = picture.opaque.ravel()
    packed = _old_pack(picture.rgb.reshape(-1, 3), bits)
    all_opaque = bool(opaque.all())
    sel = packed if all_opaque else packed[opaque]
    if bits == 8 and sel.size >= _OLD_DENSE_FROM:
        counts = np.bincount(sel, minlength=1 << 24)
        present = np.flatnonzero(counts)
        lut = np.full(1 << 24, -1, dtype=np.int32)
        lut[present] = np.arange(present.size, dtype=np.int32)
        inverse = lut[packed]
        weights = counts[present].astype(np.float64)
        del counts, lut
    else:
        present, inv_sel, counts = np.unique(sel, return_inverse=True, return_counts=True)
        inv_sel = inv_sel.ravel().astype(np.int32)
        if all_opaque:
            inverse = inv_sel
        else:
            inverse = np.full(packed.size, -1, dtype=np.int32)
            inverse[opaque] = inv_sel
        weights = counts.astype(np.float64)
    if not all_opaque:
        inverse[~opaque] = -1
    return _old_unpack(present, bits), weights, inverse, (h, w)


def old_index_image(inverse, shape, labels, dtype):
    """How ``map_picture`` spread labels onto pixels."""
    lut = labels.astype(dtype)
    return np.where(inverse >= 0, lut[np.maximum(inverse, 0)], 0).astype(dtype).reshape(shape)


# --------------------------------------------------------------------------- children

def _picture(image: str, alpha: bool):
    from quantize import load_image
    from quantize.core.picture import Picture

    pic = load_image(image, max_pixels=None)
    if alpha:
        rng = np.random.default_rng(20240611)  # invented transparency, for timing only
        a = np.where(rng.random(pic.shape) < 0.3, 0, pic.max_code).astype(pic.rgb.dtype)
        pic = Picture(rgb=pic.rgb, alpha=a, bit_depth=pic.bit_depth)
    np.asarray(pic.rgb).sum()  # the decoded pixels are resident before the clock starts
    return pic


def _labels(n: int) -> np.ndarray:
    return np.arange(n, dtype=np.int64) % 16  # any per-colour labels; int64 as map_sample gives them


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def _run_once(contender: str, pic) -> dict:
    from quantize.core import sampling as sampling

    t0 = time.perf_counter()
    if contender == "before":
        codes, _, inverse, shape = old_sample(pic)
        t1 = time.perf_counter()
        t2 = t1  # the inverse came with the sample
        idx = old_index_image(inverse, shape, _labels(codes.shape[0]), np.uint8)
    else:
        smp = sampling._sample(pic)
        t1 = time.perf_counter()
        if contender == "after+inverse":
            smp.inverse  # noqa: B018 - built on first access: what dither and separation pay
        t2 = time.perf_counter()
        idx = smp.index_image(_labels(smp.n_colours), dtype=np.uint8)
    t3 = time.perf_counter()
    assert idx.shape == pic.shape
    return {"sample": t1 - t0, "inverse": t2 - t1, "index": t3 - t2, "total": t3 - t0}


def child(contender: str, image: str, alpha: bool) -> None:
    pic = _picture(image, alpha)
    base = _peak_mb()
    first = _run_once(contender, pic)
    peak = _peak_mb()
    warm = _run_once(contender, pic)  # same process again: tables and pages already mapped
    print(json.dumps({"first": first, "warm": warm, "base_mb": base, "peak_mb": peak}))


def check(image: str) -> None:
    from quantize.core import sampling as sampling

    for alpha in (False, True):
        pic = _picture(image, alpha)
        codes, weights, inverse, shape = old_sample(pic)
        smp = sampling._sample(pic)
        labels = _labels(codes.shape[0])
        assert np.array_equal(smp.codes, codes) and smp.codes.dtype == codes.dtype
        assert np.array_equal(smp.weights, weights) and smp.weights.dtype == weights.dtype
        assert np.array_equal(smp.index_image(labels, dtype=np.uint8), old_index_image(inverse, shape, labels, np.uint8))
        assert np.array_equal(smp.inverse, inverse) and smp.inverse.dtype == inverse.dtype
        assert smp.shape == shape
    print("identical")


# --------------------------------------------------------------------------- parent

def _spawn(*args: str) -> str:
    out = subprocess.run([sys.executable, __file__, *args], capture_output=True, text=True, check=False)
    if out.returncode != 0:
        sys.exit(f"bench_sampling: child {' '.join(args)} failed:\n{out.stderr.strip()}")
    return out.stdout.strip().splitlines()[-1]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--image", default=str(DEFAULT_IMAGE), help="an 8-bit image (default: the 12 MP photo)")
    ap.add_argument("--rounds", type=int, default=7, help="fresh processes per contender (default 7)")
    ap.add_argument("--alpha", action="store_true", help="make 30 %% of the pixels transparent")
    ap.add_argument("--child", choices=CONTENDERS, help=argparse.SUPPRESS)
    ap.add_argument("--check", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if not Path(args.image).is_file():
        sys.exit(f"bench_sampling: {args.image}: no such image file")
    if args.child:
        child(args.child, args.image, args.alpha)
        return
    if args.check:
        check(args.image)
        return

    print(f"check: {_spawn('--check', '--image', args.image)}", file=sys.stderr)
    extra = ["--alpha"] if args.alpha else []
    runs: dict[str, list[dict]] = {c: [] for c in CONTENDERS}
    for r in range(args.rounds):
        for c in CONTENDERS:
            runs[c].append(json.loads(_spawn("--child", c, "--image", args.image, *extra)))
        print(f"round {r + 1}/{args.rounds} done", file=sys.stderr)

    def med(c: str, key: str, when: str = "first") -> float:
        return 1000.0 * statistics.median(x[when][key] for x in runs[c])

    def mem(c: str, above_base: bool) -> float:
        return statistics.median(x["peak_mb"] - (x["base_mb"] if above_base else 0.0) for x in runs[c])

    def ratio(a: float, b: float) -> str:
        return f"{a / b:.2f}x" if min(a, b) > 0.05 else "-"  # a stage one side does not have

    from PIL import Image

    with Image.open(args.image) as im:
        size = f"{im.width} x {im.height}"
    print(f"\n**{Path(args.image).name}** ({size}{', 30 % transparent' if args.alpha else ''}), "
          f"median of {args.rounds} fresh processes per contender; numpy {np.__version__}, "
          f"Python {platform.python_version()}, {platform.machine()}\n")
    print("| stage | before | after | after + inverse | before / after | before / (after + inverse) |")
    print("|---|---:|---:|---:|---:|---:|")
    rows = [("sample (ms)", "sample", "first"), ("build `inverse` (ms)", "inverse", "first"),
            ("index image (ms)", "index", "first"), ("**total, fresh process (ms)**", "total", "first"),
            ("total, again in the same process (ms)", "total", "warm")]
    for label, key, when in rows:
        b, a, ai = (med(c, key, when) for c in CONTENDERS)
        print(f"| {label} | {b:.1f} | {a:.1f} | {ai:.1f} | {ratio(b, a)} | {ratio(b, ai)} |")
    b, a, ai = (mem(c, True) for c in CONTENDERS)
    print(f"| peak RSS above the loaded image (MB) | {b:.0f} | {a:.0f} | {ai:.0f} | {ratio(b, a)} | {ratio(b, ai)} |")
    b, a, ai = (mem(c, False) for c in CONTENDERS)
    print(f"| peak RSS of the process (MB) | {b:.0f} | {a:.0f} | {ai:.0f} | {ratio(b, a)} | {ratio(b, ai)} |")
    print("\n`after` is the path of `map_picture` and of batch pooling (no `inverse`); `after + inverse` is that of "
          "ordered dither and separation, which read `inverse` too.  Peak RSS is `ru_maxrss` of the child after the "
          "first, fresh-process pass.")


if __name__ == "__main__":
    main()
