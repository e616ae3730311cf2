"""CIELAB images: TIFF's Lab encodings and Pillow's LAB mode, to sRGB codes.

A pre-press file may hold its pixels as CIE L*a*b* rather than RGB.  TIFF has
two encodings of it (PhotometricInterpretation 8 and 9), Pillow has its own
LAB mode; all three are decoded here to CIELAB under the file's white, adapted
to D65 (the white of sRGB) by the Bradford transform of
:mod:`quantize.colour.adaptation`, and encoded as sRGB (IEC 61966-2-1).
Colours outside sRGB are clipped, with one note saying how many pixels were
(those moved by more than the Lab codes' own rounding).

Encodings (what a code ``v`` means)

============================  ===================  ===========================
encoding                      L* (0-100)           a*, b*
============================  ===================  ===========================
TIFF CIELAB (8), 8 bits       ``v * 100 / 255``    signed bytes, ``v``
TIFF CIELAB (8), 16 bits      ``v * 100 / 65535``  signed 16-bit, ``v / 256``
TIFF ICCLAB (9), 8 bits       ``v * 100 / 255``    unsigned, ``v - 128``
TIFF ICCLAB (9), 16 bits      ``v * 100 / 65535``  unsigned, ``v / 257 - 128``
Pillow LAB mode (its bands)   ``v * 100 / 255``    unsigned, ``v - 128``
============================  ===================  ===========================

TIFF 6.0 section 23 gives the 8-bit CIELAB encoding; the 16-bit scaling of
a*, b* by 256 is the one libtiff's CIELab16 decoding uses (from memory).
ICCLAB follows the ICC.1:2010 (v4) Lab encodings, section 6.3.4.2.  The white
is the file's WhitePoint tag (318) when it holds a valid chromaticity, else
D50: TIFF 6.0 names no default for CIELAB, and D50 is what graphic-arts Lab
is measured under (ISO 13655) and what Pillow's own RGB to LAB conversion
uses (measured: sRGB red comes out a* = 81, the D50 value, not D65's 80).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from quantize.colour.adaptation import WHITE_XY, bradford_matrix
from quantize.colour.spaces import D65_WHITE_XYZ, lab_to_xyz, srgb_to_lab, xyz_to_lab, xyz_to_srgb
from quantize.core.picture import ImageWarning
from quantize.errors import ImageReadError

from ._decode import DECODE_ERRORS, check_pixels, dpi_pair, orientation_value, tiff_log_notes

__all__ = ["LAB_PHOTOMETRIC", "lab_codes_to_srgb", "pil_lab_to_srgb", "read_lab_tiff", "lab_tiff_size"]

_Note = tuple[type, str]
#: TIFF PhotometricInterpretation values of the Lab encodings read here (TIFF 6.0 section 23; TIFF
#: Technical Note 1 for ICCLAB).  ITULAB (10, ITU-T T.42) is refused with a message.
LAB_PHOTOMETRIC = {8: "CIELAB", 9: "ICCLAB"}
_ITULAB = 10
#: Pixels converted per block: bounds the float64 temporaries of a large image to about 100 MB.
_BLOCK = 1 << 20
#: A pixel counts as clipped in the note when clipping moved it by more than this CIE 1976 Delta E:
#: Lab codes are rounded (8-bit a*, b* to whole units), so a colour on the gamut's surface, sRGB red
#: say, can decode a fraction of a unit outside it; that is rounding, not a colour the file asked for.
_CLIP_DELTA_E = 1.0


def _white_xyz(xy: tuple[float, float]) -> np.ndarray:
    x, y = xy
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


_D50 = WHITE_XY[2]["D50"]


def lab_codes_to_srgb(codes: np.ndarray, *, photometric: int, bits: int, white_xy=_D50,
                      out_bits: int = 8) -> tuple[np.ndarray, int]:
    """Lab codes (H, W, 1 or 3) of one encoding -> (sRGB codes (H, W, 3), pixels clipped to the gamut).

    ``photometric`` is 8 (TIFF CIELAB, a*/b* signed) or 9 (ICC-style, a*/b* offset; Pillow's LAB mode
    bands use it too); ``bits`` is 8 or 16.  ``white_xy`` is the white the Lab is relative to, as a CIE
    1931 chromaticity.  The result is uint8 for ``out_bits`` 8, uint16 for 16.
    """
    h, w = codes.shape[:2]
    flat = codes.reshape(h * w, codes.shape[2])
    top = 255.0 if bits == 8 else 65535.0
    adapt = bradford_matrix(_white_xyz(white_xy), D65_WHITE_XYZ)
    src_over_d65 = _white_xyz(white_xy) / D65_WHITE_XYZ
    out_max = 255 if out_bits == 8 else 65535
    out = np.empty((h * w, 3), np.uint8 if out_bits == 8 else np.uint16)
    clipped = 0
    for start in range(0, h * w, _BLOCK):
        block = flat[start:start + _BLOCK]
        lab = np.zeros((len(block), 3))
        lab[:, 0] = block[:, 0] * (100.0 / top)
        if block.shape[1] == 3:
            ab = block[:, 1:]
            if photometric == 8:
                signed = ab.astype(np.uint8 if bits == 8 else np.uint16).view(np.int8 if bits == 8 else np.int16)
                lab[:, 1:] = signed / (1.0 if bits == 8 else 256.0)
            else:
                lab[:, 1:] = ab - 128.0 if bits == 8 else ab / 257.0 - 128.0
        # lab_to_xyz is relative to D65's white; rescale to the file's white, then adapt to D65.
        xyz = (lab_to_xyz(lab) * src_over_d65) @ adapt.T
        rgb = xyz_to_srgb(xyz)
        inside = np.clip(rgb, 0.0, 1.0)
        moved = (rgb != inside).any(axis=1)
        if moved.any():
            shift = np.linalg.norm(xyz_to_lab(xyz[moved]) - srgb_to_lab(inside[moved]), axis=1)
            clipped += int((shift > _CLIP_DELTA_E).sum())
        out[start:start + _BLOCK] = np.rint(inside * out_max)
    return out.reshape(h, w, 3), clipped


def clip_note(name: str, clipped: int, total: int) -> _Note:
    return (ImageWarning, f"{name}: {clipped:,} of {total:,} pixels ({100.0 * clipped / total:.1f} %) "
                          "hold Lab colours outside sRGB (by more than Delta E 1) and were clipped to it")


def pil_lab_to_srgb(img, name: str, notes: list[_Note]) -> np.ndarray:
    """A Pillow image in LAB mode -> uint8 sRGB codes (H, W, 3).

    Pillow keeps a*, b* offset by 128 in its bands (``getpixel`` shows it); the bands are read one by
    one so the encoding never depends on which raw packer ``numpy.asarray`` goes through.  Pillow's
    LAB holds no white; D50 is taken, the white its own RGB to LAB conversion uses.
    """
    bands = np.stack([np.asarray(img.getchannel(i)) for i in range(3)], axis=-1)
    colour, clipped = lab_codes_to_srgb(bands, photometric=9, bits=8)
    if clipped:
        notes.append(clip_note(name, clipped, bands.shape[0] * bands.shape[1]))
    return colour


def _tiff_page(path: Path):
    """(TiffFile, its first page), or None when tifffile cannot parse the file (Pillow then explains)."""
    import tifffile

    errors: tuple[type[BaseException], ...] = (tifffile.TiffFileError, TypeError, *DECODE_ERRORS)
    try:
        tif = tifffile.TiffFile(path)
        return tif, tif.pages[0]
    except errors:
        return None


def lab_tiff_size(path: Path, name: str) -> tuple[int, int] | None:
    """(width, height) of a Lab TIFF from its tags, or None for any other file."""
    from ._deep import _whole

    with tiff_log_notes(name, []):  # a damaged tag is noted when the pixels are read, not here
        opened = _tiff_page(path)
        photometric = None if opened is None else getattr(opened[1], "photometric", None)
    if opened is None:
        return None
    tif, page = opened
    with tif, tiff_log_notes(name, []):
        if photometric not in (*LAB_PHOTOMETRIC, _ITULAB):
            return None
        return _whole(page.imagewidth, "ImageWidth", name), _whole(page.imagelength, "ImageLength", name)


def read_lab_tiff(path: Path, name: str, max_pixels: int | None, notes: list[_Note]):
    """A CIELAB or ICCLAB TIFF -> (sRGB codes, alpha, bit depth, orientation, dpi, description).

    Returns None for a TIFF of any other photometric interpretation, or one tifffile cannot parse.

    Raises
    ------
    ImageReadError
        Naming the file: ITULAB, a depth other than 8 or 16 bits, samples per pixel that fit no Lab
        layout, pixel data past the end of the file, or a compression tifffile cannot decode.
    """
    from ._deep import _rational, _tifffile_decodes, _whole

    probe: list[_Note] = []  # what tifffile logs is noted only for a Lab file: the 16-bit reader notes it else
    with tiff_log_notes(name, probe):
        opened = _tiff_page(path)
        photometric = None if opened is None else getattr(opened[1], "photometric", None)
    if opened is None:
        return None
    tif, page = opened
    if photometric not in (*LAB_PHOTOMETRIC, _ITULAB):
        tif.close()
        return None
    notes.extend(probe)
    with tif, tiff_log_notes(name, notes):
        if photometric == _ITULAB:
            raise ImageReadError(f"{name}: ITU-T T.42 Lab (TIFF PhotometricInterpretation 10) is not read; "
                                 "save the file as CIELAB or RGB")
        if photometric not in LAB_PHOTOMETRIC:
            return None
        kind = LAB_PHOTOMETRIC[int(photometric)]
        bits, spp, width, height = (_whole(getattr(page, attr), tag, name) for attr, tag in (
            ("bitspersample", "BitsPerSample"), ("samplesperpixel", "SamplesPerPixel"),
            ("imagewidth", "ImageWidth"), ("imagelength", "ImageLength")))
        extras = [_whole(e, "ExtraSamples", name) for e in np.atleast_1d(page.extrasamples)]
        if bits not in (8, 16):
            raise ImageReadError(f"{name}: {bits}-bit {kind} TIFF; only 8- and 16-bit Lab is read")
        if spp - len(extras) not in (1, 3):
            raise ImageReadError(f"{name}: damaged {kind} TIFF ({spp} samples per pixel with {len(extras)} "
                                 "extra; Lab needs 1 (L*) or 3 (L*, a*, b*))")
        check_pixels(name, (width, height), max_pixels)
        _check_data_in_file(page, path, name)
        if not _tifffile_decodes(page):
            raise ImageReadError(f"{name}: {getattr(page.compression, 'name', page.compression)} compression "
                                 f"of a {kind} TIFF needs the imagecodecs package")
        if len(tif.pages) > 1:
            notes.append((ImageWarning, f"{name}: holds {len(tif.pages)} pages; only the first is used"))
        data = page.asarray()
        if data.dtype.kind == "i":  # signed SampleFormat: the codes are the same bits, read unsigned here
            data = data.view(np.uint8 if bits == 8 else np.uint16)
        elif data.dtype.kind != "u":
            raise ImageReadError(f"{name}: {kind} TIFF of {data.dtype} samples; only integer Lab is read")
        if data.ndim == 2:
            data = data[..., None]
        elif page.axes == "SYX":
            data = np.moveaxis(data, 0, -1)
        if data.shape != (height, width, spp):
            raise ImageReadError(f"{name}: damaged {kind} TIFF (pixel data of shape {data.shape} for "
                                 f"{width} x {height} x {spp} samples)")
        tags = {tag.code: tag.value for tag in page.tags.values()}
    white, white_text = _white_point(tags.get(318), name, notes)
    n = spp - len(extras)
    colour, clipped = lab_codes_to_srgb(data[..., :n], photometric=int(photometric), bits=bits,
                                        white_xy=white, out_bits=bits)
    if clipped:
        notes.append(clip_note(name, clipped, width * height))
    alpha = _alpha(data, n, extras, bits, name, notes)
    dpi = None
    if 282 in tags and 283 in tags and tags.get(296, 2) in (2, 3):
        per_unit = 1.0 if tags.get(296, 2) == 2 else 2.54
        dpi = dpi_pair([_rational(tags[282]) * per_unit, _rational(tags[283]) * per_unit])
    desc = f"{kind} {bits}-bit, {white_text} white, adapted to D65 (Bradford)"
    return colour, alpha, bits, orientation_value(tags.get(274, 1), name, notes), dpi, desc


def _check_data_in_file(page, path: Path, name: str) -> None:
    """Refuse strips or tiles that point past the end of the file (tifffile would read them as zeros)."""
    size = os.path.getsize(path)
    ends = [int(o) + int(c) for o, c in zip(page.dataoffsets, page.databytecounts)]
    if not ends or max(ends) > size:
        raise ImageReadError(f"{name}: file is truncated or damaged (its pixel data run past the end of "
                             f"the file, {size:,} bytes)")


def _white_point(value, name: str, notes: list[_Note]) -> tuple[tuple[float, float], str]:
    """The WhitePoint tag (two RATIONALs, x and y) as a chromaticity, or D50 when absent or invalid."""
    if value is None:
        return _D50, "D50 (assumed)"
    try:
        flat = [float(v) for v in np.ravel(value)]
        x, y = (flat[0] / flat[1], flat[2] / flat[3]) if len(flat) == 4 else (flat[0], flat[1])
    except (TypeError, ValueError, IndexError, ZeroDivisionError):
        x = y = -1.0
    if not (0.0 < x < 1.0 and 0.0 < y < 1.0 and x + y < 1.0):
        notes.append((ImageWarning, f"{name}: damaged WhitePoint tag ({str(value)[:40]}); D50 assumed"))
        return _D50, "D50 (assumed)"
    named = [k for k, v in WHITE_XY[2].items() if abs(v[0] - x) < 5e-4 and abs(v[1] - y) < 5e-4]
    return (x, y), (named[0] if named else f"x = {x:.4f}, y = {y:.4f}")


def _alpha(data: np.ndarray, n: int, extras: list[int], bits: int, name: str, notes: list[_Note]):
    for i, kind in enumerate(extras):
        if kind in (1, 2):  # TIFF 6.0 ExtraSamples: 1 associated, 2 unassociated alpha
            if kind == 1:
                notes.append((ImageWarning, f"{name}: premultiplied alpha in a Lab TIFF is read as "
                                            "unassociated (the colours are not divided by it)"))
            return data[..., n + i].astype(np.uint8 if bits == 8 else np.uint16)
    if extras:
        notes.append((ImageWarning, f"{name}: extra channel of unspecified meaning ignored"))
    return None
