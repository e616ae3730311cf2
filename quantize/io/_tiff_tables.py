"""Refuse a TIFF whose strip or tile tables declare more entries than its dimensions need.

TIFF 6.0 fixes how many strips an image has: StripsPerImage = ceil(ImageLength / RowsPerStrip), times
SamplesPerPixel when the planes are stored apart (PlanarConfiguration 2); for tiles, TilesAcross x TilesDown
(section 15), likewise per plane. A damaged or hostile file can declare millions of entries for a 16 x
12-pixel image; Pillow then builds one Python object per entry (about 260 bytes each, measured: 52 MB for
200 000 strips), and both decoders parse the tables into Python integers. The first directory's entries are
read here straight from the file (12 or 20 bytes each, nothing else parsed) so that such a file is refused
before either decoder sees it.
"""

from __future__ import annotations

import math
import struct
from pathlib import Path

from quantize.errors import ImageReadError

__all__ = ["check_tiff_tables"]

_OFFSETS = {273: "StripOffsets", 279: "StripByteCounts", 324: "TileOffsets", 325: "TileByteCounts"}
_SIZES = {256, 257, 277, 278, 284, 322, 323}
#: Most directory entries read; TIFF files hold a few dozen tags.
_MAX_ENTRIES = 4096


def check_tiff_tables(path: Path, name: str) -> None:
    """Raise :class:`ImageReadError` naming the file if a strip or tile table of its first image is longer
    than TIFF 6.0 allows for the image's dimensions. Anything this cannot read is left to the decoders."""
    with open(path, "rb") as fh:
        head = fh.read(16)
        if len(head) < 8 or head[:2] not in (b"II", b"MM"):
            return
        order = "<" if head[:2] == b"II" else ">"
        big = struct.unpack(order + "H", head[2:4])[0] == 43
        if big:
            if len(head) < 16:
                return
            ifd = struct.unpack(order + "Q", head[8:16])[0]
            count_fmt, entry_size, value_size = "Q", 20, 8
        else:
            ifd = struct.unpack(order + "I", head[4:8])[0]
            count_fmt, entry_size, value_size = "H", 12, 4
        fh.seek(ifd)
        raw = fh.read(struct.calcsize(count_fmt))
        if len(raw) < struct.calcsize(count_fmt):
            return
        n = min(struct.unpack(order + count_fmt, raw)[0], _MAX_ENTRIES)
        table = fh.read(n * entry_size)
    sizes: dict[int, int] = {}
    counts: dict[int, int] = {}
    for i in range(len(table) // entry_size):
        entry = table[i * entry_size:(i + 1) * entry_size]
        tag, kind = struct.unpack(order + "HH", entry[:4])
        count = struct.unpack(order + count_fmt.replace("H", "I"), entry[4:4 + value_size])[0]
        if tag in _OFFSETS:
            counts[tag] = count
        elif tag in _SIZES and count == 1 and kind in (3, 4, 16):  # SHORT, LONG, LONG8: one value, inline
            value = entry[4 + value_size:]
            fmt = {3: "H", 4: "I", 16: "Q"}[kind]
            sizes[tag] = struct.unpack(order + fmt, value[:struct.calcsize(fmt)])[0]
    expected = _expected_entries(sizes)
    if expected is None:
        return
    for tag, count in counts.items():
        if count > expected:
            raise ImageReadError(f"{name}: damaged TIFF: {_OFFSETS[tag]} lists {count:,} entries where a "
                                 f"{sizes[256]} x {sizes[257]} image has {expected:,}; cannot read the image")


def _expected_entries(sizes: dict[int, int]) -> int | None:
    """Strips or tiles the image needs (TIFF 6.0 sections 3, 8 and 15), or None if a size is missing."""
    width, height = sizes.get(256), sizes.get(257)
    if not width or not height:
        return None
    planes = sizes.get(277, 1) if sizes.get(284, 1) == 2 else 1
    if 322 in sizes or 323 in sizes:
        tw, tl = sizes.get(322), sizes.get(323)
        if not tw or not tl:
            return None
        return max(1, planes) * math.ceil(width / tw) * math.ceil(height / tl)
    rows = sizes.get(278) or height  # RowsPerStrip defaults to 2**32 - 1: one strip
    return max(1, planes) * math.ceil(height / min(rows, height))
