"""Mapping: every pixel of an image onto its nearest palette colour.

Mapping is out-of-sample and exact.  The image is collapsed to its distinct
colours, each distinct colour is compared with every palette colour (no
lookup grid, no approximate search), and the choice is spread back to the
pixels through the sample's index.  ΔE00 is measured against the 8-bit
colours actually written.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from quantize.fit.assign import resolve_metric

from .dither import dither_picture
from .result import MappedImage, nearest_image  # MappedImage: the return annotation

if TYPE_CHECKING:
    # The palette by its public name: palette.py imports this module, so a direct import back would be
    # a cycle (tests/test_architecture.py).
    import quantize
    from quantize.core.choices import DitherName, NearestName
    from quantize.core.picture import ImageInput
    from quantize.core.sampling import ColourSample

__all__ = ["map_picture"]


def map_picture(image: ImageInput, palette: quantize.Palette, *, dither: DitherName = "none",
                nearest: NearestName | None = None, dither_strength: float = 1.0, serpentine: bool = True,
                max_pixels: int | None = None, sample: ColourSample | None = None,
                **old_names: Any) -> MappedImage:
    """Reduce an image to ``palette``.

    Parameters
    ----------
    image : path, Picture, PIL image or ndarray
        See :func:`quantize.io.read.as_picture`.
    palette : Palette
    dither : str, default="none"
        ``"none"``: every pixel takes its nearest colour.  Other methods are
        listed in :data:`quantize.render.dither.DITHERS`.
    nearest : {"auto", "ciede2000", "space"}, optional
        Nearest colour by CIEDE2000, or by Euclidean distance in the
        palette's space.  Default (None or "auto"): CIEDE2000 without
        dithering, the space's distance with it (:func:`resolve_metric`).
        The command line's ``--nearest``; ``metric=`` is the old name
        (accepted with a DeprecationWarning).
    dither_strength : float, default=1.0
        Dither strength in 0-1 (ignored without dithering); the command
        line's ``--dither-strength``; ``strength=`` is the old name.
    serpentine : bool, default=True
        Error diffusion scans alternate rows right to left (ignored otherwise).
    max_pixels : int or None
        Decompression-bomb limit when ``image`` is a path.
    sample : ColourSample, optional
        The sample of this very image (:func:`quantize.core.sampling.sample_picture`),
        if the caller already has it, as after fitting a palette to it: the
        image is then not collapsed to its colours again.  Used without
        dithering.

    Returns
    -------
    MappedImage

    Raises
    ------
    ImageReadError
        The file cannot be read.
    ValueError
        Unknown ``dither`` or ``metric``, or a ``sample`` of another size.
    """
    from quantize.io.read import as_picture, load_image
    from quantize.core.vocabulary import renamed_keywords

    if old_names:
        unknown = set(old_names) - {"metric", "strength"}
        if unknown:
            raise TypeError(f"map_picture() got an unexpected keyword argument {sorted(unknown)[0]!r}")
        given = renamed_keywords(dict(old_names, **({"nearest": nearest} if nearest is not None else {}),
                                      **({"dither_strength": dither_strength} if dither_strength != 1.0 else {})),
                                 "map_picture", ("metric", "strength"))
        nearest = given.get("nearest", nearest)
        dither_strength = given.get("dither_strength", dither_strength)
    metric = resolve_metric(None if nearest == "auto" else nearest, dither)
    strength = dither_strength
    if isinstance(image, (str, bytes)) or hasattr(image, "__fspath__"):
        pic = load_image(image) if max_pixels is None else load_image(image, max_pixels=max_pixels)
    else:
        pic = as_picture(image)
    if sample is not None and sample.shape != pic.shape:
        raise ValueError(f"{pic.source}: the colour sample given is of a {sample.shape} image, "
                         f"not of this {pic.shape} one")
    if dither != "none":
        return dither_picture(pic, palette, method=dither, strength=strength, metric=metric,
                              serpentine=serpentine)
    return nearest_image(pic, palette, metric=metric, sample=sample)
