"""16-bit PNG and TIFF readers that keep both bytes of every sample.

Pillow reads 16-bit RGB PNG and TIFF at 8 bits.  These readers get the high
and low bytes from Pillow's own decoder (decoding twice, with the byte order
swapped the second time) or from tifffile, and return uint16 arrays for
:mod:`quantize.io.read` to orient and colour-convert.  Split out of
:mod:`quantize.io.read`; both return None when the 8-bit route should read
the file instead.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from PIL import ImageFile

from quantize.core.picture import ImageWarning
from quantize.errors import ImageReadError

from ._decode import (
    DECODE_ERRORS,
    PNG16_RAWMODE,
    check_pixels,
    dpi_pair,
    exif_orientation,
    open_pil,
    orientation_value,
    tiff_log_notes,
)

__all__ = ["read_png16", "read_tiff16"]

#: What both readers return: colour and alpha (or None) as uint16, the ICC profile (or None), the
#: orientation tag (1-8) and the dpi (or None).
Deep16 = tuple[np.ndarray, np.ndarray | None, bytes | None, int, tuple[float, float] | None]


def read_png16(path: Path, name: str, ctype: int, max_pixels: int | None, notes: list) -> Deep16 | None:
    """Both bytes of every sample of a 16-bit colour PNG, from Pillow's own decoder."""
    with open_pil(path) as img:
        check_pixels(name, img.size, max_pixels)
        if len(img.tile) != 1 or img.tile[0][3] != PNG16_RAWMODE[ctype]:
            notes.append((ImageWarning, f"{name}: this Pillow decodes 16-bit PNG differently; read at 8 bits"))
            return None
        if ctype == 4:
            # Grey+alpha at 16 bits is 4 bytes per pixel, exactly what 8-bit RGBA holds,
            # so one raw unpack gives the high and low bytes of both samples.
            img.tile = [_retile(img.tile[0], "RGBA")]
            img.load()
            b = np.asarray(img).astype(np.uint16)
            values = np.stack([b[..., 0] << 8 | b[..., 1], b[..., 2] << 8 | b[..., 3]], axis=-1)
        else:
            values = _hi_lo(img, path)
        info = dict(img.info)
        orientation = exif_orientation(img, name, notes)
    colour, alpha = (values[..., :-1], values[..., -1]) if ctype != 2 else (values, None)
    trns = info.get("transparency")
    if ctype == 2 and isinstance(trns, tuple) and len(trns) == 3:
        alpha = np.where((colour == np.array(trns, np.uint16)).all(axis=-1), 0, 65535).astype(np.uint16)
    return colour, alpha, info.get("icc_profile") or None, orientation, dpi_pair(info.get("dpi"))


def _retile(tile, rawmode: str):
    args = rawmode if isinstance(tile[3], str) else (rawmode, *tile[3][1:])
    return tile._replace(args=args) if hasattr(tile, "_replace") else (*tile[:3], args)


def _hi_lo(hi: ImageFile.ImageFile, path: Path) -> np.ndarray:
    """Decode `hi` (not yet loaded) as stored, then again with the byte order
    swapped, and join the high and low bytes. Every tile must be 16-bit."""
    swap = {"B": "L", "L": "B", "N": "B" if sys.byteorder == "little" else "L"}
    tiles = []
    for tile in hi.tile:
        args = tile[3]  # the rawmode, alone or first in a tuple; a tile without one is refused below
        rawmode = args if isinstance(args, str) else args[0] if args else str(args)
        if not rawmode[:-1].endswith(";16") or rawmode[-1] not in swap:
            raise ValueError(f"unexpected rawmode {rawmode}")
        tiles.append(_retile(tile, rawmode[:-1] + swap[rawmode[-1]]))
    with open_pil(path) as lo:
        lo.tile = tiles
        lo.load()
        low = np.asarray(lo).astype(np.uint16)
    hi.load()
    return np.asarray(hi).astype(np.uint16) << 8 | low


def _tifffile_decodes(page) -> bool:
    from tifffile import TIFF

    return page.compression in TIFF.DECOMPRESSORS


def read_tiff16(path: Path, name: str, max_pixels: int | None, notes: list) -> Deep16 | None:
    """16-bit RGB(A) and grey+alpha TIFF via tifffile. Returns None if Pillow can read the file in full."""
    import tifffile

    with tiff_log_notes(name, notes):
        try:
            tif = tifffile.TiffFile(path)
            page = tif.pages[0]
        except (tifffile.TiffFileError, TypeError) + DECODE_ERRORS:
            return None  # let Pillow try and explain
    if not isinstance(page, tifffile.TiffPage):
        # tifffile reads the first page in full (a TiffPage, never a TiffFrame); this check is
        # what tells the type checker so.
        tif.close()
        return None
    with tif, tiff_log_notes(name, notes):
        # A damaged tag can hold several values, or a number tifffile has no name for, where one is due.
        photometric, bits, spp, width, height = (
            _whole(getattr(page, attr), tag, name) for attr, tag in (
                ("photometric", "PhotometricInterpretation"), ("bitspersample", "BitsPerSample"),
                ("samplesperpixel", "SamplesPerPixel"), ("imagewidth", "ImageWidth"),
                ("imagelength", "ImageLength")))
        if bits == 16 and photometric == 5:
            notes.append((ImageWarning, f"{name}: 16-bit CMYK is read at 8 bits (LittleCMS via Pillow is 8-bit)"))
        if bits != 16 or spp < 2 or photometric not in (1, 2) or page.dtype != np.uint16:
            return None
        check_pixels(name, (width, height), max_pixels)
        if len(tif.pages) > 1:
            notes.append((ImageWarning, f"{name}: holds {len(tif.pages)} pages; only the first is used"))
        tags = {tag.code: tag.value for tag in page.tags.values()}
        extras = [_whole(e, "ExtraSamples", name) for e in np.atleast_1d(page.extrasamples)]
        if _tifffile_decodes(page):
            data = page.asarray()
            if page.axes == "SYX":
                data = np.moveaxis(data, 0, -1)
            elif page.axes != "YXS":
                raise ValueError(f"unsupported TIFF layout {page.axes}")
        elif photometric == 2 and _whole(page.planarconfig, "PlanarConfiguration", name) == 1:
            with open_pil(path) as img:
                data = _hi_lo(img, path)
        else:
            notes.append((
                ImageWarning,
                f"{name}: {getattr(page.compression, 'name', page.compression)} compression of this layout needs the imagecodecs "
                "package to keep 16 bits; read at 8 bits",
            ))
            return None
    n = 3 if photometric == 2 else 1
    colour, alpha = data[..., :n], None
    for i, kind in enumerate(extras):
        if kind in (1, 2):  # TIFF 6.0 ExtraSamples: 1 associated (premultiplied), 2 unassociated alpha
            alpha = data[..., n + i]
            if kind == 1:
                a = alpha[..., None].astype(np.float64)
                with np.errstate(divide="ignore", invalid="ignore"):
                    colour = np.where(a > 0, np.rint(np.clip(colour / a, 0, 1) * 65535), 0).astype(np.uint16)
            break
    else:
        if extras and not any("TIFF tag 338 " in text for _, text in notes):
            notes.append((ImageWarning, f"{name}: extra channel of unspecified meaning ignored"))
    dpi = None
    if 282 in tags and 283 in tags and tags.get(296, 2) in (2, 3):
        per_unit = 1.0 if tags.get(296, 2) == 2 else 2.54
        dpi = dpi_pair([_rational(tags[282]) * per_unit, _rational(tags[283]) * per_unit])
    icc = tags.get(34675)
    return colour, alpha, bytes(icc) if icc else None, orientation_value(tags.get(274, 1), name, notes), dpi


def _whole(value, tag: str, name: str) -> int:
    """One whole number from a TIFF tag, or an ImageReadError naming the tag (TIFF 6.0 gives each of
    these tags one value; a damaged file can hold a list, a fraction or a negative number)."""
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool) and int(value) >= 0:
        return int(value)
    if isinstance(value, (tuple, list, np.ndarray)):
        detail = f"{len(value)} values where one is due"
    else:
        detail = f"value {str(value)[:40]}"
    raise ImageReadError(f"{name}: damaged TIFF tag {tag} ({detail}); cannot read the image")


def _rational(v) -> float:
    """A TIFF RATIONAL (numerator, denominator) as a number; a zero denominator or a value of the wrong
    form reads as 0, which :func:`dpi_pair` takes for no resolution."""
    try:
        if isinstance(v, tuple):
            return v[0] / v[1] if len(v) == 2 and v[1] else 0.0
        return float(v)
    except (TypeError, ValueError):
        return 0.0
