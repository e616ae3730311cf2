"""How one palette serves a set of images: the worst images and each colour's coverage per image.

Used by the report page when it shows several images reduced to one
palette (``apply``, ``sweep`` of a product set) and by ``batch`` with one
palette, which writes this section as a page of its own
(:func:`write_set_report`) beside its manifest.
"""

from __future__ import annotations

import html
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from .assets import CSS

__all__ = ["SetImage", "set_section", "worst_images", "write_set_report", "CAUTION"]

e = html.escape

#: What every page says about its ΔE figures.
CAUTION = ('<p class="note caution">ΔE00 (CIEDE2000) figures are computed from file data on an assumed sRGB '
           "display; they are not measurements of a print or of a customer's screen. Proof physically and "
           "follow your shop's standards before a production run.</p>")


@dataclass(frozen=True)
class SetImage:
    """One image of a set mapped onto one palette.

    Attributes
    ----------
    source : str
        The image's name as the page shows it.
    delta_e : Mapping
        ΔE00 ``mean``, ``p95`` and ``max`` of the image against its reduction.
    coverage : sequence of float
        Percent of the image's pixels per palette colour.
    """

    source: str
    delta_e: dict
    coverage: Sequence[float]


def worst_images(images: Sequence, worst: int) -> list:
    """The ``worst`` images with the highest ΔE00 mean (then p95, then name), worst first.

    Works on anything with ``source`` and ``delta_e`` attributes.
    """
    return sorted(images, key=lambda m: (-m.delta_e["mean"], -m.delta_e["p95"], m.source))[:worst]


def set_section(palette, images: Sequence[SetImage], *, worst: int = 5) -> str:
    """HTML of the set's consistency: summary, the worst images, coverage per image and colour.

    Parameters
    ----------
    palette : Palette
        The one palette every image was mapped onto.
    images : sequence of SetImage
        In the order the page lists them.
    worst : int, default=5
        How many of the worst-fitting images (highest ΔE00 mean) to list.

    Returns
    -------
    str
        HTML, empty for no images.
    """
    if not images:
        return ""
    k = palette.k
    cov = np.zeros((len(images), k))
    for n, m in enumerate(images):
        c = np.asarray([] if m.coverage is None else m.coverage, dtype=float)[:k]
        cov[n, :len(c)] = c
    means = np.array([m.delta_e["mean"] for m in images])
    using = (cov > 0).sum(axis=0)
    unused = [palette.hex[j] for j in range(k) if using[j] == 0]
    parts = ["<h2>Consistency across the set</h2>",
             f"<p>{len(images)} images on one palette of {k} colours. ΔE00 mean per image: median "
             f"{np.median(means):.2f}, worst {means.max():.2f}, best {means.min():.2f}."
             + (f" Colours no image uses: {', '.join(unused)}." if unused else "") + "</p>"]
    rows = []
    ranked = worst_images(images, worst)
    for n, m in enumerate(ranked, start=1):
        rows.append(f'<tr><td>{n}</td><td class="l">{e(m.source)}</td><td>{m.delta_e["mean"]:.2f}</td>'
                    f'<td>{m.delta_e["p95"]:.2f}</td><td>{m.delta_e["max"]:.2f}</td></tr>')
    parts.append(f"<h3>Worst-fitting images (the {len(ranked)} with the highest ΔE00 mean)</h3>"
                 '<table class="worst"><thead><tr><th>rank</th><th class="l">image</th><th>ΔE00 mean</th>'
                 f"<th>ΔE00 p95</th><th>ΔE00 max</th></tr></thead><tbody>{''.join(rows)}</tbody></table>")
    head = "".join(f'<th title="{hx}"><span class="sw" style="background:{hx}"></span><br>{j} {hx}</th>'
                   for j, hx in enumerate(palette.hex))
    body = []
    for m, c in zip(images, cov):
        cells = "".join("<td>–</td>" if v <= 0 else f"<td>{v:.2f}</td>" if v >= 0.005 else "<td>&lt;0.01</td>"
                        for v in c)
        body.append(f'<tr><td class="l">{e(m.source)}</td>{cells}</tr>')
    for name, vals in (("images using it", [str(int(u)) for u in using]),
                       ("lowest %", [f"{v:.2f}" for v in cov.min(axis=0)]),
                       ("highest %", [f"{v:.2f}" for v in cov.max(axis=0)])):
        body.append(f'<tr class="sum"><th class="l">{name}</th>{"".join(f"<td>{v}</td>" for v in vals)}</tr>')
    parts.append("<h3>Coverage % of each colour per image</h3>"
                 f'<div style="overflow-x:auto"><table class="coverage"><thead><tr><th class="l">image</th>{head}'
                 f"</tr></thead><tbody>{''.join(body)}</tbody></table></div>"
                 '<p class="note">A colour used widely in some images and not at all in others is where the '
                 "set is least consistent; – marks a colour the image does not use.</p>")
    return "\n".join(parts)


def html_document(title: str, body: str, *, script: str = "") -> str:
    """A whole page: the inline style sheet, ``body``, and ``script`` when given."""
    tail = f"\n<script>{script}</script>" if script else ""
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<title>{e(title)}</title>\n<link rel=\"icon\" href=\"data:,\">\n"
            f"<style>{CSS}</style>\n</head>\n<body>\n{body}{tail}\n</body>\n</html>\n")


def write_set_report(path, *, palette, images: Sequence[SetImage], title: str = "palette across a set",
                     worst: int = 5, notes: Sequence[str] = (), force: bool = False) -> Path:
    """Write the set's consistency as one self-contained HTML page, atomically.

    Parameters
    ----------
    path : path
        The page to write.
    palette : Palette
    images : sequence of SetImage
    title : str
    worst : int, default=5
        How many worst-fitting images to list.
    notes : sequence of str
        Shown under the title (e.g. images that failed).
    force : bool, default=False
        Replace an existing page.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    OutputError
        The page exists and ``force`` is false, or cannot be written.
    """
    from quantize.io.write import atomic_write_text

    lab = palette.lab
    rows = "".join(f'<tr><td class="l"><span class="sw" style="background:{hx}"></span></td><td>{j}</td>'
                   f'<td class="l">{hx}</td><td>{lab[j, 0]:.2f}</td><td>{lab[j, 1]:.2f}</td><td>{lab[j, 2]:.2f}</td>'
                   f"<td class=\"l\">{'locked' if palette.locked[j] else ''}</td></tr>"
                   for j, hx in enumerate(palette.hex))
    body = [f"<h1>{e(title)}</h1>", CAUTION, *(f'<p class="note">{e(n)}</p>' for n in notes),
            ('<h2>Palette</h2><table><thead><tr><th class="l">colour</th><th>#</th><th class="l">hex</th>'
             f'<th>L*</th><th>a*</th><th>b*</th><th class="l">locked</th></tr></thead><tbody>{rows}</tbody></table>'),
            set_section(palette, images, worst=worst)]
    return atomic_write_text(path, html_document(title, "\n".join(body)), force=force)
