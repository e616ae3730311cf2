"""The fixed sets of names the public API takes, as types for type checkers.

The values are checked at run time where they are used (an unknown name is a
ValueError naming the choices); these ``Literal`` types let a type checker
catch a misspelt name before the run. tests/test_typing.py checks that each
stays in step with the table the code checks against.
"""

from __future__ import annotations

from typing import Literal

__all__ = ["DitherName", "NearestName", "SeedingName"]

#: Dither methods (keys of :data:`quantize.render.dither.DITHERS`).
DitherName = Literal["none", "floyd-steinberg", "jarvis-judice-ninke", "stucki", "bayer2", "bayer4", "bayer8",
                     "blue-noise", "clustered-dot"]
#: Nearest-colour rules of a mapping ("auto": by the dither; the others: :data:`quantize.fit.assign.METRICS`).
NearestName = Literal["auto", "ciede2000", "space"]
#: Seedings of :func:`quantize.fit.clustering.kmeans`.
SeedingName = Literal["k-means++", "random", "farthest"]
