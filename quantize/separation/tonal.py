"""Tonal plates: an image's tones printed as halftone dots or index pixels of a few inks.

Spot plates print each area in one flat ink.  Photos, gradients and soft
art are printed instead as patterns the eye mixes from a distance:

- **Halftone.** Each pixel's colour is matched by shares of the inks on the
  substrate (:func:`quantize.separation.mixing.ink_shares`); each ink's share
  becomes a dot screen at its own angle on its film
  (:func:`quantize.separation.halftone.halftone`).  Opaque inks printed one
  after another hide what lies under them where their dots overlap; with
  independent screens the overlaps are random, so each ink is screened at
  the share that leaves the wanted area visible under the inks printed
  after it (:func:`quantize.separation.mixing.printed_shares`).
- **Index.** The image is resampled to a coarser square grid (the index
  resolution) and dithered to the inks and the substrate with the project's
  dither kernels (:func:`quantize.render.dither.dither_indices`): every grid
  square prints exactly one ink, or none, so the plates never overlap.

Both are made at film resolution in strips of rows, so a poster's films
need little more memory than the films themselves.  A preview of the
printed films on the substrate, averaged in linear light to the artwork's
grid (the eye integrates light, not code values), is what the perceived
error (:func:`quantize.quality.perception.delta_e_map`, S-CIELAB filtered
CIEDE2000 at a viewing distance) is measured on: spot, halftone and index
separations of one image compare by one number.

The colours are the inks' sRGB previews, the mixing model is the
Murray-Davies area law in linear light: a preview and its error are
computed from file data, not measured from a print.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from quantize.colour.spaces import linear_to_srgb, srgb_to_linear
from quantize.core.units import MM_PER_INCH
from quantize.errors import SeparationError

from .defaults import DEFAULT_INDEX_DPI, DEFAULT_LPI, DEFAULT_MIN_DOT_MM
from .halftone import DOT_SHAPES, Screen, drop_specks, halftone
from .mixing import ink_shares, printed_shares

__all__ = ["TonalSettings", "TONES", "share_maps", "halftone_films", "index_grid", "index_films",
           "simulate_print", "print_error", "film_coverage", "INDEX_DITHERS"]

#: How a separation prints tones: flat spot areas, halftone dots, or index pixels.
TONES = ("spot", "halftone", "index")
#: Dithers an index separation may use (the project's error-diffusion and ordered dithers).
INDEX_DITHERS = ("floyd-steinberg", "jarvis-judice-ninke", "stucki", "bayer4", "bayer8", "blue-noise")

#: Film rows per strip: bounds the temporary arrays of a poster's films.
_STRIP_ROWS = 512
#: Above this many distinct colours, ink shares are computed on a lattice and interpolated.
_EXACT_COLOURS = 40_000
#: Lattice points per sRGB axis (as a colour-management lookup table).
_LATTICE = 33


@dataclass(frozen=True)
class TonalSettings:
    """How halftone and index plates are made (the defaults are common practice, from memory).

    Attributes
    ----------
    lpi : float, default 55
        Halftone screen frequency, lines per inch (textile halftones are
        commonly 45 to 65 lpi).
    angles : tuple of float
        One screen angle per printed ink in print order, degrees; empty for
        :func:`quantize.separation.halftone.default_angles`.
    dot_shape : {"round", "elliptical", "square"}
    min_dot_mm : float, default 0.1
        The smallest dot (and hole) a screen holds, diameter in mm: smaller
        dots are dropped or grown, smaller holes filled or opened.
    mesh : float or None
        The screen mesh (threads per inch), for the frequency warning.
    index_dpi : float, default 200
        Index resolution: the side of a square index pixel is 25.4 / index_dpi mm.
    index_dither : str, default "floyd-steinberg"
        One of :data:`INDEX_DITHERS`.
    yule_nielsen : float, default 1
        The Yule-Nielsen factor of the mixing model (1: Murray-Davies).
    """

    lpi: float = DEFAULT_LPI
    angles: tuple = ()
    dot_shape: str = "round"
    min_dot_mm: float = DEFAULT_MIN_DOT_MM
    mesh: float | None = None
    index_dpi: float = DEFAULT_INDEX_DPI
    index_dither: str = "floyd-steinberg"
    yule_nielsen: float = 1.0

    def check(self) -> None:
        """Raise SeparationError for a value no job can use."""
        def number(v, lo, hi):
            return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and lo <= v <= hi

        if not number(self.lpi, 1, 1000):
            raise SeparationError(f"screen frequency must be 1 to 1000 lines per inch, got {self.lpi!r}")
        if not all(number(a, -360, 360) for a in self.angles):
            raise SeparationError(f"screen angles must be degrees from -360 to 360, got {list(self.angles)!r}")
        if self.dot_shape not in DOT_SHAPES:
            raise SeparationError(f"dot shape must be one of {', '.join(DOT_SHAPES)}, got {self.dot_shape!r}")
        if not number(self.min_dot_mm, 0, 10):
            raise SeparationError(f"minimum dot must be 0 to 10 mm, got {self.min_dot_mm!r}")
        if self.mesh is not None and not number(self.mesh, 10, 1000):
            raise SeparationError(f"mesh must be 10 to 1000 threads per inch, got {self.mesh!r}")
        if not number(self.index_dpi, 10, 2400):
            raise SeparationError(f"index resolution must be 10 to 2400 dpi, got {self.index_dpi!r}")
        if self.index_dither not in INDEX_DITHERS:
            raise SeparationError(f"index dither must be one of {', '.join(INDEX_DITHERS)}, "
                                  f"got {self.index_dither!r}")
        if not number(self.yule_nielsen, 1, 10):
            raise SeparationError(f"the Yule-Nielsen factor must be 1 to 10, got {self.yule_nielsen!r}")

    def screens(self, n: int) -> list[Screen]:
        """The screens of ``n`` inks in print order."""
        from .halftone import default_angles

        angles = list(self.angles) or default_angles(n)
        if len(angles) != n:
            raise SeparationError(f"{len(angles)} screen angle(s) given for {n} printed ink(s); give one per ink")
        return [Screen(lpi=float(self.lpi), angle=float(a), shape=self.dot_shape, min_dot_mm=float(self.min_dot_mm))
                for a in angles]


def _shares(rgb: np.ndarray, inks: np.ndarray, ground: np.ndarray, n: float) -> np.ndarray:
    """Ink shares of many colours: exact for few, else interpolated from a lattice over sRGB."""
    if len(rgb) <= _EXACT_COLOURS:
        return ink_shares(rgb, inks, ground, n=n)
    from scipy.ndimage import map_coordinates

    axis = np.linspace(0.0, 255.0, _LATTICE)
    grid = np.stack(np.meshgrid(axis, axis, axis, indexing="ij"), axis=-1).reshape(-1, 3)
    lut = ink_shares(grid, inks, ground, n=n).reshape(_LATTICE, _LATTICE, _LATTICE, -1)
    coords = (rgb * ((_LATTICE - 1) / 255.0)).T
    out = np.empty((len(rgb), lut.shape[-1]))
    for j in range(lut.shape[-1]):
        out[:, j] = map_coordinates(lut[..., j], coords, order=1, mode="nearest")
    return out


def share_maps(sample, shape: tuple[int, int], ink_rgb8: np.ndarray, substrate_rgb8: np.ndarray, *,
               base_rgb8: np.ndarray | None = None, yule_nielsen: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Each ink's printed share at every artwork pixel, inks in print order.

    Parameters
    ----------
    sample : ColourSample
        The artwork's distinct colours and, per pixel, which (``inverse``).
    shape : (int, int)
        The artwork's height and width.
    ink_rgb8 : (k, 3) array
        The printed inks, in print order.
    substrate_rgb8 : (3,) array
    base_rgb8 : (3,) array, optional
        An underbase's colour: colours that need ink (their inks cover at
        least half the area on the bare substrate) are matched on the base
        instead, and marked in the second result.
    yule_nielsen : float

    Returns
    -------
    shares : (k, H, W) float32
        The share to print of each ink (0 where nothing prints).
    on_base : (H, W) bool
        Pixels matched on the underbase.
    """
    rgb = sample.codes.astype(np.float64) * (255.0 / (2**sample.bit_depth - 1))
    inks = np.asarray(ink_rgb8, np.float64)
    visible = _shares(rgb, inks, np.asarray(substrate_rgb8, np.float64), yule_nielsen)
    need = np.zeros(len(rgb), bool)
    if base_rgb8 is not None:
        need = visible.sum(axis=1) >= 0.5
        if need.any():
            visible[need] = _shares(rgb[need], inks, np.asarray(base_rgb8, np.float64), yule_nielsen)
    printed = printed_shares(visible).astype(np.float32)
    inv = sample.inverse.reshape(shape)
    live = inv >= 0
    out = np.zeros((inks.shape[0],) + tuple(shape), np.float32)
    for j in range(inks.shape[0]):
        out[j][live] = printed[inv[live], j]
    on_base = np.zeros(shape, bool)
    on_base[live] = need[inv[live]]
    return out, on_base


def _resampler(plane: np.ndarray, shape: tuple[int, int]):
    """A function of film rows (r0, r1) -> the plane resampled (bicubic) to those rows of ``shape``."""
    from PIL import Image

    h, w = plane.shape
    img = Image.fromarray(np.ascontiguousarray(plane, np.float32), mode="F")
    fh, fw = shape

    def rows(r0: int, r1: int) -> np.ndarray:
        box = (0.0, r0 * h / fh, float(w), r1 * h / fh)
        return np.asarray(img.resize((fw, r1 - r0), Image.Resampling.BICUBIC, box=box), np.float32)

    return rows


def _strips(n: int):
    for r0 in range(0, n, _STRIP_ROWS):
        yield r0, min(n, r0 + _STRIP_ROWS)


def film_coverage(plane: np.ndarray, shape: tuple[int, int], *, level: float = 0.5) -> np.ndarray:
    """Where a coverage plane (0-1 per artwork pixel) resampled to ``shape`` reaches ``level``."""
    if plane.shape == tuple(shape):
        return plane >= level
    rows = _resampler(plane, shape)
    out = np.empty(shape, bool)
    for r0, r1 in _strips(shape[0]):
        out[r0:r1] = rows(r0, r1) >= level
    return out


def halftone_films(shares: np.ndarray, screens: list[Screen], shape: tuple[int, int], dpi: float,
                   printable: np.ndarray) -> tuple[list[np.ndarray], list[tuple[int, int]]]:
    """The halftone film of each ink, made in strips of film rows.

    Parameters
    ----------
    shares : (k, h, w) float32
        Printed shares per artwork pixel (:func:`share_maps`).
    screens : list of Screen
        One per ink.
    shape : (int, int)
        The film grid's height and width.
    dpi : float
        Film resolution.
    printable : (H, W) bool
        Film pixels where anything prints.

    Returns
    -------
    films : list of (H, W) bool
    specks : list of (int, int)
        Per film, pieces below the minimum dot removed and holes below it
        filled (:func:`quantize.separation.halftone.drop_specks`).
    """
    films, specks = [], []
    for plane, screen in zip(shares, screens, strict=True):
        rows = _resampler(plane, shape)
        film = np.empty(shape, bool)
        for r0, r1 in _strips(shape[0]):
            s = np.clip(rows(r0, r1), 0.0, 1.0)
            film[r0:r1] = halftone(s, screen, dpi, row0=r0) & printable[r0:r1]
        d_px = screen.min_dot_mm / MM_PER_INCH * dpi
        specks.append(drop_specks(film, math.pi * d_px * d_px / 4.0, printable=printable))
        films.append(film)
    return films, specks


def index_grid(width_mm: float, height_mm: float, index_dpi: float) -> tuple[int, int]:
    """Height and width of the index grid of a print."""
    return (max(1, int(round(height_mm / MM_PER_INCH * index_dpi))),
            max(1, int(round(width_mm / MM_PER_INCH * index_dpi))))


def index_films(pic, palette, grid_shape: tuple[int, int], film_shape: tuple[int, int], *,
                dither: str) -> tuple[np.ndarray, np.ndarray]:
    """Palette index of every film pixel of an index separation, and where the film prints.

    The artwork is resampled (bicubic, per channel) to the index grid,
    dithered there to the palette (inks and substrate) and every index
    pixel drawn as a square block of film pixels.

    Returns
    -------
    indices : (H, W) ndarray
        Palette index per film pixel.
    printable : (H, W) bool
    """
    from quantize.io.read import as_picture
    from quantize.render.dither import dither_indices

    ih, iw = grid_shape
    rgb = pic.float_rgb()
    small = np.stack([_resampler(rgb[..., c], grid_shape)(0, ih) for c in range(3)], axis=-1)
    small = np.clip(small, 0.0, 1.0)
    if pic.alpha is not None:
        a = _resampler(pic.float_alpha(), grid_shape)(0, ih) >= 0.5
        small = np.concatenate([small, a[..., None].astype(small.dtype)], axis=-1)
    idx, _ = dither_indices(as_picture(small.astype(np.float64)), palette, method=dither)
    printable_small = np.ones(grid_shape, bool) if pic.alpha is None else small[..., 3] > 0.5
    fh, fw = film_shape
    rows = np.minimum(((np.arange(fh) + 0.5) * ih / fh).astype(np.intp), ih - 1)
    cols = np.minimum(((np.arange(fw) + 0.5) * iw / fw).astype(np.intp), iw - 1)
    return idx[np.ix_(rows, cols)], printable_small[np.ix_(rows, cols)]


def simulate_print(top: np.ndarray, colours_rgb8: np.ndarray, art_shape: tuple[int, int]) -> np.ndarray:
    """The printed films seen at the artwork's grid: each film pixel's top colour, averaged in linear light.

    Parameters
    ----------
    top : (H, W) int ndarray
        Per film pixel, the row of ``colours_rgb8`` that shows there (the
        last ink printed on it, else the underbase or the substrate); -1
        where nothing prints.
    colours_rgb8 : (m, 3) array
    art_shape : (int, int)
        The preview's height and width.

    Returns
    -------
    (h, w, 3) uint8
        Transparent artwork pixels get the substrate's colour (row 0).

    Examples
    --------
    >>> top = np.zeros((4, 4), int); top[:, ::2] = 1
    >>> simulate_print(top, np.array([[255, 255, 255], [0, 0, 0]]), (1, 1)).tolist()
    [[[188, 188, 188]]]
    """
    from PIL import Image

    h, w = art_shape
    lin = srgb_to_linear(np.asarray(colours_rgb8, np.float64) / 255.0)
    acc = np.zeros((h, w, 3))
    weight = np.zeros((h, w))
    for c in np.unique(top):
        if c < 0:
            continue
        plane = Image.fromarray((top == c).astype(np.float32), mode="F")
        frac = np.asarray(plane.resize((w, h), Image.Resampling.BOX), np.float64)
        acc += frac[..., None] * lin[c]
        weight += frac
    empty = weight <= 1e-9
    acc[empty] = lin[0]
    weight[empty] = 1.0
    return np.round(255.0 * linear_to_srgb(np.clip(acc / weight[..., None], 0.0, 1.0))).astype(np.uint8)


def print_error(pic, preview: np.ndarray, *, width_mm: float, distance_mm: float) -> dict:
    """Plain and perceived (S-CIELAB filtered) ΔE00 of a simulated print against the artwork.

    Parameters
    ----------
    pic : Picture
        The artwork.
    preview : (h, w, 3) uint8
        The simulated print on the artwork's grid (:func:`simulate_print`).
    width_mm : float
        The printed width: with the preview's width it gives the viewing
        resolution.
    distance_mm : float
        Viewing distance.

    Returns
    -------
    dict
        ``plain`` and ``filtered`` statistics (mean, median, p95, max),
        ``distance_mm`` and ``dpi`` of the preview, and a caution.
    """
    from quantize.quality.perception import delta_e_map, pixel_delta_e_stats

    dpi = preview.shape[1] / (width_mm / MM_PER_INCH)
    out: dict[str, Any] = {"distance_mm": float(distance_mm), "dpi": round(float(dpi), 3)}
    for kind in ("plain", "filtered"):
        de = delta_e_map(pic, preview, kind=kind, dpi=dpi, distance_mm=distance_mm)
        stats = pixel_delta_e_stats(de[~np.isnan(de)], overwrite=True)
        out[kind] = {k: round(v, 4) for k, v in stats.items()}
    out["caution"] = ("a preview computed from file data (sRGB ink previews, the Murray-Davies area law), "
                      "not a measured print")
    return out
