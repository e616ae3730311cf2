"""Colour-space conversions and colour-difference formulas.

Conventions, fixed here for the whole package:

* sRGB is encoded (gamma-corrected) float, nominally 0-1, shape ``(..., 3)``;
  out-of-range values pass through every conversion unclipped.
* XYZ is CIE 1931 2 degree, scaled so the white has ``Y = 1``.
* The white is D65 as sRGB defines it, xy = (0.3127, 0.3290), so
  XYZ_w = (0.950456, 1, 1.089058).  CIELAB has L* 0-100.
* The *working* spaces (:data:`SPACES`, :func:`to_space`, :func:`from_space`,
  :func:`srgb8_to_space`) share a 0-100 lightness scale so that k-means
  distances are comparable: CIELAB as is, OKLab times 100, CAM16-UCS J'a'b'
  as is.  The raw OKLab functions keep Ottosson's L of 0-1.

Results are float64 whatever the input dtype.  colour-science is imported only
inside the CAM16-UCS functions, because it takes seconds to import.
"""

from __future__ import annotations

from collections.abc import Callable
from types import MappingProxyType
from typing import Any, cast

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "srgb_to_linear", "linear_to_srgb", "srgb_to_xyz", "xyz_to_srgb",
    "xyz_to_lab", "lab_to_xyz", "srgb_to_lab", "lab_to_srgb", "clip_to_gamut",
    "xyz_to_oklab", "oklab_to_xyz", "srgb_to_oklab", "oklab_to_srgb",
    "srgb_to_cam16ucs", "cam16ucs_to_srgb", "CAM16_VIEWING_CONDITIONS",
    "SPACES", "check_space", "to_space", "from_space", "srgb8_to_space",
    "delta_e_ciede2000", "delta_e_cie76", "DELTA_E", "check_delta_e",
]

Float64Array = NDArray[np.float64]


def _xy_to_xyz(xy: np.ndarray) -> np.ndarray:
    x, y = xy[..., 0], xy[..., 1]
    return np.stack([x / y, np.ones_like(x), (1.0 - x - y) / y], axis=-1)


# IEC 61966-2-1 primaries and white.  The matrix is derived from them as in
# SMPTE RP 177-1993 (the steps of colour.normalised_primary_matrix), not taken
# as the 4-decimal matrix printed in the standard, which
# colour.RGB_COLOURSPACES["sRGB"] uses by default: that one puts RGB white at
# a* = 0.008, and its printed inverse is not its exact inverse.
_PRIMARIES_XY = np.array([[0.64, 0.33], [0.30, 0.60], [0.15, 0.06]])
#: The D65 white of sRGB, XYZ with Y = 1 (IEC 61966-2-1 chromaticity 0.3127, 0.3290).
D65_WHITE_XYZ = _xy_to_xyz(np.array([0.3127, 0.3290]))
_P = np.hstack([_PRIMARIES_XY, 1.0 - _PRIMARIES_XY.sum(axis=1, keepdims=True)]).T
#: Linear sRGB -> CIE XYZ (D65), derived from the IEC 61966-2-1 primaries and white.
SRGB_TO_XYZ = _P @ np.diagflat(np.linalg.inv(_P) @ D65_WHITE_XYZ)
_M_XYZ_TO_RGB = np.linalg.inv(SRGB_TO_XYZ)
#: Linear sRGB straight to XYZ / XYZ_w: one matrix product on the Lab hot path.
SRGB_TO_WHITE_RELATIVE = SRGB_TO_XYZ / D65_WHITE_XYZ[:, None]
_M_T_TO_RGB = np.linalg.inv(SRGB_TO_WHITE_RELATIVE)

# CIE 15:2004 CIELAB as an affine map of f(X/Xn), f(Y/Yn), f(Z/Zn).
_DELTA = 6.0 / 29.0
_M_F_TO_LAB = np.array([[0.0, 116.0, 0.0], [500.0, -500.0, 0.0], [0.0, 200.0, -200.0]])
_M_LAB_TO_F = np.linalg.inv(_M_F_TO_LAB)
_LAB_OFFSET = np.array([16.0, 0.0, 0.0])

# Ottosson (2020): M1 (XYZ -> LMS), M2 (LMS' -> Lab) and his combined linear
# sRGB -> LMS matrix, as published.  Inverses are computed in float64 so that
# round trips are exact; the printed inverses are good to ~1e-8 only.
_M1_XYZ_TO_LMS = np.array([[0.8189330101, 0.3618667424, -0.1288597137],
                           [0.0329845436, 0.9293118715, 0.0361456387],
                           [0.0482003018, 0.2643662691, 0.6338517070]])
#: Cube-rooted LMS -> OKLab (Ottosson 2020).
LMS_TO_OKLAB = np.array([[0.2104542553, 0.7936177850, -0.0040720468],
                         [1.9779984951, -2.4285922050, 0.4505937099],
                         [0.0259040371, 0.7827717662, -0.8086757660]])
#: Linear sRGB -> OKLab's cone-like LMS (Ottosson 2020).
SRGB_TO_LMS = np.array([[0.4122214708, 0.5363325363, 0.0514459929],
                        [0.2119034982, 0.6806995451, 0.1073969566],
                        [0.0883024619, 0.2817188376, 0.6299787005]])
_M1_LMS_TO_XYZ = np.linalg.inv(_M1_XYZ_TO_LMS)
_M2_OKLAB_TO_LMS = np.linalg.inv(LMS_TO_OKLAB)
_M_LMS_TO_RGB = np.linalg.inv(SRGB_TO_LMS)

#: CAM16 viewing conditions of the CAM16-UCS functions: the sRGB reference
#: viewing environment of IEC 61966-2-1 (64 lux ambient, adapting luminance
#: L_A = 20 % of 64/pi cd/m^2), background Y_b = 20, average surround
#: (F = 1, c = 0.69, N_c = 1), D65 white, degree of adaptation from the CAM16
#: formula (D ~ 0.83, so sRGB white is J' = 100, a' ~ -1.9, b' ~ -1.1).
#: These equal colour-science's defaults for CAM16-UCS.
CAM16_VIEWING_CONDITIONS: MappingProxyType[str, Any] = MappingProxyType({
    "XYZ_w": D65_WHITE_XYZ, "L_A": 64.0 / np.pi * 0.2, "Y_b": 20.0,
    "surround": {"F": 1.0, "c": 0.69, "N_c": 1.0}, "discount_illuminant": False,
})


def _colours(values: ArrayLike, name: str) -> Float64Array:
    array = np.asarray(values, dtype=np.float64)
    if array.ndim == 0 or array.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3), got shape {array.shape}")
    return array


def srgb_to_linear(rgb: ArrayLike) -> Float64Array:
    """Decode sRGB to linear light (IEC 61966-2-1 transfer function).

    Parameters
    ----------
    rgb : array_like
        Encoded sRGB, any shape.  Values up to 0.04045, negative ones
        included, take the linear segment.

    Returns
    -------
    ndarray of float64, same shape

    References
    ----------
    IEC 61966-2-1:1999, *Multimedia systems and equipment - Colour measurement
    and management - Part 2-1: Colour management - Default RGB colour space -
    sRGB*, International Electrotechnical Commission, Geneva.

    Examples
    --------
    >>> float(srgb_to_linear(0.5))
    0.21404114048223255
    """
    v = np.asarray(rgb, dtype=np.float64)
    # The clamp keeps the power off negative bases, which would warn.
    curve = ((np.maximum(v, 0.04045) + 0.055) / 1.055) ** 2.4
    return np.where(v <= 0.04045, v / 12.92, curve)


def linear_to_srgb(linear: ArrayLike) -> Float64Array:
    """Encode linear light as sRGB, unclipped; inverse of :func:`srgb_to_linear`.

    Examples
    --------
    >>> round(float(linear_to_srgb(0.18)), 7)
    0.4613561
    """
    v = np.asarray(linear, dtype=np.float64)
    curve = 1.055 * np.maximum(v, 0.0031308) ** (1.0 / 2.4) - 0.055
    return np.where(v <= 0.0031308, 12.92 * v, curve)


def srgb_to_xyz(rgb: ArrayLike) -> Float64Array:
    """Convert encoded sRGB (..., 3) to CIE XYZ with white Y = 1.

    The matrix is derived from the IEC 61966-2-1 primaries and D65 white by
    the method of SMPTE RP 177-1993, *Derivation of Basic Television Color
    Equations*; it rounds to the 4-decimal matrix printed in IEC 61966-2-1.

    Examples
    --------
    >>> srgb_to_xyz([1.0, 1.0, 1.0]).round(6)
    array([0.950456, 1.      , 1.089058])
    """
    return srgb_to_linear(_colours(rgb, "rgb")) @ SRGB_TO_XYZ.T


def xyz_to_srgb(xyz: ArrayLike) -> Float64Array:
    """Convert CIE XYZ (white Y = 1), shape (..., 3), to encoded sRGB, unclipped."""
    return linear_to_srgb(_colours(xyz, "xyz") @ _M_XYZ_TO_RGB.T)


def _t_to_lab(t: np.ndarray) -> np.ndarray:
    f = np.where(t > _DELTA**3, np.cbrt(t), t / (3.0 * _DELTA**2) + 4.0 / 29.0)
    return f @ _M_F_TO_LAB.T - _LAB_OFFSET


def _lab_to_t(lab: np.ndarray) -> np.ndarray:
    f = (lab + _LAB_OFFSET) @ _M_LAB_TO_F.T
    return np.where(f > _DELTA, f * f * f, 3.0 * _DELTA**2 * (f - 4.0 / 29.0))


def xyz_to_lab(xyz: ArrayLike) -> Float64Array:
    """Convert CIE XYZ (white Y = 1), shape (..., 3), to CIELAB relative to D65.

    References
    ----------
    CIE 15:2004, *Colorimetry*, 3rd edition, Commission Internationale de
    l'Eclairage, Vienna, section 8.2.1.

    Examples
    --------
    >>> xyz_to_lab([0.950456, 1.0, 1.089058]).round(3) + 0.0
    array([100.,   0.,   0.])
    """
    return _t_to_lab(_colours(xyz, "xyz") / D65_WHITE_XYZ)


def lab_to_xyz(lab: ArrayLike) -> Float64Array:
    """Convert CIELAB (D65), shape (..., 3), to CIE XYZ with white Y = 1 (CIE 15:2004)."""
    return _lab_to_t(_colours(lab, "lab")) * D65_WHITE_XYZ


def _linear_to_lab(linear: np.ndarray) -> np.ndarray:
    return _t_to_lab(linear @ SRGB_TO_WHITE_RELATIVE.T)


def srgb_to_lab(rgb: ArrayLike) -> Float64Array:
    """Convert encoded sRGB (..., 3) to CIELAB (D65, L* 0-100).

    Examples
    --------
    >>> srgb_to_lab([1.0, 0.0, 0.0]).round(2)
    array([53.24, 80.09, 67.2 ])
    """
    return _linear_to_lab(srgb_to_linear(_colours(rgb, "rgb")))


def lab_to_srgb(lab: ArrayLike) -> Float64Array:
    """Convert CIELAB (D65) to encoded sRGB, unclipped: see :func:`clip_to_gamut`.

    Examples
    --------
    >>> lab_to_srgb([100.0, 0.0, 0.0]).round(9)
    array([1., 1., 1.])
    """
    return linear_to_srgb(_lab_to_t(_colours(lab, "lab")) @ _M_T_TO_RGB.T)


def clip_to_gamut(rgb: ArrayLike) -> Float64Array:
    """Clip encoded sRGB (..., 3) to 0-1, channel by channel.

    Plain clipping in encoded sRGB: exact for in-gamut colours and cheap, but
    it can shift the hue and lightness of colours far outside the gamut.
    Palette colours are means of image colours, so they lie inside or just
    outside the gamut, where the shift is small.

    Examples
    --------
    >>> clip_to_gamut([1.02, 0.5, -0.01])
    array([1. , 0.5, 0. ])
    """
    return np.clip(_colours(rgb, "rgb"), 0.0, 1.0)


def _lms_to_oklab(lms: np.ndarray) -> np.ndarray:
    return np.cbrt(lms) @ LMS_TO_OKLAB.T


def _oklab_to_lms(oklab: np.ndarray) -> np.ndarray:
    lms_ = oklab @ _M2_OKLAB_TO_LMS.T
    return lms_ * lms_ * lms_


def xyz_to_oklab(xyz: ArrayLike) -> Float64Array:
    """Convert CIE XYZ (D65, white Y = 1), shape (..., 3), to OKLab with L 0-1.

    References
    ----------
    B. Ottosson, "A perceptual color space for image processing", 2020,
    https://bottosson.github.io/posts/oklab/

    Examples
    --------
    >>> xyz_to_oklab([1.0, 0.0, 0.0]).round(3)
    array([ 0.45 ,  1.236, -0.019])
    """
    return _lms_to_oklab(_colours(xyz, "xyz") @ _M1_XYZ_TO_LMS.T)


def oklab_to_xyz(oklab: ArrayLike) -> Float64Array:
    """Convert OKLab (L 0-1) to CIE XYZ (D65, white Y = 1); Ottosson (2020)."""
    return _oklab_to_lms(_colours(oklab, "oklab")) @ _M1_LMS_TO_XYZ.T


def srgb_to_oklab(rgb: ArrayLike) -> Float64Array:
    """Convert encoded sRGB (..., 3) to OKLab with L 0-1 (not the working scale).

    Uses Ottosson's linear-sRGB -> LMS matrix, which puts sRGB white at
    L = 1, a = b = 0 (to 4e-8); going through :func:`srgb_to_xyz` and his M1
    differs by up to 3e-4.  Reference: Ottosson (2020), see :func:`xyz_to_oklab`.

    Examples
    --------
    >>> srgb_to_oklab([1.0, 1.0, 1.0]).round(6) + 0.0
    array([1., 0., 0.])
    """
    return _lms_to_oklab(srgb_to_linear(_colours(rgb, "rgb")) @ SRGB_TO_LMS.T)


def oklab_to_srgb(oklab: ArrayLike) -> Float64Array:
    """Convert OKLab (L 0-1) to encoded sRGB, unclipped; inverse of :func:`srgb_to_oklab`."""
    return linear_to_srgb(_oklab_to_lms(_colours(oklab, "oklab")) @ _M_LMS_TO_RGB.T)


def _colour() -> tuple[Any, dict[str, Any]]:
    """Import colour-science (lazily: seconds to import, and only CAM16-UCS
    needs it); return it and the CAM16 keyword arguments."""
    import warnings

    options, filters = np.get_printoptions(), list(warnings.filters)
    import colour

    # Its import switches numpy to 1.13-style printing and adds warning filters: put the caller's back.
    np.set_printoptions(**options)
    if warnings.filters != filters:
        # In place, so whoever holds the list keeps it; typeshed declares it a read-only Sequence.
        cast(list, warnings.filters)[:] = filters
        getattr(warnings, "_filters_mutated", lambda: None)()  # as catch_warnings does on exit
    kwargs = dict(CAM16_VIEWING_CONDITIONS)
    kwargs["surround"] = colour.appearance.InductionFactors_CAM16(**kwargs["surround"])
    return colour, kwargs


def _linear_to_cam16ucs(linear: np.ndarray) -> np.ndarray:
    colour, kwargs = _colour()
    with colour.utilities.domain_range_scale("reference"):
        return colour.XYZ_to_CAM16UCS(linear @ SRGB_TO_XYZ.T, compute_H=False, **kwargs)


def srgb_to_cam16ucs(rgb: ArrayLike) -> Float64Array:
    """Convert encoded sRGB (..., 3) to CAM16-UCS J'a'b' (J' 0-100).

    Computed by colour-science (imported on first call) under
    :data:`CAM16_VIEWING_CONDITIONS`.

    References
    ----------
    C. Li, Z. Li, Z. Wang, Y. Xu, M. R. Luo, G. Cui, M. Melgosa, M. H. Brill
    and M. Pointer, "Comprehensive color solutions: CAM16, CAT16, and
    CAM16-UCS", *Color Res. Appl.* 42(6), 703-718, 2017, doi:10.1002/col.22131.

    Examples
    --------
    >>> srgb_to_cam16ucs([1.0, 1.0, 1.0]).round(1)
    array([100. ,  -1.9,  -1.1])
    """
    return _linear_to_cam16ucs(srgb_to_linear(_colours(rgb, "rgb")))


def cam16ucs_to_srgb(jab: ArrayLike) -> Float64Array:
    """Convert CAM16-UCS J'a'b' to encoded sRGB, unclipped; see :func:`srgb_to_cam16ucs`."""
    jab = _colours(jab, "jab")
    colour, kwargs = _colour()
    with colour.utilities.domain_range_scale("reference"):
        xyz = colour.CAM16UCS_to_XYZ(jab, **kwargs)
    return linear_to_srgb(xyz @ _M_XYZ_TO_RGB.T)


def _srgb_to_oklab100(rgb: ArrayLike) -> Float64Array:
    return 100.0 * srgb_to_oklab(rgb)


def _oklab100_to_srgb(values: ArrayLike) -> Float64Array:
    return oklab_to_srgb(_colours(values, "oklab") / 100.0)


_Conversion = Callable[[ArrayLike], Float64Array]
#: Working spaces: name -> (sRGB -> space, space -> sRGB), all on the 0-100
#: lightness scale (OKLab multiplied by 100).
SPACES: dict[str, tuple[_Conversion, _Conversion]] = {
    "lab": (srgb_to_lab, lab_to_srgb),
    "oklab": (_srgb_to_oklab100, _oklab100_to_srgb),
    "cam16ucs": (srgb_to_cam16ucs, cam16ucs_to_srgb),
}
# The same forward conversions from linear RGB, for the 8-bit lookup path.
_FROM_LINEAR: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "lab": _linear_to_lab,
    "oklab": lambda linear: 100.0 * _lms_to_oklab(linear @ SRGB_TO_LMS.T),
    "cam16ucs": _linear_to_cam16ucs,
}
_LUT8 = srgb_to_linear(np.arange(256) / 255.0)


def _check_name(name: object, table: dict[str, Any], what: str) -> str:
    key = name.lower() if isinstance(name, str) else name
    if key not in table:
        raise ValueError(f"unknown {what} {name!r}; valid names: {', '.join(table)}")
    return key  # type: ignore[return-value]


def check_space(name: str) -> str:
    """Return the canonical (lower-case) name of a working space.

    Raises
    ------
    ValueError
        If ``name`` is not a key of :data:`SPACES`; the message lists the keys.

    Examples
    --------
    >>> check_space("OKLab")
    'oklab'
    """
    return _check_name(name, SPACES, "colour space")


def to_space(rgb: ArrayLike, space: str) -> Float64Array:
    """Convert encoded sRGB (..., 3) to a working space (0-100 lightness scale).

    Examples
    --------
    >>> to_space([1.0, 1.0, 1.0], "oklab").round(4) + 0.0
    array([100.,   0.,   0.])
    """
    return SPACES[check_space(space)][0](rgb)


def from_space(values: ArrayLike, space: str) -> Float64Array:
    """Convert working-space values (..., 3) back to encoded sRGB, unclipped.

    Examples
    --------
    >>> from_space([100.0, 0.0, 0.0], "lab").round(9)
    array([1., 1., 1.])
    """
    return SPACES[check_space(space)][1](values)


def srgb8_to_space(rgb8: ArrayLike, space: str) -> Float64Array:
    """Convert 8-bit sRGB (..., 3) to a working space through a lookup table.

    Equals ``to_space(rgb8 / 255, space)`` but decodes through a 256-entry
    table instead of a power per channel.

    Raises
    ------
    TypeError
        If ``rgb8`` is not of dtype uint8.
    ValueError
        If the last axis is not of length 3, or ``space`` is unknown.

    Examples
    --------
    >>> srgb8_to_space(np.array([255, 0, 0], np.uint8), "lab").round(2)
    array([53.24, 80.09, 67.2 ])
    """
    key = check_space(space)
    rgb8 = np.asarray(rgb8)
    if rgb8.dtype != np.uint8:
        raise TypeError(f"rgb8 must be of dtype uint8, got {rgb8.dtype}")
    if rgb8.ndim == 0 or rgb8.shape[-1] != 3:
        raise ValueError(f"rgb8 must have shape (..., 3), got shape {rgb8.shape}")
    return _FROM_LINEAR[key](_LUT8[rgb8])


_TWO_PI = 2.0 * np.pi
# cos/sin of the phase offsets in CIEDE2000's T: 30, 6 and 63 degrees.
_C30, _S30, _C6, _S6, _C63, _S63 = (f(np.deg2rad(d)) for d in (30, 6, 63) for f in (np.cos, np.sin))


def _sqrt_c7_ratio(c: np.ndarray) -> np.ndarray:
    """sqrt(C^7 / (C^7 + 25^7)); products, because ``** 7`` costs 20x more."""
    c7 = c * c
    c7 *= c7 * c7 * c
    return np.sqrt(c7 / (c7 + 25.0**7))


def _hue(b: np.ndarray, a: np.ndarray) -> np.ndarray:
    h = np.arctan2(b, a)
    h += _TWO_PI * (h < 0.0)
    return h


def delta_e_ciede2000(lab1: ArrayLike, lab2: ArrayLike, *, kL: float = 1.0,
                      kC: float = 1.0, kH: float = 1.0) -> Float64Array | float:
    """CIEDE2000 colour difference between CIELAB colours, broadcasting.

    Implements equations (1)-(17) of Sharma, Wu & Dalal (2005), including their
    rules for the hue difference and mean hue across 0/360 degrees and for
    colours of zero chroma.  Float64 throughout.  Where two hues are exactly
    180 degrees apart the formula is discontinuous, so the last bit of
    rounding in the hue angles can decide between its two values.

    Parameters
    ----------
    lab1, lab2 : array_like, shape (..., 3)
        CIELAB colours; the leading shapes broadcast against each other.
    kL, kC, kH : float, keyword-only
        Parametric weights for lightness, chroma and hue (1 under the
        reference conditions).

    Returns
    -------
    ndarray of float64, shape of the broadcast leading axes
        A float64 scalar for two single colours.

    Raises
    ------
    ValueError
        If a last axis is not of length 3, the shapes do not broadcast, or a
        weight is not positive.

    References
    ----------
    G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
    formula: implementation notes, supplementary test data, and mathematical
    observations", *Color Res. Appl.* 30(1), 21-30, 2005, doi:10.1002/col.20070.

    Examples
    --------
    >>> round(float(delta_e_ciede2000([50, 2.6772, -79.7751], [50, 0, -82.7485])), 4)
    2.0425
    """
    lab1, lab2 = _colours(lab1, "lab1"), _colours(lab2, "lab2")
    if not min(kL, kC, kH) > 0:
        raise ValueError(f"kL, kC and kH must be positive, got {kL}, {kC}, {kH}")
    try:
        shape = np.broadcast_shapes(lab1.shape[:-1], lab2.shape[:-1])
    except ValueError:
        raise ValueError(f"lab1 {lab1.shape} and lab2 {lab2.shape} do not broadcast") from None
    # 2-d at least, so every intermediate is an array that can be updated in place.
    L1, a1, b1 = np.moveaxis(np.atleast_2d(lab1), -1, 0)
    L2, a2, b2 = np.moveaxis(np.atleast_2d(lab2), -1, 0)

    # sqrt(x*x + y*y) rather than np.hypot: 6x faster, and Lab cannot overflow.
    g1 = 1.5 - 0.5 * _sqrt_c7_ratio(0.5 * (np.sqrt(a1 * a1 + b1 * b1) + np.sqrt(a2 * a2 + b2 * b2)))
    a1p, a2p = a1 * g1, a2 * g1
    c1p, c2p = np.sqrt(a1p * a1p + b1 * b1), np.sqrt(a2p * a2p + b2 * b2)
    h1p, h2p = _hue(b1, a1p), _hue(b2, a2p)

    # For zero chroma Sharma et al. fix h' = 0, dh' = 0 and hbar' = h1' + h2';
    # all three reach the result only through dH' = 2 sqrt(C1'C2') sin(dh'/2),
    # which is then 0 whatever the hues, so those cases need no code.
    dhp = h2p - h1p
    far = np.abs(dhp) > np.pi  # hue angles more than 180 degrees apart
    # Exactly opposite hues (the cross product of (a', b') is exactly 0, the dot product negative) are
    # 180 degrees apart, not more: decided from the coordinates, not from the last bit of arctan2,
    # which differs between numpy versions (Sharma et al. 2005, Table 1, pair 10).
    far &= ~((a1p * b2 == a2p * b1) & (a1p * a2p + b1 * b2 < 0.0))
    # Mean hue (eq. 14): move the sum by 360 degrees when the hues are far
    # apart (up if it is below 360, else down), then halve it.
    hbar = h1p + h2p
    hbar += np.where(hbar < _TWO_PI, _TWO_PI, -_TWO_PI) * far
    hbar *= 0.5
    dhp -= np.copysign(_TWO_PI, dhp) * far  # eq. 10: into [-180, 180] degrees
    dh = 2.0 * np.sqrt(c1p * c2p) * np.sin(0.5 * dhp)

    # T from cos and sin of the mean hue alone, by multiple-angle identities.
    c1, s1 = np.cos(hbar), np.sin(hbar)
    c2, s2 = 2.0 * c1 * c1 - 1.0, 2.0 * s1 * c1
    c3, s3 = c1 * (2.0 * c2 - 1.0), s1 * (2.0 * c2 + 1.0)
    c4, s4 = 2.0 * c2 * c2 - 1.0, 2.0 * s2 * c2
    t = (1.0 - 0.17 * (_C30 * c1 + _S30 * s1) + 0.24 * c2
         + 0.32 * (_C6 * c3 - _S6 * s3) - 0.20 * (_C63 * c4 + _S63 * s4))
    u = (hbar - np.deg2rad(275.0)) / np.deg2rad(25.0)
    cbar = 0.5 * (c1p + c2p)
    rt = -2.0 * _sqrt_c7_ratio(cbar) * np.sin((np.pi / 3.0) * np.exp(-u * u))

    lbar50 = 0.5 * (L1 + L2) - 50.0
    lbar50 *= lbar50
    dl = (L2 - L1) / (kL * (1.0 + 0.015 * lbar50 / np.sqrt(20.0 + lbar50)))
    dc = (c2p - c1p) / (kC * (1.0 + 0.045 * cbar))
    dh /= kH * (1.0 + 0.015 * cbar * t)
    out = dl * dl + dc * dc + dh * dh + rt * dc * dh
    return np.sqrt(out, out=out).reshape(shape)[()]


def delta_e_cie76(lab1: ArrayLike, lab2: ArrayLike) -> Float64Array | float:
    """CIE 1976 colour difference: Euclidean distance in CIELAB, broadcasting.

    References
    ----------
    CIE 15:2004, *Colorimetry*, 3rd edition, section 8.2.1.

    Examples
    --------
    >>> float(delta_e_cie76([50, 0, 0], [53, 4, 0]))
    5.0
    """
    diff = _colours(lab1, "lab1") - _colours(lab2, "lab2")
    return np.sqrt(np.einsum("...i,...i->...", diff, diff))[()]


#: Colour-difference formulas: name -> function(lab1, lab2).
DELTA_E: dict[str, Callable[..., Float64Array | float]] = {
    "ciede2000": delta_e_ciede2000,
    "cie76": delta_e_cie76,
}


def check_delta_e(name: str) -> str:
    """Return the canonical (lower-case) name of a colour-difference formula.

    Raises
    ------
    ValueError
        If ``name`` is not a key of :data:`DELTA_E`; the message lists the keys.

    Examples
    --------
    >>> check_delta_e("CIEDE2000")
    'ciede2000'
    """
    return _check_name(name, DELTA_E, "colour-difference formula")
