"""Plain-Python/numpy twins of the dithering kernels in quantize.kernels.dither_loops.

Written for clarity, pixel by pixel, from the public colour functions: a
full-size error image instead of a rolling buffer, conversions through
encoded sRGB, CIEDE2000 from quantize.colour.spaces (checked against Sharma et
al. 2005 in test_colourspace.py).  Slow; for small images only.
"""

import numpy as np

from quantize.colour.spaces import delta_e_ciede2000, linear_to_srgb, srgb_to_lab, srgb_to_linear, to_space
# The library's defaults, so a twin called without them follows the default dither.
from quantize.render.dither import DEFAULT_HULL_HOLD, DEFAULT_HULL_HOLD_STEP, HULL_HOLD_ONSET, hold_onset_thresholds


def _choose(target_lin, pal_pts, pal_lab, space, metric, lightness_offset=0.0, allowed=None):
    rgb = linear_to_srgb(target_lin)
    shift = np.array([lightness_offset, 0.0, 0.0])
    if metric == "space":
        d = ((pal_pts - (to_space(rgb, space) + shift)) ** 2).sum(axis=1)
    else:
        d = delta_e_ciede2000((srgb_to_lab(rgb) + shift)[None, :], pal_lab)
    if allowed is not None:
        d = np.where(allowed, d, np.inf)
    return int(np.argmin(d))  # first index on ties


def _allowed(own_rgb, pal_pts, pal_lab, space, metric, reach):
    """Palette colours at most ``reach`` further (Euclidean, choice space) from the pixel's own colour than its nearest."""
    if reach == np.inf:
        return None
    pts = pal_pts if metric == "space" else pal_lab
    d = np.sqrt(((pts - to_space(own_rgb, space if metric == "space" else "lab")) ** 2).sum(axis=1))
    return d <= d.min() + reach


def _smooth(rgb, clear, y, x, step):
    """No 4-neighbour of (y, x) but a clear one is more than ``step`` 8-bit codes away in a channel."""
    h, w = clear.shape
    for yy, xx in ((y - 1, x), (y + 1, x), (y, x - 1), (y, x + 1)):
        if 0 <= yy < h and 0 <= xx < w and not clear[yy, xx] and not clear[y, x]:
            # Rounded to 1e-9 of a code: a 16-bit step of 514 is exactly 2 codes of 255.
            if np.round(np.abs(rgb[yy, xx] - rgb[y, x]).max() * 255.0, 9) > step:
                return False
    return True


def diffuse(rgb, clear, pinned, palette_rgb8, *, weights, space="lab", metric="space", strength=1.0,
            serpentine=True, low=-1.0, high=2.0, mod=None, mod_amp=0.0, reach=np.inf, hull_hold=DEFAULT_HULL_HOLD,
            hull_hold_step=DEFAULT_HULL_HOLD_STEP, hull_hold_onset=HULL_HOLD_ONSET):
    """Error diffusion in linear light.

    rgb: (H, W, 3) encoded floats; clear: (H, W) bool (transparent);
    pinned: (H, W) int, palette index or -1; weights: [(dy, dx, w), ...];
    mod: tiled mask of lightness offsets (-0.5..0.5) scaled by mod_amp,
    added to the target's lightness for the choice only; reach: the choice
    is limited to palette colours at most this much further from the pixel's
    own colour than its nearest palette colour; hull_hold: a pixel further
    than this outside the palette's hull (linear light) has its target held
    within the palette's per-channel range instead of low-high, if it is
    smooth: no 4-neighbour that is not clear differs from it by more than
    hull_hold_step codes of 255 in any channel (rgb is encoded 0-1); the
    distance must exceed hull_hold * (1 + hull_hold_onset * t), t the
    library's onset threshold tile (hold_onset_thresholds) at the pixel's place.
    """
    mod = np.zeros((1, 1)) if mod is None else mod
    h, w = clear.shape
    lin = srgb_to_linear(rgb)
    pal_lin = srgb_to_linear(palette_rgb8 / 255.0)
    pal_pts = to_space(palette_rgb8 / 255.0, space)
    pal_lab = srgb_to_lab(palette_rgb8 / 255.0)
    err = np.zeros((h, w, 3))
    out = np.zeros((h, w), dtype=int)
    far = np.zeros((h, w), bool)
    if hull_hold != np.inf:
        from quantize.fit.for_dither import hull_weights

        flat = lin.reshape(-1, 3)
        # Run far past convergence, so the distance is exact to well under the hold.
        resid = flat - hull_weights(flat, pal_lin, iterations=20000) @ pal_lin
        tile = hold_onset_thresholds()
        place = tile[np.arange(h)[:, None] % tile.shape[0], np.arange(w)[None, :] % tile.shape[1]]
        far = np.sqrt((resid**2).sum(axis=1)).reshape(h, w) > hull_hold * (1.0 + hull_hold_onset * place)
        for y in range(h):
            for x in range(w):
                if far[y, x] and not _smooth(rgb, clear, y, x, hull_hold_step):
                    far[y, x] = False

    def is_open(yy, xx):
        return 0 <= yy < h and 0 <= xx < w and not clear[yy, xx] and pinned[yy, xx] < 0

    for y in range(h):
        sign = -1 if (serpentine and y % 2 == 1) else 1
        xs = range(w - 1, -1, -1) if sign < 0 else range(w)
        for x in xs:
            if clear[y, x]:
                continue
            if pinned[y, x] >= 0:
                out[y, x] = pinned[y, x]
                continue
            if far[y, x]:
                target = np.clip(lin[y, x] + err[y, x], pal_lin.min(axis=0), pal_lin.max(axis=0))
            else:
                target = np.clip(lin[y, x] + err[y, x], low, high)
            shift = mod_amp * mod[y % mod.shape[0], x % mod.shape[1]]
            allowed = _allowed(rgb[y, x], pal_pts, pal_lab, space, metric, reach)
            j = _choose(target, pal_pts, pal_lab, space, metric, shift, allowed)
            out[y, x] = j
            e = strength * (target - pal_lin[j])
            spots = [(y + dy, x + sign * dx, wt) for dy, dx, wt in weights if is_open(y + dy, x + sign * dx)]
            total = sum(wt for _, _, wt in spots)
            for yy, xx, wt in spots:
                err[yy, xx] += e * wt / total
    return out


def ordered(rgb, clear, pinned, palette_rgb8, thresholds, *, space="lab", metric="space", strength=1.0):
    """Two-colour ordered dither: nearest colour p, partner q whose segment p-q
    passes closest to the pixel in linear RGB, q where threshold < strength * alpha."""
    h, w = clear.shape
    lin = srgb_to_linear(rgb)
    pal_lin = srgb_to_linear(palette_rgb8 / 255.0)
    pal_pts = to_space(palette_rgb8 / 255.0, space)
    pal_lab = srgb_to_lab(palette_rgb8 / 255.0)
    th, tw = thresholds.shape
    out = np.zeros((h, w), dtype=int)
    for y in range(h):
        for x in range(w):
            if clear[y, x]:
                continue
            if pinned[y, x] >= 0:
                out[y, x] = pinned[y, x]
                continue
            c = lin[y, x]
            p = _choose(c, pal_pts, pal_lab, space, metric)
            best, partner, alpha = np.sum((c - pal_lin[p]) ** 2), p, 0.0
            for q in range(len(pal_lin)):
                d = pal_lin[q] - pal_lin[p]
                if q == p or not d.any():
                    continue
                a = float((c - pal_lin[p]) @ d / (d @ d))
                if a <= 0:
                    continue
                a = min(a, 1.0)
                dist = np.sum((c - pal_lin[p] - a * d) ** 2)
                if dist < best:
                    best, partner, alpha = dist, q, a
            out[y, x] = partner if thresholds[y % th, x % tw] < strength * alpha else p
    return out


def pixel_delta_e(rgb, clear, indices, palette_rgb8):
    """CIEDE2000 of each pixel to its palette colour, NaN where transparent."""
    de = delta_e_ciede2000(srgb_to_lab(rgb), srgb_to_lab(palette_rgb8 / 255.0)[indices])
    return np.where(clear, np.nan, de)
