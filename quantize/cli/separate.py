"""``quantize separate``: one 1-bit plate per ink, for screen printing.

Registered on the main group by ``quantize.cli.main``. Only click is imported at
module level, so ``quantize --help`` stays fast.
"""

from __future__ import annotations

import json
import time
from dataclasses import replace
from pathlib import Path

import click

# The library's defaults, from a module that imports nothing (--help stays fast).
from quantize.separation.defaults import (
    DEFAULT_CHOKE_MM,
    DEFAULT_MARGIN_MM,
    DEFAULT_MIN_FEATURE_MM,
    DEFAULT_MIN_LINE_MM,
)

from ._common import _run


@click.command("separate")
@click.argument("image", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", "outdir", required=True, type=click.Path(file_okay=False),
              help="Folder for the plates, preview and manifest (created if missing).")
@click.option("--palette", "palette_file", type=click.Path(exists=True, dir_okay=False),
              help="Use the colours of a saved palette JSON.")
@click.option("--inks", "inks_file", type=click.Path(exists=True, dir_okay=False),
              help="Ink library (CSV, JSON or CGATS text) to choose the inks from.")
@click.option("-n", "--ink-count", "n", type=click.IntRange(min=1), default=None,
              help="Number of printed inks (substrate not counted). Needed with --inks.")
@click.option("--snap", is_flag=True,
              help="Fit (or take --palette), then move each colour to its nearest library ink.")
@click.option("--illuminant", default=None, metavar="NAME",
              help="Illuminant of the library's Lab values when the file does not say (default D50).")
@click.option("--substrate", default=None, metavar="COLOUR",
              help="Garment or paper colour (#rrggbb, L,a,b or a library ink name): gets no plate; "
                   "'none': every colour prints. Default: the --palette's locked colour, else the colour "
                   "that dominates the image border (said in the summary); refused when the border is mixed.")
@click.option("--dpi", type=click.FloatRange(min=1), default=None,
              help="Output resolution (default: the image's, else 300).")
@click.option("--min-feature-mm", type=click.FloatRange(min=0), default=DEFAULT_MIN_FEATURE_MM, show_default=True,
              help="Smallest printable dot diameter; smaller areas are merged into a neighbour (0: off).")
@click.option("--min-line-mm", type=click.FloatRange(min=0), default=DEFAULT_MIN_LINE_MM, show_default=True,
              help="Thinner lines and knock-out gaps are reported with their location (0: off).")
@click.option("--underbase", is_flag=True, help="Add a white underbase plate (for dark substrates), printed first.")
@click.option("--choke-mm", type=click.FloatRange(min=0), default=DEFAULT_CHOKE_MM, show_default=True,
              help="How far the underbase is pulled in from the print's edges.")
@click.option("--marks", is_flag=True, help="Add registration marks and a label in a margin around the artwork.")
@click.option("--margin-mm", type=click.FloatRange(min=1), default=DEFAULT_MARGIN_MM, show_default=True,
              help="Margin width for --marks.")
@click.option("--order", default=None, metavar="INK,INK,...",
              help="Print order of the inks by name (default light to dark).")
@click.option("--png", is_flag=True, help="Also write every plate as a 1-bit PNG.")
@click.option("--seed", type=int, default=0, show_default=True, help="Random seed for fitting and ink search.")
@click.option("--force", is_flag=True, help="Replace existing files.")
@click.option("--json", "as_json", is_flag=True, help="Print the manifest as JSON.")
@click.option("--dithered", type=click.Choice(["auto", "keep", "clean"]), default="auto", show_default=True,
              help="Dithered input: auto keeps every dot of an image that looks dithered (no clean-up), "
                   "keep always does, clean treats it as flat art.")
@click.pass_context
def separate(ctx, image, outdir, palette_file, inks_file, n, snap, illuminant, substrate, dpi, min_feature_mm,
             min_line_mm, underbase, choke_mm, marks, margin_mm, order, png, seed, force, as_json, dithered):
    """Separate IMAGE into one 1-bit TIFF plate per printed ink, in the -o folder.

    Inks come from --palette, from an ink library (--inks with -n, or --snap),
    or are fitted to the image (-n inks). Also written: a composite preview
    PNG of the plates printed in order on the substrate, and a manifest JSON.
    ΔE figures come from file data, not a measured print: proof physically.
    """
    t0 = time.perf_counter()
    if snap and not inks_file:
        raise click.UsageError("--snap needs --inks FILE")
    if inks_file and not palette_file and n is None:
        raise click.UsageError("--inks needs -n N (how many inks to print)")
    if palette_file and inks_file and not snap:
        raise click.UsageError("--palette and --inks together need --snap")
    order_list = [s.strip() for s in order.split(",") if s.strip()] if order else None

    def work():
        from quantize.io.read import load_image
        from quantize.palette import Palette
        from quantize.separation.choice import choose_palette, snap_outcomes
        from quantize.separation.inks import load_ink_library
        from quantize.separation.plates import separate as run

        pal = Palette.load(palette_file) if palette_file else None
        lib = load_ink_library(inks_file, illuminant=illuminant) if inks_file else None
        pic = load_image(image)  # the one decode: choosing the inks and making the plates share it
        pal, info = choose_palette(pic, palette=pal, library=lib, n=n, snap=snap, substrate=substrate, seed=seed)
        sub = info["substrate"] if info["substrate"] is not None else "none"
        sep = run(pic, pal, substrate=sub, dpi=dpi, min_feature_mm=min_feature_mm, min_line_mm=min_line_mm,
                  underbase=underbase, choke_mm=choke_mm, order=order_list, dithered=dithered)
        # Every note printed below is also in the manifest: where the substrate came from, the
        # library's notes, and any snap that prints far from its colour.
        said = info.get("substrate_from", "given")
        notes = ([] if said.startswith("given") else [said]) + list(sep.notes) + (list(lib.notes) if lib else [])
        if info.get("snaps"):
            info["snaps"], warnings = snap_outcomes(pic, info["snaps"], sep.indices, sep.palette, lib,
                                                    substrate=sep.substrate)
            notes += warnings
        sep = replace(sep, settings=replace(sep.settings, inks_from=info), substrate_from=said, notes=tuple(notes))
        if lib is not None:
            sep = sep.with_measured(lib)
        written = sep.write(outdir, force=force, png=png, marks=marks, margin_mm=margin_mm, inputs=[image])
        return sep, written, notes

    sep, written, notes = _run(ctx, work)
    doc = json.loads(Path(written["manifest"]).read_text(encoding="utf-8"))
    if as_json:
        doc["manifest_file"] = str(written["manifest"])
        doc["seconds"] = round(time.perf_counter() - t0, 3)
        click.echo(json.dumps(doc, indent=2, ensure_ascii=False))
        return
    films = ([sep.underbase] if sep.underbase else []) + list(sep.plates)
    kinds = f"{len(sep.plates)} ink(s)" + (" + underbase" if sep.underbase else "")
    click.echo(f"{image}: {len(films)} film(s), {kinds}, at {sep.dpi:g} dpi "
               f"({doc['settings']['inks_from']['method']})")
    for p in films:
        click.echo(f"  {p.order:>2}. {p.name:<24} {p.coverage:7.2f} %  -> "
                   + ", ".join(t.name for t in written["plates"][p.name]))
    if doc["substrate"]:
        click.echo(f"      substrate {doc['substrate']['name']} ({doc['substrate']['hex']}) "
                   f"{doc['substrate']['coverage_percent']:7.2f} %  (no plate)")
    else:
        click.echo("      no substrate: every colour prints")
    for s in doc["settings"]["inks_from"].get("snaps", []):
        click.echo("  " + _snap_line(s))
    if sep.edges is not None:
        click.echo(f"edges: {sep.edges.pixels_changed} pixel(s) blending two inks given to one of those two, "
                   "not to a third ink")
    c = sep.cleanup
    click.echo(f"clean-up: {c.pixels_changed} pixel(s) changed in {c.regions_merged} region(s) below "
               f"{c.min_feature_mm:g} mm; ΔE00 of the change: mean {c.delta_e_image_mean:.3f} over the "
               f"image, {c.delta_e_changed_mean:.2f} over changed pixels")
    t = sep.thin_summary
    if t["lines"] or t["gaps"]:
        click.echo(f"thin detail below {min_line_mm:g} mm: {t['lines']} line(s), {t['gaps']} gap(s); "
                   "largest:")
        for item in sep.thin[:5]:
            click.echo(f"  {item['kind']:<4} {item['ink']}: at x {item['x_mm']:.1f} mm, y {item['y_mm']:.1f} mm, "
                       f"{item['w_mm']:.1f} x {item['h_mm']:.1f} mm, about {item['width_mm']:.2f} mm wide")
    d = sep.delta_e
    click.echo(f"ΔE00 to the source: mean {d['mean']:.2f}  p95 {d['p95']:.2f}  max {d['max']:.2f}")
    for note in notes:
        click.echo(f"note: {note}")
    n_files = sum(len(ts) for ts in written["plates"].values()) + 2
    click.echo(f"wrote {n_files} file(s) in {Path(written['manifest']).parent}: the films above, "
               f"{written['composite'].name} and {Path(written['manifest']).name}")
    click.echo(f"done in {time.perf_counter() - t0:.2f} s")


def _snap_line(s: dict) -> str:
    """One row of the snap table: the ink the colour's pixels print as, and its ΔE00."""
    if s.get("prints_as") is None:
        return f"snap {s['fitted']} -> {s['ink']} ({s['ink_hex']}): ΔE00 {s['delta_e']:.2f}"
    line = (f"snap {s['fitted']} prints as {s['prints_as']} ({s['prints_as_hex']}, "
            f"{100 * s['prints_share']:.0f} % of its pixels): ΔE00 {s['delta_e_printed']:.2f}")
    if s["prints_as"] != s["ink"]:
        line += f" (assigned {s['ink']}, ΔE00 {s['delta_e']:.2f}, but its pixels are nearer another ink)"
    return line


if __name__ == "__main__":  # pragma: no cover
    separate()
