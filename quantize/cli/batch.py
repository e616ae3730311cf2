"""``quantize batch``: a whole folder tree, one palette per image or one for the set.

Thin: parse the options, call :func:`quantize.batch.run.run_batch`, print the
summary.  Only click is imported at start-up.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import click

# Choices and defaults from the library's settings module, which imports nothing heavy.
from quantize.batch.settings import DEFAULT_WORST, FORMATS, WEIGHTINGS

from ._common import _cmyk_profile_option, _output_folder, _check_indexed_size, _Failure, _fit_options, _fit_settings, _quiet, _with_schema
from .dither_options import dither_method_options, pop_dither_options

#: Exit code when the run finished but some images failed.
EXIT_IMAGES_FAILED = 1


class _Bar:
    """One progress bar for the whole run; its length follows the work left."""

    def __init__(self):
        self.bar = None

    def __call__(self, done: int, total: int, item: str) -> None:
        if not sys.stderr.isatty():  # click would still print the label: a stray line in a log
            return
        if self.bar is None:
            self.bar = click.progressbar(length=max(total, 1), label="batch", file=sys.stderr, show_eta=False)
            self.bar.__enter__()
        self.bar.length = max(total, 1)
        self.bar.update(max(done - self.bar.pos, 0), current_item=item)

    def close(self):
        if self.bar is not None:
            self.bar.__exit__(None, None, None)


def _fail(ctx: click.Context, exc: BaseException):

    obj = ctx.find_root().obj or {}
    if obj.get("debug"):
        raise exc
    raise _Failure((str(exc) or exc.__class__.__name__).splitlines()[0]) from None


@click.command()
@click.argument("input_dir", type=click.Path(file_okay=False))
@click.option("-o", "--output", "output_dir", required=True, callback=_output_folder, type=click.Path(file_okay=False),
              help="Folder for the reduced images; the input's folder structure is mirrored.")
@click.option("--include", multiple=True, metavar="GLOB",
              help="Only files matching this pattern (repeatable; default: common image types).")
@click.option("--exclude", multiple=True, metavar="GLOB",
              help="Leave out matching files or folders (repeatable).")
@click.option("--palette", "palette_file", type=click.Path(dir_okay=False), default=None,
              help="Map every image onto this saved palette instead of fitting.")
@click.option("--shared", is_flag=True, help="Fit one palette to the whole set and map every image onto it.")
@click.option("--weighting", "--shared-weighting", "shared_weighting", type=click.Choice(WEIGHTINGS),
              default=WEIGHTINGS[0], show_default=True,
              help="In the shared fit, each image counts equally or by its pixel count (as fit's and sweep's "
                   "--weighting; --shared-weighting is the older name).")
@_fit_options
@dither_method_options
@click.option("--format", "fmt", type=click.Choice(FORMATS), default=FORMATS[0], show_default=True,
              help="Output file type.")
@click.option("--workers", type=click.IntRange(min=0), default=None,
              help="Worker processes (default: the number of CPU cores; 0: in this process).")
@click.option("--cluster", metavar="ADDRESS", default=None,
              help="Run the per-image work on this Dask scheduler (needs quantize-palette[dask]).")
@click.option("--worst", type=click.IntRange(min=0), default=DEFAULT_WORST, show_default=True,
              help="How many worst-fitting images the one-palette report lists.")
@click.option("--force", is_flag=True, help="Redo every image and replace existing files.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@_cmyk_profile_option
@click.pass_context
def batch(ctx, input_dir, output_dir, include, exclude, palette_file, shared, shared_weighting, fmt, workers,
          cluster, worst, force, as_json, **fit_opts):
    """Reduce every image under INPUT_DIR into OUTPUT_DIR.

    Each image gets its own palette, or all share --palette FILE, or --shared
    fits one palette to the whole set first.  The fitting, mapping and
    dithering options are reduce's.  OUTPUT_DIR/manifest.json and
    manifest.csv record every image; a rerun skips images that are up to date.
    Exits non-zero if any image failed.
    """
    from quantize.batch.run import run_batch
    from quantize.batch.settings import BatchSettings
    from quantize.errors import QuantizeError

    if shared and palette_file:
        raise click.UsageError("give either --palette or --shared, not both")
    dopts = pop_dither_options(fit_opts)
    fit = dopts.fit_settings(_fit_settings(fit_opts))  # the same checks and messages as reduce; a dither
    # gets a palette fitted for it, as in reduce
    colours = fit_opts["colours"]
    _check_indexed_size(Path(f"image.{fmt}"), colours)  # as reduce: an indexed PNG holds 256 colours
    bar = _Bar()
    try:
        settings = BatchSettings(include=include or None, exclude=exclude, palette=palette_file, shared=shared,
                                 shared_weighting=shared_weighting, k=colours, fit=fit, fmt=fmt, workers=workers,
                                 cluster=cluster, force=force, max_pixels=fit_opts["max_pixels"], worst=worst,
                                 dither=dopts.dither, dither_strength=dopts.strength, serpentine=dopts.serpentine,
                                 nearest=fit_opts["nearest"])
        res = run_batch(input_dir, output_dir, settings, progress=bar)
    except (QuantizeError, ValueError, OSError) as exc:
        bar.close()
        _fail(ctx, exc)
    bar.close()
    doc = res.manifest
    s = res.summary
    failed = [{"input": r["input"], "error": r.get("error")} for r in res.rows if r["status"] == "failed"]
    summary = {"command": "batch", "input_dir": str(input_dir), "output_dir": str(output_dir),
               "mode": doc["settings"]["mode"], "summary": s, "image_bytes": doc["image_bytes"], "failed": failed,
               "palette_report": doc.get("palette_report"), "manifest": [str(p) for p in res.manifest_paths],
               "notes": res.notes, "seconds": doc["seconds"]}
    if as_json:
        click.echo(json.dumps(_with_schema(summary), indent=2, ensure_ascii=False))
    elif not _quiet():
        click.echo(f"{s['total']} images: {s['ok']} done, {s['skipped']} up to date, {s['failed']} failed"
                   f" in {doc['seconds']:.1f} s; reduced images {doc['image_bytes'] / 1000:.1f} kB")
        for f in failed:
            click.echo(f"failed: {f['input']}: {f['error']}")
        rep = doc.get("palette_report")
        if rep:
            click.echo(f"one palette of {rep['k']} colours: {' '.join(rep['hex'])}")
            if rep["unused_entries"]:
                click.echo(f"  entries no image uses: {', '.join(map(str, rep['unused_entries']))}")
            for w in rep["worst"]:  # as many as --worst asked for (fewer if the set is smaller)
                click.echo(f"  fits worst: {w['input']}  ΔE00 mean {w['delta_e']['mean']:.2f}"
                           f"  p95 {w['delta_e']['p95']:.2f}")
            if rep.get("page"):
                click.echo(f"  the set's consistency page: {Path(output_dir) / rep['page']}")
        for n in res.notes:
            click.echo(f"note: {n}")
        click.echo("manifest: " + ", ".join(summary["manifest"]))
    if s["failed"]:
        names = ", ".join(f["input"] for f in failed[:3]) + (", ..." if len(failed) > 3 else "")
        click.echo(f"quantize: error: {s['failed']} of {s['total']} images failed: {names} (see the manifest)",
                   err=True)
        ctx.exit(EXIT_IMAGES_FAILED)
