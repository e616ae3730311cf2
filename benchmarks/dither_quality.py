"""Filtered ΔE00 of the default dither over the test pictures, and the dusk sky's defects.

Regenerates the tables of docs/dithering.md, "Colours outside the hull":
for each picture and palette size, the mean S-CIELAB filtered ΔE00
(Zhang & Wandell 1996, :func:`quantize.quality.perception.filtered_delta_e`)
of Floyd-Steinberg (serpentine) at 150 dpi / 500 mm and at 96 dpi / 600 mm,
for

* ``before``: the palette fitted for no dither, no hull hold (the tool as
  issue 17 found it);
* ``previous``: the palette fitted for the dither, no hull hold (the
  default until the smooth-pixel hold);
* ``smooth``: the palette fitted for the dither, the hull hold of 0.01 on
  smooth pixels (no 4-neighbour more than 1 code away on the 8-bit scale),
  the default since this measurement;

plus any variant given with ``--variant NAME=HOLD,STEP`` (``inf`` allowed).
Each variant is run with its settings spelled out, so the figures do not move
when a default does.  ``--dusk`` prints the dusk sky's speckles, rim and worms
instead; ``--held-out`` measures pictures and a gradient that were not used
to choose the hold.  Palettes come from ``fit_palette(picture, k)`` with
default settings (``for_dither`` on or off) and are kept in ``--cache`` so a
second run only dithers.

These are ΔE00 figures computed from file data, not measurements of a print:
proof physically and follow the shop's standards.

Run from the repository root (slow: about 50 palette fits)::

    python benchmarks/dither_quality.py            # the table
    python benchmarks/dither_quality.py --dusk     # speckles, rim, worms
    python benchmarks/dither_quality.py --held-out
    python benchmarks/dither_quality.py --figure docs/dithering_hull_hold.png
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
SAMPLES = ROOT / "sample_images"
VIEWS = ({"dpi": 150, "distance_mm": 500}, {"dpi": 96, "distance_mm": 600})
VARIANTS = {"before": (False, float("inf"), float("inf")),
            "previous": (True, float("inf"), float("inf")),
            "smooth": (True, 0.01, 1.0)}


def _through(stops, t):
    """Colours at positions ``t`` (0-1, any shape) along straight segments through ``stops``."""
    stops = np.asarray(stops, float)
    pos = t * (len(stops) - 1)
    seg = np.minimum(pos.astype(int), len(stops) - 2)
    f = (pos - seg)[..., None]
    return (1 - f) * stops[seg] + f * stops[seg + 1]


def ramp(stops, h=240, w=320):
    """A vertical ramp through ``stops`` (encoded sRGB 0-1), linear in encoded values, 8-bit."""
    rows = _through(stops, np.linspace(0, 1, h))
    return np.rint(np.broadcast_to(rows[:, None, :], (h, w, 3)) * 255).astype(np.uint8)


def diagonal(h=300, w=400):
    """A held-out gradient: a diagonal ramp from deep green through sand to magenta, 8-bit."""
    stops = [[0.05, 0.25, 0.12], [0.85, 0.78, 0.55], [0.70, 0.10, 0.45]]
    t = np.add.outer(np.arange(h) / h, np.arange(w) / w) / 2.0
    return np.rint(_through(stops, t) * 255).astype(np.uint8)


def pictures():
    """The table's pictures: name -> Picture (sample files through the project's reader)."""
    from PIL import Image
    from skimage import data

    from quantize.io.read import as_picture, load_image

    d = {"grad_sky": ramp([[0.11, 0.16, 0.38], [0.50, 0.33, 0.55], [0.98, 0.62, 0.40], [1.0, 0.85, 0.55]]),
         "grad_grey": ramp([[0.02] * 3, [0.98] * 3]),
         "grad_teal": ramp([[0.05, 0.30, 0.35], [0.85, 0.95, 0.90]])}
    out = {name: as_picture(a) for name, a in d.items()}
    for f in ("dusk_sky.png", "dusk_sky_16bit.tif", "mug_celadon.jpg", "mug_oxblood.jpg", "mug_cobalt.jpg",
              "mug_oatmeal.jpg", "poster_six_inks.png"):
        out[f] = load_image(SAMPLES / f)
    # Read without its alpha (the colours under it kept), as in the earlier tables.
    with Image.open(SAMPLES / "sticker_badge.png") as im:
        out["sticker_badge.png"] = as_picture(np.asarray(im.convert("RGB")))
    for name in ("chelsea", "astronaut", "coffee"):
        out[f"ski_{name}"] = as_picture(getattr(data, name)())
    return out


def held_out():
    """Pictures not looked at while choosing the hold."""
    from skimage import data

    from quantize.io.read import as_picture

    coffee = data.coffee()
    return {"ski_rocket": as_picture(data.rocket()),
            "ski_immunohistochemistry": as_picture(data.immunohistochemistry()),
            "ski_colorwheel": as_picture(data.colorwheel()),
            "ski_coffee_cup_crop": as_picture(np.ascontiguousarray(coffee[60:360, 180:520])),
            "grad_diagonal": as_picture(diagonal())}


def palettes(pics, sizes, cache: Path):
    """``fit_palette`` for no dither and for the dither, per picture and size, kept in ``cache``."""
    from quantize.fit.engine import fit_palette

    kept = dict(np.load(cache)) if cache.exists() else {}
    for name, pic in pics.items():
        for k in sizes:
            for fd in (False, True):
                key = f"{name}|{k}|{int(fd)}"
                if key not in kept:
                    kept[key] = fit_palette(pic, k, for_dither=fd).rgb8
                    np.savez(cache, **kept)
                    print(f"  fitted {key}", file=sys.stderr, flush=True)
    return kept


def dithered(pic, rgb8, hold, step):
    from quantize.palette import Palette
    from quantize.render.dither import dither_picture

    return dither_picture(pic, Palette(rgb8=rgb8, locked=None), method="floyd-steinberg",
                          hull_hold=hold, hull_hold_step=step)


def filtered(pic, result):
    from quantize.quality.perception import filtered_delta_e

    return tuple(filtered_delta_e(pic, result, **v)["mean"] for v in VIEWS)


def table(pics, sizes, variants, cache):
    pals = palettes(pics, sizes, cache)
    names = list(variants)
    print("| image | k | " + " | ".join(names) + " |")
    print("|---|---:|" + "---:|" * len(names))
    for k in sizes:
        for name, pic in pics.items():
            cells = []
            base = None
            for vn in names:
                fd, hold, step = variants[vn]
                f = filtered(pic, dithered(pic, pals[f"{name}|{k}|{int(fd)}"], hold, step))
                base = f if base is None else base
                mark = " **(above before)**" if vn != names[0] and any(a > b for a, b in zip(f, base)) else ""
                cells.append(f"{f[0]:.3f} / {f[1]:.3f}{mark}")
            print(f"| {name} | {k} | " + " | ".join(cells) + " |", flush=True)


def dusk(variants, cache, name="dusk_sky.png"):
    """Speckles, rim, worms and filtered ΔE00 of the dusk sky (``name``) at 8 colours, per variant."""
    from scipy.ndimage import uniform_filter

    from quantize.colour.spaces import delta_e_ciede2000, linear_to_srgb, srgb_to_lab, srgb_to_linear
    from quantize.io.read import load_image
    from quantize.render.worms import worm_anisotropy

    pic = load_image(SAMPLES / name)
    pals = palettes({name: pic}, (8,), cache)
    img = pic.float_rgb()
    lab = srgb_to_lab(img)
    orange = (lab[..., 0] > 55) & (lab[..., 2] > 20)
    hill = lab[..., 0] < 30

    def local_mean(a):
        return srgb_to_lab(linear_to_srgb(np.clip(uniform_filter(srgb_to_linear(a), size=(9, 9, 1)), 0, 1)))

    ref = local_mean(img)
    print("| variant | speckles | rim | worms (dB) | filtered ΔE00 |")
    print("|---|---:|---:|---:|---:|")
    for vn, (fd, hold, step) in variants.items():
        res = dithered(pic, pals[f"{name}|8|{int(fd)}"], hold, step)
        out = res.rgb / 255.0
        speck = 100.0 * (srgb_to_lab(out)[..., 0][orange] < 30).mean()
        rim = 100.0 * (delta_e_ciede2000(ref, local_mean(out))[hill] > 3).mean()
        worms = worm_anisotropy(img[:560], out[:560]).excess_db
        f = filtered(pic, res)
        print(f"| {vn} | {speck:.2f} % | {rim:.2f} % | {worms:.1f} | {f[0]:.3f} / {f[1]:.3f} |", flush=True)


def figure(path: Path, cache: Path):
    """Side by side, 2x: the dusk sky's orange glow and its sun over the hill; original, previous, default."""
    from PIL import Image, ImageDraw

    from quantize.io.read import load_image
    from quantize.render.dither import DEFAULT_HULL_HOLD, DEFAULT_HULL_HOLD_STEP

    pic = load_image(SAMPLES / "dusk_sky.png")
    pal = palettes({"dusk_sky.png": pic}, (8,), cache)["dusk_sky.png|8|1"]
    panels = [("original", pic.rgb),
              ("no hold (previous default)", dithered(pic, pal, float("inf"), float("inf")).rgb),
              (f"hold {DEFAULT_HULL_HOLD:g}, smooth px (default)",
               dithered(pic, pal, DEFAULT_HULL_HOLD, DEFAULT_HULL_HOLD_STEP).rgb)]
    boxes = [(300, 460, 500, 620), (750, 560, 950, 720)]  # left, top, right, bottom
    w, h, gap, head = 200, 160, 6, 18
    canvas = Image.new("RGB", (3 * w + 2 * gap, len(boxes) * (h + gap) + head), "white")
    draw = ImageDraw.Draw(canvas)
    for i, (title, _) in enumerate(panels):
        draw.text((i * (w + gap) + 4, 3), title, fill="black")
    for r, box in enumerate(boxes):
        for i, (_, a) in enumerate(panels):
            canvas.paste(Image.fromarray(a).crop(box), (i * (w + gap), head + r * (h + gap)))
    canvas = canvas.resize((canvas.width * 2, canvas.height * 2), Image.NEAREST)
    canvas.save(path, optimize=True)


def _variant(text):
    name, _, rest = text.partition("=")
    hold, step = (float(v) for v in rest.split(","))
    return name, (True, hold, step)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="8,16")
    parser.add_argument("--only", default="", help="comma-separated picture names (default: all)")
    parser.add_argument("--variant", action="append", default=[], type=_variant,
                        help="NAME=HOLD,STEP: another for-dither variant, e.g. step4=0.01,4")
    parser.add_argument("--dusk", nargs="?", const="dusk_sky.png", default=None,
                        help="the dusk sky's defects instead (optionally: dusk_sky_16bit.tif)")
    parser.add_argument("--held-out", action="store_true")
    parser.add_argument("--figure", type=Path, help="write the side by side (docs/dithering_hull_hold.png)")
    parser.add_argument("--skip", default="", help="comma-separated variants not to run (e.g. before,previous)")
    parser.add_argument("--cache", type=Path, default=Path("/tmp/quantize-dither-quality-palettes.npz"))
    args = parser.parse_args(argv)
    warnings.simplefilter("ignore")  # the readers' notes (e.g. JPEG) are not the subject here
    variants = {n: v for n, v in dict(VARIANTS, **dict(args.variant)).items() if n not in args.skip.split(",")}
    if args.dusk:
        dusk(variants, args.cache, args.dusk)
        return
    if args.figure:
        figure(args.figure, args.cache)
        return
    pics = held_out() if args.held_out else pictures()
    if args.only:
        pics = {n: p for n, p in pics.items() if n in args.only.split(",")}
    table(pics, tuple(int(s) for s in args.sizes.split(",")), variants, args.cache)


if __name__ == "__main__":
    main()
