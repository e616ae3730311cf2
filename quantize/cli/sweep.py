"""``quantize sweep``: the colour error at every palette size, before choosing.

Only click is imported at module level so that ``quantize --help`` stays
fast; the library is imported inside the command.  Register it on the main
group with ``main.add_command(sweep)``.
"""

from __future__ import annotations

import time
from pathlib import Path

import click

from ._common import (
    _cmyk_profile_option,
    DEFAULT_K_TEXT,
    _check_outputs,
    _emit,
    _fit_options,
    _fit_settings,
    _progress,
    _report_targets,
    _run,
)


def _range_option(ctx, param, value: str) -> list[int]:
    from quantize.fit.sweep import parse_sweep_range

    try:
        return parse_sweep_range(value)
    except ValueError as exc:
        raise click.BadParameter(f"{value!r}: {exc}") from None


def _png_path(ctx, param, value):
    if value is not None and Path(value).suffix.lower() != ".png":
        raise click.BadParameter(f"{value}: must be a .png file")
    return value


def _decoded(images, max_pixels) -> list:
    """A Picture of every input: each file decoded once."""
    from quantize.io.read import load_image
    return [load_image(im) if max_pixels is None else load_image(im, max_pixels=max_pixels) for im in images]


@click.command()
@click.argument("images", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-k", "--colours", "ks", default=DEFAULT_K_TEXT, show_default=True, callback=_range_option,
              metavar="MIN-MAX", help="Palette sizes to sweep, inclusive (at most 64).")
@_fit_options(skip=("colours",))
@click.option("--warm/--cold", default=False, show_default=True,
              help="Also start each size from the one before (the cost then never rises with the size, "
                   "but a row depends on the rows before it); --cold: each size on its own, as reduce fits it.")
@click.option("--weighting", type=click.Choice(("equal", "pixels")), default="equal", show_default=True,
              help="Pooled images count equally, or by their pixel count.")
@click.option("--table-csv", type=click.Path(dir_okay=False), default=None, help="Write the table as CSV.")
@click.option("--table-json", type=click.Path(dir_okay=False), default=None, help="Write the table as JSON.")
@click.option("--plot", type=click.Path(dir_okay=False), default=None, callback=_png_path,
              help="Write the error-per-size plot (.png; needs matplotlib: the plots extra).")
@click.option("--swatches", type=click.Path(dir_okay=False), default=None, callback=_png_path,
              help="Write the palette of every size, one row per size (.png).")
@click.option("--report", "report_dir", type=click.Path(file_okay=False), default=None,
              help="Write an HTML report page with its images into this folder (its sweep plot needs matplotlib: "
                   "the plots extra).")
@click.option("--force", is_flag=True, help="Replace existing outputs.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@_cmyk_profile_option
@click.pass_context
def sweep(ctx, images, ks, warm, weighting, max_pixels, table_csv, table_json, plot, swatches, report_dir, force,
          as_json, **fit_opts):
    """Fit a palette at every size from MIN to MAX to IMAGES (pooled) and tabulate
    the k-means cost, ΔE00 mean / p95 / max and the penalised score; mark the
    size each rule picks."""

    t0 = time.perf_counter()
    settings = _fit_settings(fit_opts, weighting=weighting, warm=warm)  # reduce's options, reduce's checks
    space, rule = settings.space, settings.rule
    files = [p for p in (table_csv, table_json, plot, swatches) if p]
    if len({Path(p).resolve() for p in files}) != len(files):
        raise click.UsageError("two outputs name the same file")
    _check_outputs(files + _report_targets(report_dir), force, images)
    if plot or report_dir:  # both draw the sweep plot: matplotlib, the optional "plots" extra
        from quantize.report.plotlib import PlotsUnavailable, require_matplotlib

        try:
            require_matplotlib("--plot" if plot else "--report")
        except PlotsUnavailable as exc:
            raise click.UsageError(str(exc)) from None

    def work():
        from quantize.fit.sweep import sweep as run_sweep

        # The report maps every input again: then decode each once, up front, for both.
        pictures = _decoded(images, max_pixels) if report_dir else []
        with _progress(len(ks), "sweeping") as bar:
            res = run_sweep(pictures or list(images), (ks[0], ks[-1]), settings=settings, max_pixels=max_pixels,
                            progress=lambda k: bar.update(1))
        written = []
        if table_csv:
            written.append(str(res.save_csv(table_csv, force=force)))
        if table_json:
            written.append(str(res.save_json(table_json, force=force)))
        if plot or swatches:
            from quantize.report.page import plot_sweep, save_swatches

            if plot:
                written.append(str(plot_sweep(res, plot, force=force)))
            if swatches:
                written.append(str(save_swatches(res, swatches, force=force)))
        if report_dir:
            from quantize.report.page import write_report

            pal = res.chosen.palette
            mapped = [pal.apply(pic) for pic in pictures]
            title = f"Palette size sweep: {', '.join(Path(i).name for i in images)}"
            written.append(str(write_report(report_dir, original_picture=pictures, mapped=mapped,
                                            palette=pal, sweep=res, title=title, force=force)))
        return res, written

    res, written = _run(ctx, work)
    summary = {
        "command": "sweep", "inputs": list(images), "k_range": [ks[0], ks[-1]], "space": space,
        "rule": rule, "chosen": res.chosen.k,
        "choices": {n: {"k": c.k, "reason": c.reason} for n, c in res.choices.items()},
        "rows": res.candidates(), "outputs": written, "notes": list(res.notes),
        "seconds": round(time.perf_counter() - t0, 3),
    }

    def human():
        click.echo(f"{len(images)} image(s), k = {ks[0]}..{res.ks[-1]} in {space}; > marks the {rule} rule's pick")
        click.echo(res.table())
        for name, c in res.choices.items():
            click.echo(f"{name} rule: k = {c.k} ({c.reason})")
        if len(images) > 1:
            row = res.chosen
            for src, st in row.per_image.items():
                click.echo(f"  at k = {row.k}: {src}  ΔE00 mean {st['mean']:.2f}  p95 {st['p95']:.2f}  "
                           f"max {st['max']:.2f}")
        for n in res.notes:
            click.echo(f"note: {n}")
        if written:
            click.echo("wrote " + ", ".join(written))

    _emit(as_json, summary, human)
