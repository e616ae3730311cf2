"""The review page in a real browser: size slider, before/after divider, swatch highlight, 1:1 view.

Each test adds a driving script to a copy of the page (tests/browser.py):
it moves the slider, drags the divider with pointer events, clicks a
swatch, and writes what the page then shows into the DOM.  Screenshots of
the same state are measured with numpy (which colours fill which side of
the divider), never judged by eye.  The expected pictures come from the
library's own mapping of the test image with each swept palette and from
the decoded PNGs, not from the page's labels.
"""

import base64
import io
import json
import re

import numpy as np
import pytest
from artwork import flat_artwork
from browser import CHROMIUM, NO_CHROMIUM, chromium, console_lines, dump_until, with_script
from PIL import Image

from quantize.fit.sweep import sweep
from quantize.report.page import write_report

pytestmark = pytest.mark.skipif(CHROMIUM is None, reason=NO_CHROMIUM)

SIZE_I = 0  # the slider is moved to the smallest size: 2 colours, easy to tell from the chosen one
FRAC = 0.3  # where the divider is dragged, as a share of the comparison's width
WINDOW = (1280, 1700)

_DRIVE = """<script>
window.addEventListener('load', function () {
  var root = document.querySelector('.review'), out = {errors: []};
  var data = JSON.parse(root.querySelector('script.review-data').textContent);
  var after = root.querySelector('img.after'), stage = root.querySelector('.stage');
  function done() {
    var pre = document.createElement('pre'); pre.id = 'drive'; pre.textContent = JSON.stringify(out);
    pre.style.display = 'none'; document.body.appendChild(pre);
  }
  try {
    out.startK = root.dataset.k;
    var slider = root.querySelector('input.size');
    slider.value = '%(i)d'; slider.dispatchEvent(new Event('input'));
    out.k = root.dataset.k;
    out.srcIsSize = after.getAttribute('src') === data.sizes[%(i)d].src;
    out.tables = Array.from(root.querySelectorAll('.palette-at')).filter(function (t) { return !t.hidden; })
      .map(function (t) { return t.dataset.k; });
    var r = stage.getBoundingClientRect();
    stage.dispatchEvent(new PointerEvent('pointerdown', {clientX: r.left + r.width / 2, clientY: r.top + 5, bubbles: true}));
    window.dispatchEvent(new PointerEvent('pointermove', {clientX: r.left + %(frac)f * r.width, clientY: r.top + 5, bubbles: true}));
    window.dispatchEvent(new PointerEvent('pointerup', {bubbles: true}));
    out.divider = Number(root.dataset.divider);
    out.clip = root.querySelector('.after-wrap').style.clipPath;
    out.stage = [r.left, r.top, r.width, r.height];
  } catch (err) { out.errors.push(String(err)); }
  after.decode().then(function () {
    try { %(then)s } catch (err) { out.errors.push(String(err)); }
    done();
  }, function (err) { out.errors.push('decode: ' + err); done(); });
});
</script>"""

_CLICK = """var b = root.querySelector('.palette-at[data-k="%(k)d"] button.swatch[data-rgb="%(rgb)s"]');
    b.click(); out.marked = Number(root.dataset.marked); out.pressed = b.getAttribute('aria-pressed');"""

_ZOOM = """var z = root.querySelector('button.zoom'), before = root.querySelector('img.before');
    out.fitWidth = stage.getBoundingClientRect().width; z.click();
    out.zoomWidth = stage.getBoundingClientRect().width; out.natural = before.naturalWidth;
    out.afterWidth = after.getBoundingClientRect().width; z.click();
    out.backWidth = stage.getBoundingClientRect().width;
    var d = root.querySelector('.divider'); d.focus();
    d.dispatchEvent(new KeyboardEvent('keydown', {key: 'ArrowRight', bubbles: true}));
    d.dispatchEvent(new KeyboardEvent('keydown', {key: 'ArrowRight', bubbles: true}));
    out.keyed = Number(root.dataset.divider);"""


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    rgb, _ = flat_artwork(4, seed=104, size=160, jpeg_quality=85)
    s = sweep(rgb, (2, 6), restarts=2)
    mapped = s.chosen.palette.apply(rgb)
    page = write_report(tmp_path_factory.mktemp("review") / "rep", original_picture=rgb, mapped=mapped, sweep=s)
    return rgb, s, mapped, page


def _drive(page, tmp_path, then, name):
    """Run the driving script with ``then`` after the slider and divider; (result dict, console, copy)."""
    copy = with_script(page, _DRIVE % {"i": SIZE_I, "frac": FRAC, "then": then}, name)
    text, run = dump_until([f"--window-size={WINDOW[0]},{WINDOW[1]}", "--hide-scrollbars"], copy.as_uri(),
                           tmp_path, "drive")
    assert text, f"driving script did not finish (chromium exit {run.returncode}): {run.stderr[-500:]}"
    out = json.loads(text)
    assert out["errors"] == []
    return out, console_lines(run.stderr), copy


def _screenshot(copy, tmp_path) -> np.ndarray:
    shot = tmp_path / f"{copy.stem}.png"
    run = chromium([f"--window-size={WINDOW[0]},{WINDOW[1]}", "--hide-scrollbars", f"--screenshot={shot}"],
                   copy.as_uri(), tmp_path)
    assert shot.is_file(), run.stderr[-500:]
    return np.asarray(Image.open(shot).convert("RGB")).astype(int)


def _size_src(page, i) -> str:
    text = page.read_text(encoding="utf-8")
    data = json.loads(re.search(r'<script type="application/json" class="review-data">(.*?)</script>', text,
                                re.S).group(1).replace("<\\/", "</"))
    return data["sizes"][i]["src"]


def _decode(src) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(base64.b64decode(src.partition(",")[2]))).convert("RGB")).astype(int)


def _in(px: np.ndarray, colours) -> np.ndarray:
    """Which pixels of (..., 3) ``px`` are exactly one of ``colours``."""
    return np.isin(px[..., 0] * 65536 + px[..., 1] * 256 + px[..., 2],
                   [int(r) * 65536 + int(g) * 256 + int(b) for r, g, b in colours])


def _blocks(px, out, shape):
    """The screenshot at the centre of each image pixel's block in the comparison, and each column's screen x.

    The comparison draws every image pixel as a block (pixelated scaling);
    sampling block centres keeps the check clear of rounding at block edges.
    """
    left, top, w, h = out["stage"]
    rows, cols = shape[:2]
    ys = np.floor(top + (np.arange(rows) + 0.5) * h / rows).astype(int)
    xs = np.floor(left + (np.arange(cols) + 0.5) * w / cols).astype(int)
    assert ys[-1] < px.shape[0], "the comparison is not all on screen"
    return px[ys][:, xs], xs


def test_preview_of_each_size_is_that_size_mapped(case):
    rgb, s, mapped, page = case
    # The preview side (640 px) exceeds the image, so each preview is the library's mapping of the image
    # with that size's palette, pixel for pixel; the chosen size shows the reported result itself.
    for i, row in enumerate(s.rows):
        shown = _decode(_size_src(page, i)) if row.k != s.chosen.k else None
        if shown is not None:
            np.testing.assert_array_equal(shown, row.palette.apply(rgb).rgb)
    assert _size_src(page, s.ks.index(s.chosen.k)) is None  # in the page once, in its <img>


def test_slider_and_divider_change_what_is_shown(case, tmp_path):
    rgb, s, mapped, page = case
    assert s.chosen.k != s.ks[SIZE_I]
    out, console, copy = _drive(page, tmp_path, "", "drive-slider.html")
    assert console == []
    assert out["startK"] == str(s.chosen.k)
    assert out["k"] == str(s.ks[SIZE_I]) and out["srcIsSize"] and out["tables"] == [str(s.ks[SIZE_I])]
    assert out["divider"] == pytest.approx(100 * FRAC, abs=0.2)
    assert out["clip"] == f"inset(0px 0px 0px {out['divider']:g}%)"

    preview = _decode(_size_src(page, SIZE_I))
    shown, xs = _blocks(_screenshot(copy, tmp_path), out, preview.shape)
    split = out["stage"][0] + FRAC * out["stage"][2]
    right, left = xs > split + 12, xs < split - 12  # 12 px: clear of the divider and its handle
    # Right of the divider: the size the slider shows, pixel for pixel.
    assert (shown[:, right] == preview[:, right]).all(axis=2).mean() > 0.99
    # Left of it: the original (embedded as JPEG: within a few codes), which differs from the preview.
    assert np.abs(shown[:, left] - rgb[:, left]).mean() < 3
    assert np.abs(rgb[:, left] - preview[:, left]).mean() > 5
    assert np.abs(shown[:, left] - preview[:, left]).mean() > 5
    # Between the divider's start (50 %) and where it was dragged (30 %), the reduced image now shows.
    band = (xs > split + 12) & (xs < out["stage"][0] + 0.5 * out["stage"][2])
    assert band.sum() > 10 and (shown[:, band] == preview[:, band]).all(axis=2).mean() > 0.99


def test_swatch_click_highlights_that_colours_pixels(case, tmp_path):
    rgb, s, mapped, page = case
    row = s.rows[SIZE_I]
    preview = _decode(_size_src(page, SIZE_I))
    colours = [tuple(int(v) for v in c) for c in row.palette.rgb8]
    share = [(_in(preview, [c])).mean() for c in colours]
    j = int(np.argmin(share))  # the less used colour: its pixels are the ones to find
    assert 0.02 < share[j] < 0.98
    rgb_text = ",".join(str(v) for v in colours[j])
    out, console, copy = _drive(page, tmp_path, _CLICK % {"k": row.k, "rgb": rgb_text}, "drive-swatch.html")
    assert console == [] and out["pressed"] == "true"
    assert out["marked"] == pytest.approx(share[j], abs=1e-4)

    shown, xs = _blocks(_screenshot(copy, tmp_path), out, preview.shape)
    right = xs > out["stage"][0] + FRAC * out["stage"][2] + 12
    here = _in(preview[:, right], [colours[j]])
    assert here.mean() > 0.01
    # That colour's pixels show it exactly; every other pixel is dimmed, no longer any palette colour.
    assert _in(shown[:, right][here], [colours[j]]).mean() > 0.99
    assert _in(shown[:, right][~here], colours).mean() < 0.01


def test_one_to_one_view_and_keyboard_divider(case, tmp_path):
    rgb, s, mapped, page = case
    out, console, _ = _drive(page, tmp_path, _ZOOM, "drive-zoom.html")
    assert console == []
    assert out["natural"] == rgb.shape[1]
    assert out["fitWidth"] > 3 * rgb.shape[1]  # fitted to the page, a 160 px image is drawn large
    assert out["zoomWidth"] == pytest.approx(rgb.shape[1], abs=0.5)
    assert out["afterWidth"] == pytest.approx(rgb.shape[1], abs=0.5)
    assert out["backWidth"] == pytest.approx(out["fitWidth"], abs=0.5)
    # The divider also moves from the keyboard: two steps of 2 % to the right.
    assert out["keyed"] == pytest.approx(out["divider"] + 4, abs=0.05)


# -- reduce --report: every size of the range, from the one fit -----------------------------------

def _reduce_report(folder, rgb, *options):
    """Run ``reduce -k 3-6 --report`` on ``rgb``; (written file, page, every size the engine fitted)."""
    from click.testing import CliRunner

    import quantize.fit.engine as engine
    from quantize.cli.main import main

    src, out = folder / "art.png", folder / "art-reduced.png"
    Image.fromarray(rgb).save(src)
    fitted = []
    real = engine.fit_sizes
    mp = pytest.MonkeyPatch()
    mp.setattr(engine, "fit_sizes", lambda sample, ks, *a, **kw: fitted.extend(ks) or real(sample, ks, *a, **kw))
    try:
        r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "3-6", "--restarts", "2",
                                      "--report", str(folder / "rep"), *options])
    finally:
        mp.undo()
    assert r.exit_code == 0, r.output
    return out, folder / "rep" / "index.html", fitted


@pytest.fixture(scope="module")
def reduce_case(tmp_path_factory):
    rgb, _ = flat_artwork(5, seed=105, size=160, jpeg_quality=85)
    out, page, fitted = _reduce_report(tmp_path_factory.mktemp("reduce-review"), rgb, "--rule", "bic")
    # The reference: the sweep over the same sizes with the same settings, whose row of size k is the
    # palette fit_palette gives for k (quantize.fit.sweep's documented equivalence).
    s = sweep(rgb, (3, 6), rule="bic", restarts=2)
    return rgb, s, out, page, fitted


def _review_data(page):
    text = page.read_text(encoding="utf-8")
    return json.loads(re.search(r'<script type="application/json" class="review-data">(.*?)</script>', text,
                                re.S).group(1).replace("<\\/", "</")), text


def test_reduce_report_offers_every_size_of_the_range_from_its_one_fit(reduce_case):
    rgb, s, out, page, fitted = reduce_case
    assert sorted(fitted) == [3, 4, 5, 6]  # each size fitted once: the page fitted nothing more
    data, text = _review_data(page)
    assert [v["k"] for v in data["sizes"]] == [3, 4, 5, 6]
    assert re.search(r'<input type="range" class="size" min="0" max="3"', text)
    with Image.open(out) as im:
        written = np.asarray(im.convert("RGB")).astype(int)
    chosen = next(i for i, v in enumerate(data["sizes"]) if v["src"] is None)
    assert data["sizes"][chosen]["k"] == len(np.unique(written.reshape(-1, 3), axis=0))
    after = re.search(r'<img class="after" src="([^"]+)"', text).group(1)
    np.testing.assert_array_equal(_decode(after), written)  # the chosen size is the file written
    for i, row in enumerate(s.rows):
        if i != chosen:  # each other size: that size's palette mapping, pixel for pixel
            np.testing.assert_array_equal(_decode(data["sizes"][i]["src"]), row.palette.apply(rgb).rgb)


def test_reduce_report_slider_shows_the_smallest_size_in_a_browser(reduce_case, tmp_path):
    rgb, s, out, page, _ = reduce_case
    data, _ = _review_data(page)
    assert data["sizes"][SIZE_I]["src"] is not None  # the chosen size is not the smallest
    out_, console, _ = _drive(page, tmp_path, "", "drive-reduce.html")
    assert console == []
    assert out_["k"] == "3" and out_["srcIsSize"] and out_["tables"] == ["3"]


def test_reduce_report_under_the_automatic_rule_also_offers_the_sizes_it_did_not_try(tmp_path):
    # Five inks: the automatic rule tries sizes up to the inks it finds and stops there; the page fits
    # the rest of the range for its slider, each size once.
    rgb, _ = flat_artwork(5, seed=105, size=160, jpeg_quality=85)
    out, page, fitted = _reduce_report(tmp_path, rgb)
    assert sorted(fitted) == [3, 4, 5, 6]
    data, text = _review_data(page)
    assert [v["k"] for v in data["sizes"]] == [3, 4, 5, 6]
    from quantize.palette import palette_from_colours

    for v in data["sizes"]:
        if v["src"] is None:
            continue
        table = re.search(rf'<div class="palette-at" data-k="{v["k"]}"[^>]*>(.*?)</table>', text, re.S).group(1)
        shown = palette_from_colours(sorted(set(re.findall(r'<td class="l">(#[0-9a-f]{6})</td>', table))))
        assert shown.k == v["k"]
        # The preview is that size's palette mapping (nearest colour) of the image, pixel for pixel.
        np.testing.assert_array_equal(_decode(v["src"]), shown.apply(rgb).rgb)
