"""Assigning colours to palette entries: the nearest-colour metrics and the sample mapping.

The fit stage measures each candidate palette with the same assignment the
render stage later uses for every pixel, so both take it from here.
"""

from __future__ import annotations

import numpy as np

from quantize.kernels.nearest import assign_nearest, ciede2000_to, nearest_ciede2000

__all__ = ["METRICS", "check_metric", "resolve_metric", "map_sample"]

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


def map_sample(sample, palette, *, metric: str = "space", compiled_always: bool = False
               ) -> tuple[np.ndarray, np.ndarray]:
    """Map the distinct colours of a sample onto a palette.

    A mapping the fit kept with the sample for this palette and metric
    (:meth:`ColourSample.keep_mapping`) is returned as it is.
    ``compiled_always`` runs the compiled CIEDE2000 loops whatever the size
    (:func:`quantize.kernels.nearest.nearest_ciede2000`).

    Returns
    -------
    labels : ndarray of shape (n,)
        Palette index of each distinct colour.
    delta_e : ndarray of shape (n,)
        CIEDE2000 of each distinct colour to its palette colour.
    """
    kept = sample.kept_mapping(palette, metric)
    if kept is not None:
        return kept
    lab = sample.points("lab")
    if metric == "ciede2000":
        return nearest_ciede2000(lab, palette.lab, compiled_always=compiled_always)
    labels = assign_nearest(sample.points(palette.space), palette.points())[0]
    return labels, ciede2000_to(lab, palette.lab, labels, compiled_always=compiled_always)
