"""``quantize apply``: a saved palette onto images."""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path

import click

from ._common import (
    _cmyk_profile_option,
    _output_folder,
    _check_outputs,
    _emit,
    _Failure,
    _max_pixels_option,
    _nearest_option,
    _of_the_file,
    _palette_rows,
    _print_de,
    _print_palette,
    _progress,
    _report_option,
    _report_targets,
    _run,
)
from .dither_options import (dither_options, error_map_paths, jpeg_error_map, pop_dither_options,
                             run_dither_outputs)


@click.command()
@click.argument("palette", type=click.Path(exists=True, dir_okay=False))
@click.argument("images", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", "outdir", required=True, callback=_output_folder, type=click.Path(file_okay=False),
              help="Folder for the reduced images (created if missing).")
@click.option("--format", "fmt", type=click.Choice(("png", "webp", "gif", "tif", "jpg")), default="png",
              show_default=True, help="Output file type: indexed PNG, lossless WebP, GIF, RGB TIFF or JPEG.")
@_nearest_option
@_max_pixels_option
@dither_options
@_report_option
@click.option("--force", is_flag=True, help="Replace existing outputs.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@_cmyk_profile_option
@click.pass_context
def apply(ctx, palette, images, outdir, fmt, nearest, max_pixels, report_dir, force, as_json, **dither_opts):
    """Map IMAGES onto a saved PALETTE (no refit) and write them to a folder."""
    from quantize.palette import Palette

    t0 = time.perf_counter()
    dopts = pop_dither_options(dither_opts)
    maps = error_map_paths(dopts, images)
    od = Path(outdir)
    outs = [od / (Path(im).stem + "." + fmt) for im in images]
    if len(set(outs)) != len(outs):
        raise _Failure("two inputs share a file name; their outputs would collide")
    if od.exists():
        _check_outputs(outs, force, list(images) + [palette])
    if report_dir:
        _check_outputs(_report_targets(report_dir), force, list(images) + [palette])
    if dopts.error_map:
        _check_outputs(maps, force, list(images) + [palette])

    def work():
        from quantize.errors import QuantizeError
        from quantize.io.read import check_image_file
        pal = Palette.load(palette)
        for im in images:  # a file that is not an image stops the run before any output
            check_image_file(im, max_pixels=max_pixels)
        od.mkdir(parents=True, exist_ok=True)
        results, extras, pictures = [], [], []
        inputs = list(images) + [palette]
        with _progress(len(images), "mapping") as bar:
            for im, out, emap in zip(images, outs, maps):
                try:
                    pic, res, saved, dextra, dlines = _map_one(pal, im, out, emap, dopts, nearest, max_pixels,
                                                               force=force, inputs=inputs)
                except QuantizeError as exc:
                    if results:  # damage found only when decoding: say what is already written
                        done = ", ".join(str(o) for o in outs[:len(results)])
                        raise QuantizeError(f"{exc}; written before it ({len(results)} of {len(images)}): "
                                            f"{done}") from exc
                    raise
                results.append(res)
                extras.append((*_of_the_file(saved, dextra, dlines), saved))
                if report_dir:
                    # The page needs the pixels, not the colour sample the picture keeps: a copy
                    # (same read-only arrays, empty cache) lets the sample go with this image.
                    pictures.append(dataclasses.replace(pic))
                bar.update(1)
        if report_dir:
            from quantize.report.page import write_report

            write_report(report_dir, original_picture=pictures, mapped=results, palette=pal,
                         written=[sv for *_, sv in extras],  # a JPEG's page shows the JPEG as written
                         title=f"quantize apply: {Path(palette).name}", force=force)
        return pal, results, extras

    pal, results, extras = _run(ctx, work)
    per_image = [{"input": str(im), "output": str(out), "delta_e": sv.delta_e, "file": sv.to_dict(),
                  "coverage": [round(float(c), 3) for c in sv.coverage], **ex}
                 for im, out, r, (ex, _, sv) in zip(images, outs, results, extras)]
    summary = {"command": "apply", "palette_file": str(palette), "k": pal.k, "rule": "saved palette",
               "palette": _palette_rows(pal), "images": per_image, "outputs": [str(o) for o in outs],
               "seconds": round(time.perf_counter() - t0, 3)}

    def human():
        click.echo(f"{palette}: {pal.k} colours")
        _print_palette(_palette_rows(pal))
        for row, (_, lines, sv) in zip(per_image, extras):
            jpeg = " (of the decoded JPEG)" if sv.file.lossy else ""
            if row["delta_e"] is None:  # a JPEG measures opaque pixels only
                click.echo(f"{row['input']} -> {row['output']}  ΔE00: not measured (no fully opaque pixel)")
            else:
                _print_de(f"{row['input']} -> {row['output']}  ΔE00{jpeg}", row["delta_e"])
            for line in lines:
                click.echo(f"  {line}")
            click.echo(f"  wrote {sv.describe()}")

    _emit(as_json, summary, human)


def _map_one(pal, im, out, emap, dopts, nearest, max_pixels, *, force: bool, inputs: list):
    """Decode one input once, map it onto ``pal``, write it and its dither outputs: (picture, result, file, summary)."""
    from quantize.io.read import load_image

    # The one decode of this input: mapping, ΔE figures, error map and report share it.
    pic = load_image(im) if max_pixels is None else load_image(im, max_pixels=max_pixels)
    res = pal.apply(pic, **dopts.apply_kwargs(), nearest=nearest)
    # A JPEG's error map is drawn from the JPEG as written, so it waits for the file.
    late_map = emap if Path(out).suffix.lower() in (".jpg", ".jpeg") else None
    res, dextra, dlines = run_dither_outputs(
        pic, res, dataclasses.replace(dopts, error_map=None) if late_map else dopts, force=force,
        inputs=inputs, error_map_path=None if late_map else emap)
    saved = res.write(out, picture=pic, force=force, inputs=inputs)
    if late_map:
        jpeg_error_map(dopts, late_map, pic, saved, dextra, dlines, force=force, inputs=inputs)
    return pic, res, saved, dextra, dlines
