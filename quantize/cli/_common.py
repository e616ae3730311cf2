"""What the commands share: option groups, progress, printing, output checks and one-line failures.

Only click is imported at the top, so that ``quantize --help`` answers at once;
the library is imported inside the functions that need it.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from quantize.fit.settings import DEFAULT_K

SPACE_NAMES = ("lab", "oklab", "cam16ucs")
SEEDINGS = ("k-means++", "random", "farthest")
#: The -k default of every command, from the library's one default range.
DEFAULT_K_TEXT = f"{DEFAULT_K[0]}-{DEFAULT_K[1]}"


class _Failure(click.ClickException):
    """A one-line failure with exit code 1."""

    def show(self, file=None):
        click.echo(f"quantize: error: {self.message}", err=True)


def _run(ctx: click.Context, fn):
    """Call ``fn``; turn user-caused errors into a one-line message and exit 1."""
    from quantize.errors import QuantizeError
    from quantize.kernels.loading import compile_all, compile_pending

    try:
        if compile_pending():  # once after install; later runs load the cache
            click.echo("quantize: compiling its kernels once after install (about 30 s)...", err=True)
            compile_all()
        return fn()
    except (QuantizeError, ValueError, OSError) as exc:
        if (ctx.find_root().obj or {}).get("debug"):
            raise
        msg = str(exc) or exc.__class__.__name__
        if isinstance(exc, OSError) and exc.strerror and exc.filename is not None:
            msg = f"{exc.filename}: {exc.strerror}"  # not "[Errno 2] ...: 'name'"
        elif isinstance(exc, OSError) and getattr(exc, "filename", None) and str(exc.filename) not in msg:
            msg = f"{exc.filename}: {msg}"
        raise _Failure(_one_message_line(ctx, msg)) from None
    except MemoryError:
        # Out of memory anywhere in the job (numpy raises it as a subclass): one line naming the inputs.
        if (ctx.find_root().obj or {}).get("debug"):
            raise
        given = [ctx.params.get(p.name or "") for p in ctx.command.params if isinstance(p, click.Argument)]
        names = [str(v) for g in given for v in (g if isinstance(g, (tuple, list)) else (g,))
                 if isinstance(v, str)] or ["the job"]
        raise _Failure(_one_message_line(ctx, f"{', '.join(names)[:300]}: not enough memory for this job; "
                                              "lower --max-pixels or free memory")) from None


#: Longest message line shown: a hostile file's contents or a huge number are never echoed whole.
_MESSAGE_LIMIT = 1000


def _one_message_line(ctx: click.Context, msg: str) -> str:
    """The message's first line, with the command's own file names kept whole (a newline in a file name
    is shown as \\n, not taken for the end of the message), cut to :data:`_MESSAGE_LIMIT` characters."""
    for value in ctx.params.values():
        for v in value if isinstance(value, (tuple, list)) else (value,):
            if isinstance(v, str) and ("\n" in v or "\r" in v):
                msg = msg.replace(v, v.replace("\n", "\\n").replace("\r", "\\r"))
    line = msg.splitlines()[0] if msg else msg
    return line if len(line) <= _MESSAGE_LIMIT else line[: _MESSAGE_LIMIT - 20] + " ... (cut)"


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


def _output_file(ctx, param, value):
    """-o for one output file: neither empty nor ending in a path separator (a folder's name)."""
    if value == "":
        raise click.BadParameter("is empty; give the name of the file to write")
    if value.endswith(("/", "\\")):
        raise click.BadParameter(f"{value!r} ends in {value[-1]!r}, so it names a folder; give the name of "
                                 "the file to write, such as out.png")
    return value


def _output_folder(ctx, param, value):
    """-o for an output folder: not empty (an empty name would silently mean the current folder)."""
    if value == "":
        raise click.BadParameter("is empty; give the folder to write into ('.' for the current folder)")
    return value


def _use_cmyk_profile(ctx, param, value):
    """Read CMYK images without an embedded profile through this ICC profile for the whole command."""
    if value is None:
        return
    from quantize.errors import QuantizeError
    from quantize.io.read import assume_cmyk_profile

    try:
        ctx.with_resource(assume_cmyk_profile(value))
    except QuantizeError as exc:
        raise click.BadParameter(str(exc)) from exc


def _cmyk_profile_option(f):
    return click.option(
        "--cmyk-profile", type=click.Path(dir_okay=False), default=None, expose_value=False,
        callback=_use_cmyk_profile,
        help="ICC profile (CMYK) of the press a CMYK image was separated for: CMYK images without an "
             "embedded profile are read through it. Without it they are read with a naive formula, with a "
             "warning. An embedded profile always wins.")(f)


def _seed_option(ctx, param, value):
    """--seed checked by the library's own validator, named as the option that was wrong."""
    from quantize.fit.settings import FitSettings

    try:
        return FitSettings(seed=value).seed
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from None


def _restarts_option(ctx, param, value):
    """--restarts checked by the library's own validator: the same message as ``fit_palette``."""
    from quantize.fit.settings import FitSettings

    try:
        return FitSettings(restarts=value).restarts
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from None


#: Help of --nearest, wherever a command maps pixels.
_NEAREST_HELP = "Map pixels by ΔE00 or by distance in the fitting space; auto: ΔE00, or the space's distance when dithering."


def _nearest_option(f):
    """--nearest alone, for commands that map onto a saved palette (``apply``)."""
    return click.option("--nearest", type=click.Choice(NEAREST), default="auto", show_default=True,
                        help=_NEAREST_HELP)(f)


def _max_pixels_option(f):
    """--max-pixels alone, for commands that fit nothing (``apply``)."""
    return _fit_option_list()["max_pixels"](f)


def _fit_option_list() -> dict:
    """Every fitting option, by its parameter name: the one definition the commands share."""
    return {
        "colours": click.option("-k", "--colours", "colours", default=None,
                                callback=lambda c, p, v: None if v is None else _k_option(v),
                                help=f"Palette size N, or MIN-MAX to let the rule choose [default: {DEFAULT_K_TEXT}; "
                                     "for a photo under the auto rule, up to 256]."),
        "space": click.option("--space", type=click.Choice(SPACE_NAMES), default="lab", show_default=True,
                              help="Perceptual space the palette is fitted in."),
        "rule": click.option("--rule", type=click.Choice(("auto", "bic", "target")), default=None,
                             help="How N is chosen from a range. auto (default): artwork gets the fewest inks that "
                                  "print every flat area, a photo the smallest palette meeting the ΔE00 target (2.5 "
                                  "unless --target); bic: penalised score; target: smallest N meeting --target."),
        "kind": click.option("--kind", type=click.Choice(("auto", "artwork", "photo")), default="auto",
                             show_default=True, help="What the auto rule takes the image to be; auto judges it and "
                                                     "says why."),
        "target": click.option("--target", "target", type=click.FloatRange(min=0, min_open=True), default=None,
                               help="ΔE00 target for --rule target (implies it), or for photos under --rule auto."),
        "target_stat": click.option("--target-stat", type=click.Choice(("mean", "p95")), default="mean",
                                    show_default=True, help="Which ΔE00 statistic the target applies to."),
        # --locked is the library's keyword (FitSettings.locked) and the palette file's key; --lock, the
        # older spelling, stays so that existing scripts keep working.
        "locked": click.option("--locked", "--lock", "locked", multiple=True, metavar="COLOUR",
                               help="Hold a colour fixed (substrate, brand colour): #rgb, #rrggbb, L,a,b or a CSS "
                                    "colour name. Repeatable; --lock is the same option."),
        "seed": click.option("--seed", type=int, default=0, show_default=True, callback=_seed_option,
                             help="Random seed; same seed, same palette."),
        "restarts": click.option("--restarts", type=int, default=8, show_default=True, callback=_restarts_option,
                                 help="k-means++ restarts per palette size (at least 1)."),
        "seeding": click.option("--seeding", type=click.Choice(SEEDINGS), default="k-means++", show_default=True,
                                help="How each restart picks its first centres."),
        "nearest": click.option("--nearest", type=click.Choice(NEAREST), default="auto", show_default=True,
                                help=_NEAREST_HELP),
        "max_pixels": click.option("--max-pixels", type=click.IntRange(min=1), default=None,
                                   help="Refuse images larger than this (decompression-bomb guard; default "
                                        "Pillow's limit)."),
    }


def _fit_options(f=None, *, skip=()):
    """Options shared by every command that fits a palette; ``skip`` names any a command defines
    its own way (``sweep``'s -k is a range to sweep)."""
    def add(g):
        for name, opt in reversed(list(_fit_option_list().items())):
            if name not in skip:
                g = opt(g)
        return g

    return add if f is None else add(f)


#: Choices of --nearest; "auto" leaves the choice to quantize.render.mapping.resolve_metric.
NEAREST = ("auto", "ciede2000", "space")


def _metric(nearest: str) -> str | None:
    return None if nearest == "auto" else nearest


def _fit_settings(o: dict, **more):
    """The FitSettings of the fit options ``o``: the library validates them, with its messages."""
    from quantize.fit.settings import FitSettings

    rule = o["rule"] or ("target" if o["target"] is not None else "auto")
    if rule == "target" and o["target"] is None:
        raise click.UsageError("--rule target needs --target DELTA_E")
    if o["target"] is not None and o.get("colours") is not None and "-" not in o["colours"]:
        raise click.UsageError(f"--target chooses the palette size, but -k {o['colours']} fixes it; "
                               "give a range (-k MIN-MAX) or no -k")
    more.setdefault("kind", {"photo": "continuous tone"}.get(o.get("kind", "auto"), o.get("kind", "auto")))
    more.setdefault("seeding", o.get("seeding", "k-means++"))
    more.setdefault("nearest", _metric(o.get("nearest", "auto")))
    try:
        return FitSettings(space=o["space"], rule=rule, target=o["target"], target_stat=o["target_stat"],
                           locked=list(o["locked"]), seed=o["seed"], restarts=o["restarts"], **more)
    except ValueError as exc:
        raise _Failure(str(exc)) from None


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


def _fit_with_progress(images, k: str | None, settings, max_pixels):
    from quantize.fit.engine import fit_palette, parse_k
    from quantize.fit.settings import DEFAULT_K

    with _progress(len(parse_k(DEFAULT_K if k is None else k)), "fitting") as bar:
        return fit_palette(images, k, settings=settings, max_pixels=max_pixels, progress=lambda _: bar.update(1))


def _colour_on() -> bool:
    """Whether to print colour: --color always / never, else on a terminal unless NO_COLOR is set
    (no-color.org: any non-empty value)."""
    import os

    ctx = click.get_current_context(silent=True)
    mode = ((ctx.find_root().obj or {}).get("colour") if ctx else None) or "auto"
    if mode != "auto":
        return mode == "always"
    return not os.environ.get("NO_COLOR") and sys.stdout.isatty()


def _swatch(hexcode: str) -> str:
    if not _colour_on():
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
        click.echo(f"  {r['index']:>3} {_swatch(r['hex'])}{r['hex']}  Lab {L:6.2f} {a:7.2f} {b:7.2f}  {cov}{flag}{unused}",
                   color=_colour_on() or None)


def _print_de(label, stats):
    click.echo(f"{label}: mean {stats['mean']:.2f}  median {stats['median']:.2f}  "
               f"p95 {stats['p95']:.2f}  max {stats['max']:.2f}")


#: Version of the --json summaries' layout; raise it when a key changes meaning or goes away.
SUMMARY_VERSION = 1


def _with_schema(summary: dict) -> dict:
    """The summary under its schema's name and version (``quantize.<command>.summary``), as the palette
    and manifest files carry theirs."""
    ctx = click.get_current_context(silent=True)
    command = ctx.info_name if ctx is not None and ctx.info_name else "command"
    return {"format": f"quantize.{command}.summary", "version": SUMMARY_VERSION, **summary}


def _quiet() -> bool:
    """Whether -q asked for no summary."""
    ctx = click.get_current_context(silent=True)
    return bool(ctx and (ctx.find_root().obj or {}).get("quiet"))


def _emit(as_json: bool, summary: dict, human):
    if as_json:
        click.echo(json.dumps(_with_schema(summary), indent=2, ensure_ascii=False))
    elif not _quiet():
        human()
        click.echo(f"done in {summary['seconds']:.2f} s")


def _check_outputs(paths, force: bool, inputs):
    """Refuse before any work: an existing output (without --force), an input as output, or a
    folder that cannot take the file; a name the system refuses (too long) is said in one line."""
    try:
        _check_output_paths(paths, force, inputs)
    except OSError as exc:
        name = exc.filename if exc.filename is not None else (paths[0] if paths else "")
        raise _Failure(f"{_shown(name)}: {exc.strerror or exc}") from None


def _shown(name, limit: int = 200) -> str:
    """A file name as a message shows it: on one line, and cut short when it is very long."""
    text = str(name).replace("\n", "\\n").replace("\r", "\\r")
    return text if len(text) <= limit else text[: limit - 20] + "..." + text[-17:]


def _check_output_paths(paths, force: bool, inputs):
    ins = {Path(p).resolve() for p in inputs}
    folders: dict[Path, object] = {}  # each output folder -> the first output in it, as the user named it
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


#: Entries of a colour index (PNG PLTE, GIF, WebP's colour-indexing transform).
_INDEX_ENTRIES = 256
#: Outputs written through a colour index (a WebP above 256 colours is written without one).
_INDEXED = (".png", ".gif", ".webp")


def _check_indexed_size(out: Path, k: str | None):
    """Refuse a palette size above 256 where the output is an indexed PNG or a GIF."""
    if k is None:  # the default: at most 256 colours
        return
    top = int(k.split("-")[-1])
    fmt = {".png": "an indexed PNG", ".gif": "a GIF"}.get(out.suffix.lower())
    if fmt and top > _INDEX_ENTRIES:
        raise click.BadParameter(f"{top} colours do not fit {fmt} (at most {_INDEX_ENTRIES})",
                                 param_hint="'-k' / '--colours'")


def _check_room_for_transparency(out: Path, k: str | None, picture) -> None:
    """Refuse, before the fit, a fixed 256-colour palette for a picture that needs a clear index entry.

    An indexed output keeps transparency in its colour index: a pixel below
    alpha :data:`quantize.io.write.ALPHA_THRESHOLD` needs a fully transparent
    entry, and with 256 colours (a picture with at least 256 distinct
    colours, so the palette does not come out smaller) there is none left.
    Found here, from the picture alone, the mistake costs no fit.

    Raises
    ------
    click.UsageError
        Naming the output and the problem (exit code 2).
    """
    if k is None or out.suffix.lower() not in _INDEXED or picture.alpha is None:
        return
    lo, _, hi = k.partition("-")
    if int(lo) != _INDEX_ENTRIES or int(hi or lo) != _INDEX_ENTRIES:
        return  # a smaller fixed size leaves room; a range may choose fewer, and the write says so if not
    import numpy as np

    from quantize.core.sampling import sample_picture
    from quantize.io.write import ALPHA_THRESHOLD

    # Alpha as the writer rounds it to 8 bits: below the threshold the pixel is written clear.
    clear = np.rint(picture.alpha * (255.0 / picture.max_code)) < ALPHA_THRESHOLD
    if clear.any() and sample_picture(picture).n_colours >= _INDEX_ENTRIES:
        raise click.UsageError(
            f"{out}: {_INDEX_ENTRIES} colours and transparency do not fit the {_INDEX_ENTRIES} entries of a "
            f"{out.suffix.lower()[1:].upper()} colour index (transparent pixels need one); use -k 255 or fewer, "
            "or a .tif output")


def _judgement_summary(record) -> dict:
    """What the automatic rule said of the image, for --json (empty when no judgement was made)."""
    if record is None:
        return {}
    out = {"lost": [dict(x) for x in record.lost or ()]}
    if record.judged is not None:
        out.update(kind=record.judged, kind_reason=record.kind_reason)
    if record.target_met is not None:
        out["target_met"] = record.target_met
    return out


def _warn_unmet_target(record) -> None:
    """An unmet ΔE00 target is a warning on stderr, in every output mode."""
    if record is not None and record.target_met is False:
        click.echo(f"quantize: warning: the ΔE00 target was not met: {record.reason}", err=True)


def _print_judgement(record, target) -> None:
    """The automatic rule's judgement and what it lost, for people."""
    if record is None:
        return
    if record.judged is not None:
        click.echo(f"judged {record.judged}: {record.kind_reason}")
    for x in record.lost or ():
        click.echo(f"lost: a flat area of {x['share']:.2f} % near ({x['where'][0]:.0f} %, {x['where'][1]:.0f} %) "
                   f"of L*a*b* {x['lab'][0]:.1f}, {x['lab'][1]:.1f}, {x['lab'][2]:.1f} became {x['nearest_hex']} "
                   f"(ΔE00 {x['delta_e']:.1f})")


def _of_the_file(saved, dextra: dict, dlines: list) -> tuple[dict, list]:
    """A dither summary (``run_dither_outputs``) whose filtered ΔE00 is that of the file ``saved`` describes.

    For a JPEG that is the file as written and decoded again; a lossless
    file holds the mapping's own pixels, and its summary is returned as it is.
    """
    if not saved.file.lossy or dextra.get("delta_e_filtered") is None:
        return dextra, dlines
    f = saved.filtered
    dextra = dict(dextra, delta_e_filtered=None if f is None else f.stats)
    line = ("ΔE00 filtered: not measured (no fully opaque pixel)" if f is None else
            f"ΔE00 filtered (S-CIELAB, {f.viewing['dpi']:g} dpi at {f.viewing['distance_mm']:g} mm, "
            f"{f.ppd:.1f} px/degree), of the JPEG as written: mean {f.stats['mean']:.2f}  "
            f"median {f.stats['median']:.2f}  p95 {f.stats['p95']:.2f}  max {f.stats['max']:.2f}")
    return dextra, [line if ln.startswith("ΔE00 filtered") else ln for ln in dlines]
