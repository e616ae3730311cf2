"""Embedded ICC profiles: conversion of loaded pixels to sRGB.

8-bit pixels go through LittleCMS (Pillow's ImageCms).  LittleCMS converts
8-bit pixels only, so for 16-bit pixels the profile's colorant matrix and
tone curves are applied here in float64, following ICC.1 (F.3).  A profile
that cannot be read or applied leaves the pixels as sRGB, with a
:class:`quantize.io.read.ProfileWarning` note.  Split out of
:mod:`quantize.io.read`, which calls :func:`convert_8bit` and
:func:`convert_deep`.
"""

import functools
import io
import struct
from collections.abc import Callable

import numpy as np
from PIL import Image

from quantize.colour.adaptation import bradford_matrix
from quantize.colour.spaces import D65_WHITE_XYZ, SRGB_TO_XYZ
from quantize.core.picture import ProfileWarning

from ._decode import to_8bit

_LUT_TAGS = (b"A2B0", b"A2B1", b"A2B2", b"D2B0", b"D2B1", b"D2B2")
_PCS_D50 = np.array([0.9642, 1.0, 0.8249])  # ICC.1:2010 7.2.16, the PCS illuminant


@functools.lru_cache(maxsize=1)
def _xyz_d50_to_linear_srgb() -> np.ndarray:
    """Inverse of the sRGB RGB->XYZ matrix, adapted from D65 to the PCS by Bradford.

    This is how LittleCMS builds its own sRGB profile, from the IEC 61966-2-1 primaries.
    """
    adapt = bradford_matrix(D65_WHITE_XYZ, _PCS_D50)
    return np.linalg.inv(adapt @ SRGB_TO_XYZ)


def _icc_tags(icc: bytes) -> dict[bytes, bytes]:
    (count,) = struct.unpack_from(">I", icc, 128)
    tags = {}
    for i in range(count):
        sig, offset, size = struct.unpack_from(">4sII", icc, 132 + 12 * i)
        tags[sig] = icc[offset : offset + size]
    return tags


def _matrix_trc(icc: bytes):
    """(3x3 colorant matrix or None for grey, [curves]) of a matrix/TRC profile, else None."""
    try:
        tags = _icc_tags(icc)
        if icc[20:24] != b"XYZ " or any(t in tags for t in _LUT_TAGS):
            return None
        if icc[16:20] == b"GRAY":
            grey = _trc(tags[b"kTRC"])
            return None if grey is None else (None, [grey])
        matrix = np.column_stack([
            np.array(struct.unpack_from(">3i", tags[t], 8)) / 65536.0 for t in (b"rXYZ", b"gXYZ", b"bXYZ")
        ])  # fmt: skip
        curves = [_trc(tags[t]) for t in (b"rTRC", b"gTRC", b"bTRC")]
    except (KeyError, struct.error, ValueError):
        return None
    return (matrix, curves) if all(curves) else None


def _trc(tag: bytes) -> Callable[[np.ndarray], np.ndarray] | None:
    """Evaluate an ICC curveType or parametricCurveType (ICC.1:2010 10.5 and 10.15)."""
    kind = tag[:4]
    if kind == b"curv":
        (n,) = struct.unpack_from(">I", tag, 8)
        if n == 0:
            return lambda x: x
        if n == 1:
            gamma = struct.unpack_from(">H", tag, 12)[0] / 256.0  # u8Fixed8Number
            return lambda x: x**gamma
        table = np.frombuffer(tag, ">u2", n, 12) / 65535.0
        grid = np.linspace(0.0, 1.0, n)
        return lambda x: np.interp(x, grid, table)
    if kind == b"para":
        (ftype,) = struct.unpack_from(">H", tag, 8)
        count = {0: 1, 1: 3, 2: 4, 3: 5, 4: 7}.get(ftype)
        if count is None:
            return None
        params = np.zeros(7)
        params[:count] = np.array(struct.unpack_from(f">{count}i", tag, 12)) / 65536.0
        return functools.partial(_parametric, ftype, *params)
    return None


def _parametric(ftype, g, a, b, c, d, e, f, x):
    # ICC.1:2010 table 65: types 1 and 2 switch at x = -b/a, types 3 and 4 at x = d.
    with np.errstate(divide="ignore", invalid="ignore"):
        power = np.maximum(a * x + b, 0.0) ** g
        if ftype == 0:
            return x**g
        if ftype == 1:
            return np.where(x >= -b / a, power, 0.0)
        if ftype == 2:
            return np.where(x >= -b / a, power + c, c)
        if ftype == 3:
            return np.where(x >= d, power, c * x)
        return np.where(x >= d, power + e, c * x + f)


def _apply_matrix_trc(values: np.ndarray, matrix: np.ndarray | None, curves) -> np.ndarray:
    x = values / 65535.0
    linear = np.stack([curve(x[..., i]) for i, curve in enumerate(curves)], axis=-1)
    if matrix is not None:
        # Device RGB -> PCS XYZ (D50) -> linear sRGB. For a grey profile, linear
        # grey is Y relative to the PCS white, and so already linear sRGB grey.
        linear = linear @ (_xyz_d50_to_linear_srgb() @ matrix).T
    v = np.clip(linear, 0.0, 1.0)
    encoded = np.where(v <= 0.0031308, 12.92 * v, 1.055 * v ** (1 / 2.4) - 0.055)  # IEC 61966-2-1 eq. (5)
    return np.rint(np.clip(encoded, 0.0, 1.0) * 65535).astype(np.uint16)


# --------------------------------------------------------------------------- writing


# --------------------------------------------------------------------------- conversion to sRGB

def _srgb_profile():
    from PIL import ImageCms

    return ImageCms.createProfile("sRGB")


def _load_profile(icc: bytes, name: str, notes: list):
    from PIL import ImageCms


    try:
        profile = ImageCms.ImageCmsProfile(io.BytesIO(icc))
        desc = ImageCms.getProfileDescription(profile).strip() or "unnamed profile"
    except (ImageCms.PyCMSError, OSError, ValueError, TypeError) as exc:
        notes.append((ProfileWarning, f"{name}: embedded ICC profile is unreadable ({_short(exc)}); pixels treated as sRGB"))
        return None, None
    return profile, desc


def _short(exc: BaseException) -> str:
    return (str(exc).splitlines() or [type(exc).__name__])[0][:100]


def convert_8bit(base: Image.Image, icc: bytes | None, name: str, notes: list):
    """Pillow image in L, RGB or CMYK -> ((H, W, 3) uint8 sRGB, profile description)."""

    if icc:
        from PIL import ImageCms

        profile, desc = _load_profile(icc, name, notes)
        if profile is not None:
            try:
                if base.mode != "L":
                    transform = ImageCms.buildTransform(
                        profile, _srgb_profile(), base.mode, "RGB",
                        renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC,
                    )  # fmt: skip
                    return np.asarray(ImageCms.applyTransform(base, transform)), desc
                # LittleCMS's optimised grey->RGB transform resamples the curve on a
                # coarse grid, which puts shadows up to 10 codes off for a linear grey
                # TRC (LittleCMS 2.19). Converting the 256 levels unoptimised is exact and cheap.
                transform = ImageCms.buildTransform(
                    profile, _srgb_profile(), "L", "RGB",
                    renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC, flags=ImageCms.Flags.NOOPTIMIZE,
                )  # fmt: skip
                ramp = Image.frombytes("L", (256, 1), bytes(range(256)))
                return np.asarray(ImageCms.applyTransform(ramp, transform))[0][np.asarray(base)], desc
            except (ImageCms.PyCMSError, ValueError, OSError) as exc:
                notes.append((
                    ProfileWarning,
                    f"{name}: embedded ICC profile {desc!r} cannot convert {base.mode} pixels "
                    f"({_short(exc)}); pixels treated as sRGB",
                ))
    elif base.mode == "CMYK":
        notes.append((
            ProfileWarning,
            f"{name}: CMYK image without an embedded ICC profile; read with the naive formula "
            "R = (1 - C)(1 - K) (likewise G, B), which assumes no press, so colours are approximate; "
            "give the press's CMYK ICC profile with --cmyk-profile (library: cmyk_profile=)",
        ))
    return np.asarray(base if base.mode == "RGB" else base.convert("RGB")), None


def convert_deep(values: np.ndarray, icc: bytes | None, name: str, notes: list):
    """(H, W, 1|3) uint16 -> (colour, bit_depth, profile description)."""

    if not icc:
        return values, 16, None
    profile, desc = _load_profile(icc, name, notes)
    if profile is None:
        return values, 16, None
    space = b"GRAY" if values.shape[2] == 1 else b"RGB "
    if icc[16:20] != space:
        notes.append((
            ProfileWarning,
            f"{name}: embedded ICC profile {desc!r} is for {icc[16:20].decode('latin-1').strip()} data, "
            f"not {space.decode().strip()}; pixels treated as sRGB",
        ))
        return values, 16, None
    model = _matrix_trc(icc)
    if model is not None:
        return _apply_matrix_trc(values, *model), 16, desc
    notes.append((
        ProfileWarning,
        f"{name}: ICC profile {desc!r} is table-based and Pillow's LittleCMS converts colour only at "
        "8 bits; the 16-bit data were reduced to 8 bits before conversion",
    ))
    v8 = to_8bit(values)
    base = Image.fromarray(v8[..., 0] if values.shape[2] == 1 else v8)
    colour, desc = convert_8bit(base, icc, name, notes)
    return colour, 8, desc
