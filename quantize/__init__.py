"""quantize: perceptual colour-palette reduction for print and image work.

Load an image, fit a palette in a perceptual space (CIELAB by default) by
weighted k-means++ with restarts, choose its size by a penalised rule or a
ΔE00 target, map every pixel exactly onto it and report CIEDE2000 error.

>>> import quantize
>>> pal = quantize.fit_palette("sample_images/poster.png", k=(2, 12))  # doctest: +SKIP
>>> result = pal.apply("sample_images/poster.png")                     # doctest: +SKIP
>>> result.delta_e["mean"], result.coverage                            # doctest: +SKIP

Names are imported on first use, so ``import quantize`` stays fast.  (The
sweep itself is ``quantize.sweep.sweep``: a package attribute cannot be both
the function and its module.)
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

# public name -> module that defines it
_EXPORTS = {
    "kmeans": "clustering",
    "KMeansResult": "clustering",
    "fit_palette": "fitting",
    "Palette": "palette",
    "parse_colour": "palette",
    "MappedImage": "mapping",
    "map_picture": "mapping",
    "load_image": "images",
    "as_picture": "images",
    "save_image": "images",
    "Picture": "images",
    "sample_picture": "sampling",
    "ColourSample": "sampling",
    "delta_e_ciede2000": "colourspace",
    "to_space": "colourspace",
    "from_space": "colourspace",
    "SPACES": "colourspace",
    "Sweep": "sweep",
    "load_ink_library": "inks",
    "choose_inks": "ink_choice",
    "snap_palette": "ink_choice",
    "separate": "separation",
    "Separation": "separation",
    "DITHERS": "dither",
    "dither_picture": "dither",
    "filtered_delta_e": "perception",
    "save_error_map": "errormap",
    "QuantizeError": "errors",
    "ImageReadError": "errors",
    "PaletteFileError": "errors",
    "OutputError": "errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str) -> Any:
    mod = _EXPORTS.get(name)
    if mod is None:
        raise AttributeError(f"module 'quantize' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{mod}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__


if TYPE_CHECKING:  # pragma: no cover - for type checkers and IDEs only
    from .colourspace import SPACES, delta_e_ciede2000, from_space, to_space
    from .errors import ImageReadError, OutputError, PaletteFileError, QuantizeError
    from .fitting import fit_palette
    from .images import Picture, as_picture, load_image, save_image
    from .clustering import KMeansResult, kmeans
    from .mapping import MappedImage, map_picture
    from .palette import Palette, parse_colour
    from .sampling import ColourSample, sample_picture
    from .ink_choice import choose_inks, snap_palette
    from .inks import load_ink_library
    from .separation import Separation, separate
    from .sweep import Sweep
    from .dither import DITHERS, dither_picture
    from .errormap import save_error_map
    from .perception import filtered_delta_e
