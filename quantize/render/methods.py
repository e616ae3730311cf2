"""The dithering methods by name: one table, no numpy.

:data:`DITHERS` maps each name to a :class:`DitherMethod` (its kind, its
diffusion weights or threshold matrix, and the paper it comes from).  The
command line reads the names from here for ``--help`` without loading numpy;
:mod:`quantize.render.dither` runs the methods.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["DITHERS", "DEFAULT_MODULATION", "DitherMethod", "check_dither", "check_modulation", "check_strength",
           "describe", "number_option", "scan_of"]

#: Threshold modulation of error diffusion, in L* units (peak to peak): the
#: lightness the choice of colour is moved by, at most, at strength 1.
#: Off by default: measured, it breaks the worms of smooth gradients but
#: raises the filtered ΔE00 of photographs (docs/dithering.md, "Threshold modulation").
DEFAULT_MODULATION = 0.0

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


def describe(name: str, *, strength: float = 1.0, serpentine: bool = True) -> str:
    """One line saying what the method called ``name`` does, for a command's summary.

    Examples
    --------
    >>> describe("bayer4")
    'bayer4 at strength 1: ordered, 4 x 4 Bayer matrix, two palette colours mixed in linear light'
    >>> describe("stucki", strength=0.5, serpentine=False)
    'stucki at strength 0.5: error diffusion, raster scan (error in linear light)'
    """
    m = check_dither(name)
    head = f"{m.name} at strength {strength:g}"
    if m.kind == "none":
        return "no dither: nearest colour"
    if m.kind == "diffusion":
        return f"{head}: error diffusion, {'serpentine' if serpentine else 'raster'} scan (error in linear light)"
    matrix = m.matrix or ""  # every ordered method names its matrix
    what = {"blue-noise": "64 x 64 blue-noise mask", "clustered-dot": "8 x 8 clustered-dot cell"}.get(
        matrix, f"{matrix[5:]} x {matrix[5:]} Bayer matrix")
    return f"{head}: ordered, {what}, two palette colours mixed in linear light"


def scan_of(name: str, serpentine: bool) -> bool | None:
    """What a record says of the scan: ``serpentine`` for error diffusion, None for a method that scans nothing.

    >>> scan_of("floyd-steinberg", True), scan_of("bayer4", True), scan_of("none", False)
    (True, None, None)
    """
    return bool(serpentine) if check_dither(name).kind == "diffusion" else None


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


def number_option(value, default: float, accept, what: str) -> float:
    """``value`` as a float if ``accept(value)``, ``default`` for None; else a ValueError saying ``what`` it must be.

    One validator for the dither's numeric options (NaN is refused by every
    ``accept`` written as a comparison).
    """
    if value is None:
        return default
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = float("nan")
    if not accept(number):
        raise ValueError(f"{what}, got {value!r}")
    return number


def check_modulation(modulation) -> float:
    """``modulation`` (L* units, >= 0) as a float; None means :data:`DEFAULT_MODULATION`."""
    return number_option(modulation, DEFAULT_MODULATION, lambda v: 0.0 <= v < float("inf"),
                         "threshold modulation must be a number of L* units >= 0")