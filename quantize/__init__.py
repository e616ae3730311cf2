"""quantize: perceptual colour-palette reduction for print and image work.

Load an image, fit a palette in a perceptual space (CIELAB by default) by
weighted k-means++ with restarts, choose its size by a penalised rule or a
ΔE00 target, map every pixel exactly onto it and report CIEDE2000 error.

>>> import quantize
>>> pal = quantize.fit_palette("sample_images/poster.png", k=(2, 12))  # doctest: +SKIP
>>> result = pal.apply("sample_images/poster.png")                     # doctest: +SKIP
>>> result.delta_e["mean"], result.coverage                            # doctest: +SKIP

The package is one subpackage per pipeline stage, in the order the data
flows: :mod:`quantize.io` (files in and out), :mod:`quantize.colour`
(perceptual spaces and ΔE), :mod:`quantize.core` (the picture and the
weighted colour sample every stage passes on), :mod:`quantize.kernels`
(compiled loops), :mod:`quantize.fit` (palettes), :mod:`quantize.render`
(indices, dithers), :mod:`quantize.quality` (ΔE statistics, perceived
error), :mod:`quantize.report`, :mod:`quantize.separation` (films),
:mod:`quantize.batch` and :mod:`quantize.cli`.

The public names below are imported on first use (PEP 562), so that the
command line's ``--help`` does not wait for numpy, Pillow and the fitting
code to load.  Type checkers see them through the imports at the end of this
module; the package ships its annotations (``py.typed``, PEP 561).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

# public name -> module that defines it
_EXPORTS = {
    "load_image": "io.read",
    "as_picture": "io.read",
    "save_image": "io.write",
    "Picture": "core.picture",
    "sample_picture": "core.sampling",
    "ColourSample": "core.sampling",
    "delta_e_ciede2000": "colour.spaces",
    "to_space": "colour.spaces",
    "from_space": "colour.spaces",
    "SPACES": "colour.spaces",
    "kmeans": "fit.clustering",
    "KMeansResult": "fit.clustering",
    "fit_palette": "fit.engine",
    "FitSettings": "fit.settings",
    "sweep": "fit.sweep",
    "Sweep": "fit.sweep_result",
    "Palette": "palette",
    "parse_colour": "palette",
    "MappedImage": "render.result",
    "map_picture": "render.mapping",
    "DITHERS": "render.dither",
    "dither_picture": "render.dither",
    "filtered_delta_e": "quality.perception",
    "save_error_map": "report.errormap",
    "load_ink_library": "separation.inks",
    "choose_inks": "separation.choice",
    "snap_palette": "separation.choice",
    "separate": "separation.plates",
    "Separation": "separation.plates",
    "run_batch": "batch.run",
    "QuantizeError": "errors",
    "ImageReadError": "errors",
    "PaletteFileError": "errors",
    "OutputError": "errors",
    "SeparationError": "errors",
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
    from quantize.batch.run import run_batch
    from quantize.colour.spaces import SPACES, delta_e_ciede2000, from_space, to_space
    from quantize.core.picture import Picture
    from quantize.core.sampling import ColourSample, sample_picture
    from quantize.errors import ImageReadError, OutputError, PaletteFileError, QuantizeError, SeparationError
    from quantize.fit.clustering import KMeansResult, kmeans
    from quantize.fit.engine import fit_palette
    from quantize.fit.settings import FitSettings
    from quantize.fit.sweep import sweep
    from quantize.fit.sweep_result import Sweep
    from quantize.io.read import as_picture, load_image
    from quantize.io.write import save_image
    from quantize.palette import Palette, parse_colour
    from quantize.quality.perception import filtered_delta_e
    from quantize.render.dither import DITHERS, dither_picture
    from quantize.render.mapping import map_picture
    from quantize.render.result import MappedImage
    from quantize.report.errormap import save_error_map
    from quantize.separation.choice import choose_inks, snap_palette
    from quantize.separation.inks import load_ink_library
    from quantize.separation.plates import Separation, separate

