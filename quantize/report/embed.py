"""Images inside the review page: data URIs, so that one HTML file carries everything.

A reduced image is embedded as an indexed PNG (one byte or less per pixel,
the palette in the file), which keeps the page small and its colours exactly
the palette's.  The original is embedded as a JPEG when it is opaque (a
photo as PNG would be several times larger) and as PNG when it has alpha.
Previews of other palette sizes are made by scaling the original down first
and mapping that with each size's palette, so each preview shows only that
palette's colours.
"""

from __future__ import annotations

import base64
import io
from dataclasses import dataclass

import numpy as np

#: JPEG quality of the embedded original (common practice for a visually lossless photo; no source).
ORIGINAL_JPEG_QUALITY = 90


def data_uri(data: bytes, mime: str) -> str:
    """``data:`` URI of ``data`` (base64)."""
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def fit_size(size: tuple[int, int], max_side: int | None) -> tuple[int, int]:
    """``(w, h)`` scaled so the longer side is at most ``max_side`` (None: unchanged)."""
    w, h = size
    if max_side is None or max(w, h) <= max_side:
        return w, h
    s = max_side / max(w, h)
    return max(1, round(w * s)), max(1, round(h * s))


def _alpha8(alpha) -> np.ndarray:
    if alpha.dtype == bool:
        return alpha.astype(np.uint8) * 255
    if alpha.dtype != np.uint8:
        return np.rint(alpha.astype(np.float64) / 257).astype(np.uint8)
    return alpha


def picture_image(picture):
    """8-bit RGB(A) PIL image of a Picture (16-bit codes divided by 257)."""
    from PIL import Image

    rgb = picture.rgb
    if picture.bit_depth == 16:
        rgb = np.rint(rgb.astype(np.float64) / 257).astype(np.uint8)
    if picture.alpha is None:
        return Image.fromarray(np.ascontiguousarray(rgb), "RGB")
    return Image.fromarray(np.dstack([rgb, _alpha8(picture.alpha)]), "RGBA")


def indexed_image(indices: np.ndarray, rgb8: np.ndarray, alpha=None):
    """PIL image of palette indices: mode "P" when opaque, RGBA when there is alpha.

    An image with alpha keeps every alpha level (RGBA), so a soft edge is
    shown as the file has it; its RGB values are still only palette colours.
    """
    from PIL import Image

    if alpha is None:
        img = Image.fromarray(np.ascontiguousarray(indices.astype(np.uint8)), "P")
        img.putpalette(np.asarray(rgb8, dtype=np.uint8).reshape(-1).tolist())
        return img
    rgb = np.asarray(rgb8, dtype=np.uint8)[indices]
    return Image.fromarray(np.dstack([rgb, _alpha8(alpha)]), "RGBA")


def png_bytes(img) -> bytes:
    """PNG file of a PIL image; an indexed image keeps the fewest bits per pixel that hold its palette."""
    buf = io.BytesIO()
    if img.mode == "P":
        n = len(img.getpalette() or ()) // 3
        bits = next(b for b in (1, 2, 4, 8) if n <= 2 ** b)
        img.save(buf, format="PNG", optimize=True, bits=bits)
    else:
        img.save(buf, format="PNG", optimize=True)
    return buf.getvalue()


def original_uri(picture, max_side: int | None) -> tuple[str, tuple[int, int]]:
    """The original scaled smoothly to ``max_side``, as a data URI, and its embedded size."""
    from PIL import Image

    img = picture_image(picture)
    size = fit_size(img.size, max_side)
    if size != img.size:
        img = img.resize(size, Image.Resampling.LANCZOS)
    if img.mode == "RGBA":
        return data_uri(png_bytes(img), "image/png"), size
    buf = io.BytesIO()
    img.save(buf, format="JPEG", quality=ORIGINAL_JPEG_QUALITY, subsampling=0)
    return data_uri(buf.getvalue(), "image/jpeg"), size


def result_uri(mapped, max_side: int | None) -> tuple[str, tuple[int, int]]:
    """A reduced image scaled by nearest neighbour to ``max_side`` (colours stay the palette's), as a data URI."""
    h, w = mapped.indices.shape
    size = fit_size((w, h), max_side)
    idx, alpha = mapped.indices, mapped.alpha
    if size != (w, h):
        rows = (np.arange(size[1]) * h // size[1])[:, None]
        cols = (np.arange(size[0]) * w // size[0])[None, :]
        idx = idx[rows, cols]
        alpha = None if alpha is None else alpha[rows, cols]
    return data_uri(png_bytes(indexed_image(idx, mapped.palette.rgb8, alpha)), "image/png"), size


def _nearest_rows_cols(shape, size):
    """Row and column indices that scale an (h, w) grid to ``size`` (w, h) by nearest neighbour."""
    h, w = shape[:2]
    return (np.arange(size[1]) * h // size[1])[:, None], (np.arange(size[0]) * w // size[0])[None, :]


def written_uris(written, picture, palette, max_side: int | None) -> tuple[str, tuple[int, int], str]:
    """A lossy file as written (a JPEG) for the page: its image, its size, and where each palette colour is.

    The image is the file's own bytes when it fits ``max_side``; a larger
    one is its decoded pixels scaled by nearest neighbour, as a PNG
    (exactly those pixels: a second JPEG generation of a subsampled copy
    moved them by 3 levels on average, nearly as far as the palette image
    is), so the page shows the JPEG's pixels, not the palette image it was
    made from.  That PNG of a photograph is larger than the indexed PNG a
    palette image gives.  The second
    URI is an indexed PNG of the same size giving each pixel the palette
    colour nearest to it (CIEDE2000, as the file's coverage counts it;
    pixels not fully opaque in ``picture`` transparent): the swatch
    highlight reads it, since a JPEG's pixels are no longer exactly any
    palette colour.

    Parameters
    ----------
    written : quantize.io.write.WrittenImage
        With ``decoded`` pixels (a lossy file).
    picture : Picture
        The input, for which pixels were fully opaque.
    palette : Palette
    max_side : int or None
    """
    from pathlib import Path

    from PIL import Image

    from quantize.io.read import as_picture

    rgb = written.decoded
    h, w = rgb.shape[:2]
    size = fit_size((w, h), max_side)
    rows, cols = _nearest_rows_cols(rgb.shape, size)
    shown_rgb = rgb if size == (w, h) else np.ascontiguousarray(rgb[rows, cols])
    src = None
    if size == (w, h):
        try:
            src = data_uri(Path(written.path).read_bytes(), "image/jpeg")
        except OSError:  # gone since it was written: its decoded pixels instead
            src = None
    if src is None:  # PNG: exactly the JPEG's decoded pixels (another JPEG generation would add its own noise)
        src = data_uri(png_bytes(Image.fromarray(shown_rgb, "RGB")), "image/png")
    opaque = None
    if picture.alpha is not None:
        opaque = picture.alpha >= picture.max_code
        opaque = opaque if size == (w, h) else opaque[rows, cols]
    m = palette.apply(as_picture(shown_rgb), nearest="ciede2000")
    mark = png_bytes(indexed_image(m.indices, palette.rgb8, None if opaque is None else opaque))
    return src, size, data_uri(mark, "image/png")


@dataclass(frozen=True)
class Preview:
    """One palette size as the page shows it.

    Attributes
    ----------
    src : str
        Data URI of the indexed PNG.
    size : (int, int)
        Width and height of the embedded image, px.
    coverage : ndarray of shape (k,)
        Percent of the embedded image's opaque pixels per palette colour.
    """

    src: str
    size: tuple
    coverage: np.ndarray


def size_previews(picture, palettes, preview_side: int) -> list[Preview]:
    """Each palette's mapping of the original scaled to ``preview_side``, as embedded previews.

    The original is scaled once (smoothly); every palette then maps that
    small copy with the library's own nearest-colour rule, so a preview is
    what the size looks like, not a subsample of a full-size mapping.
    """
    from PIL import Image

    from quantize.io.read import as_picture

    img = picture_image(picture)
    size = fit_size(img.size, preview_side)
    if size != img.size:
        img = img.resize(size, Image.Resampling.LANCZOS)
    small = as_picture(np.asarray(img))
    out = []
    for pal in palettes:
        m = pal.apply(small)
        src = data_uri(png_bytes(indexed_image(m.indices, pal.rgb8, m.alpha)), "image/png")
        out.append(Preview(src=src, size=size, coverage=np.asarray(m.coverage, dtype=float)))
    return out
