"""``quantize reduce``: fit a palette to one image and write the reduced image."""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path

import click

from ._common import (
    _cmyk_profile_option,
    _output_file,
    _check_indexed_size,
    _check_room_for_transparency,
    _check_outputs,
    _emit,
    _of_the_file,
    _fit_options,
    _fit_settings,
    _fit_with_progress,
    _judgement_summary,
    _palette_rows,
    _print_de,
    _print_judgement,
    _print_palette,
    _report_option,
    _report_targets,
    _run,
    _warn_unmet_target,
)
from .dither_options import dither_options, jpeg_error_map, pop_dither_options, run_dither_outputs


@click.command()
@click.argument("image", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", required=True, callback=_output_file, type=click.Path(dir_okay=False),
              help="Reduced image: .png (indexed), .webp (lossless), .gif, .tif or .jpg.")
@_fit_options
@dither_options
@click.option("--keep-palette", is_flag=True, help="Also write the palette as OUTPUT-stem.palette.json beside it.")
@_report_option
@click.option("--force", is_flag=True, help="Replace existing outputs.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@_cmyk_profile_option
@click.pass_context
def reduce(ctx, image, output, keep_palette, report_dir, force, as_json, **fit_opts):
    """Fit a palette to IMAGE and write the reduced image to OUTPUT."""
    t0 = time.perf_counter()
    dopts = pop_dither_options(fit_opts)
    settings = dopts.fit_settings(_fit_settings(fit_opts))  # a dither gets a palette fitted for it
    k, max_pixels = fit_opts["colours"], fit_opts["max_pixels"]
    out = Path(output)
    from quantize.io.write import SAVE_FORMATS

    if out.suffix.lower() not in SAVE_FORMATS:  # refused before the fit, not after it
        raise click.BadParameter(f"{output}: unsupported output extension {out.suffix or '(none)'!r}; "
                                 f"use one of {', '.join(SAVE_FORMATS)}", param_hint="'-o' / '--output'")
    pal_path = out.with_name(out.stem + ".palette.json") if keep_palette else None
    emap = [Path(dopts.error_map)] if dopts.error_map else []
    _check_outputs([out] + ([pal_path] if pal_path else []) + emap + _report_targets(report_dir), force, [image])
    _check_indexed_size(out, k)

    def work():
        from quantize.io.read import load_image

        # Load once: fitting and mapping share the picture and its colour sample.
        pic = load_image(image) if max_pixels is None else load_image(image, max_pixels=max_pixels)
        _check_room_for_transparency(out, k, pic)  # before the fit, not after it
        from quantize.fit.index_room import sizes_with_room
        from quantize.io.write import needs_clear_entry

        # A range reaching 256 leaves the transparent pixels their index entry: its top is lowered first.
        k_fit, room_note = sizes_with_room(k, settings, reserve=int(needs_clear_entry(out, pic.alpha, pic.max_code)),
                                           picture=pic)
        pal = _fit_with_progress(pic, k_fit, settings, max_pixels)
        res = pal.apply(pic, **dopts.apply_kwargs(), nearest=fit_opts["nearest"])
        from quantize.io.write import SAVE_FORMATS, publish_together

        # A JPEG's error map is drawn from the JPEG as written, so it waits for the file.
        lossy = SAVE_FORMATS[out.suffix.lower()] == "JPEG"
        res, dextra, dlines = run_dither_outputs(pic, res, dataclasses.replace(dopts, error_map=None) if lossy
                                                 else dopts, force=force, inputs=[image])
        with publish_together():  # the image and its palette land together, or neither does
            saved = res.write(out, picture=pic, force=force, inputs=[image])
            if pal_path:
                pal.save(pal_path, force=force)
        if lossy and dopts.error_map:
            jpeg_error_map(dopts, dopts.error_map, pic, saved, dextra, dlines, force=force, inputs=[image])
        if report_dir:
            from quantize.report.page import write_report

            write_report(report_dir, original_picture=pic, mapped=res, palette=pal, written=saved,
                         error_map_path=dextra["error_map"],
                         more_sizes=_untried_sizes(pic, k_fit if isinstance(k_fit, str) else k, pal, settings),
                         title=f"quantize reduce: {Path(image).name}", force=force)
        return pal, res, saved, dextra, dlines, room_note

    pal, res, saved, dextra, dlines, room_note = _run(ctx, work)
    dextra, dlines = _of_the_file(saved, dextra, dlines)
    rows = _palette_rows(pal, saved.coverage)
    summary = {
        "command": "reduce", "input": str(image), "k": pal.k, "rule": pal.fit.rule,
        "reason": pal.fit.reason, "space": pal.space, "delta_e": saved.delta_e, "file": saved.to_dict(),
        "kmeans_cost": pal.fit.inertia, "palette": rows,
        "outputs": [str(out)] + ([str(pal_path)] if pal_path else [])
                   + ([str(Path(report_dir) / "index.html")] if report_dir else []),
        "candidates": [c.to_dict() for c in pal.fit.candidates],
        "notes": ([room_note] if room_note else []) + list(pal.fit.notes),
        "seconds": round(time.perf_counter() - t0, 3),
        **_judgement_summary(pal.fit), **dextra,
    }
    if dextra["error_map"]:
        summary["outputs"].append(dextra["error_map"])

    def human():
        _print_summary(image, pal, settings, saved, dopts, dlines, rows, summary)

    _warn_unmet_target(pal.fit)
    _emit(as_json, summary, human)

def _print_summary(image, pal, settings, saved, dopts, dlines: list, rows: list, summary: dict) -> None:
    """The human-readable summary of a reduction: size and why, ΔE00, the dither's lines, the palette, the files."""
    click.echo(f"{image}: {pal.k} colours ({pal.fit.reason})")
    _print_judgement(pal.fit, settings.target)
    if len(pal.fit.candidates) > 1:
        from quantize.fit.sweep_result import format_table

        click.echo(format_table(pal.fit.candidates, chosen=pal.k))
    if saved.delta_e is None:  # a JPEG measures opaque pixels only
        click.echo("ΔE00: not measured (the file has no fully opaque pixel to compare)")
    else:
        _print_de("ΔE00 plain" if dopts.viewing else "ΔE00", saved.delta_e)
    if saved.file.lossy and saved.delta_e is not None:
        click.echo("  (ΔE00 of the JPEG as written and decoded again: it is no longer the palette's colours)")
    for line in dlines:
        click.echo(line)
    _print_palette(rows)
    for n in summary["notes"]:
        click.echo(f"note: {n}")
    click.echo("wrote " + saved.describe())
    if len(summary["outputs"]) > 1:
        click.echo("wrote " + ", ".join(summary["outputs"][1:]))



def _untried_sizes(pic, k: str | None, pal, settings) -> list:
    """The sizes of the range ``-k`` the fit's rule did not try, fitted for the review page's slider.

    Every size tried keeps its palette from the fit (the page shows those as
    they are); a rule that searched the range (the automatic rule on a photo
    or on artwork with fewer inks than the range's top) left the others out.
    Each is fitted on its own random stream, so it is the palette a fixed
    ``-k`` of that size gives.
    """
    if k is None or "-" not in k:
        return []
    from quantize.core.sampling import sample_picture
    from quantize.fit.engine import parse_k
    from quantize.fit.settings import FitSettings
    from quantize.fit.sweep import sweep_sample

    sample = sample_picture(pic)
    tried = {c.k for c in pal.fit.candidates or () if c.palette is not None}
    untried = [j for j in parse_k(k) if j not in tried and j <= sample.n_colours]
    if not untried:
        return []
    # The rule does not matter here (no size is chosen): "bic" needs nothing the page lacks.
    return list(sweep_sample(sample, untried, FitSettings.of(settings, rule="bic")).rows)
