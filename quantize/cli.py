"""The ``quantize`` command line: a thin layer over the library.

Each command parses its options, calls the library and prints a summary.
Errors a user can cause become one line on stderr and exit code 1 (2 for bad
usage, from click); ``--debug`` shows the traceback instead.  Only click is
imported at start-up so that ``quantize --help`` answers at once.
"""

from __future__ import annotations

import json
import sys
import time
import warnings
from pathlib import Path

import click

from .cli_dither import dither_options, error_map_paths, pop_dither_options, run_dither_outputs

SPACE_NAMES = ("lab", "oklab", "cam16ucs")
SEEDINGS = ("k-means++", "random", "farthest")


class _Failure(click.ClickException):
    """A one-line failure with exit code 1."""

    def show(self, file=None):
        click.echo(f"quantize: error: {self.message}", err=True)


def _run(ctx: click.Context, fn):
    """Call ``fn``; turn user-caused errors into a one-line message and exit 1."""
    from .errors import QuantizeError

    try:
        return fn()
    except (QuantizeError, ValueError, OSError) as exc:
        if (ctx.find_root().obj or {}).get("debug"):
            raise
        msg = str(exc) or exc.__class__.__name__
        if isinstance(exc, OSError) and exc.strerror and exc.filename is not None:
            msg = f"{exc.filename}: {exc.strerror}"  # not "[Errno 2] ...: 'name'"
        elif isinstance(exc, OSError) and getattr(exc, "filename", None) and str(exc.filename) not in msg:
            msg = f"{exc.filename}: {msg}"
        raise _Failure(msg.splitlines()[0]) from None


def _k_option(value: str) -> str:
    from_ = value.strip()
    parts = from_.split("-")
    # isascii: str.isdigit (and int) also take other scripts' digits and superscripts.
    if not all(p.strip().isascii() and p.strip().isdigit() for p in parts) or len(parts) > 2:
        raise click.BadParameter(f"{value!r} is not N or MIN-MAX (e.g. 6 or 2-12)")
    nums = [int(p) for p in parts]
    if nums[0] < 1:
        raise click.BadParameter(f"{value!r}: a palette needs at least 1 colour")
    if len(nums) == 2 and nums[0] > nums[1]:
        raise click.BadParameter(f"{value!r}: MIN is larger than MAX")
    return from_


def _fit_options(f):
    """Options shared by every command that fits a palette."""
    opts = [
        click.option("-k", "--colours", "colours", default="2-12", show_default=True, callback=lambda c, p, v: _k_option(v),
                     help="Palette size N, or MIN-MAX to let the rule choose."),
        click.option("--space", type=click.Choice(SPACE_NAMES), default="lab", show_default=True,
                     help="Perceptual space the palette is fitted in."),
        click.option("--rule", type=click.Choice(("bic", "target")), default=None,
                     help="How N is chosen from a range: penalised score (bic, default) or a ΔE00 target."),
        click.option("--target", "target", type=click.FloatRange(min=0, min_open=True), default=None,
                     help="ΔE00 target for --rule target (implies it)."),
        click.option("--target-stat", type=click.Choice(("mean", "p95")), default="mean", show_default=True,
                     help="Which ΔE00 statistic the target applies to."),
        click.option("--lock", "locked", multiple=True, metavar="COLOUR",
                     help="Hold a colour fixed (substrate, brand colour): #rrggbb or L,a,b. Repeatable."),
        click.option("--seed", type=int, default=0, show_default=True, help="Random seed; same seed, same palette."),
        click.option("--restarts", type=click.IntRange(min=1), default=8, show_default=True,
                     help="k-means++ restarts per palette size."),
        click.option("--seeding", type=click.Choice(SEEDINGS), default="k-means++", show_default=True,
                     help="How each restart picks its first centres."),
        click.option("--nearest", type=click.Choice(NEAREST), default="auto", show_default=True,
                     help="Map pixels by ΔE00 or by distance in the fitting space; auto: ΔE00, "
                          "or the space's distance when dithering."),
        click.option("--max-pixels", type=click.IntRange(min=1), default=None,
                     help="Refuse images larger than this (decompression-bomb guard; default Pillow's limit)."),
    ]
    for opt in reversed(opts):
        f = opt(f)
    return f


#: Choices of --nearest; "auto" leaves the choice to quantize.mapping.resolve_metric.
NEAREST = ("auto", "ciede2000", "space")


def _metric(nearest: str) -> str | None:
    return None if nearest == "auto" else nearest


def _fit_kwargs(o: dict) -> dict:
    rule = o["rule"] or ("target" if o["target"] is not None else "bic")
    if rule == "target" and o["target"] is None:
        raise click.UsageError("--rule target needs --target DELTA_E")
    return dict(k=o["colours"], space=o["space"], rule=rule, target=o["target"], target_stat=o["target_stat"],
                locked=list(o["locked"]), seed=o["seed"], restarts=o["restarts"], init=o["seeding"],
                metric=_metric(o["nearest"]), max_pixels=o["max_pixels"])


class _NoBar:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def update(self, n):
        pass


def _progress(n_steps: int, label: str):
    """A click progress bar on stderr; nothing at all when stderr is not a terminal."""
    if not sys.stderr.isatty():
        return _NoBar()
    return click.progressbar(length=n_steps, label=label, file=sys.stderr, show_eta=False)


def _fit_with_progress(images, kwargs):
    from .fitting import fit_palette, parse_k

    n = len(parse_k(kwargs["k"]))
    with _progress(n, "fitting") as bar:
        return fit_palette(images, progress=lambda k: bar.update(1), **kwargs)


def _swatch(hexcode: str) -> str:
    if not sys.stdout.isatty():
        return ""
    r, g, b = (int(hexcode[i:i + 2], 16) for i in (1, 3, 5))
    return click.style("    ", bg=(r, g, b)) + " "


def _palette_rows(palette, coverage=None):
    rows = []
    lab = palette.lab
    for i, h in enumerate(palette.hex):
        row = {"index": i, "hex": h, "lab": [round(float(v), 2) for v in lab[i]],
               "locked": bool(palette.locked[i])}
        if palette.names[i]:
            row["name"] = palette.names[i]
        if coverage is not None:
            row["coverage"] = round(float(coverage[i]), 3)
        rows.append(row)
    return rows


def _print_palette(rows):
    for r in rows:
        cov = f"{r['coverage']:6.2f} %" if "coverage" in r else ""
        flag = " locked" if r["locked"] else ""
        unused = "  (unused: no pixel maps here)" if "coverage" in r and r["coverage"] == 0 else ""
        L, a, b = r["lab"]
        click.echo(f"  {r['index']:>3} {_swatch(r['hex'])}{r['hex']}  Lab {L:6.2f} {a:7.2f} {b:7.2f}  {cov}{flag}{unused}")


def _print_de(label, stats):
    click.echo(f"{label}: mean {stats['mean']:.2f}  median {stats['median']:.2f}  "
               f"p95 {stats['p95']:.2f}  max {stats['max']:.2f}")


def _emit(as_json: bool, summary: dict, human):
    if as_json:
        click.echo(json.dumps(summary, indent=2, ensure_ascii=False))
    else:
        human()
        click.echo(f"done in {summary['seconds']:.2f} s")


def _check_outputs(paths, force: bool, inputs):
    """Refuse before any work: an existing output (without --force), an input as output, or a
    folder that cannot take the file."""
    ins = {Path(p).resolve() for p in inputs}
    folders = {}
    for p in paths:
        rp = Path(p).resolve()
        if rp in ins:
            raise _Failure(f"{p}: is an input file; refusing to overwrite an input")
        if rp.exists() and not force:
            raise _Failure(f"{p}: already exists (use --force to replace it)")
        if not rp.parent.is_dir():
            raise _Failure(f"{p}: folder {rp.parent} does not exist")
        folders.setdefault(rp.parent, p)
    for folder, p in folders.items():
        _probe_folder(folder, p)


def _probe_folder(folder: Path, name) -> None:
    """Create and remove a scratch file, so that a folder which takes no files is refused before
    any output is written. ``os.access`` is no test: it says yes to root even in /proc."""
    import os
    import tempfile

    try:
        fd, tmp = tempfile.mkstemp(prefix=".quantize-", suffix=".probe", dir=folder)
    except OSError as exc:
        raise _Failure(f"{name}: cannot write in folder {folder} ({exc.strerror or exc})") from None
    os.close(fd)
    os.unlink(tmp)


def _report_option(f):
    return click.option("--report", "report_dir", type=click.Path(file_okay=False), default=None,
                        help="Write an HTML report page with its images into this folder.")(f)


def _report_targets(report_dir):
    """The report page to check before work. A folder not yet made holds nothing to clobber, but
    the folder it will be made in must take files."""
    if not report_dir:
        return []
    folder = Path(report_dir)
    if folder.is_dir():
        return [folder / "index.html"]
    base = folder.resolve().parent
    while not base.exists():
        base = base.parent
    if not base.is_dir():
        raise _Failure(f"{report_dir}: cannot make the report folder; {base} is a file")
    _probe_folder(base, report_dir)
    return []


def _stop_on_terminate(ctx: click.Context) -> None:
    """Treat SIGTERM (a job scheduler, ``kill``) as Ctrl-C.

    Python's default for SIGTERM ends the process on the spot, which can
    leave a temporary ``.part`` file beside an output being written.  As an
    interrupt, the atomic writers remove it and the run stops with one line.
    """
    import signal

    def interrupt(signum, frame):
        raise KeyboardInterrupt

    try:
        saved = signal.signal(signal.SIGTERM, interrupt)
    except (ValueError, AttributeError):  # not the main thread, or no SIGTERM here
        return
    ctx.call_on_close(lambda: signal.signal(signal.SIGTERM, saved))


def _warning_line(message, category, filename, lineno, line=None) -> str:
    """Warnings as one line, like errors, without the source line Python adds."""
    text = (str(message).splitlines() or [category.__name__])[0]
    return f"quantize: warning: {text}\n"


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show full tracebacks on errors.")
@click.version_option(package_name="quantize")
@click.pass_context
def main(ctx, debug):
    """Reduce images to a small, fixed palette of colours in a perceptual space,
    and report the CIEDE2000 (ΔE00) error of each reduction.

    ΔE figures are computed from file data on an assumed sRGB display; they are
    not measurements of a print. Proof physically before a production run.
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug
    _stop_on_terminate(ctx)
    if not debug:
        saved = warnings.formatwarning
        warnings.formatwarning = _warning_line
        ctx.call_on_close(lambda: setattr(warnings, "formatwarning", saved))


@main.command()
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
        from .images import load_image

        # Load once: fitting and mapping share the picture and its colour sample.
        pic = load_image(image) if kwargs["max_pixels"] is None else load_image(image, max_pixels=kwargs["max_pixels"])
        pal = _fit_with_progress(pic, kwargs)
        res = pal.apply(pic, **dopts.apply_kwargs(), metric=kwargs["metric"])
        res, dextra, dlines = run_dither_outputs(pic, res, dopts, force=force, inputs=[image])
        res.save(out, force=force, inputs=[image])
        if pal_path:
            pal.save(pal_path, force=force)
        if report_dir:
            from .report import write_report

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
            from .sweep import format_table

            click.echo(format_table(pal.fit["candidates"], chosen=pal.k))
        _print_de("ΔE00 plain" if dopts.viewing else "ΔE00", res.delta_e)
        for line in dlines:
            click.echo(line)
        _print_palette(rows)
        for n in summary["notes"]:
            click.echo(f"note: {n}")
        click.echo("wrote " + ", ".join(summary["outputs"]))

    _emit(as_json, summary, human)


def _check_indexed_size(out: Path, k: str):
    """Refuse a palette size above 256 where the output is an indexed PNG."""
    top = int(k.split("-")[-1])
    if out.suffix.lower() == ".png" and top > 256:
        raise click.BadParameter(f"{top} colours do not fit an indexed PNG (at most 256)",
                                 param_hint="'-k' / '--colours'")


@main.command()
@click.argument("images", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), help="Palette JSON file to write.")
@_fit_options
@click.option("--weighting", type=click.Choice(("equal", "pixels")), default="equal", show_default=True,
              help="Pooled images count equally, or by their pixel count.")
@click.option("--force", is_flag=True, help="Replace an existing palette file.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@click.pass_context
def fit(ctx, images, output, weighting, force, as_json, **fit_opts):
    """Fit one palette to one or many IMAGES (pooled) and save it as JSON."""
    t0 = time.perf_counter()
    kwargs = _fit_kwargs(fit_opts)
    kwargs["weighting"] = weighting
    _check_outputs([output], force, images)

    def work():
        pal = _fit_with_progress(list(images), kwargs)
        pal.save(output, force=force)
        return pal

    pal = _run(ctx, work)
    rows = _palette_rows(pal)
    summary = {
        "command": "fit", "inputs": list(images), "k": pal.k, "rule": pal.fit["rule"],
        "reason": pal.fit["reason"], "space": pal.space, "delta_e": pal.fit["delta_e"],
        "kmeans_cost": pal.fit["inertia"], "palette": rows, "outputs": [str(output)],
        "notes": list(pal.fit.get("notes", [])), "seconds": round(time.perf_counter() - t0, 3),
    }

    def human():
        click.echo(f"{len(images)} image(s): {pal.k} colours ({pal.fit['reason']})")
        _print_de("ΔE00 over the pooled set", pal.fit["delta_e"])
        _print_palette(rows)
        for n in summary["notes"]:
            click.echo(f"note: {n}")
        click.echo(f"wrote {output}")

    _emit(as_json, summary, human)


@main.command()
@click.argument("palette", type=click.Path(exists=True, dir_okay=False))
@click.argument("images", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", "outdir", required=True, type=click.Path(file_okay=False),
              help="Folder for the reduced images (created if missing).")
@click.option("--format", "fmt", type=click.Choice(("png", "tif", "jpg")), default="png", show_default=True,
              help="Output file type: indexed PNG, RGB TIFF or JPEG.")
@click.option("--nearest", type=click.Choice(NEAREST), default="auto", show_default=True,
              help="Map pixels by ΔE00 or by distance in the palette's space; auto: ΔE00, "
                   "or the space's distance when dithering.")
@click.option("--max-pixels", type=click.IntRange(min=1), default=None, help="Decompression-bomb guard.")
@dither_options
@_report_option
@click.option("--force", is_flag=True, help="Replace existing outputs.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary.")
@click.pass_context
def apply(ctx, palette, images, outdir, fmt, nearest, max_pixels, report_dir, force, as_json, **dither_opts):
    """Map IMAGES onto a saved PALETTE (no refit) and write them to a folder."""
    from .palette import Palette

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
        from .errors import QuantizeError
        from .images import check_image_file

        pal = Palette.load(palette)
        for im in images:  # a file that is not an image stops the run before any output
            check_image_file(im, max_pixels=max_pixels)
        od.mkdir(parents=True, exist_ok=True)
        results, extras = [], []
        inputs = list(images) + [palette]
        with _progress(len(images), "mapping") as bar:
            for im, out, emap in zip(images, outs, maps):
                try:
                    res = pal.apply(im, **dopts.apply_kwargs(), metric=_metric(nearest), max_pixels=max_pixels)
                    res, dextra, dlines = run_dither_outputs(im, res, dopts, force=force, inputs=inputs,
                                                             error_map_path=emap)
                    res.save(out, force=force, inputs=inputs)
                except QuantizeError as exc:
                    if results:  # damage found only when decoding: say what is already written
                        done = ", ".join(str(o) for o in outs[:len(results)])
                        raise QuantizeError(f"{exc}; written before it ({len(results)} of {len(images)}): "
                                            f"{done}") from exc
                    raise
                results.append(res)
                extras.append((dextra, dlines))
                bar.update(1)
        if report_dir:
            from .report import write_report

            write_report(report_dir, original_picture=list(images), mapped=results, palette=pal,
                         title=f"quantize apply: {Path(palette).name}", force=force)
        return pal, results, extras

    pal, results, extras = _run(ctx, work)
    per_image = [{"input": str(im), "output": str(out), "delta_e": r.delta_e,
                  "coverage": [round(float(c), 3) for c in r.coverage], **ex}
                 for im, out, r, (ex, _) in zip(images, outs, results, extras)]
    summary = {"command": "apply", "palette_file": str(palette), "k": pal.k, "rule": "saved palette",
               "palette": _palette_rows(pal), "images": per_image, "outputs": [str(o) for o in outs],
               "seconds": round(time.perf_counter() - t0, 3)}

    def human():
        click.echo(f"{palette}: {pal.k} colours")
        _print_palette(_palette_rows(pal))
        for row, (_, lines) in zip(per_image, extras):
            _print_de(f"{row['input']} -> {row['output']}  ΔE00", row["delta_e"])
            for line in lines:
                click.echo(f"  {line}")

    _emit(as_json, summary, human)


# Commands defined in their own modules; each imports only click at the top.
from .cli_sweep import sweep as _sweep_command  # noqa: E402
from .cli_separate import separate as _separate_command  # noqa: E402
from .cli_batch import batch as _batch_command  # noqa: E402

main.add_command(_sweep_command)
main.add_command(_separate_command)
main.add_command(_batch_command)


if __name__ == "__main__":  # pragma: no cover
    main()
