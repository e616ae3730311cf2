"""Dithering: mapping onto a palette so that areas, not pixels, match.

Every method works in **linear light**.  Error diffusion accumulates the
difference between the wanted and the chosen colour as linear RGB, and the
ordered methods mix two palette colours in the proportion that reproduces the
pixel's linear RGB.  The eye (and a densitometer) averages light, not
gamma-encoded code values, so this keeps the mean colour of an area: diffusing
encoded values instead would render a 50 % encoded grey (21.4 % light) as half
white, visibly too bright.  The *choice* of colour at each pixel is still
perceptual: nearest in the palette's working space (CIELAB or OKLab; CIELAB for
a CAM16-UCS palette, whose model cannot run in the compiled kernel), or by
CIEDE2000 with ``metric="ciede2000"``.

Rules every method keeps

* Fully transparent pixels are never dithered into: they hold index 0, and
  error diffusion gives them no error (their share goes to the open
  neighbours instead).
* A pixel that is exactly a locked palette colour keeps that colour; it
  neither takes nor passes on error, so a locked substrate stays clean.
* Error that would fall off the image edge is shared among the neighbours that
  exist, so no light is lost at borders.

Methods (:data:`DITHERS`)

========================  =========================================================
``none``                  nearest colour, no dither
``floyd-steinberg``       error diffusion, 4 neighbours (Floyd & Steinberg 1976)
``jarvis-judice-ninke``   error diffusion, 12 neighbours (Jarvis, Judice & Ninke 1976)
``stucki``                error diffusion, 12 neighbours (Stucki 1981)
``bayer2/4/8``            ordered, recursive dispersed-dot matrix (Bayer 1973)
``blue-noise``            ordered, 64 x 64 void-and-cluster mask (Ulichney 1993)
``clustered-dot``         ordered, 8 x 8 clustered-dot cell, dots of 4 px or more (screens)
========================  =========================================================
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# The threshold arrays live in their own module; their names stay importable here.
from .thresholds import (
    CLUSTERED_CELL,
    CLUSTERED_MIN_DOT,
    bayer_matrix,
    blue_noise_ranks,
    cache_dir,
    clustered_dot_matrix,
    clustered_dot_size_mm,
    threshold_matrix,
)

__all__ = [
    "CLUSTERED_CELL",
    "CLUSTERED_MIN_DOT",
    "DITHERS",
    "DitherMethod",
    "bayer_matrix",
    "blue_noise_ranks",
    "cache_dir",
    "check_dither",
    "check_strength",
    "clustered_dot_matrix",
    "clustered_dot_size_mm",
    "dither_indices",
    "dither_picture",
    "threshold_matrix",
]

_REF_FS = ("R. W. Floyd and L. Steinberg, \"An adaptive algorithm for spatial greyscale\", "
           "Proceedings of the Society for Information Display 17(2), 75-77, 1976.")
_REF_JJN = ("J. F. Jarvis, C. N. Judice and W. H. Ninke, \"A survey of techniques for the display of "
            "continuous tone pictures on bilevel displays\", Computer Graphics and Image Processing "
            "5(1), 13-40, 1976, doi:10.1016/S0146-664X(76)80003-2.")
_REF_STUCKI = ("P. Stucki, \"MECCA - a multiple-error correction computation algorithm for bi-level "
               "image hardcopy reproduction\", IBM Research Report RZ1060, IBM Research Laboratory, "
               "Zurich, 1981.")
_REF_BAYER = ("B. E. Bayer, \"An optimum method for two-level rendition of continuous-tone pictures\", "
              "IEEE International Conference on Communications, Conference Record, 26-11 to 26-15, 1973.")
_REF_VAC = ("R. Ulichney, \"The void-and-cluster method for dither array generation\", Proc. SPIE 1913, "
            "Human Vision, Visual Processing, and Digital Display IV, 332-343, 1993, doi:10.1117/12.152707.")
_REF_CLUSTER = ("R. Ulichney, *Digital Halftoning*, MIT Press, Cambridge MA, 1987, chapter 6 "
                "(clustered-dot ordered dither).")


@dataclass(frozen=True)
class DitherMethod:
    """One dithering method.

    Attributes
    ----------
    name : str
    kind : {"none", "diffusion", "ordered"}
    weights : tuple of (dy, dx, weight), for error diffusion
        Neighbours ahead in scan order and their shares (they sum to 1).
    matrix : str or None, for ordered methods
        Name understood by :func:`threshold_matrix`.
    reference : str
        Full citation of the published method.
    """

    name: str
    kind: str
    weights: tuple = ()
    matrix: str | None = None
    reference: str = ""


def _spread(rows, divisor):
    """(dy, dx, w) triples from kernel rows written as in the papers: row 0
    starts right of the current pixel, later rows are centred on it."""
    out = []
    for dy, row in enumerate(rows):
        half = len(row) // 2
        for i, v in enumerate(row):
            dx = i + 1 if dy == 0 else i - half
            if v:
                out.append((dy, dx, v / divisor))
    return tuple(out)


#: Dithering methods by name (the one name -> method table).
DITHERS: dict[str, DitherMethod] = {
    "none": DitherMethod("none", "none", reference="nearest colour, no dither"),
    "floyd-steinberg": DitherMethod("floyd-steinberg", "diffusion",
                                    _spread([[7], [3, 5, 1]], 16), reference=_REF_FS),
    "jarvis-judice-ninke": DitherMethod("jarvis-judice-ninke", "diffusion",
                                        _spread([[7, 5], [3, 5, 7, 5, 3], [1, 3, 5, 3, 1]], 48),
                                        reference=_REF_JJN),
    "stucki": DitherMethod("stucki", "diffusion",
                           _spread([[8, 4], [2, 4, 8, 4, 2], [1, 2, 4, 2, 1]], 42), reference=_REF_STUCKI),
    "bayer2": DitherMethod("bayer2", "ordered", matrix="bayer2", reference=_REF_BAYER),
    "bayer4": DitherMethod("bayer4", "ordered", matrix="bayer4", reference=_REF_BAYER),
    "bayer8": DitherMethod("bayer8", "ordered", matrix="bayer8", reference=_REF_BAYER),
    "blue-noise": DitherMethod("blue-noise", "ordered", matrix="blue-noise", reference=_REF_VAC),
    "clustered-dot": DitherMethod("clustered-dot", "ordered", matrix="clustered-dot", reference=_REF_CLUSTER),
}


def check_dither(name: str) -> DitherMethod:
    """The method called ``name`` (case-insensitive).

    Raises
    ------
    ValueError
        Unknown name; the message lists every valid one.

    Examples
    --------
    >>> check_dither("Floyd-Steinberg").kind
    'diffusion'
    """
    key = name.lower() if isinstance(name, str) else name
    if key not in DITHERS:
        raise ValueError(f"unknown dither {name!r}; valid names: {', '.join(DITHERS)}")
    return DITHERS[key]


def check_strength(strength) -> float:
    """Return ``strength`` as a float if it is within 0-1, else raise ValueError naming it."""
    try:
        value = float(strength)
    except (TypeError, ValueError):
        raise ValueError(f"dither strength must be a number in 0-1, got {strength!r}") from None
    if not 0.0 <= value <= 1.0:
        raise ValueError(f"dither strength must be within 0-1, got {strength!r}")
    return value


# --------------------------------------------------------------------------- dithering

def _kernel_inputs(pic, palette, metric):
    """Arrays the compiled kernels take (see quantize.kernels.dither_loops)."""
    from quantize.colour import spaces as cs
    from quantize.kernels.loading import compiled, with_fresh_cache

    dk = compiled("dither_loops")
    CLEAR, OPEN, PINNED = dk.CLEAR, dk.OPEN, dk.PINNED

    space = palette.space if palette.space in ("lab", "oklab") else "lab"
    if metric == "ciede2000":
        space = "lab"
    if space == "lab":
        mat, mat2, code = cs._M_RGB_TO_T, np.zeros((3, 3)), 0
    else:
        mat, mat2, code = cs._M_RGB_TO_LMS, cs._M2_LMS_TO_OKLAB, 1
    lut = cs.srgb_to_linear(np.arange(pic.max_code + 1) / pic.max_code)
    codes = np.ascontiguousarray(pic.rgb)
    state = np.full(pic.shape, OPEN, dtype=np.uint8)
    pinned = np.zeros(pic.shape, dtype=np.uint16)  # read only where state is PINNED
    if pic.alpha is not None:
        state[pic.alpha == 0] = CLEAR
    scale = 257 if pic.bit_depth == 16 else 1
    for j in np.flatnonzero(palette.locked):
        hit = np.all(codes == palette.rgb8[j].astype(codes.dtype) * scale, axis=2) & (state == OPEN)
        state[hit] = PINNED
        pinned[hit] = j
    pal_lin = np.ascontiguousarray(cs.srgb_to_linear(palette.rgb8 / 255.0))
    pal_pts = np.ascontiguousarray(cs.srgb8_to_space(palette.rgb8, space if metric == "space" else "lab"))
    mat_lab = np.ascontiguousarray(cs._M_RGB_TO_T)
    # Palette CIELAB along the kernels' own arithmetic, so that a pixel that
    # is exactly its palette colour measures exactly 0.
    pal_lab = with_fresh_cache(lambda: np.array([dk.to_space(*lin, mat_lab, mat_lab, 0) for lin in pal_lin]))
    return dict(codes=codes, lut=lut, state=state, pinned=pinned, pal_lin=pal_lin, pal_pts=pal_pts,
                pal_lab=pal_lab, mat=np.ascontiguousarray(mat), mat2=np.ascontiguousarray(mat2),
                mat_lab=mat_lab, space=code, metric=0 if metric == "space" else 1, choice_space=space)


def _diffuse_measured(args, a, out) -> np.ndarray:
    """Diffuse band by band and measure each finished band on worker threads.

    Diffusion is sequential; the ΔE00 of the rows it has finished is not, so
    the other cores measure them meanwhile (the kernels release the GIL).
    Same indices as one :func:`quantize.kernels.dither_loops.diffuse` call.
    """
    from concurrent.futures import ThreadPoolExecutor

    import numba

    from quantize.kernels.loading import compiled

    dk = compiled("dither_loops")
    h = out.shape[0]
    de = np.empty(out.shape, dtype=np.float64)
    err = np.zeros((dk.error_rows(args[10]), out.shape[1], 3))
    band = max(16, h // 64)
    with ThreadPoolExecutor(max_workers=max(numba.get_num_threads(), 1)) as pool:
        jobs = []
        for y0 in range(0, h, band):
            y1 = min(h, y0 + band)
            dk.diffuse_rows(*args, err, y0, y1, out)
            jobs.append(pool.submit(dk.delta_e_rows, a["codes"], a["lut"], a["state"], out, a["pal_lab"],
                                    a["mat_lab"], y0, y1, de))
        for job in jobs:
            job.result()
    return de


def dither_indices(pic, palette, *, method: str, strength: float = 1.0, metric: str = "space",
                   serpentine: bool = True, measure: bool = False) -> tuple[np.ndarray, dict]:
    """Palette index of every pixel under a dither, without the statistics.

    Parameters are those of :func:`dither_picture` (``method`` must not be
    ``"none"``), and ``measure``: also measure the per-pixel CIEDE2000.

    Returns
    -------
    indices : ndarray of shape (H, W), uint8 (uint16 above 256 colours)
    arrays : dict
        The kernels' inputs; with ``measure`` (always, for ordered methods)
        also ``"delta_e"``, the per-pixel CIEDE2000 (H, W), NaN where
        transparent.

    Raises
    ------
    ValueError
        Unknown or ``"none"`` method, unknown metric, strength outside 0-1.
    """
    from quantize.fit.assign import check_metric
    from quantize.io.read import as_picture
    from quantize.kernels.loading import with_fresh_cache

    m = check_dither(method)
    if m.kind == "none":
        raise ValueError("dither_indices needs a dithering method, not 'none'")
    strength = check_strength(strength)
    check_metric(metric)
    pic = as_picture(pic)
    arrays = _kernel_inputs(pic, palette, metric)
    dtype = np.uint8 if len(palette) <= 256 else np.uint16
    out = np.empty(pic.shape, dtype=dtype)
    with_fresh_cache(lambda: _run_method(m, pic, arrays, float(strength), bool(serpentine), measure, out))
    return out, arrays


def _run_method(m, pic, arrays, strength, serpentine, measure, out) -> None:
    """Run the kernels of method ``m``; fills ``out`` (and ``arrays["delta_e"]``)."""
    from quantize.kernels.loading import compiled

    dk = compiled("dither_loops")
    a = arrays
    if m.kind == "diffusion":
        off = np.array(m.weights, dtype=np.float64)
        args = (a["codes"], a["lut"], a["state"], a["pinned"], a["pal_lin"], a["pal_pts"], a["mat"],
                a["mat2"], a["space"], a["metric"], np.ascontiguousarray(off[:, 0].astype(np.int64)),
                np.ascontiguousarray(off[:, 1].astype(np.int64)), np.ascontiguousarray(off[:, 2]),
                strength, serpentine)
        if measure:
            arrays["delta_e"] = _diffuse_measured(args, a, out)
        else:
            dk.diffuse(*args, out)
    else:
        # An ordered pixel depends on its colour and place only: bracket each
        # distinct colour once, then threshold the pixels.
        from quantize.core.sampling import sample_picture

        smp = sample_picture(pic)
        n = smp.n_colours
        near, other = np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64)
        share, de_near, de_other = np.empty(n), np.empty(n), np.empty(n)
        dk.bracket(np.ascontiguousarray(smp.codes), a["lut"], a["pal_lin"], a["pal_pts"], a["pal_lab"], a["mat"],
                   a["mat2"], a["mat_lab"], a["space"], a["metric"], near, other, share, de_near, de_other)
        thr = np.ascontiguousarray(threshold_matrix(m.matrix))
        arrays["delta_e"] = np.empty(pic.shape, dtype=np.float64)
        dk.ordered(smp.inverse.reshape(pic.shape), a["state"], a["pinned"], thr, strength, near, other,
                   share, de_near, de_other, out, arrays["delta_e"])


def dither_picture(pic, palette, *, method: str, strength: float = 1.0, metric: str = "space",
                   serpentine: bool = True):
    """Reduce an image to ``palette`` with a dither.

    Parameters
    ----------
    pic : Picture, path, PIL image or ndarray
        See :func:`quantize.io.read.as_picture`.
    palette : Palette
    method : str
        A key of :data:`DITHERS`.
    strength : float, default=1.0
        0-1.  Error diffusion passes on this fraction of each pixel's error;
        ordered methods mix in this fraction of the partner colour.  0 gives
        the undithered mapping.
    metric : {"space", "ciede2000"}, default="space"
        How the colour of each pixel is chosen: Euclidean distance in the
        palette's space (CIELAB for a CAM16-UCS palette), or CIEDE2000.
    serpentine : bool, default=True
        Error diffusion only: scan odd rows right to left (reduces the
        diagonal "worm" texture of raster scanning).

    Returns
    -------
    MappedImage
        ``delta_e`` holds the plain per-pixel CIEDE2000 statistics (mean,
        median, p95, max); ``extra`` records ``dither``, ``strength``,
        ``serpentine``, ``error_space`` ("linear light") and
        ``choice_space``.  For spatially filtered statistics see
        :func:`quantize.quality.perception.with_filtered_delta_e`.

    Raises
    ------
    ValueError
        Unknown method or metric; strength outside 0-1.

    References
    ----------
    .. [1] R. W. Floyd and L. Steinberg, "An adaptive algorithm for spatial
       greyscale", Proc. SID 17(2), 75-77, 1976.
    .. [2] J. F. Jarvis, C. N. Judice and W. H. Ninke, "A survey of
       techniques for the display of continuous tone pictures on bilevel
       displays", Computer Graphics and Image Processing 5(1), 13-40, 1976.
    .. [3] P. Stucki, "MECCA - a multiple-error correction computation
       algorithm for bi-level image hardcopy reproduction", IBM Research
       Report RZ1060, 1981.
    .. [4] B. E. Bayer, "An optimum method for two-level rendition of
       continuous-tone pictures", IEEE ICC, 1973, 26-11 to 26-15.
    .. [5] R. Ulichney, "The void-and-cluster method for dither array
       generation", Proc. SPIE 1913, 332-343, 1993.

    Examples
    --------
    >>> import numpy as np
    >>> from quantize.palette import Palette
    >>> pal = Palette(rgb8=np.array([[0, 0, 0], [255, 255, 255]]), locked=None)
    >>> grey = np.full((32, 32, 3), 128, np.uint8)
    >>> out = dither_picture(grey, pal, method="floyd-steinberg")  # doctest: +SKIP
    >>> round(float(out.indices.mean()), 2)  # share of white: the light of sRGB 128  # doctest: +SKIP
    0.22
    """
    from quantize.fit.assign import check_metric
    from quantize.io.read import as_picture
    from quantize.quality.perception import pixel_delta_e_stats

    from .result import MappedImage, nearest_image

    m = check_dither(method)
    strength = check_strength(strength)
    check_metric(metric)
    pic = as_picture(pic)
    if m.kind == "none":
        return nearest_image(pic, palette, metric=metric)
    idx, arrays = dither_indices(pic, palette, method=m.name, strength=strength, metric=metric,
                                 serpentine=serpentine, measure=True)
    from quantize.kernels.loading import compiled

    dk = compiled("dither_loops")
    de = arrays["delta_e"]
    clear = arrays["state"] == dk.CLEAR if pic.alpha is not None else None
    if clear is not None and clear.any():
        values, used = de[~clear], idx[~clear]
    else:  # flat views: no copies of a 12-megapixel array
        values, used = de.ravel(), idx.ravel()
    counts = np.bincount(used, minlength=len(palette))
    notes = list(pic.warnings)
    if arrays["choice_space"] != palette.space and metric == "space":
        notes.append(f"dither chose colours by distance in CIELAB (the {palette.space} model "
                     "does not run in the compiled kernel)")
    return MappedImage(
        indices=idx,
        palette=palette,
        alpha=pic.alpha,
        delta_e=pixel_delta_e_stats(values, overwrite=True),
        coverage=100.0 * counts / counts.sum(),
        source=pic.source,
        dpi=pic.dpi,
        bit_depth=pic.bit_depth,
        notes=tuple(notes),
        extra={"dither": m.name, "strength": strength, "serpentine": bool(serpentine) if m.kind == "diffusion"
               else None, "error_space": "linear light", "choice_space": arrays["choice_space"],
               "metric": metric},
    )
