"""Pictures and a page that explain a reduction: sweep plot, swatch strip, HTML report.

* :func:`sweep_figure` / :func:`plot_sweep`: colour error (ΔE00) against
  palette size, with the penalty and the total score of the palette-size
  rule below it, the chosen k marked and labelled.
* :func:`swatch_strip` / :func:`save_swatches`: the palette at every size
  of a sweep, one row per k.
* :func:`write_report`: a self-contained HTML page in a folder, the images
  beside it and nothing fetched from a network.

matplotlib is imported inside the plotting functions only, and without
pyplot, so nothing here touches a global backend or opens a window.
"""

from __future__ import annotations

import html
import io
from pathlib import Path
from typing import Sequence

import numpy as np

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
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    ks = np.array(sweep.ks)
    fig = Figure(figsize=(width, height), dpi=dpi, layout="constrained")
    # Room between the panels so the lowest tick label above never meets the highest below.
    fig.get_layout_engine().set(hspace=0.07)
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

    Examples
    --------
    >>> plot_sweep(quantize.fit.sweep.sweep("poster.png"), "sweep.png")  # doctest: +SKIP
    PosixPath('sweep.png')
    """
    from quantize.io.write import atomic_write_bytes

    return atomic_write_bytes(path, _png_bytes_of(sweep_figure(sweep, **figure_options)), force=force)


def _font(size: int):
    """DejaVu Sans from matplotlib's own data (it has the Greek Δ), else Pillow's default."""
    import matplotlib
    from PIL import ImageFont

    try:
        return ImageFont.truetype(str(Path(matplotlib.get_data_path()) / "fonts" / "ttf" / "DejaVuSans.ttf"), size)
    except OSError:
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

_CSS = """
body { font: 15px/1.45 system-ui, sans-serif; color: #1b1b1b; margin: 2em auto; max-width: 1200px; padding: 0 1em; }
h1 { font-size: 1.5em; margin-bottom: .2em; } h2 { font-size: 1.15em; margin-top: 1.8em; }
.note { color: #555; font-size: .9em; }
.pair { display: grid; grid-template-columns: 1fr 1fr; gap: 1em; }
.pair figure { margin: 0; } .pair img { width: 100%; height: auto; display: block;
  image-rendering: pixelated; border: 1px solid #ccc; background: repeating-conic-gradient(#eee 0 25%, #fff 0 50%) 0 0 / 16px 16px; }
figcaption { font-size: .9em; color: #444; margin-top: .3em; }
table { border-collapse: collapse; margin: .5em 0; font-variant-numeric: tabular-nums; }
th, td { padding: .25em .7em; border-bottom: 1px solid #ddd; text-align: right; }
th { background: #f4f4f4; } td.l, th.l { text-align: left; }
.sw { display: inline-block; width: 2.6em; height: 1.3em; border: 1px solid #999; vertical-align: middle; }
tr.chosen td { background: #fdecea; font-weight: 600; }
img.wide { max-width: 100%; height: auto; border: 1px solid #ddd; }
"""


def _rgb8_image(picture):
    """8-bit RGB(A) PIL image of a Picture (16-bit codes divided by 257)."""
    from PIL import Image

    rgb = picture.rgb
    if picture.bit_depth == 16:
        rgb = np.rint(rgb.astype(np.float64) / 257).astype(np.uint8)
    if picture.alpha is None:
        return Image.fromarray(np.ascontiguousarray(rgb), "RGB")
    a = picture.alpha
    if a.dtype != np.uint8:
        a = np.rint(a.astype(np.float64) / 257).astype(np.uint8)
    return Image.fromarray(np.dstack([rgb, a]), "RGBA")


def _result_image(mapped):
    from PIL import Image

    rgb = np.ascontiguousarray(mapped.rgb)
    if mapped.alpha is None:
        return Image.fromarray(rgb, "RGB")
    a = mapped.alpha
    if a.dtype == bool:
        a = a.astype(np.uint8) * 255
    elif a.dtype != np.uint8:
        a = np.rint(a.astype(np.float64) / 257).astype(np.uint8)
    return Image.fromarray(np.dstack([rgb, a]), "RGBA")


def _png(img) -> bytes:
    buf = io.BytesIO()
    img.save(buf, format="PNG")
    return buf.getvalue()


def _fit_size(size, max_side):
    w, h = size
    if max_side is None or max(w, h) <= max_side:
        return w, h
    s = max_side / max(w, h)
    return max(1, round(w * s)), max(1, round(h * s))


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


def _candidates_table(cands, chosen, picks=None) -> str:
    from quantize.fit.sweep_result import candidate_rows

    rows, marks = [], []
    for n, c in enumerate(candidate_rows(cands)):
        de = c["delta_e"]
        by = ", ".join(name for name, k in (picks or {}).items() if k == c["k"])
        rows.append([str(c["k"]), f"{c['inertia']:.6g}", f"{de['mean']:.2f}", f"{de['p95']:.2f}",
                     f"{de['max']:.2f}", f"{c['score']:.2f}", html.escape(by)])
        if c["k"] == chosen:
            marks.append(n)
    head = ["k", "k-means cost", "ΔE00 mean", "ΔE00 p95", "ΔE00 max", "penalised score", "picked by"]
    return _table(head, rows, left=(), marks=marks)


def write_report(folder, *, original_picture, mapped, palette=None, sweep=None, error_map_path=None,
                 title: str = "quantize report", max_side: int | None = 1600, force: bool = False) -> Path:
    """Write a self-contained HTML report of a reduction into ``folder``.

    The folder receives ``index.html`` and the PNG images it shows:
    the original and the result side by side at the same size, the palette
    swatches with hex, CIELAB, coverage and locked flags, the ΔE00
    statistics, the error map when one is given, and the sweep plot, swatch
    strip and table when a sweep is given (or the candidates table of a
    fit over a range).  The page fetches nothing from a network and has no
    script.  Images are written first and the page last, each atomically,
    so a page never points at a missing file.

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
        Adds the sweep plot, swatch strip and table.
    error_map_path : path or list of paths, optional
        An error-map image per input, copied beside the page.
    title : str
        Page title.
    max_side : int or None, default=1600
        Longest side of the images on the page (the result is scaled by
        nearest neighbour, so its colours stay the palette's); None keeps
        full size.
    force : bool, default=False
        Replace an existing report in ``folder``.

    Returns
    -------
    pathlib.Path
        The page.

    Raises
    ------
    OutputError
        A file of the report exists and ``force`` is false, or the folder
        cannot be written.
    ValueError
        Inputs and results differ in number or size, or an error map is
        missing.

    Examples
    --------
    >>> pal = quantize.fit_palette("poster.png", (2, 12))               # doctest: +SKIP
    >>> write_report("report", original_picture="poster.png",
    ...              mapped=pal.apply("poster.png"))                      # doctest: +SKIP
    PosixPath('report/index.html')
    """
    from quantize.io.write import atomic_write_text

    pics, results, maps = _report_inputs(original_picture, mapped, error_map_path)
    pal = palette if palette is not None else results[0].palette
    out = Path(folder)
    suffix = (lambda i: "") if len(pics) == 1 else (lambda i: f"-{i + 1}")
    files = _report_files(len(pics), maps, sweep is not None, suffix)
    _make_report_folder(out, list(files) + [REPORT_PAGE], force)
    sizes = _write_report_files(out, files, pics, results, maps, sweep, max_side, force)
    page = _page(title, pics, results, pal, sweep, files, sizes, suffix)
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


def _report_files(n: int, maps, with_sweep: bool, suffix) -> dict[str, tuple[str, int]]:
    """File name -> (kind, input number) of every file the page shows, in the order they are written."""
    files = {}
    for i in range(n):
        files[f"original{suffix(i)}.png"] = ("original", i)
        files[f"result{suffix(i)}.png"] = ("result", i)
        if maps:
            files[f"error-map{suffix(i)}{Path(maps[i]).suffix.lower() or '.png'}"] = ("map", i)
    if with_sweep:
        files.update({"sweep.png": ("plot", 0), "swatches.png": ("strip", 0), "sweep.csv": ("csv", 0)})
    return files


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


def _write_report_files(out: Path, files, pics, results, maps, sweep, max_side, force) -> list[tuple[int, int]]:
    """Write the page's images (and the sweep table), each atomically; the displayed size of each input."""
    from quantize.io.write import atomic_write_bytes

    sizes = []
    for name, (kind, i) in files.items():
        target = out / name
        if kind in ("original", "result"):
            img, size = _display_image(pics[i] if kind == "original" else results[i], kind, max_side)
            if kind == "original":
                sizes.append(size)
            atomic_write_bytes(target, _png(img), force=force)
        elif kind == "map":
            if Path(maps[i]).resolve() != target.resolve():
                atomic_write_bytes(target, Path(maps[i]).read_bytes(), force=force)
        elif kind == "plot":
            plot_sweep(sweep, target, force=force)
        elif kind == "strip":
            save_swatches(sweep, target, force=force)
        else:
            sweep.save_csv(target, force=force)
    return sizes


def _display_image(item, kind: str, max_side):
    """An original (Picture) or result (MappedImage) as a PIL image no longer than ``max_side``, and its size.

    The original is scaled smoothly; the result by nearest neighbour, so
    that its colours stay the palette's.
    """
    from PIL import Image

    img = _rgb8_image(item) if kind == "original" else _result_image(item)
    size = _fit_size(img.size, max_side)
    if size != img.size:
        img = img.resize(size, Image.Resampling.LANCZOS if kind == "original" else Image.Resampling.NEAREST)
    return img, size


def _page(title, pics, results, pal, sweep, files, sizes, suffix) -> str:
    e = html.escape
    parts = [f"<h1>{e(title)}</h1>",
             '<p class="note">ΔE00 (CIEDE2000) figures are computed from file data on an assumed sRGB '
             "display; they are not measurements of a print. Proof physically before a production run.</p>"]
    fit = pal.fit
    if fit is not None and fit.reason:
        parts.append(f"<p>{pal.k} colours: {e(str(fit.reason))}</p>")
    for i, (p, r) in enumerate(zip(pics, results)):
        w, h = sizes[i]
        s = suffix(i)
        parts.append(f"<h2>{e(p.source)}</h2>" if len(pics) > 1 else "<h2>Original and result</h2>")
        parts.append(
            '<div class="pair">'
            f'<figure><img src="original{s}.png" width="{w}" height="{h}" alt="original image">'
            f"<figcaption>Original: {e(p.source)}, {p.rgb.shape[1]}×{p.rgb.shape[0]} px, "
            f"{p.bit_depth}-bit</figcaption></figure>"
            f'<figure><img src="result{s}.png" width="{w}" height="{h}" alt="reduced image">'
            f"<figcaption>Result: {r.palette.k} colours</figcaption></figure></div>")
        de = r.delta_e
        rows = [["plain"] + [f"{de[k]:.2f}" for k in ("mean", "median", "p95", "max")]]
        if "filtered_mean" in de:
            rows.append(["filtered (S-CIELAB)"] + [f"{de['filtered_' + k]:.2f}" for k in ("mean", "median", "p95", "max")])
        parts.append("<h3>ΔE00 per pixel</h3>" + _table(
            ["ΔE00", "mean", "median", "95th percentile", "maximum"], rows))
        maps = [name for name, (kind, j) in files.items() if kind == "map" and j == i]
        if maps:
            parts.append(f'<h3>Error map</h3><img class="wide" src="{e(maps[0])}" alt="ΔE00 error map">')

    head = ["colour", "#", "hex", "L*", "a*", "b*"]
    head += ["coverage %"] if len(results) == 1 else [f"coverage % {e(p.source)}" for p in pics]
    head += ["locked", "name"]
    lab = pal.lab
    rows = []
    for j, hx in enumerate(pal.hex):
        cov = [f"{r.coverage[j]:.2f}" if j < len(r.coverage) else "" for r in results]
        rows.append([f'<span class="sw" style="background:{hx}"></span>', str(j), hx,
                     f"{lab[j, 0]:.2f}", f"{lab[j, 1]:.2f}", f"{lab[j, 2]:.2f}", *cov,
                     "locked" if pal.locked[j] else "", e(pal.names[j] or "")])
    parts.append("<h2>Palette</h2>" + _table(head, rows, left=(0, 2, len(head) - 2, len(head) - 1)))

    if sweep is not None:
        parts.append("<h2>Palette size sweep</h2>")
        parts.append('<img class="wide" src="sweep.png" alt="colour error and penalised score per palette size">')
        parts.append('<img class="wide" src="swatches.png" alt="the palette at every size">')
        parts.append(_candidates_table(sweep, sweep.chosen.k, {n: c.k for n, c in sweep.choices.items()}))
        parts.append('<p class="note">Table as CSV: <a href="sweep.csv">sweep.csv</a></p>')
    elif fit is not None and fit.candidates:
        parts.append("<h2>Palette sizes considered</h2>")
        parts.append(_candidates_table(fit.candidates, fit.k, {fit.rule or "": fit.k}))
    body = "\n".join(parts)
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<title>{e(title)}</title>\n<link rel=\"icon\" href=\"data:,\">\n"
            f"<style>{_CSS}</style>\n</head>\n<body>\n{body}\n</body>\n</html>\n")
