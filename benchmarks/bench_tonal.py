"""Tonal plates: time and peak memory of a poster's films, and spot against halftone and index quality.

Part 1 (``--part time``): a 4-ink separation of a 30 x 40 cm print at 600 dpi
(7087 x 9449 film pixels, 67 MP per film) from a 150 dpi photo, each
contender in a fresh process, run alternately, medians, peak memory (the
process's maximum resident set):
- floor: decode the photo and write four 67 MP 1-bit TIFF films of a fixed
  pattern (no colour work): what any tool pays to write these films;
- halftone: ``quantize separate --tones halftone -n 4``;
- index: ``quantize separate --tones index -n 4``.

Part 2 (``--part quality``): on scikit-image's sample photos, four inks
fitted to each photo on white paper, the perceived (S-CIELAB filtered)
ΔE00 at 1 m of the simulated print of spot, halftone and index plates with
those same inks (the figure each separation reports, computed from the
films it made).

Run: ``python benchmarks/bench_tonal.py`` (both parts; a few minutes).
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from installed_bytecode import compile_installed

FLOOR = r"""
import io, resource, sys
import numpy as np
from PIL import Image
src, out = sys.argv[1], sys.argv[2]
with Image.open(src) as im:
    rgb = np.asarray(im.convert("RGB"))
h, w = 9449, 7087
yy, xx = np.ogrid[:h, :w]
for i in range(4):
    film = ((yy // (3 + i)) + (xx // 5)) % 2 == 0
    Image.fromarray(film).save(f"{out}/floor-{i}.tif", compression="group4", dpi=(600, 600))
print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
"""

RUN = r"""
import resource, sys
from quantize.cli.main import main
try:
    main(sys.argv[1:], standalone_mode=False)
finally:
    print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)
"""


def _poster(folder: Path) -> Path:
    """A 150 dpi photo for a 30 x 40 cm print: scikit-image's astronaut, resized (bicubic)."""
    import numpy as np
    from PIL import Image
    from skimage import data

    w, h = 1772, 2362  # 30 x 40 cm at 150 dpi
    img = Image.fromarray(data.astronaut()).resize((h, h), Image.BICUBIC).crop(((h - w) // 2, 0, (h - w) // 2 + w, h))
    path = folder / "poster.png"
    img.save(path, dpi=(150, 150))
    assert np.asarray(img).shape == (h, w, 3)
    return path


def _once(kind: str, src: Path, folder: Path) -> tuple[float, float]:
    out = folder / f"out-{kind}"
    out.mkdir(exist_ok=True)
    if kind == "floor":
        cmd = [sys.executable, "-c", FLOOR, str(src), str(out)]
    else:
        cmd = [sys.executable, "-c", RUN, "separate", str(src), "-o", str(out), "-n", "4", "--substrate", "#ffffff",
               "--tones", kind, "--print-width", "30cm", "--film-dpi", "600", "--force", "--no-pdf"]
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True)
    dt = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(f"{kind} failed:\n{res.stdout}\n{res.stderr}")
    rss_kb = float((res.stdout if kind == "floor" else res.stderr).strip().splitlines()[-1])
    return dt, rss_kb / 1024.0


def part_time(runs: int) -> None:
    kinds = ["floor", "halftone", "index"]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        src = _poster(folder)
        times = {k: [] for k in kinds}
        peaks = {k: [] for k in kinds}
        for _ in range(runs):
            for k in kinds:  # alternate the contenders, so load changes hit all of them
                dt, mb = _once(k, src, folder)
                times[k].append(dt)
                peaks[k].append(mb)
    floor = statistics.median(times["floor"])
    print(f"30 x 40 cm at 600 dpi, 4 films of 7087 x 9449 px, from a 1772 x 2362 px photo; {runs} run(s), medians")
    print(f"{'contender':<10} {'seconds':>8} {'x floor':>8} {'peak MB':>8}")
    for k in kinds:
        t = statistics.median(times[k])
        print(f"{k:<10} {t:8.1f} {t / floor:8.2f} {max(peaks[k]):8.0f}")


def part_quality() -> None:
    import numpy as np
    from skimage import data

    from quantize.io.read import as_picture
    from quantize.separation.choice import choose_palette
    from quantize.separation.plates import SeparationSettings, separate

    print("perceived ΔE00 (S-CIELAB, 1 m) of the simulated print, 4 fitted inks on white, printed 20 cm wide")
    print(f"{'photo':<12} {'spot':>7} {'halftone':>9} {'index':>7}")
    for name in ("astronaut", "coffee", "chelsea", "rocket", "immunohistochemistry"):
        img = getattr(data, name)()
        pic = as_picture(np.ascontiguousarray(img[::2, ::2]))
        pal, info = choose_palette(pic, n=4, substrate="#ffffff", seed=0)
        row = []
        for tones in ("spot", "halftone", "index"):
            st = SeparationSettings(tones=tones, print_width_mm=200.0, film_dpi=600)
            sep = separate(pic, pal, substrate=info["substrate"], settings=st)
            row.append(sep.perceived["filtered"]["mean"])
        print(f"{name:<12} {row[0]:7.2f} {row[1]:9.2f} {row[2]:7.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--part", choices=["time", "quality", "both"], default="both")
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args()
    compile_installed()  # time what an installed copy runs (installed_bytecode.py)
    os.environ.setdefault("PYTHONHASHSEED", "0")
    if args.part in ("quality", "both"):
        part_quality()
    if args.part in ("time", "both"):
        part_time(args.runs)
    print(json.dumps({"machine": os.uname().nodename, "cpus": os.cpu_count()}))


if __name__ == "__main__":
    main()
