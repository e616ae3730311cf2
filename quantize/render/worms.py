"""A measure of worms: oriented, low-frequency structure in a dither's texture.

Error diffusion can string its minority dots into chains ("worms") or lay
them out along rows where a colour sits just beside a palette colour.  A
well-behaved dither texture is *isotropic*: its power is spread evenly over
every direction at each radial frequency.  :func:`worm_anisotropy` measures
how far it is from that, by Ulichney's anisotropy of the texture's power
spectrum, at the low frequencies where worms live.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["WormMeasure", "worm_anisotropy"]


@dataclass(frozen=True)
class WormMeasure:
    """Result of :func:`worm_anisotropy`.

    Attributes
    ----------
    anisotropy_db : float
        Mean anisotropy over the measured annuli, in dB.
    excess_db : float
        ``anisotropy_db`` above the level an isotropic texture measures with
        the same number of tiles (``-10 log10(tiles)``): about 0 for an
        isotropic texture, several dB for worms.
    tiles : int
        Tiles that held a dither texture (the others are left out).
    """

    anisotropy_db: float
    excess_db: float
    tiles: int


def _linear(rgb) -> np.ndarray:
    from quantize.colour.spaces import srgb_to_linear

    a = np.asarray(getattr(rgb, "rgb", rgb))
    if a.ndim != 3 or a.shape[2] != 3:
        raise ValueError(f"expected an (H, W, 3) sRGB image, got shape {a.shape}")
    scale = 65535.0 if a.dtype == np.uint16 else 255.0 if a.dtype == np.uint8 else 1.0
    return srgb_to_linear(a / scale)


def worm_anisotropy(original, dithered, *, tile: int = 32, max_frequency: float = 0.25) -> WormMeasure:
    """Anisotropy of a dither's texture at low frequencies (worms, row patterns).

    The texture is the difference of the dithered image from the original in
    linear-light RGB.  It is cut into ``tile`` x ``tile`` tiles; in each, the
    mean of every row is removed (so a vertical gradient's residual and row
    banding, measured elsewhere, do not count), and the periodogram summed
    over the three channels is normalised to unit power; tiles with no
    texture (nothing dithered) are skipped.  The normalised periodograms are
    averaged (Bartlett's method).  In each annulus of radial frequency
    ``r / tile`` cycles per pixel, r = 1 .. ``max_frequency * tile``, the
    anisotropy is the variance of the power over the annulus divided by its
    mean squared (Ulichney 1987); the zero horizontal-frequency column,
    emptied by the row means, is left out.  The result is the mean over the
    annuli, in dB.

    An isotropic texture measures about ``-10 log10(tiles)`` dB: each
    periodogram bin of noise is exponentially distributed (variance equal to
    the mean squared), and the average of ``tiles`` of them has ``1/tiles``
    of that relative variance.  ``excess_db`` is the measure above that level.

    Parameters
    ----------
    original, dithered : ndarray of shape (H, W, 3), or objects with an ``rgb`` array
        Encoded sRGB, 8 or 16 bits (or floats 0-1), the same shape.
    tile : int, default=32
        Side of the tiles in pixels.
    max_frequency : float, default=0.25
        Highest radial frequency measured, in cycles per pixel: worms are
        low-frequency structures; above it a dither's regular mid-tone
        patterns (a checkerboard at 0.5) would count.

    Returns
    -------
    WormMeasure

    Raises
    ------
    ValueError
        Shapes differ, the image is smaller than a tile, or nothing is dithered.

    References
    ----------
    .. [1] R. Ulichney, *Digital Halftoning*, MIT Press, 1987, chapter 8
       (radially averaged power spectrum and anisotropy of halftone patterns).
    .. [2] M. S. Bartlett, "Periodogram analysis and continuous spectra",
       Biometrika 37(1/2), 1-16, 1950.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> flat = np.full((128, 128, 3), 128, np.uint8)
    >>> noise = np.where(rng.random((128, 128, 1)) < 0.2, 255, 0).astype(np.uint8).repeat(3, axis=2)
    >>> abs(worm_anisotropy(flat, noise).excess_db) < 1.5
    True
    """
    a, b = _linear(original), _linear(dithered)
    if a.shape != b.shape:
        raise ValueError(f"original and dithered images differ in shape: {a.shape} and {b.shape}")
    tile = int(tile)
    h, w = a.shape[:2]
    if tile < 8 or h < tile or w < tile:
        raise ValueError(f"tiles of {tile} pixels need an image at least that size, got {h} x {w}")
    diff = b - a
    acc = np.zeros((tile, tile))
    count = 0
    for y in range(0, h - tile + 1, tile):
        for x in range(0, w - tile + 1, tile):
            t = diff[y:y + tile, x:x + tile]
            t = t - t.mean(axis=1, keepdims=True)
            power = (np.abs(np.fft.fft2(t, axes=(0, 1))) ** 2).sum(axis=2)
            total = power.sum()
            # Below this there is no dither texture, only rounding of the original.
            if total < 1e-7 * tile * tile:
                continue
            acc += power / total
            count += 1
    if count == 0:
        raise ValueError("nothing is dithered: the images hold no texture to measure")
    f = np.fft.fftfreq(tile)
    ring = np.rint(np.hypot(f[:, None], f[None, :]) * tile).astype(int)
    off_axis = np.broadcast_to(f[None, :] != 0.0, ring.shape)
    values = []
    for r in range(1, int(max_frequency * tile) + 1):
        p = acc[(ring == r) & off_axis]
        values.append(p.var() / p.mean() ** 2)
    db = float(10.0 * np.log10(np.mean(values)))
    return WormMeasure(anisotropy_db=db, excess_db=db + float(10.0 * np.log10(count)), tiles=count)
