"""Weighted colour samples: an image collapsed to its distinct colours.

A 12-megapixel photo rarely holds more than a million distinct colours, and a
flat-colour poster only a few thousand, so every later stage (fitting, mapping,
ΔE statistics) works on the distinct colours with their pixel counts as
weights and reaches individual pixels only through an index.  The result is
exact: each pixel is treated exactly as its colour is.

For the restarts of the clustering, :meth:`ColourSample.binned` reduces the
distinct colours further to at most 32 768 weighted cell means, so that the
cost of a restart does not grow with megapixels.  The final refinement always
sees every distinct colour with its true weight.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from .images import Picture

__all__ = ["ColourSample", "sample_picture", "pool_samples"]

#: Bits per channel kept when binning for the restarts (2**15 cells).
_BIN_BITS = 5
#: Opaque pixels from which an 8-bit image is histogrammed densely.
_DENSE_FROM = 1 << 22


@dataclass(frozen=True, eq=False)
class ColourSample:
    """Distinct opaque colours of one image (or a pooled set) with weights.

    Attributes
    ----------
    codes : ndarray of shape (n, 3), uint8 or uint16
        The distinct sRGB codes, sorted by packed value.
    weights : ndarray of shape (n,), float64
        Pixel count of each colour (scaled when images are pooled).
    bit_depth : int
        8 or 16: the scale of ``codes``.
    inverse : ndarray of shape (H*W,), integer, or None
        For a single image: the row of ``codes`` of every pixel, -1 for
        fully transparent pixels.  None for a pooled sample.
    shape : tuple of int or None
        ``(H, W)`` of the single image, None for a pooled sample.
    n_pixels : int
        Opaque pixels counted (before any pooling scale).
    """

    codes: np.ndarray
    weights: np.ndarray
    bit_depth: int
    inverse: np.ndarray | None = None
    shape: tuple[int, int] | None = None
    n_pixels: int = 0
    _points: dict = field(default_factory=dict, repr=False)

    @property
    def n_colours(self) -> int:
        """Number of distinct colours."""
        return int(self.codes.shape[0])

    def float_rgb(self) -> np.ndarray:
        """Distinct colours as encoded sRGB floats in 0-1, shape (n, 3)."""
        return self.codes.astype(np.float64) / (2**self.bit_depth - 1)

    def points(self, space: str) -> np.ndarray:
        """Distinct colours in the perceptual ``space``, cached per space."""
        from .colourspace import srgb8_to_space, to_space

        if space not in self._points:
            if self.bit_depth == 8:
                pts = srgb8_to_space(self.codes, space)
            else:
                pts = to_space(self.float_rgb(), space)
            self._points[space] = np.ascontiguousarray(pts, dtype=np.float64)
        return self._points[space]

    def binned(self, space: str, *, max_points: int = 20_000) -> tuple[np.ndarray, np.ndarray]:
        """Weighted cell means for the restarts.

        Colours are grouped by the top five bits of each sRGB channel; each
        cell becomes one point at the weighted mean of its members' perceptual
        coordinates, carrying their total weight.  Below ``max_points``
        distinct colours nothing is binned.

        Returns
        -------
        points : ndarray of shape (m, 3)
        weights : ndarray of shape (m,)
        """
        key = ("binned", space, max_points)
        if key in self._points:
            return self._points[key]
        pts = self.points(space)
        if self.n_colours <= max_points:
            return pts, self.weights
        shift = self.bit_depth - _BIN_BITS
        c = self.codes.astype(np.int64) >> shift
        cell = (c[:, 0] << (2 * _BIN_BITS)) | (c[:, 1] << _BIN_BITS) | c[:, 2]
        cells, inv = np.unique(cell, return_inverse=True)
        w = np.bincount(inv, weights=self.weights, minlength=cells.size)
        means = np.empty((cells.size, pts.shape[1]))
        for j in range(pts.shape[1]):
            means[:, j] = np.bincount(inv, weights=self.weights * pts[:, j], minlength=cells.size) / w
        self._points[key] = (means, w)  # every palette size and refinement reuses it
        return means, w


def _pack(rgb: np.ndarray, bit_depth: int) -> np.ndarray:
    """One integer per colour: R, G, B in descending significance."""
    if bit_depth == 8:
        # uint32 in place: a third of the memory traffic of int64 temporaries.
        out = rgb[..., 0].astype(np.uint32)
        out <<= 8
        out |= rgb[..., 1]
        out <<= 8
        out |= rgb[..., 2]
        return out
    rgb = rgb.astype(np.int64, copy=False)
    return (rgb[..., 0] << (2 * bit_depth)) | (rgb[..., 1] << bit_depth) | rgb[..., 2]


def _unpack(packed: np.ndarray, bit_depth: int) -> np.ndarray:
    mask = (1 << bit_depth) - 1
    dtype = np.uint8 if bit_depth == 8 else np.uint16
    out = np.empty((packed.size, 3), dtype=dtype)
    out[:, 0] = (packed >> (2 * bit_depth)) & mask
    out[:, 1] = (packed >> bit_depth) & mask
    out[:, 2] = packed & mask
    return out


# One sample per picture object: fitting and mapping the same picture (as
# ``quantize reduce`` does) collapse it once.
_CACHE: "weakref.WeakKeyDictionary[Picture, ColourSample]" = weakref.WeakKeyDictionary()


def sample_picture(picture: Picture) -> ColourSample:
    """Collapse a picture to its distinct opaque colours and pixel counts.

    Parameters
    ----------
    picture : Picture
        A loaded image (see :func:`quantize.load_image`).

    Returns
    -------
    ColourSample
        With ``inverse`` set, so that per-colour results can be spread back
        onto pixels exactly.

    Examples
    --------
    >>> import numpy as np
    >>> from quantize.images import as_picture
    >>> pic = as_picture(np.array([[[255, 0, 0], [255, 0, 0], [0, 0, 255]]], np.uint8))
    >>> s = sample_picture(pic)
    >>> s.codes.tolist(), s.weights.tolist()
    ([[0, 0, 255], [255, 0, 0]], [1.0, 2.0])
    """
    cached = _CACHE.get(picture)
    if cached is not None:
        return cached
    smp = _sample(picture)
    _CACHE[picture] = smp
    return smp


def _sample(picture: Picture) -> ColourSample:
    h, w = picture.rgb.shape[:2]
    bits = picture.bit_depth
    opaque = picture.opaque.ravel()
    packed = _pack(picture.rgb.reshape(-1, 3), bits)
    all_opaque = bool(opaque.all())
    sel = packed if all_opaque else packed[opaque]
    if bits == 8 and sel.size >= _DENSE_FROM:
        # A dense histogram over all 2**24 codes is several times faster than
        # sorting for unique values on large images, and exact; below a few
        # megapixels, touching its 200 MB of tables costs more than a sort.
        counts = np.bincount(sel, minlength=1 << 24)
        present = np.flatnonzero(counts)
        lut = np.full(1 << 24, -1, dtype=np.int32)  # int32 halves the gather's memory traffic
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
    return ColourSample(
        codes=_unpack(present, bits),
        weights=weights,
        bit_depth=bits,
        inverse=inverse,
        shape=(h, w),
        n_pixels=int(sel.size),
    )


def pool_samples(samples: Sequence[ColourSample], *, weighting: str = "equal") -> ColourSample:
    """Merge the samples of several images into one weighted sample.

    Parameters
    ----------
    samples : sequence of ColourSample
        One per image.
    weighting : {"equal", "pixels"}, default="equal"
        ``"equal"`` scales each image's weights so that every image counts
        as much as the average image, whatever its size; ``"pixels"`` keeps
        raw pixel counts, so a large image counts more.

    Returns
    -------
    ColourSample
        Without ``inverse``; ``n_pixels`` is the total opaque pixel count.
    """
    if weighting not in ("equal", "pixels"):
        raise ValueError(f"weighting must be 'equal' or 'pixels', got {weighting!r}")
    if not samples:
        raise ValueError("no images to pool")
    if len(samples) == 1:
        return samples[0]
    bits = max(s.bit_depth for s in samples)
    packed, weights = [], []
    mean_pixels = np.mean([s.weights.sum() for s in samples])
    for s in samples:
        codes = s.codes
        if s.bit_depth != bits:
            codes = codes.astype(np.int64) * 257  # 8-bit code c is 16-bit code 257*c exactly
        packed.append(_pack(codes, bits))
        scale = mean_pixels / s.weights.sum() if weighting == "equal" else 1.0
        weights.append(s.weights * scale)
    allp = np.concatenate(packed)
    allw = np.concatenate(weights)
    uniq, inv = np.unique(allp, return_inverse=True)
    w = np.bincount(inv.ravel(), weights=allw, minlength=uniq.size)
    return ColourSample(
        codes=_unpack(uniq, bits),
        weights=w,
        bit_depth=bits,
        n_pixels=int(sum(s.n_pixels for s in samples)),
    )
