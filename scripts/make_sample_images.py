"""Render the demo images in sample_images/ (invented scenes, for demos only).

Everything is drawn from code with a fixed seed and fetches nothing, so running
the script again gives the same pictures. (The same Pillow, zlib and libjpeg
also give the same bytes.) Edges are drawn at 4x and reduced by area averaging,
in linear light, to give true anti-aliasing. Shading is computed per pixel in
linear light and then encoded to sRGB (IEC 61966-2-1).

Usage::

    python scripts/make_sample_images.py [--out sample_images]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import tifffile
from PIL import Image, ImageDraw, ImageFilter, ImageFont

SEED = 1926
SS = 4  # supersampling factor for edges

PAPER = (244, 236, 214)  # cream poster stock
POSTER_INKS = {
    "navy": (31, 45, 84),
    "coral": (222, 84, 68),
    "mustard": (236, 178, 52),
    "teal": (32, 130, 128),
    "blush": (242, 176, 162),
    "ink black": (34, 28, 30),
}
GLAZES = {
    "celadon": (150, 188, 164),
    "oxblood": (122, 26, 30),
    "cobalt": (30, 58, 140),
    "oatmeal": (216, 202, 176),
}


def to_linear(srgb) -> np.ndarray:
    v = np.asarray(srgb, dtype=np.float64) / 255.0
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def to_srgb(linear: np.ndarray) -> np.ndarray:
    """Linear light -> sRGB-encoded 0-1 floats."""
    v = np.clip(linear, 0.0, 1.0)
    return np.where(v <= 0.0031308, 12.92 * v, 1.055 * v ** (1 / 2.4) - 0.055)


def to_uint8(linear: np.ndarray) -> np.ndarray:
    return np.rint(to_srgb(linear) * 255).astype(np.uint8)


def coverage(mask_4x: Image.Image | np.ndarray) -> np.ndarray:
    """Fraction of each output pixel covered by a 4x supersampled mask."""
    m = np.asarray(mask_4x, dtype=np.float64)
    m = m / 255.0 if m.max() > 1 else m
    h, w = m.shape[0] // SS, m.shape[1] // SS
    return m[: h * SS, : w * SS].reshape(h, SS, w, SS).mean(axis=(1, 3))


def blank(w: int, h: int) -> tuple[Image.Image, ImageDraw.ImageDraw]:
    img = Image.new("L", (w * SS, h * SS), 0)
    return img, ImageDraw.Draw(img)


def font(size: int) -> ImageFont.ImageFont | ImageFont.FreeTypeFont:
    return ImageFont.load_default(size=size)


# --------------------------------------------------------------------------- poster

def render_poster(rng: np.random.Generator, w: int = 900, h: int = 1200) -> np.ndarray:
    """Harbourlight Screenworks' gig poster: six flat inks on cream stock."""
    names = list(POSTER_INKS)
    labels = Image.new("L", (w * SS, h * SS), 0)  # 0 = paper, i = ink names[i - 1]
    d = ImageDraw.Draw(labels)
    ink = {name: i + 1 for i, name in enumerate(names)}
    s = SS

    # Sun, with bands of paper cut through its lower half.
    cx, cy, r = 450 * s, 520 * s, 300 * s
    d.ellipse([cx - r, cy - r, cx + r, cy + r], fill=ink["mustard"])
    for k, y in enumerate(range(560, 830, 42)):
        gap = (6 + 3 * k) * s
        d.rectangle([cx - r, y * s, cx + r, y * s + gap], fill=0)
    # Lighthouse on a rock, its beam in blush.
    d.polygon([(640 * s, 395 * s), (900 * s, 300 * s), (900 * s, 470 * s)], fill=ink["blush"])
    d.polygon([(600 * s, 820 * s), (700 * s, 820 * s), (680 * s, 450 * s), (620 * s, 450 * s)], fill=ink["coral"])
    for y0 in (520, 640, 760):
        d.polygon([(616 * s, y0 * s), (684 * s, y0 * s), (686 * s, (y0 + 36) * s), (614 * s, (y0 + 36) * s)], fill=0)
    d.rectangle([612 * s, 405 * s, 688 * s, 450 * s], fill=ink["ink black"])
    d.ellipse([626 * s, 412 * s, 674 * s, 444 * s], fill=ink["blush"])
    d.polygon([(605 * s, 405 * s), (650 * s, 365 * s), (695 * s, 405 * s)], fill=ink["coral"])
    d.polygon([(540 * s, 880 * s), (580 * s, 815 * s), (720 * s, 805 * s), (770 * s, 880 * s)], fill=ink["ink black"])
    # Sea: three bands of waves with sine crests.
    xs = np.linspace(0, w * s, 400)
    for band, (y_base, amp, period, name) in enumerate(
        [(840, 14, 160, "teal"), (905, 12, 120, "navy"), (975, 10, 90, "teal"), (1040, 8, 70, "navy")]
    ):
        phase = rng.uniform(0, 2 * np.pi)
        crest = (y_base + amp * np.sin(2 * np.pi * xs / (period * s) + phase)) * s
        d.polygon(list(zip(xs, crest)) + [(w * s, h * s), (0, h * s)], fill=ink[name])
    # Gulls.
    for _ in range(7):
        gx, gy, gs = rng.uniform(80, 520), rng.uniform(230, 420), rng.uniform(14, 26)
        pts = [(gx - gs, gy - gs * 0.35), (gx - gs * 0.45, gy - gs * 0.55), (gx, gy),
               (gx + gs * 0.45, gy - gs * 0.55), (gx + gs, gy - gs * 0.35)]  # fmt: skip
        d.line([(x * s, y * s) for x, y in pts], fill=ink["ink black"], width=int(3.2 * s), joint="curve")
    # Lettering.
    d.text((450 * s, 95 * s), "THE TIDEWATER ROOKS", font=font(70 * s), fill=ink["navy"], anchor="mm")
    d.text((450 * s, 165 * s), "live at pier nine hall", font=font(34 * s), fill=ink["coral"], anchor="mm")
    d.rectangle([60 * s, 1095 * s, 840 * s, 1170 * s], fill=ink["blush"])
    d.text((450 * s, 1133 * s), "FRIDAY 14 MARCH  -  DOORS 8PM", font=font(36 * s), fill=ink["ink black"], anchor="mm")

    lab = np.asarray(labels)
    colours = [to_linear(PAPER)] + [to_linear(POSTER_INKS[n]) for n in names]
    out = np.zeros((h, w, 3))
    for i, colour in enumerate(colours):
        out += coverage(lab == i)[..., None] * colour
    return to_uint8(out)


# --------------------------------------------------------------------------- mug

def smoothstep(e0: float, e1: float, x: np.ndarray) -> np.ndarray:
    t = np.clip((x - e0) / (e1 - e0), 0.0, 1.0)
    return t * t * (3 - 2 * t)


def render_mug(glaze: tuple[int, int, int], rng: np.random.Generator, w: int = 1000, h: int = 750) -> np.ndarray:
    """Fernwood Pottery's Lindow mug on a seamless backdrop, one glaze."""
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float64) + 0.5
    light = np.array([-0.55, -0.45, 0.70])
    light /= np.linalg.norm(light)
    half = light + np.array([0.0, 0.0, 1.0])
    half /= np.linalg.norm(half)

    # Backdrop: wall sweeping into the floor, lit from the upper left.
    wall = 0.50 + 0.16 * smoothstep(0, 600, yy)
    floor = 0.72 - 0.14 * smoothstep(620, 750, yy)
    tone = wall + (floor - wall) * smoothstep(560, 640, yy)
    tone *= 1.0 - 0.22 * ((xx - 350) ** 2 + (yy - 250) ** 2) / (w**2)
    scene = tone[..., None] * np.array([1.0, 0.96, 0.90])

    cx, R, y_top, y_bot, e = 470.0, 150.0, 230.0, 560.0, 0.22
    ry = R * e

    # Soft shadow away from the light, and a tight contact shadow.
    shadow_img, sd = blank(w, h)
    sd.ellipse([(cx + 45 - R * 1.3) * SS, (y_bot + 10 - ry * 1.4) * SS,
                (cx + 45 + R * 1.3) * SS, (y_bot + 10 + ry * 1.4) * SS], fill=255)  # fmt: skip
    soft = np.asarray(shadow_img.resize((w, h), Image.BOX).filter(ImageFilter.GaussianBlur(24))) / 255.0
    contact_img, cd = blank(w, h)
    cd.ellipse([(cx - R * 1.02) * SS, (y_bot + 2 - ry) * SS, (cx + R * 1.02) * SS, (y_bot + 4 + ry) * SS], fill=255)
    contact = np.asarray(contact_img.resize((w, h), Image.BOX).filter(ImageFilter.GaussianBlur(6))) / 255.0
    scene *= (1.0 - 0.45 * soft - 0.35 * contact)[..., None]

    albedo = to_linear(glaze)
    # Handle: an elliptical ring to the right, shaded as a tube.
    hx, hy = cx + R + 5, (y_top + y_bot) / 2 - 5
    ring_img, rd = blank(w, h)
    rd.ellipse([(hx - 80) * SS, (hy - 115) * SS, (hx + 80) * SS, (hy + 115) * SS], fill=255)
    rd.ellipse([(hx - 46) * SS, (hy - 78) * SS, (hx + 46) * SS, (hy + 78) * SS], fill=0)
    ring = coverage(ring_img)
    dx, dy = xx - hx, yy - hy
    theta = np.arctan2(dy / 1.0, dx)
    r = np.hypot(dx, dy)
    r_out = 1 / np.sqrt((np.cos(theta) / 80) ** 2 + (np.sin(theta) / 115) ** 2)
    r_in = 1 / np.sqrt((np.cos(theta) / 46) ** 2 + (np.sin(theta) / 78) ** 2)
    t = np.clip(2 * (r - r_in) / (r_out - r_in) - 1, -1, 1)
    n_ring = np.stack([t * np.cos(theta), t * np.sin(theta), np.sqrt(1 - t**2)], axis=-1)
    scene = _shade_into(scene, ring, n_ring, albedo, light, half)

    # Body: a cylinder with elliptical top and bottom.
    body_img, bd = blank(w, h)
    bd.rectangle([(cx - R) * SS, y_top * SS, (cx + R) * SS, y_bot * SS], fill=255)
    bd.ellipse([(cx - R) * SS, (y_bot - ry) * SS, (cx + R) * SS, (y_bot + ry) * SS], fill=255)
    bd.ellipse([(cx - R) * SS, (y_top - ry) * SS, (cx + R) * SS, (y_top + ry) * SS], fill=255)
    body = coverage(body_img)
    u = np.clip((xx - cx) / R, -1, 1)
    n_body = np.stack([u, np.zeros_like(u), np.sqrt(1 - u**2)], axis=-1)
    bottom_edge = y_bot + ry * np.sqrt(1 - u**2)
    foot = smoothstep(bottom_edge - 18, bottom_edge - 14, yy)  # unglazed stoneware foot ring
    body_albedo = albedo * (1 - foot[..., None]) + to_linear((190, 160, 124)) * foot[..., None]
    occlusion = 1.0 - 0.25 * smoothstep(y_bot - 80, y_bot + ry, yy)
    scene = _shade_into(scene, body, n_body, body_albedo, light, half, occlusion, gloss=1 - foot)

    # Opening: rim, then the inside in shadow, brighter on the far right wall.
    rim_img, md = blank(w, h)
    md.ellipse([(cx - R) * SS, (y_top - ry) * SS, (cx + R) * SS, (y_top + ry) * SS], fill=255)
    inner_img, nd = blank(w, h)
    nd.ellipse([(cx - R + 11) * SS, (y_top - ry + 4) * SS, (cx + R - 11) * SS, (y_top + ry - 3) * SS], fill=255)
    rim, inner = coverage(rim_img), coverage(inner_img)
    rim_colour = albedo * 0.95 + 0.08
    scene = scene * (1 - rim[..., None]) + rim[..., None] * rim_colour
    inside = albedo * (0.10 + 0.35 * smoothstep(cx - R, cx + R, xx))[..., None]
    scene = scene * (1 - inner[..., None]) + inner[..., None] * inside

    encoded = to_srgb(scene) + rng.normal(0.0, 1.2 / 255, scene.shape)  # sensor grain
    return np.rint(np.clip(encoded, 0, 1) * 255).astype(np.uint8)


def _shade_into(scene, cover, normal, albedo, light, half, occlusion=1.0, gloss=1.0):
    """Composite a glazed surface (Lambert + Blinn-Phong) into the scene by coverage."""
    diffuse = np.clip(normal @ light, 0, None)
    fill = 0.10 * np.clip(normal @ np.array([0.8, 0.0, 0.6]), 0, None)  # weak fill from the right
    spec = np.clip(normal @ half, 0, None)
    highlight = (0.55 * spec**90 + 0.05 * spec**8) * gloss
    colour = albedo * ((0.16 + 0.82 * diffuse + fill) * occlusion)[..., None] + highlight[..., None]
    c = cover[..., None]
    return scene * (1 - c) + c * colour


# --------------------------------------------------------------------------- sky and sticker

def render_sky(w: int, h: int) -> np.ndarray:
    """Dusk over the estuary: smooth gradients, the hard case for banding. Linear RGB floats."""
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float64) + 0.5
    t = yy / h
    zenith, mid, horizon = to_linear((28, 36, 92)), to_linear((150, 96, 140)), to_linear((246, 150, 88))
    a = smoothstep(0.0, 0.55, t)[..., None]
    b = smoothstep(0.45, 0.80, t)[..., None]
    sky = zenith * (1 - a) + mid * a
    sky = sky * (1 - b) + horizon * b
    glow = np.exp(-(((xx - 0.68 * w) / (0.22 * w)) ** 2 + ((yy - 0.78 * h) / (0.16 * h)) ** 2))
    sky = sky + glow[..., None] * to_linear((255, 214, 150)) * 0.6
    # Two ranges of hills, anti-aliased by supersampling their outline.
    xs = (np.arange(w * SS) + 0.5) / SS
    ys = (np.arange(h * SS) + 0.5) / SS
    for base, amp, period, colour in [(0.80, 0.05, 0.9, (58, 40, 74)), (0.88, 0.035, 0.55, (24, 18, 38))]:
        crest = h * (base - amp * np.sin(2 * np.pi * xs / (period * w) + 1.3) - 0.4 * amp * np.sin(7 * xs / w))
        cover = coverage((ys[:, None] >= crest[None, :]).astype(np.float64))
        sky = sky * (1 - cover[..., None]) + cover[..., None] * to_linear(colour)
    return sky


def render_sticker(w: int = 700, h: int = 700) -> np.ndarray:
    """Harbourlight's round studio sticker: four inks, transparent surround, soft drop shadow."""
    navy, coral, mustard = (to_linear(POSTER_INKS[k]) for k in ("navy", "coral", "mustard"))
    cream = to_linear(PAPER)
    s = SS
    layers = []
    for box, colour in [((40, 40, 660, 660), navy), ((80, 80, 620, 620), cream), ((230, 150, 470, 390), mustard)]:
        img, d = blank(w, h)
        d.ellipse([v * s for v in box], fill=255)
        layers.append((coverage(img), colour))
    wave_img, d = blank(w, h)
    xs = np.linspace(80, 620, 300)
    crest = 420 + 18 * np.sin(xs / 32)
    d.polygon([(x * s, y * s) for x, y in zip(xs, crest)] + [(620 * s, 640 * s), (80 * s, 640 * s)], fill=255)
    disc_img, dd = blank(w, h)
    dd.ellipse([80 * s, 80 * s, 620 * s, 620 * s], fill=255)
    layers.append((coverage(wave_img) * coverage(disc_img), coral))
    text_img, td = blank(w, h)
    td.text((350 * s, 515 * s), "HARBOURLIGHT", font=font(52 * s), fill=255, anchor="mm")
    td.text((350 * s, 570 * s), "SCREENWORKS", font=font(34 * s), fill=255, anchor="mm")
    layers.append((coverage(text_img), cream))

    badge = layers[0][0]
    shadow = Image.fromarray(np.rint(badge * 255).astype(np.uint8)).filter(ImageFilter.GaussianBlur(14))
    shadow = np.roll(np.asarray(shadow) / 255.0 * 0.35, (12, 10), axis=(0, 1))
    colour = np.zeros((h, w, 3))
    alpha = shadow.copy()  # black shadow first, then the badge over it
    for cover, c in layers:
        colour = colour * (1 - cover[..., None]) + cover[..., None] * c
        alpha = alpha * (1 - cover) + cover
    # `colour` is premultiplied (composited over black, the shadow's colour): divide by alpha.
    rgb = np.where(alpha[..., None] > 0, colour / np.maximum(alpha, 1e-9)[..., None], 0.0)
    return np.dstack([to_uint8(rgb), np.rint(alpha * 255).astype(np.uint8)])


# --------------------------------------------------------------------------- main

def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parents[1] / "sample_images")
    out = parser.parse_args(argv).out
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)

    Image.fromarray(render_poster(rng)).save(out / "poster_six_inks.png", optimize=True, dpi=(150, 150))
    for name, glaze in GLAZES.items():
        Image.fromarray(render_mug(glaze, rng)).save(out / f"mug_{name}.jpg", quality=90, dpi=(72, 72))
    Image.fromarray(to_uint8(render_sky(1200, 800))).save(out / "dusk_sky.png", optimize=True)
    deep = np.rint(to_srgb(render_sky(960, 640)) * 65535).astype(np.uint16)
    tifffile.imwrite(out / "dusk_sky_16bit.tif", deep, photometric="rgb", compression="zlib", predictor=True)
    Image.fromarray(render_sticker(), "RGBA").save(out / "sticker_badge.png", optimize=True)
    for path in sorted(out.iterdir()):
        print(f"{path.name:28s} {path.stat().st_size / 1024:8.1f} KiB")


if __name__ == "__main__":
    main()
