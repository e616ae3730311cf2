"""Pictures and a page that explain a reduction: sweep plot, swatch strip, HTML report.

* :func:`sweep_figure` / :func:`plot_sweep`: colour error (ΔE00) against
  palette size, with the penalty and the total score of the palette-size
  rule below it, the chosen k marked and labelled.
* :func:`swatch_strip` / :func:`save_swatches`: the palette at every size
  of a sweep, one row per k.
* :func:`write_report`: the review page, one self-contained HTML file in a
  folder (images inline, nothing fetched from a network); its parts are in
  :mod:`.review` (the per-image block), :mod:`.embed` (images as data URIs),
  :mod:`.set_report` (a set on one palette) and :mod:`.assets` (style and
  script).

matplotlib is imported inside the plotting functions only, and without
pyplot, so nothing here touches a global backend or opens a window.  It is
the optional ``plots`` extra: the sweep plot, and a report page with a sweep,
ask for it by name when it is missing (:mod:`quantize.report.plotlib`).
"""

from __future__ import annotations

import html
import io
from pathlib import Path
from typing import Sequence

import numpy as np

from .plotlib import require_matplotlib

__all__ = ["sweep_figure", "plot_sweep", "swatch_strip", "save_swatches", "write_report",
           "score_terms", "REPORT_PAGE"]

#: File name of the page :func:`write_report` writes.
REPORT_PAGE = "index.html"
_INK = "#1b1b1b"


def score_terms(sweep) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Error term, penalty and total of the ``"bic"`` score per row.

    The split is read off :func:`quantize.fit.selection.bic_scores` itself: at
    k = 0 the penalty vanishes, leaving the error term.
    """
    from quantize.fit.selection import bic_scores

    ks = np.array(sweep.ks, dtype=float)
    robust = [r.robust for r in sweep.rows]
    total = bic_scores(ks, robust)
    error = bic_scores(np.zeros_like(ks), robust)
    return error, total - error, total


def sweep_figure(sweep, *, width: float = 9.0, height: float = 7.0, dpi: int = 110):
    """A matplotlib Figure of a sweep (no pyplot; attach a canvas to draw it).

    Top: ΔE00 mean, 95th percentile and maximum against k, with the target
    line when the target rule was used.  Bottom: the error term, the
    penalty and the total penalised score.  The chosen k is marked on both
    and labelled; a different pick of the other rule is marked too.

    Parameters
    ----------
    sweep : Sweep
        From :func:`quantize.fit.sweep.sweep`.
    width, height : float
        Inches.
    dpi : int

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    quantize.report.plotlib.PlotsUnavailable
        matplotlib is not installed (the ``plots`` extra).
    """
    require_matplotlib("the sweep plot")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    ks = np.array(sweep.ks)
    fig = Figure(figsize=(width, height), dpi=dpi, layout="constrained")
    # Room between the panels so the lowest tick label above never meets the highest below.
    fig.get_layout_engine().set(hspace=0.07)  # type: ignore[union-attr,call-arg]  # constrained: it has hspace
    FigureCanvasAgg(fig)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3, 2])
    stat = lambda name: [r.delta_e[name] for r in sweep.rows]  # noqa: E731
    top.plot(ks, stat("mean"), "o-", color="#1f5fa8", label="ΔE00 mean")
    top.plot(ks, stat("p95"), "s--", color="#c0562a", label="ΔE00 95th percentile")
    top.plot(ks, stat("max"), ":", color="#8a8a8a", label="ΔE00 maximum")
    target = sweep.settings.target
    if target is not None:
        top.axhline(target, color="#2c8a3c", lw=1.2,
                    label=f"ΔE00 target {target:g} ({sweep.settings.target_stat})")
    top.set_ylabel("colour error, ΔE00 (CIEDE2000)")
    top.set_ylim(bottom=0)
    top.grid(alpha=0.3)
    top.set_title("Colour error and penalised score per palette size", loc="left")

    err, pen, total = score_terms(sweep)
    bottom.plot(ks, err, "^-", color="#6a3d9a", ms=4, label="error term  m·ln(R + s0²)")
    bottom.plot(ks, pen, "v-", color="#b15928", ms=4, label="penalty  k·(d+1)·ln m")
    bottom.plot(ks, total, "o-", color=_INK, lw=2, label="total score (lower is better)")
    bottom.set_ylabel("penalised score (dimensionless)")
    bottom.set_xlabel("palette size k (number of colours)")
    bottom.grid(alpha=0.3)
    bottom.xaxis.set_major_locator(MaxNLocator(integer=True, nbins=16))

    chosen = sweep.chosen.k
    picks = [(sweep.rule, chosen)] + [(n, c.k) for n, c in sweep.choices.items()
                                      if n != sweep.rule and c.k != chosen]
    centre = (ks[0] + ks[-1]) / 2
    for i, (name, k) in enumerate(picks):
        style = dict(color="#d62728" if i == 0 else "#2c8a3c", lw=1.5 if i == 0 else 1.0,
                     ls="-" if i == 0 else "--")
        top.axvline(k, **style)
        bottom.axvline(k, **style)
        j = sweep.ks.index(k)
        bottom.plot([k], [total[j]], "*", ms=14, color=style["color"], zorder=5)
        label = f"{'chosen' if i == 0 else 'also'}: k = {k} ({name} rule)"
        right = k <= centre
        # Labels sit on separate heights so two picks never collide.
        top.annotate(label, xy=(k, 1.0 - 0.09 * (i + 1)), xycoords=("data", "axes fraction"),
                     xytext=(6 if right else -6, 0), textcoords="offset points",
                     ha="left" if right else "right", va="center", color=style["color"],
                     fontsize=9, bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.9))
    top.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0, fontsize=8.5, frameon=False)
    bottom.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0, fontsize=8.5, frameon=False)
    return fig


def _png_bytes_of(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def plot_sweep(sweep, path, *, force: bool = False, **figure_options) -> Path:
    """Write :func:`sweep_figure` as a PNG, atomically.

    Raises
    ------
    OutputError
        The file exists and ``force`` is false, or cannot be written.
    quantize.report.plotlib.PlotsUnavailable
        matplotlib is not installed (the ``plots`` extra); nothing is written.

    Examples
    --------
    >>> plot_sweep(quantize.fit.sweep.sweep("poster.png"), "sweep.png")  # doctest: +SKIP
    PosixPath('sweep.png')
    """
    from quantize.io.write import atomic_write_bytes

    return atomic_write_bytes(path, _png_bytes_of(sweep_figure(sweep, **figure_options)), force=force)


def _font(size: int):
    """DejaVu Sans from matplotlib's own data (it has the Greek Δ), else Pillow's default (matplotlib is
    optional: the swatch strip needs no plot)."""
    from PIL import ImageFont

    try:
        import matplotlib

        return ImageFont.truetype(str(Path(matplotlib.get_data_path()) / "fonts" / "ttf" / "DejaVuSans.ttf"), size)
    except (OSError, ImportError):
        return ImageFont.load_default(size=size)


def swatch_strip(sweep, *, cell: int | None = None, row_height: int = 34):
    """The palette at every k of a sweep as one image, one row per k.

    Each row reads ``k = N`` on the left, then the colours from most to
    least used (pooled coverage), then the row's ΔE00 mean on the right.
    The chosen row is framed and says so.

    Returns
    -------
    PIL.Image.Image
        RGB.
    """
    from PIL import Image, ImageDraw

    kmax = max(r.palette.k for r in sweep.rows)
    cell = cell or int(np.clip(1100 // kmax, 14, 44))
    font = _font(15)
    left, right, pad = 150, 150, 6
    width = left + kmax * cell + right
    height = pad + len(sweep.rows) * (row_height + pad)
    img = Image.new("RGB", (width, height), "white")
    draw = ImageDraw.Draw(img)
    chosen = sweep.chosen.k
    for i, r in enumerate(sweep.rows):
        y0 = pad + i * (row_height + pad)
        order = np.argsort(-np.asarray(r.coverage), kind="stable")
        for j, idx in enumerate(order):
            x0 = left + j * cell
            draw.rectangle([x0, y0, x0 + cell - 2, y0 + row_height - 1], fill=tuple(int(v) for v in r.palette.rgb8[idx]))
        label = f"k = {r.k}" + ("  chosen" if r.k == chosen else "")
        draw.text((8, y0 + row_height / 2), label, fill=_INK, font=font, anchor="lm")
        draw.text((left + kmax * cell + 10, y0 + row_height / 2), f"ΔE00 mean {r.delta_e['mean']:.2f}",
                  fill=_INK, font=font, anchor="lm")
        if r.k == chosen:
            draw.rectangle([2, y0 - 3, width - 3, y0 + row_height + 2], outline="#d62728", width=3)
    return img


def save_swatches(sweep, path, *, force: bool = False, **options) -> Path:
    """Write :func:`swatch_strip` as a PNG, atomically (OutputError if it exists)."""
    from quantize.io.write import atomic_write_bytes

    buf = io.BytesIO()
    swatch_strip(sweep, **options).save(buf, format="PNG")
    return atomic_write_bytes(path, buf.getvalue(), force=force)


# -- the HTML page ---------------------------------------------------------


def _as_list(x) -> list:
    return list(x) if isinstance(x, (list, tuple)) else [x]


def _table(head: Sequence[str], rows: Sequence[Sequence[str]], *, left=(0,), marks=()) -> str:
    """HTML table; cells are pre-escaped HTML; ``marks`` are row indices to highlight."""
    th = "".join(f'<th class="l">{h}</th>' if i in left else f"<th>{h}</th>" for i, h in enumerate(head))
    body = []
    for n, r in enumerate(rows):
        tds = "".join(f'<td class="l">{c}</td>' if i in left else f"<td>{c}</td>" for i, c in enumerate(r))
        body.append(f'<tr class="chosen">{tds}</tr>' if n in marks else f"<tr>{tds}</tr>")
    return f"<table><thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _sizes_table(cands, chosen, picks=None) -> str:
    """Every size with the meaning of its numbers: ΔE00 and its change, the cost relative to the first size."""
    from quantize.fit.sweep_result import candidate_rows

    rows, marks = [], []
    cands = candidate_rows(cands)
    first = cands[0]["inertia"] if cands else 0.0
    for n, c in enumerate(cands):
        de = c["delta_e"]
        by = ", ".join(name for name, k in (picks or {}).items() if k == c["k"])
        prev = cands[n - 1]["delta_e"]["mean"] if n else None
        change = f"{100.0 * (de['mean'] - prev) / prev:+.0f} %" if prev else ""
        cost = f"{100.0 * c['inertia'] / first:.1f} %" if first > 0 else ""
        rows.append([str(c["k"]), f"{de['mean']:.2f}", change, f"{de['p95']:.2f}", f"{de['max']:.2f}", cost,
                     f"{c['score']:.2f}", html.escape(by)])
        if c["k"] == chosen:
            marks.append(n)
    k0 = cands[0]["k"] if cands else ""
    head = ["k", "ΔE00 mean", "mean against the size before", "ΔE00 p95", "ΔE00 max",
            f"k-means cost, % of k = {k0}", "penalised score", "picked by"]
    return (_table(head, rows, left=(), marks=marks)
            + '<p class="note">ΔE00 mean: the average colour difference per pixel between the image and its '
              "reduction (about 1 is at the edge of what a trained eye sees side by side; common practice, "
              "no source). The k-means cost is the fit's own measure, the sum over pixels of the squared "
              f"distance to their palette colour in the fitting space, shown relative to k = {k0}. "
              "The penalised score weighs that error against the number of colours; lower is better.</p>")


_SETTING_NAMES = {"locked": "locked colours asked for", "k_requested": "palette size asked for",
                  "nearest": "nearest colour by", "refine": "refinement",
                  "weighting": "images weighted", "target": "ΔE00 target", "target_stat": "target statistic"}


def _settings_rows(pal, sweep, result) -> list[tuple[str, str]]:
    """The settings that produced the page's palettes, as (name, value) text."""
    def text(v):
        if v is None or v == () or v == []:
            return "—"
        if isinstance(v, (list, tuple)):
            return ", ".join(str(x) for x in v)
        return str(v)

    rows = []
    if sweep is not None:
        d = sweep.settings_dict()
        rows.append(("palette sizes swept", f"{d['k_range'][0]}–{d['k_range'][1]}"))
        rows.append(("rule for the marked size", sweep.rule))
        for key in ("space", "seed", "restarts", "seeding", "refine", "warm", "nearest", "weighting", "target",
                    "target_stat", "locked"):
            rows.append((_SETTING_NAMES.get(key, key.replace("_", " ")), text(d[key])))
        rows.append(("pixels / distinct colours sampled", f"{d['n_pixels']} / {d['n_distinct']}"))
    elif pal.fit is not None:
        f = pal.fit
        for key in ("rule", "k_requested", "space", "seed", "restarts", "seeding", "refine", "nearest", "weighting",
                    "target", "target_stat", "kind", "locked"):
            rows.append((_SETTING_NAMES.get(key, key.replace("_", " ")), text(getattr(f, key))))
    else:
        rows.append(("palette", f"saved palette, {pal.k} colours, space {pal.space} (not fitted here)"))
    locked = [hx for hx, lk in zip(pal.hex, pal.locked) if lk]
    rows.append(("locked colours in the palette", text(locked)))
    d = result.dither
    if d is None:
        rows.append(("dither", "none"))
    else:
        # The command line's one-line wording: an ordered dither mixes two colours, it diffuses no error.
        from quantize.render.methods import describe

        rows.append(("dither", describe(d.method, strength=d.strength,
                                        serpentine=True if d.serpentine is None else d.serpentine)))
    return rows


def write_report(folder, *, original_picture, mapped, palette=None, sweep=None, error_map_path=None,
                 title: str = "quantize report", max_side: int | None = 1600, preview_side: int = 640,
                 worst: int = 5, force: bool = False, more_sizes=(), written=None) -> Path:
    """Write a self-contained HTML review page of a reduction into ``folder``.

    The folder receives one file, ``index.html``, with every image inside
    it as a data URI: nothing beside it and nothing fetched from a network,
    so the page can be mailed on its own.  Per image it shows a
    before/after comparison with a draggable divider, the palette of the
    size shown (swatch, hex, CIELAB, coverage, locked; a click on a swatch
    shows where that colour is), a 1:1 view, and the ΔE00 statistics and
    error map.  With a sweep, a size slider shows the image at every
    palette size (a preview mapped with that size's palette) and the sizes
    table gives each size's ΔE00 and its change; the settings that
    produced the palettes are listed.  Several images on one palette add
    the set's consistency (worst images, each colour's coverage per image).

    Parameters
    ----------
    folder : path
        Created if missing.
    original_picture : Picture, path, PIL image or ndarray, or a list of them
        The input image(s).
    mapped : MappedImage or a list of them
        The reduction of each input, same order.
    palette : Palette, optional
        Default: the palette of the first ``mapped``.
    sweep : Sweep, optional
        Adds the size slider, the sweep plot, swatch strip and table.
    error_map_path : path or list of paths, optional
        An error-map image per input, embedded in the page.
    title : str
        Page title.
    max_side : int or None, default=1600
        Longest side, px, of the original and the result embedded in the
        page (the result is scaled by nearest neighbour, so its colours
        stay the palette's); None embeds them at full size, so that 1:1
        shows the file's own pixels.
    preview_side : int, default=640
        Longest side, px, of the preview of each other palette size.
    worst : int, default=5
        Worst-fitting images listed for a set.
    force : bool, default=False
        Replace an existing report in ``folder``.
    more_sizes : sequence of SweepRow, default=()
        Without a sweep: palette sizes to add to the size slider beside
        those the result's fit tried (see
        :func:`quantize.report.review.size_views`).
    written : SavedImage or a list of them (or None per image), optional
        The file each result was written to (:meth:`MappedImage.write`).
        For a lossy file (JPEG) the page shows the JPEG as written, not the
        palette image it was made from: the result's image and 1:1 view,
        its coverage (each decoded pixel counted for its nearest palette
        colour) and its ΔE00 table (over the input's fully opaque pixels);
        a swatch click shows the pixels nearest to that colour.

    Returns
    -------
    pathlib.Path
        The page.

    Raises
    ------
    OutputError
        The page exists and ``force`` is false, or the folder cannot be
        written.
    ValueError
        Inputs and results differ in number or size, an error map is
        missing, or ``preview_side`` is below 16.
    quantize.report.plotlib.PlotsUnavailable
        A sweep is given and matplotlib is not installed (the ``plots``
        extra); nothing is written.

    Notes
    -----
    What is embedded is bounded by ``max_side`` and ``preview_side``, not
    by the image: a 12-megapixel photo swept over k = 2-16 at the defaults
    gave a 1.8 MB page, 8.2 MB with ``max_side=None``
    (docs/palette-per-size.md).  ΔE00 figures are from
    file data, not a measured print; the page says so.

    Examples
    --------
    >>> pal = quantize.fit_palette("poster.png", (2, 12))               # doctest: +SKIP
    >>> write_report("report", original_picture="poster.png",
    ...              mapped=pal.apply("poster.png"))                      # doctest: +SKIP
    PosixPath('report/index.html')
    """
    from quantize.io.write import atomic_write_text

    if int(preview_side) < 16:
        raise ValueError(f"preview_side {preview_side}: expected at least 16 px")
    if sweep is not None:
        require_matplotlib("the report page's sweep plot")
    pics, results, maps = _report_inputs(original_picture, mapped, error_map_path)
    files = _as_list(written) if written is not None else [None] * len(results)
    if len(files) != len(results):
        raise ValueError(f"{len(files)} written file(s) for {len(results)} result(s)")
    pal = palette if palette is not None else results[0].palette
    out = Path(folder)
    _make_report_folder(out, [REPORT_PAGE], force)
    page = _page(title, pics, results, pal, sweep, maps, max_side=max_side, preview_side=int(preview_side),
                 worst=worst, more_sizes=more_sizes, files=files)
    return atomic_write_text(out / REPORT_PAGE, page, force=force)


def _report_inputs(original_picture, mapped, error_map_path):
    """The inputs as Pictures (each file decoded here, once), the results and the error maps, checked."""
    from quantize.io.read import as_picture, load_image

    originals = _as_list(original_picture)
    results = _as_list(mapped)
    if not originals or len(originals) != len(results):
        raise ValueError(f"{len(originals)} original image(s) for {len(results)} result(s)")
    maps = _as_list(error_map_path) if error_map_path is not None else []
    if maps and len(maps) != len(results):
        raise ValueError(f"{len(maps)} error map(s) for {len(results)} result(s)")
    for m in maps:
        if not Path(m).is_file():
            raise ValueError(f"{m}: error map not found")
    pics = [load_image(o) if isinstance(o, (str, bytes)) or hasattr(o, "__fspath__") else as_picture(o)
            for o in originals]
    for p, r in zip(pics, results):
        if tuple(p.rgb.shape[:2]) != tuple(r.indices.shape):
            raise ValueError(f"{p.source}: original is {p.rgb.shape[1]}x{p.rgb.shape[0]} px but its result is "
                             f"{r.indices.shape[1]}x{r.indices.shape[0]} px")
    return pics, results, maps


def _make_report_folder(out: Path, names, force: bool) -> None:
    """Refuse before writing anything: a file in the way, or any file of the report unless ``force``."""
    from quantize.errors import OutputError

    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a folder")
    if not force:
        for name in names:
            if (out / name).exists():
                raise OutputError(f"{out / name}: already exists (use force / --force to replace the report)")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{out}: cannot create the report folder ({exc.strerror or exc})") from exc


def _error_map_uri(path) -> str:
    """An error map as a data URI; a file type a browser may not show (TIFF) is re-encoded as PNG."""
    from PIL import Image

    from .embed import data_uri

    p = Path(path)
    mime = {".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg"}.get(p.suffix.lower())
    if mime:
        return data_uri(p.read_bytes(), mime)
    with Image.open(p) as im:
        return data_uri(_png(im.convert("RGBA" if "A" in im.getbands() else "RGB")), "image/png")


def _png(img) -> bytes:
    buf = io.BytesIO()
    img.save(buf, format="PNG")
    return buf.getvalue()


def _image_blocks(pics, results, sweep, maps, *, max_side, preview_side, more_sizes=(), files=None) -> list[str]:
    """Each image's review block, ΔE00 table and error map."""
    from .review import review_block, size_views

    e = html.escape
    picks = {n: c.k for n, c in sweep.choices.items()} if sweep is not None else {}
    parts = []
    for i, (p, r) in enumerate(zip(pics, results)):
        f = files[i] if files else None
        views = size_views(p, r, sweep, max_side=max_side, preview_side=preview_side, more=more_sizes, written=f)
        start = next(n for n, v in enumerate(views) if v.full)
        heading = e(p.source) if len(pics) > 1 else "Original and result"
        parts.append(review_block(p, views, start=start, picks=picks, max_side=max_side, heading=heading))
        parts.append(_delta_e_table(r, f))
        if maps:
            parts.append(f'<h3>Error map</h3><img class="wide" src="{_error_map_uri(maps[i])}" alt="ΔE00 error map">')
    return parts


def _set_image(picture, result, written):
    """One image of a set as the consistency section counts it: the file's figures for a JPEG."""
    from .set_report import SetImage

    if written is not None and written.file.lossy and written.delta_e is not None:
        return SetImage(picture.source, dict(written.delta_e), list(written.coverage))
    return SetImage(picture.source, dict(result.delta_e), list(result.coverage))


def _delta_e_table(r, written) -> str:
    """The ΔE00 statistics of one result, or of the JPEG it was written to (decoded, its opaque pixels)."""
    stats = ("mean", "median", "p95", "max")
    head = ["ΔE00", "mean", "median", "95th percentile", "maximum"]
    if written is not None and written.file.lossy:
        rows = [["plain"] + ([f"{written.delta_e[k]:.2f}" for k in stats] if written.delta_e is not None
                             else ["not measured"] + [""] * 3)]
        if written.filtered is not None:
            rows.append(["filtered (S-CIELAB)"] + [f"{written.filtered.stats[k]:.2f}" for k in stats])
        return (f"<h3>ΔE00 per pixel of the JPEG as written and decoded again ({r.palette.k} palette colours "
                "before it re-encoded them; the input's fully opaque pixels)</h3>" + _table(head, rows))
    de = r.delta_e
    rows = [["plain"] + [f"{de[k]:.2f}" for k in stats]]
    if "filtered_mean" in de:
        rows.append(["filtered (S-CIELAB)"] + [f"{de['filtered_' + k]:.2f}" for k in stats])
    return f"<h3>ΔE00 per pixel of the result ({r.palette.k} colours, full image)</h3>" + _table(head, rows)


def _page(title, pics, results, pal, sweep, maps, *, max_side, preview_side, worst, more_sizes=(), files=None) -> str:
    from .assets import SCRIPT
    from .embed import data_uri
    from .set_report import CAUTION, html_document, set_section

    e = html.escape
    parts = [f"<h1>{e(title)}</h1>", CAUTION]
    fit = pal.fit
    if fit is not None and fit.reason:
        parts.append(f"<p>{pal.k} colours: {e(str(fit.reason))}</p>")
    parts.extend(_image_blocks(pics, results, sweep, maps, max_side=max_side, preview_side=preview_side,
                               more_sizes=more_sizes, files=files))
    if len(pics) > 1:
        shown = files or [None] * len(pics)
        parts.append(set_section(pal, [_set_image(p, r, f) for p, r, f in zip(pics, results, shown)], worst=worst))
    parts.append("<h2>Settings that produced it</h2>"
                 + _table(["setting", "value"], [[e(a), e(b)] for a, b in _settings_rows(pal, sweep, results[0])],
                          left=(0, 1)))
    if sweep is not None:
        parts.append("<h2>Palette size sweep</h2>")
        parts.append(_sizes_table(sweep, sweep.chosen.k, {n: c.k for n, c in sweep.choices.items()}))
        parts.append(f'<img class="wide" src="{data_uri(_png_bytes_of(sweep_figure(sweep)), "image/png")}" '
                     'alt="colour error and penalised score per palette size">')
        strip = io.BytesIO()
        swatch_strip(sweep).save(strip, format="PNG")
        parts.append(f'<img class="wide" src="{data_uri(strip.getvalue(), "image/png")}" '
                     'alt="the palette at every size">')
        csv = data_uri(sweep.to_csv().encode("utf-8"), "text/csv")
        parts.append(f'<p class="note">The table as CSV, with the raw k-means cost: '
                     f'<a download="sweep.csv" href="{csv}">sweep.csv</a></p>')
    elif fit is not None and fit.candidates:
        parts.append("<h2>Palette sizes considered</h2>")
        parts.append(_sizes_table(fit.candidates, fit.k, {fit.rule or "": fit.k}))
    return html_document(title, "\n".join(parts), script=SCRIPT)
