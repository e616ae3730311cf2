"""Mapping: every pixel of an image onto its nearest palette colour.

Mapping is out-of-sample and exact.  The image is collapsed to its distinct
colours, each distinct colour is compared with every palette colour (no
lookup grid, no approximate search), and the choice is spread back to the
pixels through the sample's index.  ΔE00 is measured against the 8-bit
colours actually written.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .measure import coverage_percent, delta_e_stats

__all__ = ["MappedImage", "map_picture", "map_sample", "METRICS", "check_metric", "resolve_metric"]

#: Nearest-colour metrics.
METRICS = ("space", "ciede2000")


def check_metric(name: str) -> str:
    """Return ``name`` if it is a known mapping metric, else raise ValueError."""
    if name not in METRICS:
        raise ValueError(f"unknown mapping metric {name!r}; choose one of: {', '.join(METRICS)}")
    return name


def resolve_metric(metric: str | None, dither: str = "none") -> str:
    """The nearest-colour metric to use: ``metric``, or the default for ``dither``.

    The default (``None``) is CIEDE2000, the measure users judge results
    by.  Error diffusion and ordered dithers pick a colour per pixel rather
    than per distinct colour, and there CIEDE2000 would cost one evaluation
    per pixel and palette colour, so they default to the palette space's
    Euclidean distance.
    """
    if metric is None:
        return "ciede2000" if dither == "none" else "space"
    return check_metric(metric)


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
    extra: dict = field(default_factory=dict)

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
        from .images import save_image

        return save_image(path, self.indices, self.palette.rgb8, alpha=self.alpha,
                          dpi=self.dpi, force=force, inputs=inputs)


def map_sample(sample, palette, *, metric: str = "space") -> tuple[np.ndarray, np.ndarray]:
    """Map the distinct colours of a sample onto a palette.

    Returns
    -------
    labels : ndarray of shape (n,)
        Palette index of each distinct colour.
    delta_e : ndarray of shape (n,)
        CIEDE2000 of each distinct colour to its palette colour.
    """
    from ._kernels import assign_nearest, ciede2000_to, nearest_ciede2000

    # The last mapping is kept with the sample: fitting measures the palette
    # it returns, and applying that palette to the same picture would
    # otherwise repeat the work.
    key = ("mapped", palette.rgb8.tobytes(), palette.space, metric)
    last = sample._points.get("mapped")
    if last is not None and last[0] == key:
        return last[1], last[2]
    lab = sample.points("lab")
    if metric == "ciede2000":
        labels, de = nearest_ciede2000(lab, palette.lab)
    else:
        labels = assign_nearest(sample.points(palette.space), palette.points())[0]
        de = ciede2000_to(lab, palette.lab, labels)
    labels.setflags(write=False)
    de.setflags(write=False)
    sample._points["mapped"] = (key, labels, de)
    return labels, de


def map_picture(image, palette, *, dither: str = "none", metric: str | None = None,
                strength: float = 1.0, serpentine: bool = True, max_pixels=None, sample=None) -> MappedImage:
    """Reduce an image to ``palette``.

    Parameters
    ----------
    image : path, Picture, PIL image or ndarray
        See :func:`quantize.images.as_picture`.
    palette : Palette
    dither : str, default="none"
        ``"none"``: every pixel takes its nearest colour.  Other methods are
        listed in :data:`quantize.dither.DITHERS`.
    metric : {"ciede2000", "space"}, optional
        Nearest colour by CIEDE2000, or by Euclidean distance in the
        palette's space.  Default: CIEDE2000 without dithering, the space's
        distance with it (:func:`resolve_metric`).
    strength : float, default=1.0
        Dither strength in 0-1 (ignored without dithering).
    serpentine : bool, default=True
        Error diffusion scans alternate rows right to left (ignored otherwise).
    max_pixels : int or None
        Decompression-bomb limit when ``image`` is a path.
    sample : ColourSample, optional
        The image's sample if the caller already has it.

    Returns
    -------
    MappedImage

    Raises
    ------
    ImageReadError
        The file cannot be read.
    ValueError
        Unknown ``dither`` or ``metric``.
    """
    from .images import as_picture, load_image
    from .sampling import sample_picture

    from ._kernels import warm_up

    warm_up()
    metric = resolve_metric(metric, dither)
    if isinstance(image, (str, bytes)) or hasattr(image, "__fspath__"):
        pic = load_image(image) if max_pixels is None else load_image(image, max_pixels=max_pixels)
    else:
        pic = as_picture(image)
    if dither != "none":
        from .dither import dither_picture

        return dither_picture(pic, palette, method=dither, strength=strength, metric=metric,
                              serpentine=serpentine)
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
