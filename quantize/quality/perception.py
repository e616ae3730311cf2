"""Colour error as a viewer sees it: spatially filtered CIEDE2000 (S-CIELAB).

Plain ΔE00 compares pixel with pixel, so it punishes any dither even when the
dithered image looks closer to the original from where it is viewed.  The
S-CIELAB method of Zhang & Wandell (1996) first blurs both images the way the
eye does at the viewing distance, then takes the colour difference:

1. encoded sRGB -> CIE XYZ (D65, IEC 61966-2-1);
2. XYZ -> the opponent space of Poirson & Wandell,
   ``O1 = 0.279 X + 0.72 Y - 0.107 Z`` (luminance),
   ``O2 = -0.449 X + 0.29 Y - 0.077 Z`` (red-green),
   ``O3 = 0.086 X - 0.59 Y + 0.501 Z`` (blue-yellow);
3. each channel is convolved with a sum of Gaussians
   ``sum_i w_i k_i exp(-(x^2 + y^2) / s_i^2)``, spreads ``s_i`` in degrees
   of visual angle (:data:`SCIELAB_KERNELS`), each Gaussian normalised to
   unit sum over a support of one degree, as in the authors' own code;
4. back to XYZ, then CIELAB, then CIEDE2000 (the original used ΔE*ab;
   CIEDE2000 is the project's measure and was later adopted for S-CIELAB by
   the same group).

Where an image is flat both images are unchanged by the filter, so the
filtered ΔE equals the plain one there.  The viewing condition is given as
the output resolution (dpi) and viewing distance (mm), or directly in pixels
per degree of visual angle.  Fully transparent pixels are given the
original's colour in both images (so they add no difference) and are left
out of the statistics.
"""

from __future__ import annotations

import dataclasses
import math
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    # MappedImage by its public name: the render stage comes after this one.
    import quantize
    from quantize.core.picture import ImageInput

__all__ = [
    "FilteredDeltaE",
    "SCIELAB_KERNELS",
    "SCIELAB_OPPONENT",
    "delta_e_map",
    "filtered_delta_e",
    "pixel_delta_e_stats",
    "pixels_per_degree",
    "scielab_filter",
    "scielab_kernels",
    "viewing_ppd",
    "with_filtered_delta_e",
]

#: XYZ -> opponent (O1 luminance, O2 red-green, O3 blue-yellow); Zhang & Wandell (1996),
#: from Poirson & Wandell (1993).
SCIELAB_OPPONENT = np.array([[0.279, 0.72, -0.107],
                             [-0.449, 0.29, -0.077],
                             [0.086, -0.59, 0.501]])
_OPPONENT_INV = np.linalg.inv(SCIELAB_OPPONENT)

#: Per opponent channel: (weight, spread in degrees) of each Gaussian; the
#: weights of a channel sum to 1.  Zhang & Wandell (1996), table of filter
#: parameters (normalised weights as in their published code).
SCIELAB_KERNELS = (
    ((1.00327, 0.0500), (0.114416, 0.2250), (-0.117686, 7.0000)),
    ((0.616725, 0.0685), (0.383275, 0.8260)),
    ((0.567885, 0.0920), (0.432115, 0.6451)),
)

_REFERENCE = ("X. Zhang and B. A. Wandell, \"A spatial extension of CIELAB for digital color image "
              "reproduction\", SID International Symposium Digest of Technical Papers 27, 731-734, 1996; "
              "extended in Journal of the SID 5(1), 61-63, 1997, doi:10.1889/1.1985127.")


def pixels_per_degree(*, dpi: float, distance_mm: float) -> float:
    """Pixels per degree of visual angle for a print or screen viewed head-on.

    One degree at distance d spans ``2 d tan(0.5 deg)`` mm, and a mm holds
    ``dpi / 25.4`` pixels.

    Raises
    ------
    ValueError
        ``dpi`` or ``distance_mm`` is not a positive finite number.

    Examples
    --------
    >>> round(pixels_per_degree(dpi=300, distance_mm=400), 1)
    82.5
    """
    dpi = _positive(dpi, "viewing dpi")
    distance_mm = _positive(distance_mm, "viewing distance (mm)")
    return dpi / 25.4 * 2.0 * distance_mm * math.tan(math.radians(0.5))


def _positive(value, what: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what} must be a positive number, got {value!r}") from None
    if not (v > 0 and math.isfinite(v)):
        raise ValueError(f"{what} must be a positive number, got {value!r}")
    return v


#: Most pixels per degree a viewing condition may give: the S-CIELAB kernels span one degree, so their side
#: is this many pixels (2400 dpi seen from 1 m is about 1650).
MAX_PPD = 2000.0


def viewing_ppd(*, dpi=None, distance_mm=None, ppd=None) -> float:
    """Pixels per degree from ``ppd`` or from ``dpi`` and ``distance_mm``, validated.

    Raises
    ------
    ValueError
        Neither form is complete, both are given, a value is not positive, or
        the condition gives more than :data:`MAX_PPD` pixels per degree.
    """
    if ppd is not None:
        if dpi is not None or distance_mm is not None:
            raise ValueError("give the viewing condition as dpi and distance_mm, or as ppd, not both")
        value = _positive(ppd, "pixels per degree")
    elif dpi is None or distance_mm is None:
        raise ValueError("filtered ΔE00 needs a viewing condition: dpi and distance_mm (or ppd); "
                         f"got dpi={dpi!r}, distance_mm={distance_mm!r}")
    else:
        value = pixels_per_degree(dpi=dpi, distance_mm=distance_mm)
    if value > MAX_PPD:
        raise ValueError(f"the viewing condition gives {value:.0f} pixels per degree, more than {MAX_PPD:g}: "
                         "lower the resolution or the distance")
    return value


def scielab_kernels(ppd: float) -> list[np.ndarray]:
    """The three 2-D S-CIELAB kernels sampled at ``ppd`` pixels per degree.

    Each is odd-sized, about one degree wide (at least 1 pixel) and sums to 1.

    References
    ----------
    .. [1] X. Zhang and B. A. Wandell, "A spatial extension of CIELAB for
       digital color image reproduction", SID Symposium Digest 27, 731-734,
       1996.

    Examples
    --------
    >>> [round(float(k.sum()), 9) for k in scielab_kernels(60)]
    [1.0, 1.0, 1.0]
    """
    ppd = _positive(ppd, "pixels per degree")
    width = max(int(math.ceil(ppd / 2.0)) * 2 - 1, 1)
    x = np.arange(width) - width // 2
    kernels = []
    for terms in SCIELAB_KERNELS:
        k = np.zeros((width, width))
        for weight, spread in terms:
            g = np.exp(-(x / (spread * ppd)) ** 2)
            g /= g.sum()
            k += weight * np.outer(g, g)
        kernels.append(k)
    return kernels


def _fft():
    """rfft2/irfft2: scipy's (threaded, fast lengths) when installed, else numpy's."""
    try:
        import scipy.fft as sf
    except ImportError:  # pragma: no cover - scipy comes with scikit-image
        return np.fft.rfft2, np.fft.irfft2, (lambda n: n), {}
    return sf.rfft2, sf.irfft2, sf.next_fast_len, {"workers": -1}


def _filter_opponent(planes: list[np.ndarray], ppd: float) -> list[np.ndarray]:
    """Convolve opponent images (each (H, W, 3)) with the S-CIELAB kernels, in place.

    Mirrored edges, through the FFT; the kernel's transform is made once
    per channel and shared by all the images.
    """
    rfft2, irfft2, fast, opts = _fft()
    h, w = planes[0].shape[:2]
    for c, kernel in enumerate(scielab_kernels(ppd)):
        half = kernel.shape[0] // 2
        if half == 0:
            for p in planes:
                p[..., c] *= kernel[0, 0]
            continue
        shape = (fast(h + 2 * half), fast(w + 2 * half))
        stack = np.zeros((len(planes),) + shape)
        for i, p in enumerate(planes):
            # Zeros beyond the mirrored margin never reach the kept centre.
            stack[i, :h + 2 * half, :w + 2 * half] = np.pad(p[..., c], half, mode="symmetric")
        kp = np.zeros(shape)
        kp[:kernel.shape[0], :kernel.shape[1]] = kernel
        kp = np.roll(kp, (-half, -half), axis=(0, 1))
        spectrum = rfft2(stack, axes=(-2, -1), **opts)
        spectrum *= rfft2(kp, **opts)
        out = irfft2(spectrum, s=shape, axes=(-2, -1), **opts)
        for i, p in enumerate(planes):
            p[..., c] = out[i, half:half + h, half:half + w]
    return planes


def scielab_filter(xyz: np.ndarray, ppd: float) -> np.ndarray:
    """Blur an XYZ image (H, W, 3) as the eye does at ``ppd`` pixels per degree.

    XYZ -> opponent channels -> S-CIELAB kernels -> XYZ.  A uniform image is
    returned unchanged (each kernel sums to 1).
    """
    opp = np.asarray(xyz, dtype=np.float64) @ SCIELAB_OPPONENT.T
    return _filter_opponent([opp], ppd)[0] @ _OPPONENT_INV.T


def _delta_e_chunked(lab1: np.ndarray, lab2: np.ndarray) -> np.ndarray:
    from quantize.colour.spaces import delta_e_ciede2000

    a, b = lab1.reshape(-1, 3), lab2.reshape(-1, 3)
    out = np.empty(a.shape[0])
    step = 1 << 20  # bounds the temporaries of the vectorised formula
    for i in range(0, a.shape[0], step):
        out[i:i + step] = delta_e_ciede2000(a[i:i + step], b[i:i + step])
    return out.reshape(lab1.shape[:-1])


def _is_mapped(result) -> bool:
    return hasattr(result, "indices") and hasattr(result, "palette")


def _pair(pic, mapped):
    """Linear-light RGB of a Picture and of its reduction (a MappedImage or a
    Picture), decoded through lookup tables, and the opaque mask; transparent
    pixels of the result take the original's value."""
    from quantize.colour.spaces import srgb_to_linear

    lin = srgb_to_linear(np.arange(pic.max_code + 1) / pic.max_code)[pic.rgb]
    if _is_mapped(mapped):
        out = srgb_to_linear(mapped.palette.rgb8 / 255.0)[mapped.indices]
    else:
        out = srgb_to_linear(np.arange(mapped.max_code + 1) / mapped.max_code)[mapped.rgb]
    if out.shape != lin.shape:
        raise ValueError(f"the two images differ in size: {lin.shape[:2]} and {out.shape[:2]}")
    opaque = pic.opaque
    if not opaque.all():
        out[~opaque] = lin[~opaque]
    return lin, out, opaque


def delta_e_map(original, mapped, *, kind: str = "plain", dpi=None, distance_mm=None,
                ppd=None) -> np.ndarray:
    """CIEDE2000 of every pixel, plain or S-CIELAB filtered.

    Parameters
    ----------
    original : Picture, path, PIL image or ndarray
    mapped : MappedImage or ndarray (H, W, 3)
        The reduced image.
    kind : {"plain", "filtered"}, default="plain"
    dpi, distance_mm, ppd : float, optional
        Viewing condition, needed for ``"filtered"`` (see :func:`viewing_ppd`).

    Returns
    -------
    ndarray of shape (H, W), float64
        NaN at fully transparent pixels.

    Raises
    ------
    ValueError
        Unknown ``kind``, a missing or non-positive viewing condition, or
        images of different sizes.

    References
    ----------
    .. [1] X. Zhang and B. A. Wandell, "A spatial extension of CIELAB for
       digital color image reproduction", SID Symposium Digest 27, 731-734, 1996.
    .. [2] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Res. Appl. 30(1), 21-30, 2005.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((4, 4, 3), np.uint8)
    >>> float(np.nanmax(delta_e_map(img, img, kind="filtered", ppd=30)))
    0.0
    """
    from quantize.colour.spaces import SRGB_TO_XYZ, xyz_to_lab
    from quantize.io.read import as_picture

    if kind not in ("plain", "filtered"):
        raise ValueError(f"unknown error-map kind {kind!r}; valid names: plain, filtered")
    ppd_value = viewing_ppd(dpi=dpi, distance_mm=distance_mm, ppd=ppd) if kind == "filtered" else None
    result = mapped if _is_mapped(mapped) else as_picture(np.asarray(mapped))
    lin, out, opaque = _pair(as_picture(original), result)
    if ppd_value is None:  # kind "plain": no viewing condition to filter for
        lab1, lab2 = xyz_to_lab(lin @ SRGB_TO_XYZ.T), xyz_to_lab(out @ SRGB_TO_XYZ.T)
    else:
        to_opp = SCIELAB_OPPONENT @ SRGB_TO_XYZ
        planes = _filter_opponent([lin @ to_opp.T, out @ to_opp.T], ppd_value)
        lab1, lab2 = (xyz_to_lab(p @ _OPPONENT_INV.T) for p in planes)
    de = _delta_e_chunked(lab1, lab2)
    de[~opaque] = np.nan
    return de


def pixel_delta_e_stats(values, *, overwrite: bool = False) -> dict[str, float]:
    """Mean, median, p95 and max of per-pixel ΔE (each pixel counts once).

    Equal to :func:`quantize.quality.stats.delta_e_stats` with unit weights
    (inverted empirical CDF, Hyndman & Fan 1996 definition 1), by partial
    sorting instead of a full sort.  With ``overwrite`` a float64 array is
    reordered in place instead of copied.
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    n = v.size
    if n == 0:
        raise ValueError("no opaque pixels to measure")
    mean, top = float(v.mean()), float(v.max())
    pos = [min(max(int(math.ceil(q * n * (1 - 1e-12))) - 1, 0), n - 1) for q in (0.5, 0.95)]
    if overwrite:
        v.partition(pos)
        part = v
    else:
        part = np.partition(v, pos)
    return {"mean": mean, "median": float(part[pos[0]]), "p95": float(part[pos[1]]), "max": top}


def filtered_delta_e(original_picture: ImageInput, mapped: quantize.MappedImage | np.ndarray, *,
                     dpi: float | None = None, distance_mm: float | None = None,
                     ppd: float | None = None) -> dict[str, float]:
    """S-CIELAB-filtered CIEDE2000 statistics (mean, median, p95, max) over opaque pixels.

    See :func:`delta_e_map` for the parameters.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.full((8, 8, 3), 200, np.uint8)
    >>> filtered_delta_e(img, img, dpi=300, distance_mm=500)["max"]
    0.0
    """
    de = delta_e_map(original_picture, mapped, kind="filtered", dpi=dpi, distance_mm=distance_mm, ppd=ppd)
    return _map_stats(de)


def _map_stats(de: np.ndarray) -> dict[str, float]:
    return pixel_delta_e_stats(de[~np.isnan(de)])


@dataclasses.dataclass(frozen=True)
class FilteredDeltaE:
    """S-CIELAB filtered CIEDE2000 of a reduced image, and where it was seen from.

    Attributes
    ----------
    stats : dict
        ``mean``, ``median``, ``p95``, ``max`` of the filtered ΔE00 over the
        opaque pixels.
    dpi : float or None
        Output resolution of the viewing condition (None when given as ``ppd``).
    distance_mm : float or None
        Viewing distance in mm (None when given as ``ppd``).
    ppd : float
        Pixels per degree of visual angle, rounded to 3 decimals.
    """

    stats: dict
    dpi: float | None
    distance_mm: float | None
    ppd: float

    @property
    def viewing(self) -> dict:
        """The viewing condition as a dict: ``dpi``, ``distance_mm``, ``ppd``."""
        return {"dpi": self.dpi, "distance_mm": self.distance_mm, "ppd": self.ppd}


def with_filtered_delta_e(original_picture, mapped, *, dpi=None, distance_mm=None, ppd=None,
                          pixel_delta_e=None):
    """A copy of ``mapped`` that also reports the filtered statistics.

    ``delta_e`` keeps the plain statistics under ``mean``, ``median``,
    ``p95``, ``max`` and gains the S-CIELAB filtered ones as
    ``filtered_mean``, ``filtered_median``, ``filtered_p95``,
    ``filtered_max``; ``filtered`` (a :class:`FilteredDeltaE`) holds the same
    four and the viewing condition.

    Parameters
    ----------
    original_picture, mapped, dpi, distance_mm, ppd
        As :func:`delta_e_map`.
    pixel_delta_e : ndarray of shape (H, W), optional
        The filtered map of this pair at this viewing condition, from
        :func:`delta_e_map` with ``kind="filtered"``, when the caller already
        has it (to draw an error map, say): the images are then not
        filtered again.

    Raises
    ------
    ValueError
        As :func:`delta_e_map`, or ``pixel_delta_e`` is not of the image's size.
    """
    ppd_value = viewing_ppd(dpi=dpi, distance_mm=distance_mm, ppd=ppd)
    if pixel_delta_e is None:
        stats = filtered_delta_e(original_picture, mapped, ppd=ppd_value)
    else:
        stats = _map_stats(check_map_shape(pixel_delta_e, mapped.indices.shape))
    both = {**mapped.delta_e, **{f"filtered_{k}": v for k, v in stats.items()}}
    filtered = FilteredDeltaE(stats=stats, dpi=dpi, distance_mm=distance_mm, ppd=round(ppd_value, 3))
    return dataclasses.replace(mapped, delta_e=both, filtered=filtered)


def check_map_shape(pixel_delta_e, shape) -> np.ndarray:
    """``pixel_delta_e`` as a float array, if it is an (H, W) map of an image of ``shape``, else ValueError."""
    de = np.asarray(pixel_delta_e, dtype=np.float64)
    if de.shape != tuple(shape):
        raise ValueError(f"the ΔE00 map given has shape {de.shape}, not the image's {tuple(shape)}")
    return de
