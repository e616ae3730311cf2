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
    DEFAULT_FILM_DPI,
    DEFAULT_HIGHLIGHT_MIN_L,
    DEFAULT_INDEX_DPI,
    DEFAULT_KEEP_FRACTION,
    DEFAULT_LPI,
    DEFAULT_MARGIN_MM,
    DEFAULT_MIN_DOT_MM,
    DEFAULT_MIN_FEATURE_MM,
    DEFAULT_MIN_LINE_MM,
    DEFAULT_TRAP_MM,
    DEFAULT_VIEW_DISTANCE_MM,
)

from ._common import _cmyk_profile_option, _output_folder, _quiet, _run

_UNITS_MM = {"mm": 1.0, "cm": 10.0, "in": 25.4, '"': 25.4}


class PrintSize(click.ParamType):
    """A length with a unit: ``200mm``, ``20 cm``, ``8in`` or ``8"``; a bare number is in mm."""

    name = "size"

    def convert(self, value, param, ctx):
        if isinstance(value, float):
            return value
        text = str(value).strip().lower().replace(" ", "")
        for unit, factor in _UNITS_MM.items():
            if text.endswith(unit):
                text, scale = text[: -len(unit)], factor
                break
        else:
            scale = 1.0
        try:
            mm = float(text) * scale
        except ValueError:
            self.fail(f"{value!r} is not a length (examples: 200mm, 20cm, 8in)", param, ctx)
        if not (mm > 0 and mm <= 10_000):
            self.fail(f"{value!r} must be a positive length of at most 10 m", param, ctx)
        return mm


@click.command("separate")
@click.argument("image", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", "outdir", required=True, callback=_output_folder, type=click.Path(file_okay=False),
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
              help="Garment or paper colour (#rgb, #rrggbb, a CSS colour name, L,a,b or a library ink name): "
                   "gets no plate; 'none': every colour prints. Default: the --palette's locked colour, else the colour "
                   "that dominates the image border (said in the summary); refused when the border is mixed.")
@click.option("--dpi", type=click.FloatRange(min=1, max=10000), default=None,
              help="The artwork's resolution (default: the file's, else 300). It sets the printed size only "
                   "without --print-width/--print-height, and a value that differs from the file's is reported.")
@click.option("--print-width", type=PrintSize(), default=None, metavar="LENGTH",
              help="Printed width of the artwork, e.g. 250mm, 25cm or 10in (a bare number is mm); the height "
                   "follows the artwork's proportions. Default: the artwork's own size at its dpi.")
@click.option("--print-height", type=PrintSize(), default=None, metavar="LENGTH",
              help="Printed height instead of --print-width.")
@click.option("--film-dpi", type=click.FloatRange(min=10, max=10000), default=DEFAULT_FILM_DPI, show_default=True,
              help="Resolution of the films; each ink's area is resampled to it with smooth edges.")
@click.option("--mirror", is_flag=True, help="Flip the films left to right (emulsion side).")
@click.option("--negative", is_flag=True, help="Negative films: clear where ink prints, black elsewhere.")
@click.option("--job", default=None, metavar="NAME", help="Job name on the film labels (default: the file name).")
@click.option("--no-pdf", is_flag=True, help="Do not write the PDF of all films.")
@click.option("--min-feature-mm", type=click.FloatRange(min=0, max=10), default=DEFAULT_MIN_FEATURE_MM, show_default=True,
              help="Smallest printable dot diameter; smaller areas are merged into a neighbour (0: off).")
@click.option("--min-line-mm", type=click.FloatRange(min=0, max=10), default=DEFAULT_MIN_LINE_MM, show_default=True,
              help="Thinner lines are thickened to it where there is room; what stays thinner, and knock-out "
                   "gaps, are reported with their location (0: off).")
@click.option("--keep-detail/--merge-only", default=True, show_default=True,
              help="Thicken thin lines to --min-line-mm and grow small elements to the minimum dot where there "
                   "is room, before merging what is left; --merge-only merges every small area.")
@click.option("--keep-fraction", type=click.FloatRange(min=0, max=1), default=DEFAULT_KEEP_FRACTION,
              show_default=True, help="Small elements of at least this fraction of the minimum dot are grown; "
                                      "smaller ones are dropped whole, with a warning.")
@click.option("--underbase", is_flag=True, help="Add a white underbase plate (for dark substrates), printed first.")
@click.option("--choke-mm", type=click.FloatRange(min=0, max=10), default=DEFAULT_CHOKE_MM, show_default=True,
              help="How far the underbase is pulled in from the print's edges.")
@click.option("--base-min-l", type=click.FloatRange(min=0, max=100), default=0.0, show_default=True,
              metavar="L*", help="Inks darker than this L* get no underbase under them (0: every ink gets one).")
@click.option("--highlight-white", is_flag=True,
              help="Add a highlight white plate, printed last, on the inks at least --highlight-min-l light.")
@click.option("--highlight-min-l", type=click.FloatRange(min=0, max=100), default=DEFAULT_HIGHLIGHT_MIN_L,
              show_default=True, metavar="L*", help="How light an ink must be to get the highlight white.")
@click.option("--trap", "trap_mm", type=click.FloatRange(min=0, max=10), default=DEFAULT_TRAP_MM, show_default=True,
              metavar="MM", help="Where two inks meet, the lighter spreads this far under the darker (0: butt joins).")
@click.option("--trap-pair", "trap_pairs", multiple=True, metavar="INK/INK=MM",
              help="A trap width for one pair of inks, e.g. 'Gold/Navy=0.3' (repeatable).")
@click.option("--overprint", multiple=True, metavar="INK",
              help="A keyline ink that overprints: the inks beside it continue under it (repeatable).")
@click.option("--marks", is_flag=True, help="Add registration marks and a label in a margin around the artwork.")
@click.option("--margin-mm", type=click.FloatRange(min=1, max=100), default=DEFAULT_MARGIN_MM, show_default=True,
              help="Margin width for --marks.")
@click.option("--order", default=None, metavar="INK,INK,...",
              help="Print order of the inks by name (default light to dark); it may also place 'underbase', "
                   "'flash' and 'highlight white' (default: underbase, flash, inks, highlight white).")
@click.option("--png", is_flag=True, help="Also write every plate as a 1-bit PNG.")
@click.option("--seed", type=click.IntRange(min=0), default=0, show_default=True,
              help="Random seed for fitting and ink search.")
@click.option("--force", is_flag=True, help="Replace existing files.")
@click.option("--json", "as_json", is_flag=True, help="Print the manifest as JSON.")
@click.option("--dithered", type=click.Choice(["auto", "keep", "clean"]), default="auto", show_default=True,
              help="Dithered input: auto keeps every dot of an image that looks dithered (no clean-up), "
                   "keep always does, clean treats it as flat art.")
@click.option("--tones", type=click.Choice(["spot", "halftone", "index"]), default="spot", show_default=True,
              help="How the inks print: spot (flat areas, cleaned up and trapped), halftone (dots of each ink's "
                   "share, for photos and gradients) or index (square pixels of one ink each, never overlapping).")
@click.option("--lpi", type=click.FloatRange(min=1, max=1000), default=DEFAULT_LPI, show_default=True,
              help="Halftone screen frequency, lines per inch.")
@click.option("--angles", default=None, metavar="DEG,DEG,...",
              help="Halftone screen angle of each ink in print order (default: kept 30 degrees apart, or spread "
                   "over 90 for more than three inks).")
@click.option("--dot", "dot_shape", type=click.Choice(["round", "elliptical", "square"]), default="round",
              show_default=True, help="Halftone dot shape.")
@click.option("--min-dot-mm", type=click.FloatRange(min=0, max=10), default=DEFAULT_MIN_DOT_MM, show_default=True,
              help="Smallest halftone dot and hole the screen holds; smaller ones are dropped or grown to it.")
@click.option("--mesh", type=click.FloatRange(min=10, max=1000), default=None, metavar="THREADS",
              help="Screen mesh (threads per inch): warns when the halftone frequency is too fine for it.")
@click.option("--index-dpi", type=click.FloatRange(min=10, max=2400), default=DEFAULT_INDEX_DPI, show_default=True,
              help="Index separation resolution: the side of an index square is 25.4 / this mm.")
@click.option("--index-dither", default="floyd-steinberg", show_default=True,
              type=click.Choice(["floyd-steinberg", "jarvis-judice-ninke", "stucki", "bayer4", "bayer8",
                                 "blue-noise"]),
              help="How index squares are chosen: an error diffusion or an ordered pattern.")
@click.option("--view-distance", "view_distance", type=PrintSize(), default=DEFAULT_VIEW_DISTANCE_MM,
              show_default="1000 mm", metavar="LENGTH",
              help="Viewing distance for the perceived ΔE00 of the simulated print (e.g. 1m is 1000mm, 40in).")
@_cmyk_profile_option
@click.pass_context
def separate(ctx, image, outdir, palette_file, inks_file, n, snap, illuminant, substrate, dpi, print_width,
             print_height, film_dpi, mirror, negative, job, no_pdf, min_feature_mm,
             min_line_mm, keep_detail, keep_fraction, underbase, choke_mm, base_min_l, highlight_white,
             highlight_min_l, trap_mm, trap_pairs, overprint, marks, margin_mm, order, png, seed, force, as_json,
             dithered, tones, lpi, angles, dot_shape, min_dot_mm, mesh, index_dpi, index_dither, view_distance):
    """Separate IMAGE into one 1-bit TIFF plate per printed ink, in the -o folder.

    Inks come from --palette, from an ink library (--inks with -n, or --snap),
    or are fitted to the image (-n inks). The films are at --film-dpi and
    print at --print-width/--print-height (default: the artwork's own size).
    Also written: one PDF with every film at its physical size with marks
    and a label, a composite preview PNG of the plates printed in order on
    the substrate, and a manifest JSON.
    ΔE figures come from file data, not a measured print: proof physically.
    """
    t0 = time.perf_counter()
    if snap and not inks_file:
        raise click.UsageError("--snap needs --inks FILE")
    if inks_file and not palette_file and n is None:
        raise click.UsageError("--inks needs -n N (how many inks to print)")
    if palette_file and inks_file and not snap:
        raise click.UsageError("--palette and --inks together need --snap")
    if print_width is not None and print_height is not None:
        raise click.UsageError("give --print-width or --print-height, not both (the other follows the artwork)")
    order_list = [s.strip() for s in order.split(",") if s.strip()] if order else None
    angle_list = _angles(angles) if angles else ()
    pairs = tuple(_trap_pair(t) for t in trap_pairs)

    def work():
        from quantize.io.read import load_image
        from quantize.palette import Palette
        from quantize.separation.choice import choose_palette, snap_outcomes
        from quantize.separation.inks import load_ink_library
        from quantize.separation.plates import SeparationSettings
        from quantize.separation.plates import separate as run
        from quantize.separation.tonal import TonalSettings

        pal = Palette.load(palette_file) if palette_file else None
        lib = load_ink_library(inks_file, illuminant=illuminant) if inks_file else None
        pic = load_image(image)  # the one decode: choosing the inks and making the plates share it
        pal, info = choose_palette(pic, palette=pal, library=lib, n=n, snap=snap, substrate=substrate, seed=seed)
        settings = SeparationSettings(dpi=dpi, min_feature_mm=min_feature_mm, min_line_mm=min_line_mm,
                                      underbase=underbase, choke_mm=choke_mm, film_dpi=film_dpi,
                                      print_width_mm=print_width, print_height_mm=print_height, mirror=mirror,
                                      negative=negative, base_min_l=base_min_l,
                                      highlight_white=highlight_white, highlight_min_l=highlight_min_l,
                                      trap_mm=trap_mm, trap_pairs=pairs, overprint=tuple(overprint),
                                      keep_detail=keep_detail, keep_fraction=keep_fraction, dithered=dithered,
                                      tones=tones, view_distance_mm=view_distance,
                                      tonal=TonalSettings(lpi=lpi, angles=angle_list, dot_shape=dot_shape,
                                                          min_dot_mm=min_dot_mm, mesh=mesh, index_dpi=index_dpi,
                                                          index_dither=index_dither))
        sub = info["substrate"] if info["substrate"] is not None else "none"
        sep = run(pic, pal, substrate=sub, order=order_list, settings=settings)
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
        written = sep.write(outdir, force=force, png=png, marks=marks, margin_mm=margin_mm, inputs=[image],
                            pdf=not no_pdf, job=job)
        return sep, written, notes

    sep, written, notes = _run(ctx, work)
    doc = json.loads(Path(written["manifest"]).read_text(encoding="utf-8"))
    if as_json:
        doc["manifest_file"] = str(written["manifest"])
        doc["seconds"] = round(time.perf_counter() - t0, 3)
        click.echo(json.dumps(doc, indent=2, ensure_ascii=False))
        return
    if _quiet():
        return
    _summary(image, sep, doc, written, notes, min_line_mm)
    click.echo(f"done in {time.perf_counter() - t0:.2f} s")


def _summary(image, sep, doc: dict, written: dict, notes: list, min_line_mm: float) -> None:
    """The summary of a separation: its films, then what was changed, measured and written."""
    films = sep.films()
    g = sep.film
    kinds = (f"{len(sep.plates)} ink(s)" + (" + underbase" if sep.underbase else "")
             + (" + highlight white" if sep.highlight else ""))
    click.echo(f"{image}: {len(films)} film(s), {kinds}, at {sep.dpi:g} dpi, printed {g.width_mm:.1f} x "
               f"{g.height_mm:.1f} mm (size from the {g.size_from}; {doc['settings']['inks_from']['method']})")
    _film_lines(sep, films, written)
    if doc["flash_steps"]:
        click.echo("  sequence: " + ", ".join(sep.sequence))
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
    if c is not None:
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
    if sep.traps:
        n_traps = sum(1 for t in sep.traps if "lighter" in t)
        click.echo(f"traps: {n_traps} join(s), lighter under darker; {len(sep.traps) - n_traps} keyline fill(s)")
    d = sep.delta_e
    click.echo(f"ΔE00 to the source, pixel by pixel: mean {d['mean']:.2f}  p95 {d['p95']:.2f}  max {d['max']:.2f}")
    if sep.perceived:
        f = sep.perceived["filtered"]
        click.echo(f"perceived ΔE00 of the simulated print at {sep.perceived['distance_mm']:g} mm (S-CIELAB): "
                   f"mean {f['mean']:.2f}  p95 {f['p95']:.2f}  (compare spot, halftone and index by this)")
    for note in notes:
        click.echo(f"note: {note}")
    n_files = sum(len(ts) for ts in written["plates"].values()) + 2 + (1 if written["pdf"] else 0)
    pdf = f"{written['pdf'].name}, " if written["pdf"] else ""
    click.echo(f"wrote {n_files} file(s) in {Path(written['manifest']).parent}: the films above, {pdf}"
               f"{written['composite'].name} and {Path(written['manifest']).name}")
    click.echo("caution: sizes, meshes and ΔE are computed from file data; proof physically and follow the "
               "shop's own standards before a production run")


def _film_lines(sep, films, written: dict) -> None:
    """One line per film, then its screen: halftone dots, index squares or the smallest spot detail."""
    screens = (sep.tonal or {}).get("plates", {})
    for p in films:
        click.echo(f"  {p.order:>2}. {p.name:<24} {p.coverage:7.2f} %  -> "
                   + ", ".join(t.name for t in written["plates"][p.name]))
        g: dict = (sep.guidance or {}).get(p.name) or {}
        sc = screens.get(p.name)
        if sc and "lpi" in sc:
            click.echo(f"      {sc['lpi']:g} lpi at {sc['angle']:g}°, {sc['dot_shape']} dots of at least "
                       f"{sc['min_dot_mm']:g} mm; screen area {g['area_cm2']:.1f} cm², mesh about "
                       f"{g['mesh']['threads_per_inch']} threads/in (common practice)")
        elif sc:
            click.echo(f"      index squares of {sc['square_mm']:.3f} mm ({sc['index_dpi']:g} dpi, {sc['dither']}); "
                       f"screen area {g['area_cm2']:.1f} cm², mesh about {g['mesh']['threads_per_inch']} threads/in "
                       "(common practice)")
        elif g and g["pieces"]:
            line = f"line {g['smallest_line_mm']:.2f} mm, " if g["smallest_line_mm"] is not None else ""
            click.echo(f"      smallest dot {g['smallest_dot_mm']:.2f} mm, {line}screen area {g['area_cm2']:.1f} cm², "
                       f"mesh about {g['mesh']['threads_per_inch']} threads/in (common practice)")


def _snap_line(s: dict) -> str:
    """One row of the snap table: the ink the colour's pixels print as, and its ΔE00."""
    if s.get("prints_as") is None:
        return f"snap {s['fitted']} -> {s['ink']} ({s['ink_hex']}): ΔE00 {s['delta_e']:.2f}"
    line = (f"snap {s['fitted']} prints as {s['prints_as']} ({s['prints_as_hex']}, "
            f"{100 * s['prints_share']:.0f} % of its pixels): ΔE00 {s['delta_e_printed']:.2f}")
    if s["prints_as"] != s["ink"]:
        line += f" (assigned {s['ink']}, ΔE00 {s['delta_e']:.2f}, but its pixels are nearer another ink)"
    return line


def _angles(text: str) -> tuple[float, ...]:
    """``'15,45,75'`` -> ``(15.0, 45.0, 75.0)``."""
    try:
        out = tuple(float(a) for a in text.split(",") if a.strip())
    except ValueError:
        out = ()
    if not out or not all(-360 <= a <= 360 for a in out):
        raise click.BadParameter(f"{text!r}: write degrees separated by commas, e.g. '15,45,75'",
                                 param_hint="--angles")
    return out


def _trap_pair(text: str) -> tuple[str, str, float]:
    """``'Gold/Navy=0.3'`` -> ``("Gold", "Navy", 0.3)``."""
    names, eq, width = text.rpartition("=")
    a, slash, b = names.partition("/")
    try:
        mm = float(width)
    except ValueError:
        mm = -1.0
    if not (eq and slash and a.strip() and b.strip()) or not 0 <= mm <= 10:
        raise click.BadParameter(f"{text!r}: write INK/INK=MM, e.g. 'Gold/Navy=0.3'", param_hint="--trap-pair")
    return a.strip(), b.strip(), mm


if __name__ == "__main__":  # pragma: no cover
    separate()
