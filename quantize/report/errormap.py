"""The error map: a picture of per-pixel ΔE00 with its colour scale drawn in.

The map keeps the image's own pixel grid (one map pixel per image pixel, no
resampling), coloured by a perceptually ordered colour map from dark (exact)
to bright (far off).  Below it a legend strip shows the colour scale with its
ΔE00 ticks, which ΔE was mapped (plain, or S-CIELAB filtered with the viewing
condition) and the statistics.  Fully transparent pixels are mid grey.  The
scale is fixed (0 to ``vmax``, 10 by default, values above shown at the top
colour) so maps of different runs compare directly.  matplotlib draws the
legend and is imported only here, inside the functions; it is the optional
``plots`` extra, asked for by name when missing (:mod:`quantize.report.plotlib`).
"""

from __future__ import annotations

import io
from pathlib import Path
from typing import TYPE_CHECKING, Iterable, Literal

import numpy as np

from .plotlib import require_matplotlib

if TYPE_CHECKING:
    from quantize.core.picture import ImageInput
    from quantize.io.write import PathLike
    from quantize.render.result import MappedImage

__all__ = ["COLOUR_MAP", "ERROR_MAP_KINDS", "error_map_image", "save_error_map", "save_file_error_map"]

#: Kinds of ΔE the map can show.
ERROR_MAP_KINDS = ("plain", "filtered")
#: matplotlib colour map of the scale: perceptually ordered, dark = exact.
COLOUR_MAP = "inferno"
_TRANSPARENT = np.array([128, 128, 128], dtype=np.uint8)
_LEGEND_HEIGHT = 96
_LEGEND_MIN_WIDTH = 560


def _legend(width: int, vmax: float, title: str, stats_line: str) -> np.ndarray:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    dpi = 100
    fig = Figure(figsize=(width / dpi, _LEGEND_HEIGHT / dpi), dpi=dpi, facecolor="white")
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_axes((0.04, 0.52, 0.92, 0.18))
    bar = fig.colorbar(ScalarMappable(norm=Normalize(0.0, vmax), cmap=COLOUR_MAP), cax=ax,
                       orientation="horizontal", extend="max")
    bar.ax.tick_params(labelsize=8)
    fig.text(0.04, 0.80, title, fontsize=9, ha="left", va="center")
    fig.text(0.04, 0.10, stats_line, fontsize=8, ha="left", va="center")
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    return rgba[..., :3].copy()


def error_map_image(original: ImageInput, mapped: MappedImage | np.ndarray, *,
                    kind: Literal["plain", "filtered"] = "plain", dpi: float | None = None,
                    distance_mm: float | None = None, ppd: float | None = None, vmax: float = 10.0,
                    pixel_delta_e: np.ndarray | None = None) -> np.ndarray:
    """The error map as an 8-bit RGB array.

    Parameters
    ----------
    original : Picture, path, PIL image or ndarray
        The image before reduction.
    mapped : MappedImage or ndarray (H, W, 3)
        The reduced image.
    kind : {"plain", "filtered"}, default="plain"
        Per-pixel ΔE00, or S-CIELAB filtered ΔE00 (needs the viewing
        condition: ``dpi`` and ``distance_mm``, or ``ppd``).
    vmax : float, default=10.0
        ΔE00 at the top of the colour scale (common practice, no source:
        about 1 is just noticeable side by side, above 5 is a different colour).
    pixel_delta_e : ndarray of shape (H, W), optional
        The map of this ``kind`` already computed by
        :func:`quantize.quality.perception.delta_e_map` for this pair and
        viewing condition: drawn as it is instead of being measured again
        (a filtered map costs two S-CIELAB filterings).

    Returns
    -------
    ndarray of shape (H + 96, max(W, 560), 3), uint8
        The map on top (left-aligned, white beyond its width) and the
        legend strip below.

    Raises
    ------
    ValueError
        Unknown kind, non-positive ``vmax``, or a missing or non-positive
        viewing condition for ``"filtered"``.

    References
    ----------
    .. [1] X. Zhang and B. A. Wandell, "A spatial extension of CIELAB for
       digital color image reproduction", SID Symposium Digest 27, 731-734, 1996.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((20, 30, 3), np.uint8)
    >>> error_map_image(img, img).shape  # doctest: +SKIP
    (116, 560, 3)
    """
    require_matplotlib("the error map")
    from matplotlib import colormaps

    from quantize.quality.perception import check_map_shape, delta_e_map, pixel_delta_e_stats, viewing_ppd

    if kind not in ERROR_MAP_KINDS:
        raise ValueError(f"unknown error-map kind {kind!r}; valid names: {', '.join(ERROR_MAP_KINDS)}")
    if not (isinstance(vmax, (int, float)) and np.isfinite(vmax) and vmax > 0):
        raise ValueError(f"error-map scale top (vmax) must be a positive number, got {vmax!r}")
    if pixel_delta_e is None:
        de = delta_e_map(original, mapped, kind=kind, dpi=dpi, distance_mm=distance_mm, ppd=ppd)
    else:
        # An array, or a MappedImage's indices (mypy cannot follow getattr's default).
        de = check_map_shape(pixel_delta_e, np.shape(getattr(mapped, "indices", mapped))[:2])  # type: ignore[arg-type]
    clear = np.isnan(de)
    lut = (np.asarray(colormaps[COLOUR_MAP](np.linspace(0.0, 1.0, 256)))[:, :3] * 255 + 0.5).astype(np.uint8)
    level = np.rint(np.clip(np.nan_to_num(de) / vmax, 0.0, 1.0) * 255).astype(np.intp)
    picture = lut[level]
    picture[clear] = _TRANSPARENT
    if kind == "plain":
        title = "ΔE00 per pixel (plain CIEDE2000)"
    else:
        ppd_value = viewing_ppd(dpi=dpi, distance_mm=distance_mm, ppd=ppd)
        where = f"{dpi:g} dpi at {distance_mm:g} mm, " if ppd is None else ""
        title = f"ΔE00 per pixel, S-CIELAB filtered ({where}{ppd_value:.1f} px/degree)"
    if clear.all():
        stats_line = "no opaque pixels"
    else:
        s = pixel_delta_e_stats(de[~clear])
        stats_line = (f"mean {s['mean']:.2f}   median {s['median']:.2f}   p95 {s['p95']:.2f}   "
                      f"max {s['max']:.2f}" + ("   grey: transparent" if clear.any() else ""))
    h, w = de.shape
    width = max(w, _LEGEND_MIN_WIDTH)
    canvas = np.full((h + _LEGEND_HEIGHT, width, 3), 255, dtype=np.uint8)
    canvas[:h, :w] = picture
    legend = _legend(width, float(vmax), title, stats_line)
    canvas[h:, :] = legend[:_LEGEND_HEIGHT, :width]
    return canvas


def save_error_map(path: PathLike, original: ImageInput, mapped: MappedImage | np.ndarray, *,
                   kind: Literal["plain", "filtered"] = "plain", dpi: float | None = None,
                   distance_mm: float | None = None, ppd: float | None = None, vmax: float = 10.0,
                   force: bool = False, inputs: Iterable[PathLike] = (),
                   pixel_delta_e: np.ndarray | None = None) -> Path:
    """Write :func:`error_map_image` as a PNG file, atomically.

    The parameters are those of :func:`error_map_image`, and ``force`` and
    ``inputs``.

    Raises
    ------
    OutputError
        The file exists and ``force`` is false, is one of ``inputs``, or
        cannot be written.
    ValueError
        As :func:`error_map_image`.
    quantize.report.plotlib.PlotsUnavailable
        matplotlib is not installed (the ``plots`` extra); nothing is written.
    """
    from PIL import Image

    from quantize.io.write import atomic_write_bytes

    image = error_map_image(original, mapped, kind=kind, dpi=dpi, distance_mm=distance_mm, ppd=ppd, vmax=vmax,
                            pixel_delta_e=pixel_delta_e)
    buf = io.BytesIO()
    Image.fromarray(image).save(buf, format="PNG")
    atomic_write_bytes(path, buf.getvalue(), force=force, inputs=inputs)
    return Path(path)


def save_file_error_map(path: PathLike, original, saved, *, kind: Literal["plain", "filtered"] = "plain",
                        dpi: float | None = None, distance_mm: float | None = None, ppd: float | None = None,
                        vmax: float = 10.0, force: bool = False, inputs: Iterable[PathLike] = ()) -> Path:
    """Write the error map of a file as written (:class:`quantize.render.result.SavedImage`), atomically.

    A lossless file holds the mapping's pixels, so its map is the mapping's.
    A JPEG does not: its map is drawn from the decoded JPEG, over the
    input's fully opaque pixels (the others are flattened onto white and
    shown transparent grey), the same pixels its reported ΔE00 is measured
    on.  Parameters as :func:`save_error_map`, with ``original`` a Picture.

    Raises
    ------
    ValueError
        ``saved`` describes a lossless file whose pixels are not at hand
        (use :func:`save_error_map` with the mapped image), or as
        :func:`error_map_image`.
    """
    from quantize.quality.perception import delta_e_map

    decoded = saved.file.decoded
    if decoded is None:
        raise ValueError(f"{saved.file.path}: a lossless file; its error map is the mapping's (save_error_map)")
    de = delta_e_map(original, decoded, kind=kind, dpi=dpi, distance_mm=distance_mm, ppd=ppd)
    if original.alpha is not None:
        de[original.alpha < original.max_code] = np.nan
    return save_error_map(path, original, decoded, kind=kind, dpi=dpi, distance_mm=distance_mm, ppd=ppd,
                          vmax=vmax, force=force, inputs=inputs, pixel_delta_e=de)
