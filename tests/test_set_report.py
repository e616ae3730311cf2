"""How one palette serves a set: the worst images and each colour's coverage per image, on the page.

``apply`` (several images onto a saved palette) shows it in the review
page; ``batch`` with one palette writes it as ``palette-report.html``
beside its manifest.  The expected ranking is computed with
scikit-image's CIEDE2000 (Sharma et al. 2005) from the images and their
reductions, and the expected coverage by counting the pixels of the files
batch wrote, not by reading the tool's own figures back.
"""

import dataclasses
import re

import numpy as np
import pytest
from artwork import flat_artwork
from PIL import Image
from skimage.color import deltaE_ciede2000, rgb2lab

from quantize import fit_palette
from quantize.batch.manifest import SET_REPORT_PAGE
from quantize.batch.run import run_batch
from quantize.io.read import as_picture
from quantize.report.page import write_report


def _section(text: str, heading: str) -> str:
    return re.search(rf"<h3>{heading}.*?</h3>(.*?)</table>", text, re.S).group(1)


def _row_texts(table: str) -> list[list[str]]:
    return [re.findall(r"<t[dh][^>]*>(.*?)</t[dh]>", r) for r in re.findall(r"<tr[^>]*>(.*?)</tr>", table, re.S)]


def _value(cell: str) -> float:
    """A coverage cell as a number: – is 0, &lt;0.01 is taken as its bound."""
    return 0.0 if cell == "–" else 0.01 if cell == "&lt;0.01" else float(cell)


def _images(n=4):
    return [flat_artwork(3 + i % 2, seed=40 + i, size=64, jpeg_quality=80)[0] for i in range(n)]


def test_apply_page_ranks_the_worst_images_and_lists_coverage_per_image(tmp_path):
    imgs = _images()
    pal = fit_palette(imgs[0], 4, restarts=2)
    mapped = [pal.apply(im) for im in imgs]
    names = [f"shirt-{i}" for i in range(len(imgs))]
    pics = [dataclasses.replace(as_picture(im), source=n) for im, n in zip(imgs, names)]
    page = write_report(tmp_path / "r", original_picture=pics, mapped=mapped, palette=pal, worst=3)
    text = page.read_text(encoding="utf-8")
    # The ranking, from scikit-image's CIEDE2000 of each image against its reduction.
    ref = [float(deltaE_ciede2000(rgb2lab(im / 255.0), rgb2lab(m.rgb / 255.0)).mean()) for im, m in zip(imgs, mapped)]
    want = [names[i] for i in np.argsort(ref)[::-1][:3]]
    worst = _row_texts(_section(text, "Worst-fitting images"))[1:]
    assert [r[1] for r in worst] == want
    for r in worst:  # the page's figure (the library's ΔE00) agrees with scikit-image's to the rounding
        assert float(r[2]) == pytest.approx(ref[names.index(r[1])], abs=0.006)
    # Coverage: each image's share of each palette colour, counted from its pixels.
    cov = _row_texts(_section(text, "Coverage % of each colour per image"))
    body = {r[0]: r[1:] for r in cov[1:]}
    for n, m in zip(names, mapped):
        counts = np.bincount(m.indices.ravel(), minlength=pal.k) / m.indices.size * 100
        np.testing.assert_allclose([_value(v) for v in body[n]], counts, atol=0.006)
    used = [int(v) for v in body["images using it"]]
    assert used == [sum((m.indices == j).any() for m in mapped) for j in range(pal.k)]


def test_batch_with_one_palette_writes_the_set_page(tmp_path):
    root = tmp_path / "in"
    for i, im in enumerate(_images(5)):
        (root / f"p{i}.png").parent.mkdir(parents=True, exist_ok=True)
        Image.fromarray(im).save(root / f"p{i}.png")
    pal = fit_palette(root / "p0.png", 4, restarts=1)
    pfile = pal.save(tmp_path / "house.palette.json")
    out = tmp_path / "out"
    res = run_batch(root, out, workers=0, palette=pfile, worst=2)
    assert res.manifest["palette_report"]["page"] == SET_REPORT_PAGE
    text = (out / SET_REPORT_PAGE).read_text(encoding="utf-8")
    assert "proof physically" in text.lower() and 'src="http' not in text
    worst = _row_texts(_section(text, "Worst-fitting images"))[1:]
    assert len(worst) == 2
    # Ranked by the ΔE00 of the files written, measured here with scikit-image.
    ref = {}
    for i in range(5):
        a = np.asarray(Image.open(root / f"p{i}.png").convert("RGB")) / 255.0
        b = np.asarray(Image.open(out / f"p{i}.png").convert("RGB")) / 255.0
        ref[f"p{i}.png"] = float(deltaE_ciede2000(rgb2lab(a), rgb2lab(b)).mean())
    assert [r[1] for r in worst] == sorted(ref, key=ref.get, reverse=True)[:2]
    cov = {r[0]: r[1:] for r in _row_texts(_section(text, "Coverage % of each colour per image"))[1:]}
    for i in range(5):
        got = np.asarray(Image.open(out / f"p{i}.png").convert("RGB")).reshape(-1, 3)
        for j, hx in enumerate(pal.hex):
            share = (got == np.array([int(hx[k:k + 2], 16) for k in (1, 3, 5)])).all(axis=1).mean() * 100
            assert _value(cov[f"p{i}.png"][j]) == pytest.approx(share, abs=0.01)



def test_batch_command_lists_every_worst_image_and_names_the_page(tmp_path):
    from click.testing import CliRunner

    from quantize.cli.main import main

    root = tmp_path / "in"
    root.mkdir()
    for i, im in enumerate(_images(7)):
        Image.fromarray(im).save(root / f"p{i}.png")
    pfile = fit_palette(root / "p0.png", 4, restarts=1).save(tmp_path / "house.palette.json")
    r = CliRunner().invoke(main, ["batch", str(root), "-o", str(tmp_path / "out"), "--palette", str(pfile),
                                  "--worst", "7", "--workers", "0"], catch_exceptions=False)
    assert r.exit_code == 0, r.output
    assert sum(ln.strip().startswith("fits worst:") for ln in r.output.splitlines()) == 7  # was cut at 5
    assert f"consistency page: {tmp_path / 'out' / SET_REPORT_PAGE}" in r.output
    assert (tmp_path / "out" / SET_REPORT_PAGE).is_file()
