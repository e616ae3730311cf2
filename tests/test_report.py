"""Sweep plot, swatch strip and the HTML report page, including a real browser.

The page is one file with every image inside it (data URIs).  The browser
check runs Debian's chromium headless (the binary the CI installs): the
page must load with no console message, every image it references must load (an inline probe script, added by the test to a copy
of the page, writes each image's state into the DOM), and a screenshot must
show the page's content.  A negative control proves the probe catches a
missing image and a console error.  Without chromium the test is skipped
with the reason shown.
"""

import html.parser
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from artwork import flat_artwork
from browser import CHROMIUM, NO_CHROMIUM, chromium
from PIL import Image

from quantize import fit_palette
from quantize.errors import OutputError
from quantize.fit.selection import bic_scores
from quantize.fit.sweep import sweep
from quantize.io.read import as_picture
from quantize.report.page import (
    REPORT_PAGE,
    plot_sweep,
    save_swatches,
    score_terms,
    swatch_strip,
    sweep_figure,
    write_report,
)


@pytest.fixture(scope="module")
def art():
    rgb, inks = flat_artwork(4, seed=104, size=160, jpeg_quality=85)
    return rgb


@pytest.fixture(scope="module")
def art_sweep(art):
    return sweep(art, (2, 7), restarts=2, target=3.0, target_stat="p95")


def _texts(fig):
    """Drawn, non-empty text artists of a figure with their pixel boxes.

    Tick labels whose tick lies outside the axis view are made but never
    drawn by matplotlib, so they are left out.
    """
    from matplotlib.text import Text

    renderer = fig.canvas.get_renderer()
    hidden = set()
    for ax in fig.axes:
        for labels, lim, coord in ((ax.get_xticklabels(), ax.get_xlim(), 0),
                                   (ax.get_yticklabels(), ax.get_ylim(), 1)):
            lo, hi = min(lim), max(lim)
            for t in labels:
                v = t.get_position()[coord]
                if not lo - 1e-9 * abs(hi - lo) <= v <= hi + 1e-9 * abs(hi - lo):
                    hidden.add(id(t))
    out = []
    for t in fig.findobj(Text):
        if t.get_visible() and t.get_text().strip() and id(t) not in hidden:
            bb = t.get_window_extent(renderer)
            if bb.width > 0 and bb.height > 0:
                out.append((t.get_text(), bb))
    return out


def _assert_no_overlap(fig):
    fig.canvas.draw()
    texts = _texts(fig)
    assert len(texts) > 10
    for i in range(len(texts)):
        for j in range(i + 1, len(texts)):
            (a, ba), (b, bb) = texts[i], texts[j]
            assert not ba.overlaps(bb), f"text {a!r} overlaps {b!r}"
    w, h = fig.canvas.get_width_height()
    for t, bb in texts:
        assert bb.x0 >= -1 and bb.y0 >= -1 and bb.x1 <= w + 1 and bb.y1 <= h + 1, f"{t!r} is cut off"


def test_plot_has_units_legend_and_chosen_mark(art_sweep):
    fig = sweep_figure(art_sweep)
    top, bottom = fig.axes
    assert "ΔE00" in top.get_ylabel()
    assert "palette size" in bottom.get_xlabel()
    assert "score" in bottom.get_ylabel()
    labels = [t.get_text() for t in top.get_legend().get_texts()]
    assert labels[:3] == ["ΔE00 mean", "ΔE00 95th percentile", "ΔE00 maximum"]
    assert any("target 3" in t for t in labels)
    assert len(bottom.get_legend().get_texts()) == 3
    chosen = art_sweep.chosen.k
    notes = [t.get_text() for t in top.texts]
    assert f"chosen: k = {chosen} ({art_sweep.rule} rule)" in notes
    if art_sweep.choices["target"].k != chosen:
        assert f"also: k = {art_sweep.choices['target'].k} (target rule)" in notes
    # The plotted total is the rule's own score, split into its two terms.
    err, pen, total = score_terms(art_sweep)
    np.testing.assert_allclose(total, [r.score for r in art_sweep.rows])
    np.testing.assert_allclose(err + pen, bic_scores(art_sweep.ks, [r.robust for r in art_sweep.rows]))
    total_line = [ln for ln in bottom.get_lines() if ln.get_label().startswith("total")][0]
    np.testing.assert_allclose(total_line.get_ydata(), total)
    _assert_no_overlap(fig)


def test_plot_text_does_not_overlap_on_a_wide_range():
    # Many distinct colours (invented demo data), 2..32: crowded ticks and two picks.
    rng = np.random.default_rng(9)
    img = rng.integers(0, 256, (20, 20, 3), dtype=np.uint8)
    s = sweep(img, (2, 32), restarts=1, refine="none", target=12.0, rule="bic")
    assert s.choices["target"].k != s.chosen.k
    _assert_no_overlap(sweep_figure(s))


def test_plot_file_is_a_png_and_not_overwritten(art_sweep, tmp_path):
    p = plot_sweep(art_sweep, tmp_path / "s.png")
    with Image.open(p) as im:
        assert im.format == "PNG" and im.size[0] > 600 and im.size[1] > 400
    with pytest.raises(OutputError, match="exists"):
        plot_sweep(art_sweep, p)
    assert list(tmp_path.iterdir()) == [p]  # no temporary left behind


def test_swatch_strip_shows_each_palette_row_by_row(art_sweep, tmp_path):
    cell, rh = 30, 34
    img = np.asarray(swatch_strip(art_sweep, cell=cell, row_height=rh))
    for i, r in enumerate(art_sweep.rows):
        y = 6 + i * (rh + 6) + rh // 2
        shown = {tuple(img[y, 150 + j * cell + cell // 2]) for j in range(r.palette.k)}
        assert shown == {tuple(int(v) for v in c) for c in r.palette.rgb8}
        # Right of the last swatch the row is background until the label column.
        assert tuple(img[y, 150 + r.palette.k * cell + 1]) == (255, 255, 255) or r.palette.k == max(
            q.palette.k for q in art_sweep.rows)
    i = art_sweep.ks.index(art_sweep.chosen.k)
    frame_y = 6 + i * (rh + 6) - 3
    assert (img[frame_y, 10:200] == (0xd6, 0x27, 0x28)).all(axis=1).any()
    p = save_swatches(art_sweep, tmp_path / "sw.png")
    with Image.open(p) as im:
        assert im.size[1] == 6 + len(art_sweep.rows) * 40


class _Refs(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.refs, self.imgs = [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        for key in ("src", "href"):
            if key in a:
                self.refs.append(a[key])
        if tag == "img":
            self.imgs.append(a)


def _refs(page: Path) -> _Refs:
    p = _Refs()
    p.feed(page.read_text(encoding="utf-8"))
    return p


@pytest.fixture(scope="module")
def report(art, art_sweep, tmp_path_factory):
    folder = tmp_path_factory.mktemp("report") / "out"
    pal = art_sweep.chosen.palette
    mapped = pal.apply(art)
    emap = tmp_path_factory.mktemp("maps") / "errors.png"
    Image.fromarray(np.uint8(np.clip(np.abs(art.astype(int) - mapped.rgb.astype(int)) * 8, 0, 255))).save(emap)
    page = write_report(folder, original_picture=art, mapped=mapped, sweep=art_sweep, error_map_path=emap,
                        title="Poster <test> & report")
    return page, pal, mapped


def _decode(src: str) -> Image.Image:
    """The image of a data URI (the page embeds every image)."""
    import base64
    import io

    head, _, payload = src.partition(",")
    assert head.startswith("data:image/") and head.endswith(";base64"), head[:40]
    im = Image.open(io.BytesIO(base64.b64decode(payload)))
    im.load()
    return im


def _img(refs: _Refs, cls: str, n: int = 0) -> dict:
    return [i for i in refs.imgs if cls in (i.get("class") or "").split()][n]


def test_report_page_is_one_self_contained_file(report, art, art_sweep):
    page, pal, mapped = report
    text = page.read_text(encoding="utf-8")
    assert page.name == REPORT_PAGE
    assert [p.name for p in page.parent.iterdir()] == [REPORT_PAGE]  # nothing beside it
    assert "Poster &lt;test&gt; &amp; report" in text
    lab = pal.lab
    for j, hx in enumerate(pal.hex):
        assert hx in text
        assert f"{lab[j, 0]:.2f}" in text and f"{mapped.coverage[j]:.2f}" in text
    for v in mapped.delta_e.values():
        assert f"{v:.2f}" in text
    refs = _refs(page)
    # Every reference is inline: nothing to fetch, from disk or a network.
    assert refs.refs and all(r.startswith("data:") for r in refs.refs), [r[:40] for r in refs.refs]
    assert "url(" not in text and "@import" not in text and "http://" not in text and "https://" not in text
    assert len(refs.imgs) == 5  # before, after, error map, sweep plot, swatch strip
    # The original at full size (160 px, JPEG at quality 90: within a few codes of the input) and the
    # result pixel for pixel, as an indexed PNG holding only palette colours.
    before = np.asarray(_decode(_img(refs, "before")["src"]).convert("RGB")).astype(int)
    assert before.shape == art.shape and np.abs(before - art).mean() < 3
    after = _decode(_img(refs, "after")["src"])
    assert after.mode == "P"
    np.testing.assert_array_equal(np.asarray(after.convert("RGB")), mapped.rgb)
    assert text.count('<tr class="chosen">') == 1
    assert "proof physically" in text.lower()
    # The settings of the sweep, and the cost given a meaning, not a bare number.
    settings = re.search(r"Settings that produced it</h2>(.*?)</table>", text, re.S).group(1)
    for name, value in (("space", "lab"), ("seed", "0"), ("restarts", "2"), ("ΔE00 target", "3.0")):
        assert f'<td class="l">{name}</td><td class="l">{value}</td>' in settings, name
    assert not re.search(r"<td>[0-9.]+e[+-][0-9]+</td>", text)
    means = [r.delta_e["mean"] for r in art_sweep.rows]
    for before, now in zip(means, means[1:]):  # each size's mean ΔE00 against the size before, in %
        assert f"<td>{100 * (now - before) / before:+.0f} %</td>" in text
    first = art_sweep.rows[0].cost
    for r in art_sweep.rows:
        assert f"<td>{100 * r.cost / first:.1f} %</td>" in text


def test_report_refuses_to_overwrite_and_checks_inputs(report, art, art_sweep, tmp_path):
    _, pal, mapped = report
    page = write_report(tmp_path / "own", original_picture=art, mapped=mapped, sweep=art_sweep)
    before = page.read_bytes()
    with pytest.raises(OutputError, match="already exists"):
        write_report(page.parent, original_picture=art, mapped=mapped)
    assert page.read_bytes() == before
    write_report(page.parent, original_picture=art, mapped=mapped, force=True)
    assert "Palette size sweep" not in page.read_text(encoding="utf-8")
    with pytest.raises(ValueError, match="1 original image"):
        write_report(tmp_path / "x", original_picture=art, mapped=[mapped, mapped])
    with pytest.raises(ValueError, match="original is 80x160 px"):
        write_report(tmp_path / "x", original_picture=art[:, :80], mapped=mapped)
    with pytest.raises(ValueError, match="error map not found"):
        write_report(tmp_path / "x", original_picture=art, mapped=mapped, error_map_path=tmp_path / "nope.png")
    with pytest.raises(ValueError, match="preview_side"):
        write_report(tmp_path / "x", original_picture=art, mapped=mapped, preview_side=4)
    assert not (tmp_path / "x").exists()


def test_report_of_a_fit_over_a_range_lists_the_candidates(art, tmp_path):
    pal = fit_palette(art, (2, 5), restarts=2, locked=["#ffffff"])
    page = write_report(tmp_path / "r", original_picture=art, mapped=pal.apply(art))
    text = page.read_text(encoding="utf-8")
    assert "Palette sizes considered" in text and text.count('<tr class="chosen">') == 1
    # Every size the fit tried has its palette table (the size slider's), each with the locked white once.
    sizes = [c.k for c in pal.fit.candidates]
    assert len(sizes) > 1 and text.count('<div class="palette-at"') == len(sizes)
    assert text.count('<td class="l">locked</td>') == len(sizes)
    assert pal.fit.reason.split(";")[0] in text
    # The settings that produced it, read off the palette's own fit record.
    settings = re.search(r"Settings that produced it</h2>(.*?)</table>", text, re.S).group(1)
    assert "#ffffff" in settings and "<td class=\"l\">seed</td><td class=\"l\">0</td>" in settings


def test_report_of_several_images_and_downscaled_display(tmp_path):
    a, _ = flat_artwork(3, seed=5, size=120)
    b, _ = flat_artwork(3, seed=6, size=90)
    big = np.repeat(np.repeat(a, 3, axis=0), 3, axis=1)  # 360 px
    pal = fit_palette([big, b], 3, restarts=2)
    page = write_report(tmp_path / "r", original_picture=[big, b], mapped=[pal.apply(big), pal.apply(b)],
                        max_side=200)
    refs = _refs(page)
    assert _decode(_img(refs, "before", 0)["src"]).size == (200, 200)
    shown = _decode(_img(refs, "after", 0)["src"])
    assert shown.size == (200, 200)
    colours = {tuple(c) for c in np.unique(np.asarray(shown.convert("RGB")).reshape(-1, 3), axis=0)}
    assert colours <= {tuple(int(v) for v in c) for c in pal.rgb8}
    assert _decode(_img(refs, "before", 1)["src"]).size == (90, 90)
    assert "Consistency across the set" in page.read_text(encoding="utf-8")


def test_report_keeps_16_bit_and_alpha_inputs(tmp_path):
    from quantize.core.picture import Picture

    rgb = np.zeros((20, 30, 3), np.uint16)
    rgb[:, 15:] = (65535, 0, 32896)
    alpha = np.full((20, 30), 65535, np.uint16)
    alpha[:5] = 0
    pic = Picture(rgb=rgb, alpha=alpha, bit_depth=16)
    pal = fit_palette(pic, 2)
    page = write_report(tmp_path / "r", original_picture=pic, mapped=pal.apply(pic))
    im = _decode(_img(_refs(page), "before")["src"])
    px = np.asarray(im)
    assert im.mode == "RGBA" and tuple(px[10, 20]) == (255, 0, 128, 255) and px[0, 0, 3] == 0
    shown = np.asarray(_decode(_img(_refs(page), "after")["src"]).convert("RGBA"))
    assert shown[0, 0, 3] == 0 and shown[10, 20, 3] == 255


@pytest.mark.slow
def test_review_page_of_a_12_megapixel_photo_stays_under_3_mb(tmp_path):
    # A 4000 x 3000 px photo-like image (invented for the check: smooth light, shapes and sensor-like
    # noise, which makes the embedded original harder to compress than most photos).
    rng = np.random.default_rng(12)
    y, x = np.mgrid[0:3000, 0:4000].astype(np.float32)
    rgb = np.stack([90 + 100 * x / 4000, 60 + 120 * y / 3000, 160 - 80 * (x + y) / 7000], axis=-1)
    rgb[(x - 2000) ** 2 + (y - 1500) ** 2 < 900 ** 2] *= (0.45, 0.7, 1.3)
    rgb += rng.normal(0, 3.0, rgb.shape).astype(np.float32)
    rgb = np.clip(rgb, 0, 255).astype(np.uint8)
    pic = as_picture(rgb)
    # The sizes are fitted to a quarter-size copy (quicker; any palettes will do for the page's size).
    s = sweep(np.ascontiguousarray(rgb[::4, ::4]), (2, 16), restarts=1)
    page = write_report(tmp_path / "r", original_picture=pic, mapped=s.chosen.palette.apply(pic), sweep=s)
    size = page.stat().st_size
    assert size < 3_000_000, f"{size / 1e6:.2f} MB"  # the size docs/palette-per-size.md states
    text = page.read_text(encoding="utf-8")
    assert text.count('class="palette-at"') == 15  # every size is in it


def test_report_module_imports_no_matplotlib():
    code = ("import sys; import quantize.report.page, quantize.fit.sweep; "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parents[1])
    assert out.stdout.strip() == "False"


# -- the real browser ------------------------------------------------------

_PROBE = """<script>
window.addEventListener('load', function () {
  var imgs = Array.from(document.images);
  var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); })
                .map(function (i) { return i.getAttribute('src'); });
  var out = document.createElement('pre'); out.id = 'probe';
  out.textContent = 'IMAGES ' + imgs.length + ' BROKEN ' + JSON.stringify(bad);
  document.body.appendChild(out);
});
</script>"""


def _probe(page: Path, tmp_path):
    """(number of images, broken srcs, console lines) of a page, via a probe copy beside it."""
    probe = page.with_name("probe-" + page.name)
    probe.write_text(page.read_text(encoding="utf-8").replace("</body>", _PROBE + "</body>"), encoding="utf-8")
    try:
        run = chromium(["--dump-dom"], probe.as_uri(), tmp_path)
    finally:
        probe.unlink()
    m = re.search(r"IMAGES (\d+) BROKEN (\[.*?\])", run.stdout)
    assert m, f"probe did not run (chromium exit {run.returncode}): {run.stderr[-500:]}"
    import json

    console = [ln for ln in run.stderr.splitlines() if ":CONSOLE" in ln]
    return int(m.group(1)), json.loads(m.group(2)), console


@pytest.mark.skipif(CHROMIUM is None, reason=NO_CHROMIUM)
def test_report_loads_in_a_real_browser(report, tmp_path):
    page, pal, mapped = report
    # Negative control: a missing image and a console error must be caught.
    bad = page.with_name("bad.html")
    good = _img(_refs(page), "after")["src"]
    bad.write_text('<!DOCTYPE html><html><head><meta charset="utf-8"><link rel="icon" href="data:,"></head>'
                   f'<body><img src="nowhere.png"><img src="{good}">'
                   '<script>console.error("deliberate")</script></body></html>', encoding="utf-8")
    try:
        n, broken, console = _probe(bad, tmp_path)
    finally:
        bad.unlink()
    assert n == 2 and broken == ["nowhere.png"]
    assert any("deliberate" in ln for ln in console)

    n, broken, console = _probe(page, tmp_path)
    assert n == len(_refs(page).imgs) == 5
    assert broken == []
    assert console == []

    shot = tmp_path / "shot.png"
    run = chromium(["--window-size=1280,1800", "--hide-scrollbars", f"--screenshot={shot}"], page.as_uri(),
                    tmp_path)
    assert shot.is_file(), run.stderr[-500:]
    px = np.asarray(Image.open(shot).convert("RGB"))
    assert px.shape[:2] == (1800, 1280)
    assert px.std() > 20 and len(np.unique(px.reshape(-1, 3), axis=0)) > 200
    # The palette's most used colour is painted on screen (result image and swatch).
    top = tuple(int(v) for v in pal.rgb8[int(np.argmax(mapped.coverage))])
    near = np.abs(px.reshape(-1, 3).astype(int) - top).max(axis=1) <= 2
    assert near.mean() > 0.01
