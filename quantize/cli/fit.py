"""``quantize fit``: one palette for one or many images, saved as JSON."""

from __future__ import annotations

import time

import click

from ._common import (
    _cmyk_profile_option,
    _output_file,
    _check_outputs,
    _emit,
    _fit_options,
    _fit_settings,
    _fit_with_progress,
    _judgement_summary,
    _palette_rows,
    _print_de,
    _print_judgement,
    _print_palette,
    _run,
    _warn_unmet_target,
)


@click.command()
@click.argument("images", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", required=True, callback=_output_file, type=click.Path(dir_okay=False), help="Palette JSON file to write.")
@_fit_options
@click.option("--weighting", type=click.Choice(("equal", "pixels")), default="equal", show_default=True,
              help="Pooled images count equally, or by their pixel count.")
@click.option("--force", is_flag=True, help="Replace an existing palette file.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@_cmyk_profile_option
@click.pass_context
def fit(ctx, images, output, weighting, force, as_json, **fit_opts):
    """Fit one palette to one or many IMAGES (pooled) and save it as JSON."""
    t0 = time.perf_counter()
    settings = _fit_settings(fit_opts, weighting=weighting)
    _check_outputs([output], force, images)

    def work():
        pal = _fit_with_progress(list(images), fit_opts["colours"], settings, fit_opts["max_pixels"])
        pal.save(output, force=force)
        return pal

    pal = _run(ctx, work)
    rows = _palette_rows(pal)
    summary = {
        "command": "fit", "inputs": list(images), "k": pal.k, "rule": pal.fit.rule,
        "reason": pal.fit.reason, "space": pal.space, "delta_e": dict(pal.fit.delta_e),
        "kmeans_cost": pal.fit.inertia, "palette": rows, "outputs": [str(output)],
        "notes": list(pal.fit.notes), "seconds": round(time.perf_counter() - t0, 3),
        **_judgement_summary(pal.fit),
    }

    def human():
        click.echo(f"{len(images)} image(s): {pal.k} colours ({pal.fit.reason})")
        _print_judgement(pal.fit, settings.target)
        _print_de("ΔE00 over the pooled set", pal.fit.delta_e)
        _print_palette(rows)
        for n in summary["notes"]:
            click.echo(f"note: {n}")
        click.echo(f"wrote {output}")

    _warn_unmet_target(pal.fit)
    _emit(as_json, summary, human)
