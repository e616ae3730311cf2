"""``quantize reduce``: fit a palette to one image and write the reduced image."""

from __future__ import annotations

import time
from pathlib import Path

import click

from ._common import (
    _check_indexed_size,
    _check_outputs,
    _emit,
    _fit_kwargs,
    _fit_options,
    _fit_with_progress,
    _palette_rows,
    _print_de,
    _print_palette,
    _report_option,
    _report_targets,
    _run,
)
from .dither_options import dither_options, pop_dither_options, run_dither_outputs


@click.command()
@click.argument("image", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Reduced image: .png (indexed), .tif or .jpg.")
@_fit_options
@dither_options
@click.option("--keep-palette", is_flag=True, help="Also write the palette as OUTPUT-stem.palette.json beside it.")
@_report_option
@click.option("--force", is_flag=True, help="Replace existing outputs.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@click.pass_context
def reduce(ctx, image, output, keep_palette, report_dir, force, as_json, **fit_opts):
    """Fit a palette to IMAGE and write the reduced image to OUTPUT."""
    t0 = time.perf_counter()
    dopts = pop_dither_options(fit_opts)
    kwargs = _fit_kwargs(fit_opts)
    out = Path(output)
    pal_path = out.with_name(out.stem + ".palette.json") if keep_palette else None
    emap = [Path(dopts.error_map)] if dopts.error_map else []
    _check_outputs([out] + ([pal_path] if pal_path else []) + emap + _report_targets(report_dir), force, [image])
    _check_indexed_size(out, kwargs["k"])

    def work():
        from quantize.io.read import load_image
        from quantize.kernels.loading import warm_up

        warm_up()  # the compiled kernels load while the image decodes
        # Decode once: fitting, mapping, the ΔE figures and the report share the picture (and the
        # colour sample it keeps).
        pic = load_image(image) if kwargs["max_pixels"] is None else load_image(image, max_pixels=kwargs["max_pixels"])
        pal = _fit_with_progress(pic, kwargs)
        res = pal.apply(pic, **dopts.apply_kwargs(), metric=kwargs["metric"])
        res, dextra, dlines = run_dither_outputs(pic, res, dopts, force=force, inputs=[image])
        res.save(out, force=force, inputs=[image])
        if pal_path:
            pal.save(pal_path, force=force)
        if report_dir:
            from quantize.report.page import write_report

            write_report(report_dir, original_picture=pic, mapped=res, palette=pal,
                         error_map_path=dextra["error_map"],
                         title=f"quantize reduce: {Path(image).name}", force=force)
        return pal, res, dextra, dlines

    pal, res, dextra, dlines = _run(ctx, work)
    rows = _palette_rows(pal, res.coverage)
    summary = {
        "command": "reduce", "input": str(image), "k": pal.k, "rule": pal.fit["rule"],
        "reason": pal.fit["reason"], "space": pal.space, "delta_e": res.delta_e,
        "kmeans_cost": pal.fit["inertia"], "palette": rows,
        "outputs": [str(out)] + ([str(pal_path)] if pal_path else [])
                   + ([str(Path(report_dir) / "index.html")] if report_dir else []),
        "candidates": pal.fit.get("candidates", []),
        "notes": list(pal.fit.get("notes", [])), "seconds": round(time.perf_counter() - t0, 3),
        **dextra,
    }
    if dextra["error_map"]:
        summary["outputs"].append(dextra["error_map"])

    def human():
        click.echo(f"{image}: {pal.k} colours ({pal.fit['reason']})")
        if len(pal.fit.get("candidates", [])) > 1:
            from quantize.fit.sweep_result import format_table

            click.echo(format_table(pal.fit["candidates"], chosen=pal.k))
        _print_de("ΔE00 plain" if dopts.viewing else "ΔE00", res.delta_e)
        for line in dlines:
            click.echo(line)
        _print_palette(rows)
        for n in summary["notes"]:
            click.echo(f"note: {n}")
        click.echo("wrote " + ", ".join(summary["outputs"]))

    _emit(as_json, summary, human)
