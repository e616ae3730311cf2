"""The reduced image: :class:`MappedImage`, and the plain nearest-colour mapping that makes one."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from quantize.fit.assign import map_sample
from quantize.quality.perception import FilteredDeltaE
from quantize.quality.stats import coverage_percent, delta_e_stats

__all__ = ["DitherInfo", "MappedImage", "nearest_image"]


@dataclass(frozen=True)
class DitherInfo:
    """How a dithered :class:`MappedImage` was made.

    Attributes
    ----------
    method : str
        The dither's name, a key of :data:`quantize.render.methods.DITHERS`.
    strength : float
        0-1: the share of each pixel's error passed on (error diffusion), or
        of the partner colour mixed in (ordered methods).
    serpentine : bool or None
        Error diffusion: True when odd rows were scanned right to left,
        False for a raster scan.  None for ordered methods, which have no
        scan order.
    choice_space : {"lab", "oklab"}
        Space whose distance chose each pixel's colour (CIELAB for a
        CAM16-UCS palette, and always with ``metric="ciede2000"``).
    metric : {"space", "ciede2000"}
        Euclidean distance in ``choice_space``, or CIEDE2000.
    error_space : str, default="linear light"
        What the dither keeps on average: every method mixes and diffuses
        linear RGB, never gamma-encoded values.
    """

    method: str
    strength: float
    serpentine: bool | None
    choice_space: str
    metric: str
    error_space: str = "linear light"


@dataclass(frozen=True, eq=False)
class MappedImage:
    """An image reduced to a palette.

    Attributes
    ----------
    indices : ndarray of shape (H, W)
        Palette index of every pixel (uint8 up to 256 colours, else uint16).
        Fully transparent pixels hold 0; ``alpha`` marks them.
    palette : Palette
    alpha : ndarray of shape (H, W) or None
        The input's alpha channel, unchanged.
    delta_e : dict
        CIEDE2000 between each opaque input pixel and its output colour:
        ``mean``, ``median``, ``p95``, ``max``.
    coverage : ndarray of shape (k,)
        Percent of opaque pixels per palette colour (0.0 for unused ones).
    source : str
    dpi : tuple or None
    bit_depth : int
        Of the input.
    notes : tuple of str
        Anything the user should know (warnings from loading, etc.).
    dither : DitherInfo or None
        How the image was dithered; None for the plain nearest-colour mapping.
    filtered : FilteredDeltaE or None
        S-CIELAB filtered ΔE00 at a viewing condition, once
        :func:`quantize.quality.perception.with_filtered_delta_e` has
        measured it; else None.
    """

    indices: np.ndarray
    palette: object
    alpha: np.ndarray | None
    delta_e: dict
    coverage: np.ndarray
    source: str = "<array>"
    dpi: tuple | None = None
    bit_depth: int = 8
    notes: tuple = ()
    dither: DitherInfo | None = None
    filtered: FilteredDeltaE | None = None

    @property
    def rgb(self) -> np.ndarray:
        """The reduced image as 8-bit sRGB, shape (H, W, 3)."""
        return self.palette.rgb8[self.indices]

    @property
    def unused(self) -> list[int]:
        """Indices of palette colours that no opaque pixel uses."""
        return [int(i) for i in np.flatnonzero(self.coverage == 0)]

    def save(self, path, *, force: bool = False, inputs=()):
        """Write the reduced image (indexed PNG, or RGB TIFF/JPEG by extension)."""
        from quantize.io.write import save_image

        return save_image(path, self.indices, self.palette.rgb8, alpha=self.alpha,
                          dpi=self.dpi, force=force, inputs=inputs)


def nearest_image(pic, palette, *, metric: str, sample=None) -> MappedImage:
    """Every pixel of ``pic`` (a Picture) onto its nearest colour of ``palette``, by ``metric``."""
    from quantize.core.sampling import sample_picture

    smp = sample if sample is not None else sample_picture(pic)
    labels, de = map_sample(smp, palette, metric=metric)
    k = len(palette)
    dtype = np.uint8 if k <= 256 else np.uint16
    idx = smp.index_image(labels, dtype=dtype)
    return MappedImage(
        indices=idx,
        palette=palette,
        alpha=pic.alpha,
        delta_e=delta_e_stats(de, smp.weights),
        coverage=coverage_percent(labels, smp.weights, k),
        source=pic.source,
        dpi=pic.dpi,
        bit_depth=pic.bit_depth,
        notes=tuple(pic.warnings),
    )
