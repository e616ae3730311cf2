"""Film images as they are written: 1-bit pictures with a margin of marks, and the multi-page PDF.

A film is ink black on clear (a positive) unless it is asked for as a
negative; a mirrored film is flipped left to right (for films read from the
emulsion side), label included, so the label reads the way the artwork does.
The margin carries registration targets at the four corners, centre marks on
the four sides and a label: the ink, its place in the print order, the job
and the date. The PDF has one page per film at its exact physical size
(Pillow writes the page size from the pixels and the resolution).
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np

__all__ = ["FilmPage", "film_image", "pdf_bytes"]


@dataclass(frozen=True)
class FilmPage:
    """How one film is drawn.

    Attributes
    ----------
    margin_px : int
        Width of the margin around the artwork (0: no margin, no marks).
    label : str or None
        Text below the artwork, in the margin.
    mirror : bool
        Flip left to right (emulsion side).
    negative : bool
        Clear where the ink prints, black elsewhere.
    """

    margin_px: int = 0
    label: str | None = None
    mirror: bool = False
    negative: bool = False


def film_image(mask: np.ndarray, page: FilmPage):
    """The film as a 1-bit PIL image: ink black (0), clear white (1) on a positive.

    Examples
    --------
    >>> m = np.zeros((4, 6), bool); m[:, :2] = True
    >>> im = film_image(m, FilmPage(mirror=True))
    >>> (~np.asarray(im))[0].tolist()
    [False, False, False, False, True, True]
    """
    from PIL import Image

    margin = page.margin_px
    h, w = mask.shape
    canvas = np.zeros((h + 2 * margin, w + 2 * margin), bool)
    canvas[margin:margin + h, margin:margin + w] = mask
    img = Image.fromarray(~canvas)
    if margin >= 8:
        _draw_marks(img, w, h, margin)
        if page.label:
            _draw_label(img, w, h, margin, page.label)
    if page.mirror:
        img = img.transpose(Image.Transpose.FLIP_LEFT_RIGHT)
    if page.negative:
        img = Image.fromarray(~np.asarray(img))
    return img


def _draw_marks(img, w: int, h: int, margin: int) -> None:
    """Targets at the corners and centre marks on each side, all inside the margin."""
    from PIL import ImageDraw

    draw = ImageDraw.Draw(img)
    r = max(2, int(margin * 0.3))
    lw = max(1, margin // 40)
    mid = margin // 2
    cx = [mid, w + margin + mid]
    cy = [mid, h + margin + mid]

    def target(x, y):
        draw.ellipse([x - r, y - r, x + r, y + r], outline=0, width=lw)
        draw.line([x - r - lw, y, x + r + lw, y], fill=0, width=lw)
        draw.line([x, y - r - lw, x, y + r + lw], fill=0, width=lw)

    for x in cx:
        for y in cy:
            target(x, y)
    # Centre marks: a short line across the middle of each side, pointing at the artwork.
    xm, ym = margin + w // 2, margin + h // 2
    for y0 in (mid - r, h + margin + mid - r):
        draw.line([xm, y0, xm, y0 + 2 * r], fill=0, width=lw)
        draw.line([xm - r // 2, y0 + r, xm + r // 2, y0 + r], fill=0, width=lw)
    for x0 in (mid - r, w + margin + mid - r):
        draw.line([x0, ym, x0 + 2 * r, ym], fill=0, width=lw)
        draw.line([x0 + r, ym - r // 2, x0 + r, ym + r // 2], fill=0, width=lw)


def _draw_label(img, w: int, h: int, margin: int, label: str) -> None:
    from PIL import Image, ImageDraw

    size = max(6, int(margin * 0.3))
    font = _font(size)
    # Between the bottom-left target and the bottom centre mark.
    x0 = margin + max(1, margin // 4)
    room = max(1, w // 2 - margin // 2 - max(1, margin // 4))
    probe = ImageDraw.Draw(img)
    while size > 6 and probe.textlength(label, font=font) > room:
        size -= 1
        font = _font(size)
    # Drawn on a scratch strip and pasted into the margin only, so nothing reaches the artwork.
    strip = Image.new("1", (room, margin), 1)
    ImageDraw.Draw(strip).text((0, max(0, (margin - size) // 2)), label, fill=0, font=font)
    img.paste(strip, (x0, h + margin))


def _font(size: int):
    from PIL import ImageFont

    try:
        return ImageFont.load_default(size=size)
    except (TypeError, OSError, ImportError):  # a Pillow without FreeType: fixed-size bitmap font
        return ImageFont.load_default()


def pdf_bytes(images: list, dpi: float, *, title: str) -> bytes:
    """One PDF page per film image, each page the image's size at ``dpi`` (1/72 in per point)."""
    buf = io.BytesIO()
    first, rest = images[0], images[1:]
    first.save(buf, format="PDF", save_all=True, append_images=rest, resolution=float(dpi), title=title,
               creator="quantize")
    return buf.getvalue()
