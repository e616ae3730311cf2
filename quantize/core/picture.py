"""The :class:`Picture`: an sRGB image as integer codes, with its alpha and provenance.

What :func:`quantize.io.read.load_image` returns and every later stage takes,
and the warnings raised while reading one.  Split out of
:mod:`quantize.io.read`, which re-exports these names.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Union

import numpy as np

from quantize.core.derived import DerivedCache

if TYPE_CHECKING:
    from PIL import Image

__all__ = ["ImageInput", "ImageWarning", "Picture", "ProfileWarning"]

#: What the public functions take as an image (see :func:`quantize.io.read.as_picture`): a Picture,
#: a file path, a PIL image or an (H, W, 3) / (H, W, 4) array of sRGB codes.
ImageInput = Union["Picture", str, "os.PathLike[str]", "Image.Image", "np.ndarray"]


class ImageWarning(UserWarning):
    """An image was read or written, but not exactly as stored or asked."""


class ProfileWarning(ImageWarning):
    """An embedded ICC profile is missing, broken or unusable. Pixels are taken as sRGB."""


@dataclass(frozen=True, eq=False)
class Picture:
    """An sRGB image as integer codes, with its alpha and provenance.

    Parameters
    ----------
    rgb : (H, W, 3) ndarray of uint8 or uint16
        sRGB codes, after any ICC conversion.
    alpha : (H, W) ndarray of the same dtype, optional
        Opacity codes, 0 = fully transparent. ``None`` means opaque.
    bit_depth : {8, 16}
        Bits per channel; must match the dtype.
    dpi : (float, float), optional
        Horizontal and vertical resolution, if the file gave one.
    source : str
        The file's path, or ``"<array>"`` / ``"<image>"`` for in-memory input.
    profile : str, optional
        Description of the embedded ICC profile the pixels were converted from.
    warnings : tuple of str
        Every warning raised while reading, in order.

    Raises
    ------
    ValueError
        If the arrays do not have the shapes and dtypes above.

    Notes
    -----
    The pixels never change, so what later stages derive from them (the
    colour sample, :func:`quantize.core.sampling.sample_picture`) is
    computed once and kept in a :class:`~quantize.core.derived.DerivedCache`
    the picture owns: fitting a palette to a picture and mapping the same
    picture collapse it to its colours once.

    Examples
    --------
    >>> import numpy as np
    >>> pic = Picture(rgb=np.zeros((2, 3, 3), np.uint8))
    >>> pic.shape, bool(pic.opaque.all())
    ((2, 3), True)
    """

    rgb: np.ndarray
    alpha: np.ndarray | None = None
    bit_depth: int = 8
    dpi: tuple[float, float] | None = None
    source: str = "<array>"
    profile: str | None = None
    warnings: tuple[str, ...] = ()
    _derived: DerivedCache = field(default_factory=DerivedCache, init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        rgb = self.rgb
        if not isinstance(rgb, np.ndarray) or rgb.ndim != 3 or rgb.shape[2] != 3 or rgb.size == 0:
            raise ValueError(
                f"Picture.rgb must be a non-empty (H, W, 3) array, got {getattr(rgb, 'shape', type(rgb))}"
            )
        dtype = {8: np.uint8, 16: np.uint16}.get(self.bit_depth)
        if dtype is None or rgb.dtype != dtype:
            raise ValueError(
                f"Picture.rgb dtype {rgb.dtype} does not match bit_depth {self.bit_depth!r} "
                "(8 -> uint8, 16 -> uint16)"
            )
        if self.alpha is not None and (
            not isinstance(self.alpha, np.ndarray)
            or self.alpha.shape != rgb.shape[:2]
            or self.alpha.dtype != rgb.dtype
        ):
            raise ValueError(
                f"Picture.alpha must be None or a {rgb.shape[:2]} {rgb.dtype} array, got "
                f"{getattr(self.alpha, 'shape', type(self.alpha))} {getattr(self.alpha, 'dtype', '')}"
            )
        # Read-only views: the dataclass is frozen, and so should its pixels be.
        # The caller's own arrays stay writable.
        object.__setattr__(self, "rgb", _read_only(rgb))
        if self.alpha is not None:
            object.__setattr__(self, "alpha", _read_only(self.alpha))

    @property
    def shape(self) -> tuple[int, int]:
        """``(H, W)``, the height and width in pixels."""
        return self.rgb.shape[0], self.rgb.shape[1]

    @property
    def max_code(self) -> int:
        """The code for full intensity: 255 or 65535."""
        return (1 << self.bit_depth) - 1

    @property
    def opaque(self) -> np.ndarray:
        """(H, W) bool mask of pixels that are not fully transparent (alpha > 0)."""
        if self.alpha is None:
            return np.ones(self.shape, dtype=bool)
        return self.alpha > 0

    def float_rgb(self) -> np.ndarray:
        """(H, W, 3) float64 sRGB, encoded (not linear), 0-1."""
        return self.rgb / float(self.max_code)

    def float_alpha(self) -> np.ndarray | None:
        """(H, W) float64 opacity 0-1, or ``None`` when the picture is opaque."""
        return None if self.alpha is None else self.alpha / float(self.max_code)


def _read_only(a: np.ndarray) -> np.ndarray:
    view = a.view()
    view.flags.writeable = False
    return view
