"""Command-line options of the dithering stage, for ``reduce``, ``apply`` and ``batch``.

Only click is imported at the top, so ``quantize --help`` stays fast; the
library is imported inside the functions.  Use::

    @dither_options
    def reduce(ctx, ..., **opts):
        choice = pop_dither_options(opts)          # before the other options are read
        pic = load_image(image)                    # the one decode of the input
        res = pal.apply(pic, **choice.apply_kwargs(), nearest=...)
        res, extra, lines = run_dither_outputs(pic, res, choice, force=force, inputs=[image])
        summary.update(extra)                      # JSON: dither, delta_e_filtered, viewing, error_map
        for line in lines: click.echo(line)        # human summary
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import click

from quantize.render.methods import DITHERS

__all__ = [
    "DITHER_NAMES",
    "DitherChoice",
    "dither_method_options",
    "dither_options",
    "error_map_paths",
    "pop_dither_options",
    "run_dither_outputs",
]

#: Names of the dithering methods, read from the table that defines them
#: (quantize.render.methods imports no numpy, so --help stays fast).
DITHER_NAMES = tuple(DITHERS)
_KEYS = ("dither", "dither_strength", "serpentine", "view_dpi", "view_distance", "error_map", "error_map_kind")


@dataclass(frozen=True)
class DitherChoice:
    """The dithering options of one command invocation."""

    dither: str = "none"
    strength: float = 1.0
    serpentine: bool = True
    view_dpi: float | None = None
    view_distance: float | None = None
    error_map: str | None = None
    error_map_kind: Literal["plain", "filtered"] = "plain"

    @property
    def viewing(self) -> bool:
        """True when a viewing condition was given (filtered ΔE00 is reported)."""
        return self.view_dpi is not None

    def apply_kwargs(self) -> dict:
        """Keyword arguments for ``Palette.apply`` / ``map_picture``."""
        return {"dither": self.dither, "dither_strength": self.strength, "serpentine": self.serpentine}

    def fit_settings(self, settings):
        """``settings`` (a FitSettings) for a palette this dither will follow: fitted for it when one does."""
        if self.dither == "none" or self.strength == 0.0:
            return settings
        from quantize.fit.settings import FitSettings

        return FitSettings.of(settings, for_dither=True)


#: The defaults of every option: the command line's and pop_dither_options' one source.
_DEFAULT = DitherChoice()


def _check(choice: DitherChoice) -> DitherChoice:
    if (choice.view_dpi is None) != (choice.view_distance is None):
        raise click.UsageError("--view-dpi and --view-distance go together: give both, or neither")
    if choice.viewing:  # refused before any work, not after the image is written
        from quantize.quality.perception import viewing_ppd

        try:
            viewing_ppd(dpi=choice.view_dpi, distance_mm=choice.view_distance)
        except ValueError as exc:
            raise click.UsageError(f"--view-dpi and --view-distance: {exc}") from None
    if choice.error_map_kind == "filtered" and not choice.viewing:
        raise click.UsageError("--error-map-kind filtered needs --view-dpi and --view-distance")
    if choice.error_map is not None and Path(choice.error_map).suffix.lower() != ".png":
        raise click.BadParameter(f"{choice.error_map!r}: the error map is written as PNG; name it *.png",
                                 param_hint="'--error-map'")
    if choice.error_map is not None:
        from quantize.report.plotlib import PlotsUnavailable, require_matplotlib

        try:
            require_matplotlib("--error-map")  # matplotlib is the optional "plots" extra
        except PlotsUnavailable as exc:
            raise click.UsageError(str(exc)) from None
    return choice


def _method_options() -> list:
    return [
        click.option("--dither", type=click.Choice(DITHER_NAMES, case_sensitive=False), default=_DEFAULT.dither,
                     show_default=True, help="Dithering method (error diffusion, ordered or clustered-dot)."),
        click.option("--dither-strength", type=click.FloatRange(0.0, 1.0), default=_DEFAULT.strength, show_default=True,
                     help="Share of the dither, 0 (none) to 1 (full)."),
        click.option("--serpentine/--raster", default=_DEFAULT.serpentine, show_default=True,
                     help="Error diffusion scans alternate rows backwards, or every row left to right."),
    ]


def dither_method_options(f):
    """Decorator adding --dither, --dither-strength and --serpentine/--raster only: for commands
    (``batch``) that write no per-image viewing report or error map."""
    for opt in reversed(_method_options()):
        f = opt(f)
    return f


def dither_options(f):
    """Decorator adding --dither, --dither-strength, --serpentine/--raster,
    --view-dpi, --view-distance, --error-map and --error-map-kind."""
    opts = _method_options() + [
        click.option("--view-dpi", type=click.FloatRange(min=0.0, max=10_000, min_open=True), default=None,
                     metavar="DPI",
                     help="Output resolution for the filtered (S-CIELAB) ΔE00 report."),
        click.option("--view-distance", type=click.FloatRange(min=10.0, max=100_000), default=None, metavar="MM",
                     help="Viewing distance in mm for the filtered ΔE00 report."),
        click.option("--error-map", type=click.Path(dir_okay=False), default=None, metavar="FILE.png",
                     help="Also write a picture of per-pixel ΔE00 with its colour scale (needs matplotlib: "
                          "the plots extra)."),
        click.option("--error-map-kind", type=click.Choice(("plain", "filtered")), default=_DEFAULT.error_map_kind,
                     show_default=True, help="Plain ΔE00, or filtered as seen at the viewing condition."),
    ]
    for opt in reversed(opts):
        f = opt(f)
    return f


def pop_dither_options(opts: dict) -> DitherChoice:
    """Remove the dithering options from a command's ``**opts`` and return them checked.

    Raises
    ------
    click.UsageError
        --view-dpi without --view-distance (or the reverse), or a filtered
        error map without a viewing condition.
    """
    got = {k: opts.pop(k) for k in _KEYS if k in opts}
    choice = DitherChoice(
        dither=str(got.get("dither", _DEFAULT.dither)).lower(),
        strength=float(got.get("dither_strength", _DEFAULT.strength)),
        serpentine=bool(got.get("serpentine", _DEFAULT.serpentine)),
        view_dpi=got.get("view_dpi", _DEFAULT.view_dpi),
        view_distance=got.get("view_distance", _DEFAULT.view_distance),
        error_map=got.get("error_map", _DEFAULT.error_map),
        error_map_kind=got.get("error_map_kind", _DEFAULT.error_map_kind),
    )
    return _check(choice)


def error_map_paths(choice: DitherChoice, images) -> list[Path | None]:
    """Error-map file for each input: FILE.png itself for one image, else
    FILE-<image stem>.png beside it (so several inputs never collide)."""
    images = list(images)
    if choice.error_map is None:
        return [None] * len(images)
    base = Path(choice.error_map)
    if len(images) == 1:
        return [base]
    return [base.with_name(f"{base.stem}-{Path(im).stem}{base.suffix}") for im in images]


def run_dither_outputs(image, result, choice: DitherChoice, *, force: bool = False, inputs=(),
                       error_map_path=None):
    """Filtered ΔE00 and the error map for one reduced image.

    Parameters
    ----------
    image : Picture
        The input (the original pixels), as the command decoded it.
    result : MappedImage
        What ``Palette.apply`` returned for it.
    choice : DitherChoice
    force : bool
        Replace an existing error map.
    inputs : sequence of paths
        Files the error map must never overwrite.
    error_map_path : path, optional
        Overrides ``choice.error_map`` (see :func:`error_map_paths`).

    Returns
    -------
    result : MappedImage
        With ``filtered`` (the filtered ΔE00 and its viewing condition) when
        a viewing condition was given.
    summary : dict
        For the JSON summary: ``dither`` (name, strength, serpentine),
        ``delta_e_filtered`` and ``viewing`` (or None), ``error_map`` (path
        or None).
    lines : list of str
        For the human summary, each naming which ΔE it reports.
    """
    from quantize.render.methods import scan_of

    summary: dict[str, Any] = {
        # An ordered dither or none scans nothing: its serpentine is null, not the option's default.
        "dither": {"method": choice.dither, "strength": choice.strength,
                   "serpentine": scan_of(choice.dither, choice.serpentine)},
        "delta_e_filtered": None, "viewing": None, "error_map": None}
    lines = []
    if choice.dither != "none":
        from quantize.render.methods import describe

        lines.append("dither: " + describe(choice.dither, strength=choice.strength, serpentine=choice.serpentine))
    filtered = None  # the filtered ΔE00 map: measured once, for the statistics and the error map
    if choice.viewing:
        from quantize.quality.perception import delta_e_map, with_filtered_delta_e

        viewing = {"dpi": choice.view_dpi, "distance_mm": choice.view_distance}
        filtered = delta_e_map(image, result, kind="filtered", **viewing)
        result = with_filtered_delta_e(image, result, **viewing, pixel_delta_e=filtered)
        s, v = result.filtered.stats, result.filtered.viewing
        summary["delta_e_filtered"], summary["viewing"] = s, v
        lines.append(f"ΔE00 filtered (S-CIELAB, {v['dpi']:g} dpi at {v['distance_mm']:g} mm, "
                     f"{v['ppd']:.1f} px/degree): mean {s['mean']:.2f}  median {s['median']:.2f}  "
                     f"p95 {s['p95']:.2f}  max {s['max']:.2f}")
    target = error_map_path if error_map_path is not None else choice.error_map
    if target is not None:
        from quantize.report.errormap import save_error_map

        save_error_map(target, image, result, kind=choice.error_map_kind, dpi=choice.view_dpi,
                       distance_mm=choice.view_distance, force=force, inputs=inputs,
                       pixel_delta_e=filtered if choice.error_map_kind == "filtered" else None)
        summary["error_map"] = str(target)
        lines.append(f"error map ({choice.error_map_kind} ΔE00): {target}")
    return result, summary, lines


def jpeg_error_map(dopts, path, pic, saved, dextra: dict, dlines: list, *, force: bool, inputs) -> None:
    """Write the error map of a JPEG output at ``path``, drawn from the JPEG as written (so after the file).

    ``dextra`` and ``dlines`` (the summary of :func:`run_dither_outputs`) then name it.
    """
    from quantize.report.errormap import save_file_error_map

    save_file_error_map(path, pic, saved, kind=dopts.error_map_kind, dpi=dopts.view_dpi,
                        distance_mm=dopts.view_distance, force=force, inputs=inputs)
    dextra["error_map"] = str(path)
    dlines.append(f"error map ({dopts.error_map_kind} ΔE00, of the JPEG as written): {path}")
