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

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, cast

import numpy as np

# The method table and the threshold arrays live in their own modules; their
# names stay importable here.
from .methods import DITHERS, DitherMethod, check_dither, check_modulation, check_strength, number_option
from .result import DitherInfo, MappedImage, nearest_image
if TYPE_CHECKING:
    # The palette by its public name: palette.py imports the render stage, so a direct import back
    # would be a cycle (tests/test_architecture.py).
    import quantize
    from quantize.core.choices import DitherName
    from quantize.core.picture import ImageInput

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
    "DEFAULT_HULL_HOLD",
    "DEFAULT_HULL_HOLD_STEP",
    "DEFAULT_REACH",
    "DITHERS",
    "DitherArrays",
    "HULL_HOLD_ONSET",
    "DitherMethod",
    "bayer_matrix",
    "blue_noise_ranks",
    "cache_dir",
    "check_dither",
    "check_hull_hold",
    "check_hull_hold_step",
    "check_reach",
    "check_strength",
    "clustered_dot_matrix",
    "clustered_dot_size_mm",
    "dither_indices",
    "dither_picture",
    "hold_onset_thresholds",
    "hull_distance",
    "smooth_pixels",
    "threshold_matrix",
]

# --------------------------------------------------------------------------- dithering

#: Error diffusion's reach, in the choice space's units (L*a*b*, or OKLab x 100):
#: a pixel may take a palette colour only if it lies at most this much further
#: from the pixel's own colour than the pixel's nearest palette colour does.
#: Unrestricted (``inf``) by default: a reach of 40 removes the dark speckles
#: from the orange of the dusk sample at 8 colours and lowers its filtered
#: ΔE00, but raises the filtered ΔE00 of three of the four mug photographs
#: (docs/dithering.md, "Dark speckles").
DEFAULT_REACH = float("inf")


def check_reach(reach) -> float:
    """``reach`` (choice-space units, > 0, ``inf`` for no limit) as a float; None means :data:`DEFAULT_REACH`."""
    return number_option(reach, DEFAULT_REACH, lambda v: v > 0.0,
                         "dither reach must be a positive number of L* units or inf")


#: Error diffusion's hold on colours outside the palette's hull: a smooth
#: pixel (see :data:`DEFAULT_HULL_HOLD_STEP`) whose own colour lies further
#: than this (linear light, Euclidean; the onset is spread,
#: :data:`HULL_HOLD_ONSET`) outside the hull has its diffusion
#: target held within the palette's per-channel range, so error that no
#: palette mix can discharge does not pile up there and come out as dark
#: speckles in a light area or a dark rim where the area ends.  ``inf`` turns
#: the hold off (the default before the smooth-only hold: measured, the hold
#: lowers the dusk sample's filtered ΔE00 and keeps every test picture's below
#: the tool's first result; docs/dithering.md, "Colours outside the hull").
DEFAULT_HULL_HOLD = 0.01

#: The hold applies only to *smooth* pixels: no 4-neighbour (transparent ones
#: aside) differs by more than this many codes in any channel, counted on the
#: 8-bit scale (a 16-bit picture's codes over 257).  A colourful photograph's
#: out-of-hull colours sit in textured patches, whose mean colour the carried
#: error keeps; a sky's sit in smooth areas, where it piles up.  ``inf`` holds
#: every far pixel (that raises scikit-image's coffee at 16 colours above the
#: tool's first result; so does 4).  2 holds whole generated sky ramps and
#: breaks issue 17's row-band limit on them (the held ends lose their mean);
#: 1 keeps it, but leaves gradients steeper than a code per pixel unheld.
DEFAULT_HULL_HOLD_STEP = 1.0

#: The hold sets in over a range of distances, not at one: a pixel is held
#: where its distance exceeds the hold times 1 + this times a blue-noise
#: threshold of its place (:func:`hold_onset_thresholds`).  A smooth sky's
#: colours are whole runs of one code along a row, so at one threshold the
#: held and free pixels came in alternating row runs where the sky left the
#: hull; a held run cut off the error that its free neighbours had piled up
#: and took the lightest colour along its length (short light streaks in the
#: dusk sample).  Scattered, the held pixels make no runs
#: (tests/test_dither_hold.py, docs/dithering.md).
HULL_HOLD_ONSET = 0.5


def check_hull_hold(hold) -> float:
    """``hold`` (linear light, >= 0, ``inf`` for off) as a float; None means :data:`DEFAULT_HULL_HOLD`."""
    return number_option(hold, DEFAULT_HULL_HOLD, lambda v: v >= 0.0,
                         "hull hold must be a distance in linear light >= 0 or inf")


def check_hull_hold_step(step) -> float:
    """``step`` (8-bit codes, >= 0, ``inf`` for every pixel) as a float; None means :data:`DEFAULT_HULL_HOLD_STEP`."""
    return number_option(step, DEFAULT_HULL_HOLD_STEP, lambda v: v >= 0.0,
                         "hull hold step must be a number of 8-bit codes >= 0 or inf")


def smooth_pixels(codes: np.ndarray, clear: np.ndarray | None, step: float, max_code: int) -> np.ndarray:
    """Pixels none of whose 4-neighbours differs by more than ``step`` 8-bit codes in any channel.

    Parameters
    ----------
    codes : ndarray of shape (H, W, 3), uint8 or uint16
    clear : ndarray of shape (H, W), bool, or None
        Fully transparent pixels: their hidden colour is no neighbour.
    step : float
        On the 8-bit scale; a code of a ``max_code`` picture counts
        ``255 / max_code`` of one.
    max_code : int
        255 or 65535.

    Returns
    -------
    ndarray of shape (H, W), bool
    """
    rough = np.zeros(codes.shape[:2], dtype=bool)
    limit = step * max_code / 255.0
    if limit >= np.iinfo(codes.dtype).max:
        return ~rough
    # Codes are whole numbers, so "more than limit" is "more than its floor";
    # compared in the codes' own dtype, nothing is widened to float.
    lim = codes.dtype.type(math.floor(limit))
    for axis in (0, 1):
        head = [slice(None)] * 2
        tail = [slice(None)] * 2
        head[axis], tail[axis] = slice(1, None), slice(None, -1)
        a, b = codes[tuple(head)], codes[tuple(tail)]
        jump = np.zeros(a.shape[:2], dtype=bool)
        for c in range(codes.shape[2]):
            ac, bc = a[..., c], b[..., c]
            # max - min stays within the unsigned dtype, so no wider copy is made.
            jump |= (np.maximum(ac, bc) - np.minimum(ac, bc)) > lim
        if clear is not None:
            jump &= ~(clear[tuple(head)] | clear[tuple(tail)])
        rough[tuple(head)] |= jump
        rough[tuple(tail)] |= jump
    return ~rough


def _mark_outside(pic, a: DitherArrays, hold: float, step: float) -> np.ndarray:
    """``a.state`` with the open, smooth pixels further than ``hold`` outside the palette's hull marked FAR."""
    from quantize.core.sampling import sample_picture
    from quantize.kernels.loading import compiled

    dk = compiled("dither_loops")
    state = a.state.copy()
    held = state == dk.OPEN
    if step != np.inf:
        held &= smooth_pixels(a.codes, state == dk.CLEAR, step, pic.max_code)
    if not held.any():
        return state
    smp = sample_picture(pic)
    rows = _rows_of(smp).reshape(pic.shape)
    # Only the colours of pixels that may be held are looked at.
    wanted = np.unique(rows[held])
    dist = np.zeros(smp.n_colours)
    dist[wanted] = hull_distance(a.lut[smp.codes[wanted]], a.pal_lin)
    ys, xs = np.nonzero(held & (dist[rows] > hold))
    t = hold_onset_thresholds()
    keep = dist[rows[ys, xs]] > hold * (1.0 + HULL_HOLD_ONSET * t[ys % t.shape[0], xs % t.shape[1]])
    state[ys[keep], xs[keep]] = dk.FAR
    return state


def hold_onset_thresholds() -> np.ndarray:
    """The tile of per-place thresholds (0-1) of the hold's onset (:data:`HULL_HOLD_ONSET`).

    The blue-noise matrix shifted by half its size, so it does not line up
    with the same matrix's threshold modulation of the choice.
    """
    t = threshold_matrix("blue-noise")
    return np.roll(t, (t.shape[0] // 2, t.shape[1] // 2), axis=(0, 1))


#: Colours set against the hull at a time: bounds the (n, facets, 3) arrays.
_HULL_BLOCK = 1 << 13


def hull_distance(points: np.ndarray, vertices: np.ndarray) -> np.ndarray:
    """Euclidean distance of each point to the convex hull of ``vertices`` (0 inside).

    Parameters
    ----------
    points : ndarray of shape (n, 3)
    vertices : ndarray of shape (k, 3)
        A solid hull (Qhull, Barber et al. 1996) gives exact distances: 0
        where no facet plane has the point outside, else the distance to the
        nearest boundary triangle (closest point on a triangle, Ericson,
        *Real-Time Collision Detection*, 2005, sec. 5.1.5, in vector form).
        A flat or tiny palette has no solid hull; then the hull projection of
        :func:`quantize.fit.for_dither.hull_weights` is used.

    Returns
    -------
    ndarray of shape (n,)
    """
    from scipy.spatial import ConvexHull, QhullError

    from quantize.fit.for_dither import hull_weights

    out = np.zeros(len(points))
    try:
        hull = ConvexHull(vertices)
    except (QhullError, ValueError):
        for i in range(0, len(points), _HULL_BLOCK):
            p = points[i:i + _HULL_BLOCK]
            out[i:i + _HULL_BLOCK] = np.sqrt(((p - hull_weights(p, vertices) @ vertices) ** 2).sum(axis=1))
        return out
    eq = hull.equations  # unit outward normals and offsets
    tri = vertices[hull.simplices]  # (T, 3 corners, 3)
    for i in range(0, len(points), _HULL_BLOCK):
        p = points[i:i + _HULL_BLOCK]
        outside = (p @ eq[:, :3].T + eq[:, 3]).max(axis=1) > 0.0
        if outside.any():
            out[i:i + _HULL_BLOCK][outside] = np.sqrt(_triangle_distance2(p[outside], tri).min(axis=1))
    return out


def _triangle_distance2(p: np.ndarray, tri: np.ndarray) -> np.ndarray:
    """Squared distance of each point (n, 3) to each triangle (T, 3, 3): (n, T)."""
    a, b, c = tri[None, :, 0], tri[None, :, 1], tri[None, :, 2]
    q = p[:, None, :]
    n = np.cross(b - a, c - a)
    nn = (n * n).sum(axis=-1)
    h = ((q - a) * n).sum(axis=-1) / nn
    foot = q - h[..., None] * n  # the point's projection onto the triangle's plane
    inside = ((np.cross(b - a, foot - a) * n).sum(axis=-1) >= 0.0) \
        & ((np.cross(c - b, foot - b) * n).sum(axis=-1) >= 0.0) \
        & ((np.cross(a - c, foot - c) * n).sum(axis=-1) >= 0.0)
    edge = np.minimum(np.minimum(_segment_distance2(q, a, b), _segment_distance2(q, b, c)),
                      _segment_distance2(q, c, a))
    return np.where(inside, h * h * nn, edge)


def _segment_distance2(q: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    ab = b - a
    t = np.clip(((q - a) * ab).sum(axis=-1) / (ab * ab).sum(axis=-1), 0.0, 1.0)
    d = q - (a + t[..., None] * ab)
    return (d * d).sum(axis=-1)


@dataclass(frozen=True, eq=False)
class DitherArrays:
    """The arrays the compiled dither kernels take (:mod:`quantize.kernels.dither_loops`).

    Attributes
    ----------
    codes : ndarray of shape (H, W, 3)
        The picture's sRGB codes (8 or 16 bits), C-contiguous.
    lut : ndarray of shape (max_code + 1,)
        Code -> linear light, 0-1.
    state : ndarray of shape (H, W), uint8
        Per pixel ``CLEAR`` (fully transparent), ``OPEN`` or ``PINNED``
        (exactly a locked palette colour), as the kernels name them.
    pinned : ndarray of shape (H, W), uint16
        The locked colour of each ``PINNED`` pixel (read only there).
    pal_lin : ndarray of shape (k, 3)
        Palette in linear RGB, 0-1.
    pal_pts : ndarray of shape (k, 3)
        Palette in the space colours are chosen in (CIELAB for CIEDE2000).
    pal_lab : ndarray of shape (k, 3)
        Palette CIELAB along the kernels' own arithmetic, so that a pixel
        that is exactly its palette colour measures exactly 0.
    mat, mat2 : ndarray of shape (3, 3)
        Linear RGB -> the choice space: the XYZ-based matrix for CIELAB, or
        the LMS and OKLab matrices.
    mat_lab : ndarray of shape (3, 3)
        Linear RGB -> XYZ, for measuring ΔE00.
    space_code : int
        0 for CIELAB, 1 for OKLab (the kernels' switch).
    metric_code : int
        0 for Euclidean distance in the choice space, 1 for CIEDE2000.
    choice_space : {"lab", "oklab"}
        The space colours are chosen in, by name.
    delta_e : ndarray of shape (H, W) or None
        Per-pixel CIEDE2000 to the chosen colour, NaN where transparent;
        None until measured.
    """

    codes: np.ndarray
    lut: np.ndarray
    state: np.ndarray
    pinned: np.ndarray
    pal_lin: np.ndarray
    pal_pts: np.ndarray
    pal_lab: np.ndarray
    mat: np.ndarray
    mat2: np.ndarray
    mat_lab: np.ndarray
    space_code: int
    metric_code: int
    choice_space: str
    delta_e: np.ndarray | None = None


@dataclass(frozen=True, eq=False)
class _Diffusion:
    """An error-diffusion pass as the kernels take it: neighbour offsets and shares, strength, scan."""

    off_dy: np.ndarray  # int64, rows below the current pixel
    off_dx: np.ndarray  # int64, columns right of it (left on reversed rows)
    off_w: np.ndarray  # float64 shares, summing to 1
    strength: float
    serpentine: bool
    mod: np.ndarray  # tiled lightness offsets of the choice, -0.5 to 0.5
    mod_amp: float  # their scale, in L* (OKLab L x 100) units
    reach: float  # how much further than the nearest colour a choice may lie from the pixel's own colour
    hold: float = np.inf  # how far outside the palette's hull a pixel's target is held within its range

    @classmethod
    def of(cls, method: DitherMethod, strength: float, serpentine: bool, modulation: float,
           reach: float = np.inf, hold: float = np.inf) -> _Diffusion:
        off = np.array(method.weights, dtype=np.float64)
        if modulation > 0.0:
            mod = np.ascontiguousarray(threshold_matrix("blue-noise") - 0.5)
        else:
            mod = np.zeros((1, 1))
        return cls(off_dy=np.ascontiguousarray(off[:, 0].astype(np.int64)),
                   off_dx=np.ascontiguousarray(off[:, 1].astype(np.int64)),
                   off_w=np.ascontiguousarray(off[:, 2]), strength=float(strength), serpentine=bool(serpentine),
                   mod=mod, mod_amp=float(modulation) * float(strength), reach=float(reach),
                   hold=float(hold))

    def kernel_args(self, a: DitherArrays) -> tuple:
        """The leading arguments of ``diffuse`` and ``diffuse_rows``, in the kernels' order."""
        return (a.codes, a.lut, a.state, a.pinned, a.pal_lin, a.pal_pts, a.mat, a.mat2, a.space_code,
                a.metric_code, self.off_dy, self.off_dx, self.off_w, self.strength, self.serpentine,
                self.mod, self.mod_amp, self.reach, np.stack([a.pal_lin.min(axis=0), a.pal_lin.max(axis=0)]))


def _kernel_inputs(pic, palette, metric) -> DitherArrays:
    """The arrays the compiled kernels take, for ``pic`` onto ``palette``."""
    from quantize.colour import spaces as cs
    from quantize.kernels.loading import compiled, with_fresh_cache

    dk = compiled("dither_loops")
    space = palette.space if palette.space in ("lab", "oklab") else "lab"
    if metric == "ciede2000":
        space = "lab"
    if space == "lab":
        mat, mat2, code = cs.SRGB_TO_WHITE_RELATIVE, np.zeros((3, 3)), 0
    else:
        mat, mat2, code = cs.SRGB_TO_LMS, cs.LMS_TO_OKLAB, 1
    codes = np.ascontiguousarray(pic.rgb)
    state = np.full(pic.shape, dk.OPEN, dtype=np.uint8)
    pinned = np.zeros(pic.shape, dtype=np.uint16)  # read only where state is PINNED
    if pic.alpha is not None:
        state[pic.alpha == 0] = dk.CLEAR
    scale = 257 if pic.bit_depth == 16 else 1
    for j in np.flatnonzero(palette.locked):
        hit = np.all(codes == palette.rgb8[j].astype(codes.dtype) * scale, axis=2) & (state == dk.OPEN)
        state[hit] = dk.PINNED
        pinned[hit] = j
    pal_lin = np.ascontiguousarray(cs.srgb_to_linear(palette.rgb8 / 255.0))
    mat_lab = np.ascontiguousarray(cs.SRGB_TO_WHITE_RELATIVE)
    return DitherArrays(
        codes=codes,
        lut=cs.srgb_to_linear(np.arange(pic.max_code + 1) / pic.max_code),
        state=state,
        pinned=pinned,
        pal_lin=pal_lin,
        pal_pts=np.ascontiguousarray(cs.srgb8_to_space(palette.rgb8, space if metric == "space" else "lab")),
        # Palette CIELAB along the kernels' own arithmetic, so that a pixel that
        # is exactly its palette colour measures exactly 0.
        pal_lab=with_fresh_cache(lambda: np.array([dk.to_space(*lin, mat_lab, mat_lab, 0) for lin in pal_lin])),
        mat=np.ascontiguousarray(mat),
        mat2=np.ascontiguousarray(mat2),
        mat_lab=mat_lab,
        space_code=code,
        metric_code=0 if metric == "space" else 1,
        choice_space=space,
    )


def _diffuse_measured(a: DitherArrays, diffusion: _Diffusion, out) -> np.ndarray:
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
    err = np.zeros((dk.error_rows(diffusion.off_dy), out.shape[1], 3))
    band = max(16, h // 64)
    args = diffusion.kernel_args(a)
    with ThreadPoolExecutor(max_workers=max(numba.get_num_threads(), 1)) as pool:
        jobs = []
        for y0 in range(0, h, band):
            y1 = min(h, y0 + band)
            dk.diffuse_rows(*args, err, y0, y1, out)
            jobs.append(pool.submit(dk.delta_e_rows, a.codes, a.lut, a.state, out, a.pal_lab, a.mat_lab,
                                    y0, y1, de))
        for job in jobs:
            job.result()
    return de


def dither_indices(pic, palette, *, method: str, strength: float = 1.0, metric: str = "space",
                   serpentine: bool = True, modulation: float | None = None, reach: float | None = None,
                   hull_hold: float | None = None, hull_hold_step: float | None = None,
                   measure: bool = False) -> tuple[np.ndarray, DitherArrays]:
    """Palette index of every pixel under a dither, without the statistics.

    Parameters are those of :func:`dither_picture` (``method`` must not be
    ``"none"``), and ``measure``: also measure the per-pixel CIEDE2000.

    Returns
    -------
    indices : ndarray of shape (H, W), uint8 (uint16 above 256 colours)
    arrays : DitherArrays
        The kernels' inputs; with ``measure`` (always, for ordered methods)
        its ``delta_e`` holds the per-pixel CIEDE2000 (H, W), NaN where
        transparent.

    Raises
    ------
    ValueError
        Unknown or ``"none"`` method, unknown metric, strength outside 0-1,
        a negative modulation, a reach that is not positive or a negative
        hull hold or hull hold step.
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
    diffusion = None
    if m.kind == "diffusion":
        diffusion = _Diffusion.of(m, strength, bool(serpentine), check_modulation(modulation), check_reach(reach),
                                  check_hull_hold(hull_hold))
        step = check_hull_hold_step(hull_hold_step)  # checked with the other options, whatever the hold
        if diffusion.hold != np.inf:
            arrays = replace(arrays, state=_mark_outside(pic, arrays, diffusion.hold, step))
    de = with_fresh_cache(lambda: _run_method(m, pic, arrays, strength, diffusion, measure, out))
    return out, replace(arrays, delta_e=de)


def _run_method(m, pic, a: DitherArrays, strength, diffusion, measure, out) -> np.ndarray | None:
    """Run the kernels of method ``m``, filling ``out``; the per-pixel ΔE00 when measured, else None."""
    from quantize.kernels.loading import compiled

    dk = compiled("dither_loops")
    if m.kind == "diffusion":
        if measure:
            return _diffuse_measured(a, diffusion, out)
        dk.diffuse(*diffusion.kernel_args(a), out)
        return None
    # An ordered pixel depends on its colour and place only: bracket each
    # distinct colour once, then threshold the pixels.
    from quantize.core.sampling import sample_picture

    smp = sample_picture(pic)
    n = smp.n_colours
    near, other = np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64)
    share, de_near, de_other = np.empty(n), np.empty(n), np.empty(n)
    dk.bracket(np.ascontiguousarray(smp.codes), a.lut, a.pal_lin, a.pal_pts, a.pal_lab, a.mat, a.mat2, a.mat_lab,
               a.space_code, a.metric_code, near, other, share, de_near, de_other)
    thr = np.ascontiguousarray(threshold_matrix(m.matrix))
    de = np.empty(pic.shape, dtype=np.float64)
    dk.ordered(_rows_of(smp).reshape(pic.shape), a.state, a.pinned, thr, strength, near, other, share, de_near,
               de_other, out, de)
    return de


def dither_picture(pic: ImageInput, palette: quantize.Palette, *, method: DitherName, strength: float = 1.0,
                   metric: str = "space", serpentine: bool = True, modulation: float | None = None,
                   reach: float | None = None, hull_hold: float | None = None,
                   hull_hold_step: float | None = None) -> MappedImage:
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
    modulation : float, optional
        Error diffusion only: threshold modulation, in L* units (OKLab L x
        100 for an OKLab palette), times ``strength``.  The choice of colour
        sees the target's lightness moved by up to half this, by a tiled
        blue-noise mask; the error passed on is measured from the unmoved
        target.  Default :data:`quantize.render.methods.DEFAULT_MODULATION`
        (0, off: measured in docs/dithering.md, it breaks the worms of smooth
        gradients but raises the filtered ΔE00 of photographs).
    reach : float, optional
        Error diffusion only: a pixel may take only the palette colours at
        most this much further from its own colour than its nearest palette
        colour is (Euclidean, in the choice space: CIELAB, or OKLab x 100);
        ``inf`` lets every colour be chosen.  40 removes dark speckles where
        the palette lacks a dark shade of a light area, but raises the
        filtered ΔE00 of several photographs, so the default
        :data:`DEFAULT_REACH` is ``inf`` (docs/dithering.md, "Dark speckles").
    hull_hold : float, optional
        Error diffusion only: a smooth pixel (``hull_hold_step``) whose own
        colour lies further than this outside the palette's convex hull
        (linear light, Euclidean) has its diffusion target held within the
        palette's per-channel range, so error no palette mix can discharge
        does not pile up over an out-of-gamut area.  Up to 1.5 times this,
        only some pixels, scattered by place, are held
        (:data:`HULL_HOLD_ONSET`).  Default
        :data:`DEFAULT_HULL_HOLD` (0.01: it takes most dark speckles and the
        dark rim out of the dusk sample); ``inf`` turns it off
        (docs/dithering.md, "Colours outside the hull").
    hull_hold_step : float, optional
        Error diffusion only: the hold applies to pixels none of whose
        4-neighbours differs by more than this many codes in any channel,
        counted on the 8-bit scale (16-bit codes over 257); ``inf`` holds
        every far pixel.  Default :data:`DEFAULT_HULL_HOLD_STEP` (1).

    Returns
    -------
    MappedImage
        ``delta_e`` holds the plain per-pixel CIEDE2000 statistics (mean,
        median, p95, max); ``dither`` (a :class:`DitherInfo`) records the
        method, strength, scan, error space and the space the colours were
        chosen in.  For spatially filtered statistics see
        :func:`quantize.quality.perception.with_filtered_delta_e`.

    Raises
    ------
    ValueError
        Unknown method or metric; strength outside 0-1; a negative
        modulation, hull hold or hull hold step, or a reach that is not
        positive.

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
    from quantize.kernels.loading import compiled
    from quantize.quality.perception import pixel_delta_e_stats

    m = check_dither(method)
    strength = check_strength(strength)
    check_metric(metric)
    pic = as_picture(pic)
    if m.kind == "none":
        return nearest_image(pic, palette, metric=metric)
    idx, arrays = dither_indices(pic, palette, method=m.name, strength=strength, metric=metric,
                                 serpentine=serpentine, modulation=modulation, reach=reach,
                                 hull_hold=hull_hold, hull_hold_step=hull_hold_step, measure=True)
    dk = compiled("dither_loops")
    de = cast(np.ndarray, arrays.delta_e)  # asked for with measure=True
    clear = arrays.state == dk.CLEAR if pic.alpha is not None else None
    if clear is not None and clear.any():
        values, used = de[~clear], idx[~clear]
    else:  # flat views: no copies of a 12-megapixel array
        values, used = de.ravel(), idx.ravel()
    counts = np.bincount(used, minlength=len(palette))
    notes = list(pic.warnings)
    if arrays.choice_space != palette.space and metric == "space":
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
        dither=DitherInfo(method=m.name, strength=strength,
                          serpentine=bool(serpentine) if m.kind == "diffusion" else None,
                          choice_space=arrays.choice_space, metric=metric),
    )


def _rows_of(smp) -> np.ndarray:
    """Each pixel's row in the colour sample of one picture, which always has them (a pooled sample has not)."""
    return cast(np.ndarray, smp.inverse)
