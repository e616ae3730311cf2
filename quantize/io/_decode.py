"""Decoding helpers shared by the readers and the writer of :mod:`quantize.io`."""

from __future__ import annotations

import contextlib
import logging
import re
import struct
import threading
import warnings
import zlib
from collections.abc import Iterable
from pathlib import Path

import numpy as np
from PIL import Image, ImageFile

from quantize.core.picture import ImageWarning
from quantize.errors import ImageReadError

_Note = tuple[type, str]
# What decoders raise on damaged or foreign data. Our own bugs (TypeError,
# AttributeError...) are deliberately not listed, so they keep their tracebacks.
DECODE_ERRORS: tuple[type[BaseException], ...] = (
    OSError, SyntaxError, ValueError, EOFError, IndexError, KeyError,
    struct.error, zlib.error, MemoryError, Image.DecompressionBombError,
)  # fmt: skip

# 16-bit PNG colour types that Pillow narrows to 8 bits, with the rawmode its
# decoder uses for each (ISO/IEC 15948:2004, table 11.1).
PNG16_RAWMODE = {2: "RGB;16B", 4: "LA;16B", 6: "RGBA;16B"}
_LIMIT_LOCK = threading.Lock()


def open_pil(path: Path) -> ImageFile.ImageFile:
    """``Image.open`` with Pillow's pixel limit replaced by the caller's own."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", Image.DecompressionBombWarning)
        try:
            return Image.open(path)
        except Image.DecompressionBombError:
            pass
        # Pillow refuses before saying how big the image is. Lift its limit for
        # the header read only, so that max_pixels decides and the message can
        # name the size.
        with _LIMIT_LOCK:
            saved, Image.MAX_IMAGE_PIXELS = Image.MAX_IMAGE_PIXELS, None
            try:
                return Image.open(path)
            finally:
                Image.MAX_IMAGE_PIXELS = saved


def check_pixels(name: str, size: tuple[int, int], max_pixels: int | None) -> None:
    count = int(size[0]) * int(size[1])
    if max_pixels is not None and count > max_pixels:
        raise ImageReadError(
            f"{name}: {size[0]} x {size[1]} = {count:,} pixels exceeds the limit of "
            f"{max_pixels:,} (decompression-bomb guard; raise max_pixels to allow it)"
        )


def dpi_pair(value: object) -> tuple[float, float] | None:
    if not isinstance(value, Iterable):
        return None
    try:
        x, y = (float(v) for v in value)
    except (TypeError, ValueError):
        return None
    # A resolution of 0, or beyond any device (TIFF stores it as a 32-bit rational), is no resolution.
    ok = all(0 < v <= MAX_DPI and np.isfinite(v) for v in (x, y))
    return (x, y) if ok else None


#: Highest resolution read from a file (dots per inch); above it the file's value is ignored.
MAX_DPI = 1_000_000.0


def exif_orientation(img: Image.Image, name: str, notes: list[_Note]) -> int:
    try:
        value = img.getexif().get(0x0112, 1)
    except DECODE_ERRORS + (TypeError,):
        notes.append((ImageWarning, f"{name}: unreadable EXIF data; orientation ignored"))
        return 1
    return orientation_value(value, name, notes)


def orientation_value(value: object, name: str, notes: list[_Note]) -> int:
    """An orientation tag's value: one whole number 1-8 (TIFF 6.0 / Exif tag 274), else 1 with a note."""
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool) and 1 <= int(value) <= 8:
        return int(value)
    if value is None:
        return 1
    notes.append((ImageWarning, f"{name}: damaged orientation tag ({str(value)[:40]}); orientation ignored"))
    return 1


@contextlib.contextmanager
def tiff_log_notes(name: str, notes: list[_Note]):
    """Turn what tifffile logs while reading ``name`` (a damaged tag it skipped, say) into one note.

    tifffile reports such faults through the ``logging`` module, which with no handler set up prints
    them raw on stderr, even when the file then reads well.  A filter on tifffile's logger takes the
    records for the duration of the block and is removed after it, so the logger is left as it was.
    """
    records: list[logging.LogRecord] = []

    def keep(record: logging.LogRecord) -> bool:
        if record.levelno >= logging.WARNING:
            records.append(record)
            return False
        return True

    logger = logging.getLogger("tifffile")
    logger.addFilter(keep)
    try:
        yield
    finally:
        logger.removeFilter(keep)
        # The orientation tag's fault is noted where the tag is read, on either route.
        records = [r for r in records if "TiffTag 274 " not in str(r.msg)]
        if records:
            notes.append((ImageWarning, f"{name}: {_tiff_log_text(records[0])}"
                          + (f" (and {len(records) - 1} more)" if len(records) > 1 else "")))


def _tiff_log_text(record: logging.LogRecord) -> str:
    try:
        text = record.getMessage()
    except Exception:  # noqa: BLE001 - a message that does not format is still a fault to note
        text = str(record.msg)
    text = " ".join(text.split())
    tag = re.search(r"TiffTag (\d+)", text)
    why = re.search(r"raised \w+\((.*)\)$", text)
    if tag and why:
        return f"damaged TIFF tag {tag.group(1)} ignored ({why.group(1).strip(chr(39) + chr(34))[:100]})"
    return f"TIFF reader: {text[:150]}"


def to_8bit(a: np.ndarray) -> np.ndarray:
    """uint16 codes -> nearest uint8 codes (v / 257, rounded)."""
    return ((a.astype(np.uint32) * 255 + 32767) // 65535).astype(np.uint8)


def check_png_chunks(path: Path, name: str) -> None:
    """Refuse a PNG whose chunks are damaged: a CRC that does not match, a palette image without its
    palette (PLTE), or a file that ends before its IEND chunk (truncated, also mid-animation).

    Pillow reads past each of these without a word (ISO/IEC 15948:2004 sections 5.3, 11.2.2, 11.2.5:
    every chunk carries a CRC-32 of its type and data; colour type 3 requires PLTE; IEND ends the file).
    """
    with open(path, "rb") as fh:
        fh.seek(8)
        colour_type, seen_plte = None, False
        while True:
            head = fh.read(8)
            if len(head) < 8:
                raise ImageReadError(f"{name}: PNG ends before its IEND chunk (truncated or damaged)")
            length, ctype = struct.unpack(">I4s", head)
            if length > 2**31 - 1:
                raise ImageReadError(f"{name}: PNG chunk {ctype!r} has an impossible length (damaged file)")
            crc = zlib.crc32(ctype)
            left = length
            while left:
                part = fh.read(min(left, 1 << 20))
                if not part:
                    raise ImageReadError(f"{name}: PNG ends inside its {ctype.decode('latin-1')} chunk "
                                         "(truncated or damaged)")
                crc = zlib.crc32(part, crc)
                if ctype == b"IHDR" and colour_type is None and len(part) >= 10:
                    colour_type = part[9]
                left -= len(part)
            stored = fh.read(4)
            if len(stored) < 4 or struct.unpack(">I", stored)[0] != crc:
                raise ImageReadError(f"{name}: PNG chunk {ctype.decode('latin-1')} fails its CRC check "
                                     "(damaged file)")
            if ctype == b"PLTE":
                seen_plte = True
            elif ctype == b"IDAT" and colour_type == 3 and not seen_plte:
                raise ImageReadError(f"{name}: palette PNG without its palette (no PLTE chunk before the image data)")
            elif ctype == b"IEND":
                return
