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

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, overload

import numpy as np

from quantize.core.derived import DerivedCache
from quantize.core.picture import Picture

if TYPE_CHECKING:
    import numpy.typing as npt

    import quantize  # the Palette by its public name: the palette stage comes after this one

__all__ = ["ColourSample", "pool_samples", "sample_picture"]

#: Bits per channel kept when binning for the restarts (2**15 cells).
_BIN_BITS = 5
#: Opaque pixels from which an 8-bit image is histogrammed densely: from
#: about two megapixels the fixed cost of the 2**24 table (128 MB) is less
#: than that of sorting (benchmarks/bench_everyday.py: peak memory at 1 MP).
_DENSE_FROM = 1 << 21
#: Packed code given to transparent pixels on the dense path: one past the
#: last 8-bit colour, so that one table lookup also handles transparency.
_CLEAR = 1 << 24
#: Pixels per block when gathering through a table.  numpy casts any index
#: that is not intp to intp first; per block, that cast stays in cache
#: instead of becoming a 96 MB temporary for 12 megapixels.
_BLOCK = 1 << 18


class _LazyInverse:
    """``ColourSample.inverse``: the array given, else built on first access.

    The dense path keeps only the pixels' packed codes; most callers want an
    index image (:meth:`ColourSample.index_image`), which one lookup in a
    small table indexed by packed code gives directly, so the int32 row of
    every pixel is only built (into the sample's :class:`DerivedCache`) for
    callers that ask for it.
    """

    @overload
    def __get__(self, obj: None, objtype: type | None = None) -> None: ...
    @overload
    def __get__(self, obj: ColourSample, objtype: type | None = None) -> np.ndarray | None: ...

    def __get__(self, obj: ColourSample | None, objtype: type | None = None) -> np.ndarray | None:
        if obj is None:
            return None  # the dataclass default
        given = obj.__dict__.get("_inverse")
        if given is not None or obj._packed is None:
            return given
        return obj._cache.get("inverse", lambda: obj._spread(np.arange(obj.n_colours, dtype=np.int32), -1))

    def __set__(self, obj: ColourSample, value: np.ndarray | None) -> None:
        # Only the dataclass __init__ sets it (the instance is frozen).
        obj.__dict__["_inverse"] = value


@dataclass(frozen=True, eq=False, repr=False)
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
    inverse : ndarray of shape (H*W,), int32, or None
        For a single image: the row of ``codes`` of every pixel, -1 for
        fully transparent pixels.  None for a pooled sample.  For large 8-bit
        images it is built on first access; :meth:`index_image` does not
        need it.
    shape : tuple of int or None
        ``(H, W)`` of the single image, None for a pooled sample.
    n_pixels : int
        Opaque pixels counted (before any pooling scale).

    Notes
    -----
    The arrays above never change.  What is derived from them (points per
    space, binned means, the lazily built ``inverse``) is computed on first
    use and kept in a :class:`DerivedCache` the sample owns, so a sample may
    be shared between threads.
    """

    codes: np.ndarray
    weights: np.ndarray
    bit_depth: int
    if TYPE_CHECKING:
        # The type checker sees the descriptor: read as ``np.ndarray | None`` (its __get__), given as
        # one to __init__ (its __set__). At run time the field is annotated as what it holds.
        inverse: _LazyInverse = _LazyInverse()
    else:
        inverse: np.ndarray | None = _LazyInverse()
    shape: tuple[int, int] | None = None
    n_pixels: int = 0
    #: Dense path only: (H*W,) uint32 packed code of every pixel, ``_CLEAR``
    #: where transparent.
    _packed: np.ndarray | None = None
    _cache: DerivedCache = field(default_factory=DerivedCache, init=False, repr=False, compare=False)

    def __repr__(self) -> str:
        # Not the dataclass repr: it would print (and build) ``inverse``.
        return (f"ColourSample(n_colours={self.n_colours}, bit_depth={self.bit_depth}, "
                f"shape={self.shape}, n_pixels={self.n_pixels})")

    def index_image(self, labels: np.ndarray, *, dtype: npt.DTypeLike | None = None, step: int = 1) -> np.ndarray:
        """Spread one value per distinct colour onto the pixels of the image.

        Parameters
        ----------
        labels : array_like of shape (n_colours,), integer
            A value for every row of ``codes``, typically its palette index.
        dtype : dtype, optional
            Of the result, default that of ``labels``.  ``labels`` are cast
            to it as by ``labels.astype(dtype)``.
        step : int, default=1
            Spread onto every ``step``-th pixel of every ``step``-th row only
            (the pixels of ``image[::step, ::step]``).

        Returns
        -------
        ndarray of shape (H, W), or of ``image[::step, ::step]``'s shape
            ``labels[inverse]`` for every opaque pixel, 0 for fully
            transparent ones.

        Raises
        ------
        ValueError
            The sample is pooled (it has no pixels), or ``labels`` does not
            hold one value per distinct colour.

        Examples
        --------
        >>> import numpy as np
        >>> from quantize.io.read import as_picture
        >>> pic = as_picture(np.array([[[255, 0, 0], [0, 0, 255], [255, 0, 0]]], np.uint8))
        >>> s = sample_picture(pic)
        >>> s.index_image(np.array([7, 3]), dtype=np.uint8).tolist()
        [[3, 7, 3]]
        """
        if self.shape is None:
            raise ValueError("a pooled colour sample has no pixels to spread labels onto")
        labels = np.asarray(labels)
        if labels.shape != (self.n_colours,):
            raise ValueError(
                f"labels must hold one value per distinct colour, shape ({self.n_colours},); got {labels.shape}"
            )
        values = labels.astype(labels.dtype if dtype is None else dtype)
        if step == 1:
            return self._spread(values, 0).reshape(self.shape)
        h, w = self.shape
        return self._spread(values, 0, step).reshape(-(-h // step), -(-w // step))

    def _spread(self, values: np.ndarray, fill, step: int = 1) -> np.ndarray:
        """``values`` of each pixel's colour (of every ``step``-th pixel and row), ``fill`` where transparent; flat."""
        def every(index: np.ndarray) -> np.ndarray:
            return index if step == 1 else np.ascontiguousarray(index.reshape(self.shape)[::step, ::step]).ravel()

        if self._packed is not None:
            # np.empty, not np.zeros: only rows of present colours (and the
            # transparent slot) are ever read, and an untouched page of a
            # fresh table costs nothing.
            table = np.empty(_CLEAR + 1, dtype=values.dtype)
            table[_pack(self.codes, 8)] = values
            table[_CLEAR] = fill
            return _take_blocks(table, every(self._packed))
        table = np.empty(values.size + 1, dtype=values.dtype)
        table[:-1] = values
        table[-1] = fill  # the row -1 of transparent pixels reads this slot
        inverse = self.inverse
        if inverse is None:  # a pooled sample: index_image refuses it before coming here
            raise ValueError("a pooled colour sample has no pixels to spread values onto")
        return _take_blocks(table, every(inverse))

    def keep_mapping(self, palette: quantize.Palette, metric: str, labels: np.ndarray, delta_e: np.ndarray) -> None:
        """Keep the mapping of these colours onto ``palette`` by ``metric``, for reuse.

        The fitting engine maps the sample onto every candidate palette to
        measure it, and keeps the mapping of the palette it returns, so
        that mapping the same picture onto that palette (as ``quantize
        reduce`` does) does not repeat the work.  One mapping is kept per
        sample; a new one replaces it.  The arrays become read-only.

        Parameters
        ----------
        palette : Palette
        metric : {"ciede2000", "space"}
        labels : ndarray of shape (n_colours,)
            Palette index of each distinct colour.
        delta_e : ndarray of shape (n_colours,)
            CIEDE2000 of each distinct colour to its palette colour.
        """
        for a in (labels, delta_e):
            if np.shape(a) != (self.n_colours,):
                raise ValueError(f"a mapping holds one value per distinct colour, shape ({self.n_colours},); "
                                 f"got {np.shape(a)}")
            a.setflags(write=False)
        self._cache.put("kept mapping", (_mapping_key(palette, metric), labels, delta_e))

    def kept_mapping(self, palette: quantize.Palette, metric: str) -> tuple[np.ndarray, np.ndarray] | None:
        """``(labels, delta_e)`` kept by :meth:`keep_mapping` for this palette and metric, else None."""
        kept = self._cache.peek("kept mapping")
        if kept is None or kept[0] != _mapping_key(palette, metric):
            return None
        return kept[1], kept[2]

    @property
    def n_colours(self) -> int:
        """Number of distinct colours."""
        return int(self.codes.shape[0])

    def float_rgb(self) -> np.ndarray:
        """Distinct colours as encoded sRGB floats in 0-1, shape (n, 3)."""
        return self.codes.astype(np.float64) / (2**self.bit_depth - 1)

    def points(self, space: str) -> np.ndarray:
        """Distinct colours in the perceptual ``space``, computed once per space."""
        return self._cache.get(("points", space), lambda: self._points_in(space))

    def _points_in(self, space: str) -> np.ndarray:
        from quantize.colour.spaces import srgb8_to_space, to_space

        if self.bit_depth == 8:
            pts = srgb8_to_space(self.codes, space)
        else:
            pts = to_space(self.float_rgb(), space)
        return np.ascontiguousarray(pts, dtype=np.float64)

    def binned(self, space: str, *, max_points: int = 20_000, bits: int | None = _BIN_BITS
               ) -> tuple[np.ndarray, np.ndarray]:
        """Weighted cell means: a small stand-in for the distinct colours.

        Colours are grouped by the top ``bits`` bits of each sRGB channel;
        each cell becomes one point at the weighted mean of its members'
        perceptual coordinates, carrying their total weight.  Below
        ``max_points`` distinct colours nothing is binned.  Each result is
        computed once per sample: every palette size and refinement reuses it.

        Parameters
        ----------
        space : str
            Perceptual space of the cell means.
        max_points : int, default=20000
        bits : int or None, default=5
            Bits per channel.  The restarts use 5 (at most 32 768 cells).
            None takes the finest grid, 7 bits down to 5, with at most
            ``max_points`` cells: the refinements use that.

        Returns
        -------
        points : ndarray of shape (m, 3)
        weights : ndarray of shape (m,)
        """
        if self.n_colours <= max_points:
            return self.points(space), self.weights
        return self._cache.get(("binned", space, max_points, bits),
                               lambda: self._cell_means(space, max_points, bits))

    def _cell_means(self, space: str, max_points: int, bits: int | None) -> tuple[np.ndarray, np.ndarray]:
        pts = self.points(space)
        inv, n_cells = self._cache.get(("cells", max_points, bits), lambda: self._cells(max_points, bits))
        w = np.bincount(inv, weights=self.weights, minlength=n_cells)
        means = np.empty((n_cells, pts.shape[1]))
        for j in range(pts.shape[1]):
            means[:, j] = np.bincount(inv, weights=self.weights * pts[:, j], minlength=n_cells) / w
        return means, w

    def _cells(self, max_points: int, bits: int | None) -> tuple[np.ndarray, int]:
        """Cell of every distinct colour (numbered in code order) and the cell count."""
        for b in ((bits,) if bits is not None else (7, 6, _BIN_BITS)):
            shift = self.bit_depth - b
            c = self.codes.astype(np.int64) >> shift
            cell = (c[:, 0] << (2 * b)) | (c[:, 1] << b) | c[:, 2]
            cells, inv = np.unique(cell, return_inverse=True)
            if cells.size <= max_points or bits is not None:
                break
        return inv.ravel(), int(cells.size)


def _mapping_key(palette, metric: str) -> tuple:
    # The 8-bit colours fix the CIEDE2000 mapping; the space too fixes the Euclidean one.
    return (palette.rgb8.tobytes(), palette.space, metric)


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


def _pack_pixels(rgb: np.ndarray, dtype) -> np.ndarray:
    """``_pack`` of every pixel of an (H, W, 3) uint8 image, in one pass, flat."""
    flat = np.ascontiguousarray(rgb).reshape(-1)
    n = flat.size // 3
    out = np.empty(n, dtype=dtype)
    # The four bytes R G B R' from a pixel's start, read as one big-endian
    # word, are R<<24 | G<<16 | B<<8 | R': shifting out R' packs the pixel.
    # The last pixel has no fourth byte and is packed alone.
    words = np.ndarray((n - 1,), dtype=">u4", buffer=flat, strides=(3,))
    np.right_shift(words, 8, out=out[:-1])
    r, g, b = (int(c) for c in flat[-3:])
    out[-1] = (r << 16) | (g << 8) | b
    return out


def _take_blocks(table: np.ndarray, index: np.ndarray) -> np.ndarray:
    """``table[index]`` for an in-range index (negative counts from the end)."""
    out = np.empty(index.size, dtype=table.dtype)
    for i in range(0, index.size, _BLOCK):
        np.take(table, index[i:i + _BLOCK], out=out[i:i + _BLOCK], mode="wrap")
    return out


def sample_picture(picture: Picture) -> ColourSample:
    """Collapse a picture to its distinct opaque colours and pixel counts.

    Parameters
    ----------
    picture : Picture
        A loaded image (see :func:`quantize.load_image`).

    Returns
    -------
    ColourSample
        With ``shape`` and ``inverse`` set, so that per-colour results can be
        spread back onto pixels exactly (see :meth:`ColourSample.index_image`).
        Computed on the first call and kept by the picture: every later call
        with the same picture returns the same sample.

    Examples
    --------
    >>> import numpy as np
    >>> from quantize.io.read import as_picture
    >>> pic = as_picture(np.array([[[255, 0, 0], [255, 0, 0], [0, 0, 255]]], np.uint8))
    >>> s = sample_picture(pic)
    >>> s.codes.tolist(), s.weights.tolist()
    ([[0, 0, 255], [255, 0, 0]], [1.0, 2.0])
    """
    return picture._derived.get("colour sample", lambda: _sample(picture))


def _sample(picture: Picture) -> ColourSample:
    h, w = picture.rgb.shape[:2]
    bits = picture.bit_depth
    opaque = None if picture.alpha is None else picture.opaque.ravel()  # no alpha: every pixel is opaque
    if opaque is not None and bool(opaque.all()):
        opaque = None  # an alpha that hides nothing is sampled as no alpha
    n_opaque = h * w if opaque is None else int(np.count_nonzero(opaque))
    if bits == 8 and n_opaque >= _DENSE_FROM:
        return _sample_dense(picture, None if opaque is None else ~opaque, n_opaque)
    packed = _pack_pixels(picture.rgb, np.uint32) if bits == 8 else _pack(picture.rgb.reshape(-1, 3), bits)
    sel = packed if opaque is None else packed[opaque]
    present, inv_sel, counts = np.unique(sel, return_inverse=True, return_counts=True)
    inv_sel = inv_sel.ravel().astype(np.int32)
    if opaque is None:
        inverse = inv_sel
    else:
        inverse = np.full(packed.size, -1, dtype=np.int32)
        inverse[opaque] = inv_sel
    return ColourSample(
        codes=_unpack(present, bits),
        weights=counts.astype(np.float64),
        bit_depth=bits,
        inverse=inverse,
        shape=(h, w),
        n_pixels=n_opaque,
    )


def _sample_dense(picture: Picture, clear: np.ndarray | None, n_opaque: int) -> ColourSample:
    """Sample an 8-bit image through a histogram over all 2**24 codes.

    Exact, and several times faster than sorting from a quarter of a
    megapixel; below that, touching the 128 MB table costs more than a sort.
    """
    rgb = picture.rgb
    # int64 because bincount casts any other index to it, a 96 MB copy.
    packed = _pack_pixels(rgb, np.int64)
    if clear is not None:
        # max(code, _CLEAR * clear) is the code or _CLEAR, as every code is
        # below _CLEAR: branch-free, unlike a masked assignment, which
        # mispredicts on scattered transparency and is about three times slower.
        flags = clear.view(np.uint8)
        for i in range(0, packed.size, _BLOCK):
            block = packed[i:i + _BLOCK]
            np.maximum(block, flags[i:i + _BLOCK] * np.int64(_CLEAR), out=block)
    counts = np.bincount(packed, minlength=_CLEAR + 1)
    present = np.flatnonzero(counts[:_CLEAR] != 0)  # on bools: several times faster than on the counts
    weights = counts[present].astype(np.float64)
    del counts
    return ColourSample(
        codes=_unpack(present, 8),
        weights=weights,
        bit_depth=8,
        shape=rgb.shape[:2],
        n_pixels=n_opaque,
        _packed=packed.astype(np.uint32),  # kept for the lifetime of the sample: half the memory
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
