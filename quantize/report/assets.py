"""The review page's style sheet and its one small script, inlined into the page.

Nothing here is fetched: no fonts, no libraries, no network.  The script
drives every ``.review`` block of a page on its own:

* the size slider and the size buttons swap the reduced image for the
  chosen palette size's preview and show that size's palette table;
* the divider of the before/after comparison follows a pointer drag (or
  the arrow keys) and clips the reduced image to its right;
* a click on a swatch dims every pixel of the reduced image that is not
  that colour (read back from the embedded image through a canvas; for a
  JPEG, from the embedded image of each pixel's nearest palette colour);
* the 1:1 button shows the embedded images at one screen pixel per image
  pixel, in a scrolling frame.

It records what it shows in ``data-`` attributes of the block
(``data-k``, ``data-divider``, ``data-marked``), which is what the browser
tests read.
"""

CSS = """
body { font: 15px/1.45 system-ui, sans-serif; color: #1b1b1b; margin: 2em auto; max-width: 1200px; padding: 0 1em; }
h1 { font-size: 1.5em; margin-bottom: .2em; } h2 { font-size: 1.15em; margin-top: 1.8em; }
.note { color: #555; font-size: .9em; }
.caution { border-left: 4px solid #c0562a; padding: .3em .8em; background: #fbf1ec; }
figcaption { font-size: .9em; color: #444; margin-top: .3em; }
table { border-collapse: collapse; margin: .5em 0; font-variant-numeric: tabular-nums; }
th, td { padding: .25em .7em; border-bottom: 1px solid #ddd; text-align: right; }
th { background: #f4f4f4; } td.l, th.l { text-align: left; }
.sw { display: inline-block; width: 2.6em; height: 1.3em; border: 1px solid #999; vertical-align: middle; }
button.swatch { width: 3em; height: 1.5em; border: 1px solid #777; cursor: pointer; padding: 0; }
button.swatch[aria-pressed="true"] { outline: 3px solid #1b1b1b; outline-offset: 1px; }
tr.chosen td { background: #fdecea; font-weight: 600; }
img.wide { max-width: 100%; height: auto; border: 1px solid #ddd; }
.controls { display: flex; flex-wrap: wrap; align-items: center; gap: .6em 1em; margin: .6em 0; }
.controls input[type=range] { width: 18em; }
.sizes { display: flex; flex-wrap: wrap; gap: .3em; }
.sizes button { min-width: 2.4em; padding: .15em .4em; border: 1px solid #999; background: #fff; cursor: pointer; }
.sizes button[aria-pressed="true"] { background: #1b1b1b; color: #fff; }
.sizes button.picked { border: 2px solid #d62728; }
.frame { max-width: 100%; overflow: hidden; border: 1px solid #ccc;
  background: repeating-conic-gradient(#eee 0 25%, #fff 0 50%) 0 0 / 16px 16px; }
.review.actual .frame { overflow: auto; max-height: 85vh; }
.stage { position: relative; width: 100%; touch-action: none; user-select: none; cursor: ew-resize; }
.stage img, .stage canvas { display: block; image-rendering: pixelated; }
.stage img.before { width: 100%; height: auto; }
.stage .after-wrap { position: absolute; inset: 0; }
.stage .after-wrap img, .stage .after-wrap canvas { position: absolute; inset: 0; width: 100%; height: 100%; }
.divider { position: absolute; top: 0; bottom: 0; width: 0; border-left: 2px solid #fff;
  box-shadow: 0 0 0 1px #1b1b1b; outline: none; }
.divider::after { content: ""; position: absolute; top: 50%; left: -9px; width: 16px; height: 32px;
  margin-top: -16px; background: #fff; border: 1px solid #1b1b1b; border-radius: 3px; }
.divider:focus::after { background: #ffd54a; }
img.mark-src { display: none; }
.legend { display: flex; justify-content: space-between; font-size: .9em; color: #444; }
"""

SCRIPT = r"""
(function () {
  "use strict";
  function setup(root) {
    var data = JSON.parse(root.querySelector("script.review-data").textContent);
    var stage = root.querySelector(".stage"), before = root.querySelector("img.before");
    var wrap = root.querySelector(".after-wrap"), after = root.querySelector("img.after");
    var mark = root.querySelector("canvas.mark"), divider = root.querySelector(".divider");
    var slider = root.querySelector("input.size"), label = root.querySelector(".size-label");
    var buttons = root.querySelectorAll(".sizes button"), tables = root.querySelectorAll(".palette-at");
    var dragging = false, initial = after.getAttribute("src"), current = data.start;
    // A JPEG's pixels are no longer exactly palette colours: its nearest-colour image is read instead.
    var markSrc = root.querySelector("img.mark-src");
    function source() { return markSrc && data.sizes[current].mark ? markSrc : after; }

    function place(pct) {
      pct = Math.max(0, Math.min(100, pct));
      wrap.style.clipPath = "inset(0 0 0 " + pct + "%)";
      divider.style.left = pct + "%";
      divider.setAttribute("aria-valuenow", String(Math.round(pct)));
      root.dataset.divider = pct.toFixed(1);
    }
    function unmark() {
      mark.hidden = true;
      root.dataset.marked = "";
      root.querySelectorAll("button.swatch").forEach(function (b) { b.setAttribute("aria-pressed", "false"); });
    }
    function show(i) {
      var s = data.sizes[i];
      current = i;
      after.src = s.src || initial;
      root.dataset.k = String(s.k);
      if (slider) { slider.value = String(i); }
      if (label) { label.textContent = s.label; }
      buttons.forEach(function (b) { b.setAttribute("aria-pressed", b.dataset.i === String(i) ? "true" : "false"); });
      tables.forEach(function (t) { t.hidden = t.dataset.k !== String(s.k); });
      unmark();
    }
    function highlight(button) {
      var rgb = button.dataset.rgb.split(",").map(Number);
      var src = source(), w = src.naturalWidth, h = src.naturalHeight;
      mark.width = w; mark.height = h;
      var ctx = mark.getContext("2d");
      ctx.drawImage(src, 0, 0);
      var img = ctx.getImageData(0, 0, w, h), d = img.data, hits = 0, shown = 0;
      // Dim towards the far end of lightness from the colour, so light and dark colours both stand out.
      var dim = Number(button.dataset.light) > 60 ? 40 : 235;
      for (var p = 0; p < d.length; p += 4) {
        if (d[p + 3] === 0) { continue; }
        shown += 1;
        if (d[p] === rgb[0] && d[p + 1] === rgb[1] && d[p + 2] === rgb[2]) {
          hits += 1; d[p + 3] = 0;
        } else {
          d[p] = dim; d[p + 1] = dim; d[p + 2] = dim; d[p + 3] = 230;
        }
      }
      ctx.putImageData(img, 0, 0);
      mark.hidden = false;
      root.querySelectorAll("button.swatch").forEach(function (b) {
        b.setAttribute("aria-pressed", b === button ? "true" : "false");
      });
      root.dataset.marked = (shown ? hits / shown : 0).toFixed(5);
    }
    function atPointer(ev) {
      var r = stage.getBoundingClientRect();
      return (ev.clientX - r.left) / r.width * 100;
    }

    stage.addEventListener("pointerdown", function (ev) { dragging = true; place(atPointer(ev)); ev.preventDefault(); });
    window.addEventListener("pointermove", function (ev) { if (dragging) { place(atPointer(ev)); } });
    window.addEventListener("pointerup", function () { dragging = false; });
    divider.addEventListener("keydown", function (ev) {
      var step = ev.key === "ArrowLeft" ? -2 : ev.key === "ArrowRight" ? 2 : 0;
      if (step) { place(Number(root.dataset.divider) + step); ev.preventDefault(); }
    });
    if (slider) { slider.addEventListener("input", function () { show(Number(slider.value)); }); }
    buttons.forEach(function (b) { b.addEventListener("click", function () { show(Number(b.dataset.i)); }); });
    root.querySelectorAll("button.swatch").forEach(function (b) {
      b.addEventListener("click", function () {
        if (b.getAttribute("aria-pressed") === "true") { unmark(); return; }
        var src = source();
        if (src.complete) { highlight(b); }
        else { src.addEventListener("load", function () { highlight(b); }, { once: true }); }
      });
    });
    var zoom = root.querySelector("button.zoom");
    zoom.addEventListener("click", function () {
      var actual = !root.classList.contains("actual");
      root.classList.toggle("actual", actual);
      stage.style.width = actual ? before.naturalWidth + "px" : "";
      zoom.setAttribute("aria-pressed", actual ? "true" : "false");
      zoom.textContent = actual ? "Fit to page" : "1:1 pixels";
    });
    place(50);
    show(data.start);
  }
  document.querySelectorAll(".review").forEach(setup);
})();
"""
