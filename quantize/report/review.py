"""The review block of the report page: one image at every palette size, before and after.

Per image the block holds a size slider and a strip of size buttons, the
before/after comparison with its divider, the 1:1 button and the palette of
the size shown (a table per size; the script shows one).  The figures that
explain a size are ΔE00 figures with their relative change, not the bare
k-means cost.
"""

from __future__ import annotations

import html
import json
from dataclasses import dataclass
from typing import TYPE_CHECKING, Sequence

import numpy as np

from .embed import original_uri, result_uri, size_previews, written_uris

if TYPE_CHECKING:
    from quantize.palette import Palette

e = html.escape


@dataclass(frozen=True)
class SizeView:
    """One palette size of one image, as the block shows it.

    Attributes
    ----------
    k : int
        Palette size (requested; the palette may hold fewer colours).
    palette : Palette
    src : str
        Data URI of the reduced image.
    size : (int, int)
        Its width and height, px.
    coverage : ndarray
        Percent of the shown image's pixels per colour.
    delta_e : dict
        ΔE00 ``mean``, ``p95``, ``max`` of this image at this size.
    full : bool
        True for the reported result itself (full mapping, any dither);
        False for a preview mapped from the scaled-down original.
    mark : str or None, default None
        For a lossy file (JPEG), the data URI of an indexed image giving
        each shown pixel its nearest palette colour, which the swatch
        highlight reads instead of ``src``; None when ``src`` holds the
        palette's colours themselves.
    """

    k: int
    palette: Palette
    src: str
    size: tuple
    coverage: np.ndarray
    delta_e: dict
    full: bool
    mark: str | None = None


def size_views(picture, result, sweep, *, max_side, preview_side, more=(), written=None) -> list[SizeView]:
    """The sizes one image is shown at: every row of ``sweep``, or every size the result's fit tried.

    The row whose palette is the result's own shows the result itself, at
    ``max_side``; the other rows show previews at ``preview_side``.  Without
    a sweep, the sizes are the candidates of the result's fit record that
    kept their palettes (:attr:`quantize.palette.FitCandidate.palette`: a
    palette fitted in this run, not one read from a file), so ``reduce -k
    3-6`` shows 3 to 6 colours from its one fit; a palette with no such
    candidates shows just ``result``.  ``more`` (rows with ``k``,
    ``palette`` and ``delta_e``, such as a sweep's) adds sizes the fit's
    rule did not try; a size the fit tried keeps the fit's palette.
    ``written`` (a :class:`quantize.render.result.SavedImage`) is the file
    the result was written to: for a lossy file (JPEG) the result's view
    shows the JPEG as written, with its coverage and ΔE00.
    """
    if written is not None and written.file.lossy:
        src, size, mark = written_uris(written.file, picture, result.palette, max_side)
        de = written.delta_e if written.delta_e is not None else dict.fromkeys(("mean", "median", "p95", "max"),
                                                                                float("nan"))
        own = SizeView(k=result.palette.k, palette=result.palette, src=src, size=size,
                       coverage=np.asarray(written.coverage, dtype=float), delta_e=dict(de), full=True, mark=mark)
    else:
        src, size = result_uri(result, max_side)
        own = SizeView(k=result.palette.k, palette=result.palette, src=src, size=size,
                       coverage=np.asarray(result.coverage, dtype=float), delta_e=dict(result.delta_e), full=True)
    if sweep is None:
        return _fitted_views(picture, result, own, preview_side, more)
    rows = list(sweep.rows)
    mine = [r for r in rows if list(r.palette.hex) == list(result.palette.hex)]
    others = [r for r in rows if not mine or r is not mine[0]]
    previews = iter(size_previews(picture, [r.palette for r in others], preview_side))
    views = []
    for r in rows:
        de = r.per_image.get(picture.source, r.delta_e) if r.per_image else r.delta_e
        if mine and r is mine[0]:
            views.append(SizeView(k=r.k, palette=own.palette, src=own.src, size=own.size, coverage=own.coverage,
                                  delta_e=own.delta_e, full=True, mark=own.mark))
        else:
            p = next(previews)
            views.append(SizeView(k=r.k, palette=r.palette, src=p.src, size=p.size, coverage=p.coverage,
                                  delta_e=dict(de), full=False))
    if not mine:  # a palette that is not one of the sweep's: the result first, then the sweep's sizes
        views.insert(0, own)
    return views


def _fitted_views(picture, result, own: SizeView, preview_side, more=()) -> list[SizeView]:
    """Every size of the result's own fit (its candidates' palettes, the chosen size as the result), and ``more``."""
    record = result.palette.fit
    if record is None:
        return [own]
    cands = [c for c in (record.candidates or ()) if c.palette is not None]
    tried = {c.k for c in cands}
    cands = sorted(cands + [m for m in more if m.palette.k not in tried and m.k not in tried],
                   key=lambda c: c.palette.k)
    if len(cands) < 2:
        return [own]
    others = [c for c in cands if c.k != record.k]
    previews = iter(size_previews(picture, [c.palette for c in others], preview_side))
    views = []
    for c in cands:
        if c.k == record.k:  # the result itself (also when a dither moved its palette after the fit)
            views.append(own)
        else:
            p = next(previews)
            views.append(SizeView(k=c.k, palette=c.palette, src=p.src, size=p.size, coverage=p.coverage,
                                  delta_e=dict(c.delta_e), full=False))
    if all(c.k != record.k for c in cands):
        views.insert(0, own)
    return views


def _change(now: float, before: float | None) -> str:
    if before is None or before <= 0:
        return ""
    return f"{100.0 * (now - before) / before:+.0f} %"


def size_label(views: Sequence[SizeView], i: int) -> str:
    """What the slider shows for size ``i``: k, ΔE00 mean and its change from the size before."""
    v = views[i]
    text = f"k = {v.k} ({v.palette.k} colours): ΔE00 mean {v.delta_e['mean']:.2f}, p95 {v.delta_e['p95']:.2f}"
    if i > 0:
        text += f"; {_change(v.delta_e['mean'], views[i - 1].delta_e['mean'])} mean against k = {views[i - 1].k}"
    if not v.full:
        text += f" (preview, {v.size[0]}×{v.size[1]} px)"
    elif v.mark is not None:
        text += " (the JPEG as written)"
    return text


def palette_table(view: SizeView, *, shown: bool) -> str:
    """The palette of one size: swatch button, hex, CIELAB, coverage, locked, name."""
    pal = view.palette
    lab = pal.lab
    order = np.argsort(-view.coverage, kind="stable") if len(view.coverage) == pal.k else range(pal.k)
    rows = []
    for j in order:
        rgb = ",".join(str(int(v)) for v in pal.rgb8[j])
        cov = f"{view.coverage[j]:.2f}" if j < len(view.coverage) else ""
        rows.append(
            f'<tr><td class="l"><button type="button" class="swatch" style="background:{pal.hex[j]}" '
            f'data-rgb="{rgb}" data-light="{lab[j, 0]:.1f}" aria-pressed="false" '
            f'title="show where {pal.hex[j]} is"></button></td>'
            f"<td>{j}</td><td class=\"l\">{pal.hex[j]}</td><td>{lab[j, 0]:.2f}</td><td>{lab[j, 1]:.2f}</td>"
            f"<td>{lab[j, 2]:.2f}</td><td>{cov}</td><td class=\"l\">{'locked' if pal.locked[j] else ''}</td>"
            f"<td class=\"l\">{e(pal.names[j] or '')}</td></tr>")
    head = ('<tr><th class="l">colour</th><th>#</th><th class="l">hex</th><th>L*</th><th>a*</th><th>b*</th>'
            '<th>coverage %</th><th class="l">locked</th><th class="l">name</th></tr>')
    if view.mark is not None:
        where = ("of the JPEG as written, each decoded pixel counted for the palette colour nearest to it "
                 "(CIEDE2000); the JPEG holds many more colours than the palette")
        what = "where the pixels nearest to that colour are"
    else:
        where, what = ("of the full image" if view.full else "of the preview"), "where that colour is"
    return (f'<div class="palette-at" data-k="{view.k}"{"" if shown else " hidden"}><h3>Palette at k = {view.k}: {pal.k} colours, '
            f"most used first</h3><table><thead>{head}</thead><tbody>{''.join(rows)}</tbody></table>"
            f'<p class="note">Coverage is measured {where}. Click a swatch to show {what}; '
            "click it again to clear.</p></div>")


def review_block(picture, views: Sequence[SizeView], *, start: int, picks: dict, max_side, heading: str) -> str:
    """HTML of one image's review block (the page's script drives it)."""
    orig, osize = original_uri(picture, max_side)
    w, h = osize
    # The shown size's image is in the page once, in its <img>; the script reads it from there.
    sizes = [{"k": v.k, "src": None if i == start else v.src, "label": size_label(views, i),
              "mark": v.mark is not None} for i, v in enumerate(views)]
    marks = [v.mark for v in views if v.mark is not None]
    data = json.dumps({"start": start, "sizes": sizes}).replace("</", "<\\/")
    parts = [f'<section class="review" data-k="{views[start].k}">', f"<h2>{heading}</h2>",
             '<div class="controls">']
    if len(views) > 1:
        parts.append(f'<label>Palette size <input type="range" class="size" min="0" max="{len(views) - 1}" '
                     f'step="1" value="{start}"></label>')
        buttons = []
        for i, v in enumerate(views):
            by = [n for n, k in picks.items() if k == v.k]
            cls = ' class="picked"' if by else ""
            tip = f"k = {v.k}" + (f", picked by the {', '.join(by)} rule" if by else "")
            buttons.append(f'<button type="button"{cls} data-i="{i}" aria-pressed="false" title="{e(tip)}">'
                           f"{v.k}</button>")
        parts.append(f'<div class="sizes" role="group" aria-label="palette sizes">{"".join(buttons)}</div>')
    parts.append('<button type="button" class="zoom" aria-pressed="false">1:1 pixels</button></div>')
    if len(views) == 1:
        parts.append('<p class="note">This page shows one palette size; a sweep\'s page (quantize sweep '
                     "--report) shows the image at every size.</p>")
    if picks and len(views) > 1:
        named = ", ".join(f"k = {k} ({n} rule)" for n, k in picks.items())
        parts.append(f'<p class="note">Sizes a rule picked are framed red: {e(named)}.</p>')
    parts.append(f'<p class="size-label">{e(size_label(views, start))}</p>')
    parts.append(
        '<div class="frame"><div class="stage">'
        f'<img class="before" src="{orig}" width="{w}" height="{h}" alt="original image">'
        f'<div class="after-wrap"><img class="after" src="{views[start].src}" alt="reduced image">'
        '<canvas class="mark" hidden></canvas></div>'
        '<div class="divider" tabindex="0" role="slider" aria-label="before and after divider" '
        'aria-valuemin="0" aria-valuemax="100" aria-valuenow="50"></div></div></div>')
    if marks:  # read by the swatch highlight, never shown
        parts.append(f'<img class="mark-src" hidden src="{marks[0]}" alt="">')
    parts.append('<div class="legend"><span>◀ original</span><span>reduced ▶</span></div>')
    ih, iw = picture.rgb.shape[:2]
    full = "" if (w, h) == (iw, ih) else f", shown from a copy scaled to {w}×{h} px (1:1 shows that copy)"
    parts.append(f'<p class="note">Original: {e(picture.source)}, {iw}×{ih} px, {picture.bit_depth}-bit{full}. '
                 "Drag the divider (or focus it and use the arrow keys) to compare.</p>")
    parts.extend(palette_table(v, shown=i == start) for i, v in enumerate(views))
    parts.append(f'<script type="application/json" class="review-data">{data}</script></section>')
    return "\n".join(parts)
