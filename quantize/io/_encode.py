"""Encoding a palette image in each output format, and how its transparency is kept.

The policy for transparency in a palette image (indexed PNG, lossless WebP)
is to keep alpha in the palette: the PNG tRNS chunk holds one alpha per
palette entry (ISO/IEC 15948:2004, section 11.3.2.1), so a pixel of palette
colour ``i`` at alpha ``a`` is written as an entry (colour ``i``, ``a``).
The first ``k`` entries are the palette itself, opaque and in order; one
fully transparent entry and the (colour, alpha) entries the image uses follow.

(With 256 colours and transparency, the transparent entry takes the place of
a palette colour no visible pixel uses; if every one is used, the image does
not fit.)  So that the entries fit in 256, alpha is rounded to the nearest of a set of
levels spaced ``step`` apart, the finest of :data:`ALPHA_STEPS` that fits.
The steps divide 255, so 0 and 255 are always levels and an opaque or fully
transparent pixel is never changed.  With the coarsest step, 255, alpha is
thresholded: :data:`ALPHA_THRESHOLD` and above is opaque, below it fully
transparent.  GIF, with one transparent index, always uses that threshold.
TIFF keeps alpha exactly (RGBA), and JPEG flattens it onto white.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np
from PIL import Image

from quantize.errors import OutputError

#: Spacings of the alpha levels tried for a palette image, finest first (the divisors of 255).
ALPHA_STEPS = (1, 3, 5, 15, 17, 51, 85, 255)
#: Alpha (0-255) from which a pixel is opaque where only on/off transparency fits (GIF, or
#: a palette image with no room for more levels).
ALPHA_THRESHOLD = 128
#: Entries a PNG, GIF or WebP colour index can hold.
MAX_ENTRIES = 256
#: Pillow's options where every colour and alpha is kept as given (TIFF; PNG and WebP above 256 colours).
_EXACT_OPTIONS: dict[str, dict[str, object]] = {"TIFF": {"compression": "tiff_lzw"}, "PNG": {},
                                                 "WEBP": {"lossless": True, "exact": True}}
#: JPEG settings: quality 95 and no chroma subsampling (4:4:4), so flat-colour edges stay crisp.
_JPEG = {"quality": 95, "subsampling": 0}


@dataclass(frozen=True, eq=False)
class IndexedAlpha:
    """A palette image with its transparency moved into the palette.

    Attributes
    ----------
    indices : ndarray of shape (H, W), uint8
        Entry of every pixel.
    rgb : ndarray of shape (n, 3), uint8
        Colour of each entry; the first ``k`` are the palette.
    alpha : ndarray of shape (n,), uint8
        Opacity of each entry.
    step : int
        Spacing of the alpha levels (1: alpha kept exactly; 255: thresholded).
    max_change : int
        Largest difference between a pixel's alpha and the alpha written, 0-255.
    cleared : ndarray of shape (H, W), bool, or None
        Pixels given some opacity but written fully transparent; None if none.
    """

    indices: np.ndarray
    rgb: np.ndarray
    alpha: np.ndarray
    step: int
    max_change: int
    cleared: np.ndarray | None = None


def _levels(a8: np.ndarray, step: int) -> np.ndarray:
    """Alpha rounded to the nearest multiple of ``step`` (halves up), as int32."""
    a = a8.astype(np.int32)
    return (a + step // 2) // step * step


def indexed_with_alpha(idx: np.ndarray, palette: np.ndarray, a8: np.ndarray, *,
                       binary: bool = False) -> IndexedAlpha | None:
    """Entries for ``idx`` on ``palette`` with alpha ``a8``: the finest alpha levels that fit.

    ``binary`` allows only the threshold (GIF).  None when not even that fits
    (256 palette colours and a transparent pixel).
    """
    k = len(palette)
    for step in (ALPHA_STEPS[-1:] if binary else ALPHA_STEPS):
        q = _levels(a8, step)
        partial = (q > 0) & (q < 255)
        clear = bool((q == 0).any())
        # One bin per (colour, level) pair: k * 256 bins at most, cheap next to the pixels.
        pair = idx[partial].astype(np.int32) * 256 + q[partial]
        used = np.flatnonzero(np.bincount(pair, minlength=k * 256)) if pair.size else np.empty(0, np.intp)
        n = k + clear + used.size
        if n <= MAX_ENTRIES:
            break
    else:
        return _clear_in_unused_entry(idx, palette, a8, q) if clear and not used.size else None
    table = np.zeros(k * 256, dtype=np.uint8)
    table[used] = np.arange(k + clear, n, dtype=np.int64).astype(np.uint8)
    out = idx.astype(np.uint8)  # a copy; opaque pixels keep their palette index
    if clear:
        out[q == 0] = k
    out[partial] = table[pair]
    rgb = np.vstack([palette, np.full((int(clear), 3), 255), palette[used // 256]]).astype(np.uint8)
    alpha = np.concatenate([np.full(k, 255), [0] * clear, used % 256]).astype(np.uint8)
    change = int(np.abs(q - a8.astype(np.int32)).max())
    cleared = (q == 0) & (a8 > 0)
    return IndexedAlpha(out, rgb, alpha, step, change, cleared if cleared.any() else None)


def _clear_in_unused_entry(idx, palette, a8, q) -> IndexedAlpha | None:
    """256 colours and on/off transparency: the transparent entry takes the place of a
    palette colour no visible pixel uses, if there is one (else None)."""
    seen = np.bincount(idx[q > 0].ravel(), minlength=len(palette))
    free = np.flatnonzero(seen == 0)
    if not free.size:
        return None
    u = int(free[0])
    out = np.where(q == 0, u, idx).astype(np.uint8)
    rgb = palette.copy()
    rgb[u] = 255
    alpha = np.full(len(palette), 255, np.uint8)
    alpha[u] = 0
    cleared = (q == 0) & (a8 > 0)
    change = int(np.abs(q - a8.astype(np.int32)).max())
    return IndexedAlpha(out, rgb, alpha, ALPHA_STEPS[-1], change, cleared if cleared.any() else None)


@dataclass(frozen=True, eq=False)
class Encoded:
    """One output file's bytes and what it holds.

    Attributes
    ----------
    data : bytes
    palette_entries : int or None
        Colour-index entries in the file (indexed PNG, GIF, WebP), else None.
    alpha_step : int or None
        Spacing of the alpha levels written (see :data:`ALPHA_STEPS`); None
        with no transparency, or where alpha is kept exactly or dropped.
    alpha_max_change : int
        Largest change of a pixel's alpha, 0-255 (255 where JPEG dropped it).
    decoded : ndarray of shape (H, W, 3), uint8, or None
        A lossy file's pixels as decoded; None for a lossless one.
    cleared : ndarray of shape (H, W), bool, or None
        Pixels given some opacity but written fully transparent; None if none.
    notes : tuple of str
        What the user should be warned of.
    """

    data: bytes
    palette_entries: int | None = None
    alpha_step: int | None = None
    alpha_max_change: int = 0
    decoded: np.ndarray | None = None
    cleared: np.ndarray | None = None
    notes: tuple = ()


def encode(fmt: str, idx: np.ndarray, palette: np.ndarray, a8: np.ndarray | None,
           dpi: tuple[float, float] | None, name: str) -> Encoded:
    """Encode a checked raster as ``fmt`` ("PNG", "WEBP", "GIF", "TIFF" or "JPEG").

    ``name`` is the output's name for messages.  Raises OutputError where the
    image does not fit the format.
    """
    k = len(palette)
    if fmt == "JPEG":
        return _jpeg(idx, palette, a8, dpi, name)
    if fmt == "TIFF" or (k > MAX_ENTRIES and fmt in ("PNG", "WEBP")):
        # Not a palette image: every colour and alpha kept exactly.
        rgb = palette[idx]
        image = Image.fromarray(rgb if a8 is None else np.dstack([rgb, a8]))
        return Encoded(_pillow(image, fmt, dict(_EXACT_OPTIONS[fmt]), dpi, name))
    ia: IndexedAlpha | None
    if a8 is None:
        ia = IndexedAlpha(idx.astype(np.uint8), palette, np.full(k, 255, np.uint8), 1, 0)
    else:
        ia = indexed_with_alpha(idx, palette, a8, binary=fmt == "GIF")
    if ia is None or len(ia.rgb) > MAX_ENTRIES:
        need = f"{k} colours and transparency" if a8 is not None else f"{k} colours"
        raise OutputError(f"{name}: {need} do not fit the {MAX_ENTRIES} entries of a {fmt} colour index; "
                          f"use fewer colours or a .tif output")
    notes = []
    if a8 is not None and ia.step == 255 and ia.max_change:
        n = int(((a8 > 0) & (a8 < 255)).sum())
        notes.append(f"{name}: {n} partly transparent pixels made opaque or clear (alpha {ALPHA_THRESHOLD} "
                     f"and above is opaque); {fmt} keeps one transparent entry here")
    step = None if a8 is None else ia.step
    if fmt == "PNG":
        from ._png import indexed_png

        trns = ia.alpha if a8 is not None else None
        return Encoded(indexed_png(ia.indices, ia.rgb, alpha=trns, dpi=dpi), len(ia.rgb), step,
                       ia.max_change, cleared=ia.cleared, notes=tuple(notes))
    if fmt == "GIF":
        image = Image.fromarray(ia.indices, mode="P")
        image.putpalette(ia.rgb.ravel().tolist())
        options: dict[str, bool | int] = {"optimize": False}
        if a8 is not None and (ia.alpha == 0).any():
            options["transparency"] = int(np.flatnonzero(ia.alpha == 0)[0])
        return Encoded(_pillow(image, fmt, options, None, name), len(ia.rgb), step, ia.max_change,
                       cleared=ia.cleared, notes=tuple(notes))
    # WebP lossless: at most 256 distinct colours, which its colour-indexing transform stores
    # as a palette; exact=True keeps the colour under fully transparent pixels.
    rgb = ia.rgb[ia.indices]
    image = Image.fromarray(rgb if a8 is None else np.dstack([rgb, ia.alpha[ia.indices]]))
    data = _pillow(image, fmt, {"lossless": True, "exact": True, "quality": 100}, None, name)
    return Encoded(data, len(ia.rgb), step, ia.max_change, cleared=ia.cleared, notes=tuple(notes))


def _jpeg(idx, palette, a8, dpi, name) -> Encoded:
    rgb = palette[idx]
    notes = []
    if a8 is not None:
        a = a8[..., None] / 255.0
        rgb = np.rint(rgb * a + 255.0 * (1.0 - a)).astype(np.uint8)
        notes.append(f"{name}: JPEG has no transparency; {int((a8 < 255).sum())} transparent or partly "
                     "transparent pixels flattened onto white")
    data = _pillow(Image.fromarray(rgb), "JPEG", dict(_JPEG), dpi, name)
    with Image.open(io.BytesIO(data)) as im:
        decoded = np.asarray(im.convert("RGB"))
    flat = decoded.reshape(-1, 3).astype(np.uint32)
    n = np.unique((flat[:, 0] << 16) | (flat[:, 1] << 8) | flat[:, 2]).size
    notes.append(f"{name}: JPEG re-encodes the colours, so the file is no longer the palette's {len(palette)} "
                 f"colours ({n} distinct colours in it); its ΔE00 and coverage (each pixel counted for its "
                 "nearest palette colour) are measured on the decoded JPEG")
    return Encoded(data, None, None, 255 if a8 is not None else 0, decoded, notes=tuple(notes))


def _pillow(image: Image.Image, fmt: str, options: dict, dpi, name: str) -> bytes:
    # Encoded in memory, then written by Python: Pillow's encoders write to a
    # real file through its descriptor and do not notice a short write, so on
    # a full disk a JPEG came out cut short with no error.
    if dpi is not None:
        options["dpi"] = dpi
    buf = io.BytesIO()
    try:
        image.save(buf, format=fmt, **options)
    except OSError as exc:
        raise OutputError(f"{name}: writing failed ({exc.strerror or exc})") from exc
    return buf.getvalue()
