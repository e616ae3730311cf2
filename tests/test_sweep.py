"""The palette-size sweep: costs, ΔE00 columns, rules, tables, bad input.

References: scikit-learn's KMeans (test-only reference for the k-means
cost), skimage.color.rgb2lab / deltaE_ciede2000 (independent CIELAB and
CIEDE2000 after Sharma et al. 2005) with numpy's inverted-CDF quantile
(Hyndman and Fan 1996, definition 1) for the per-pixel statistics.  That the
best cost cannot rise with k is a property of the k-means objective (a
palette of k + 1 can always hold the k solution plus one colour).
"""

import csv
import io
import json

import numpy as np
import pytest
from artwork import flat_artwork
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from quantize import fit_palette
from quantize.errors import OutputError
from quantize.fit.selection import bic_scores
from quantize.fit.sweep import MAX_SWEEP_K, parse_sweep_range, sweep
from quantize.fit.sweep_result import Sweep, candidate_rows, format_table


def _blob_image(seed, n_blobs, size=48, spread=12.0):
    """Invented demo data: noisy colour blobs, many distinct colours."""
    rng = np.random.default_rng(seed)
    centres = rng.uniform(20, 235, (n_blobs, 3))
    which = rng.integers(0, n_blobs, size * size)
    px = centres[which] + rng.normal(0, spread, (size * size, 3))
    return np.clip(np.rint(px), 0, 255).astype(np.uint8).reshape(size, size, 3)


@pytest.fixture(scope="module")
def photo():
    # scikit-image's bundled "astronaut" photo, downsampled for speed.
    from skimage import data

    return np.ascontiguousarray(data.astronaut()[::8, ::8])


@pytest.fixture(scope="module")
def photo_sweep(photo):
    return sweep(photo, (2, 8), restarts=3, seed=0, target=8.0, rule="bic")


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**16), n_blobs=st.integers(1, 7), restarts=st.integers(1, 2),
       top=st.integers(3, 8))
def test_warm_best_cost_never_rises_with_k(seed, n_blobs, restarts, top):
    # The refinement after each fit does not change the k-means cost: leave it out for speed.
    # Warm starts (an explicit setting) make the best cost non-increasing in k.
    s = sweep(_blob_image(seed, n_blobs, size=24), (1, top), restarts=restarts, seed=seed, refine="none", warm=True)
    costs = np.array([r.cost for r in s.rows])
    assert s.ks == list(range(1, top + 1))
    assert np.all(np.diff(costs) <= 0), costs


def test_costs_not_worse_than_scikit_learn(photo_sweep, photo):
    # Reference: sklearn.cluster.KMeans on the same distinct CIELAB colours and
    # pixel weights; the sweep must reach at most 1.01 x its best inertia
    # (tolerance: common practice, no source).
    from sklearn.cluster import KMeans

    from quantize.core.sampling import sample_picture
    from quantize.io.read import as_picture

    smp = sample_picture(as_picture(photo))
    pts, w = smp.points("lab"), smp.weights
    for k in (3, 6, 8):
        ref = KMeans(n_clusters=k, n_init=4, random_state=0).fit(pts, sample_weight=w).inertia_
        assert photo_sweep.row(k).cost <= 1.01 * ref


def test_delta_e_columns_match_per_pixel_reference(photo_sweep, photo):
    # Every pixel mapped by brute force by skimage's ΔE00 in skimage's CIELAB
    # (the default nearest colour); statistics by numpy's inverted-CDF quantile.
    from skimage.color import deltaE_ciede2000, rgb2lab

    lab = rgb2lab(photo).reshape(-1, 3)
    for k in (2, 5, 8):
        pal = photo_sweep.row(k).palette
        plab = rgb2lab(pal.rgb8[None].astype(float) / 255)[0]
        all_de = np.stack([deltaE_ciede2000(lab, np.broadcast_to(p, lab.shape)) for p in plab], axis=1)
        de = all_de.min(axis=1)
        got = photo_sweep.row(k).delta_e
        # skimage's D65 white and sRGB matrix differ from IEC 61966-2-1's in the
        # 4th decimal, which moves ΔE00 by up to about 0.002: tolerance 0.01.
        assert got["mean"] == pytest.approx(de.mean(), abs=1e-2)
        assert got["max"] == pytest.approx(de.max(), abs=1e-2)
        assert got["p95"] == pytest.approx(np.quantile(de, 0.95, method="inverted_cdf"), abs=1e-2)


def test_scores_and_picks_follow_the_selection_rules(photo_sweep):
    rows = photo_sweep.rows
    want = bic_scores([r.k for r in rows], [r.robust for r in rows])
    np.testing.assert_allclose([r.score for r in rows], want, rtol=1e-12)
    assert photo_sweep.choices["bic"].k == rows[int(np.argmin(want))].k
    means = {r.k: r.delta_e["mean"] for r in rows}
    tk = photo_sweep.choices["target"].k
    assert means[tk] <= 8.0 and all(means[k] > 8.0 for k in means if k < tk)
    assert "smallest k" in photo_sweep.choices["target"].reason
    assert photo_sweep.chosen.k == photo_sweep.choices["bic"].k


def test_sweep_rows_are_the_palettes_fit_palette_gives(photo):
    # One engine: with the same settings (no warm starts, the default) the
    # sweep's row of size k is fit_palette's palette at k, bit for bit, and
    # its candidates carry the same figures.
    cold = sweep(photo, (3, 6), restarts=2, seed=4, rule="bic")
    pal = fit_palette(photo, (3, 6), restarts=2, seed=4, rule="bic")
    for c in pal.fit.candidates:
        row = cold.row(c.k)
        assert row.cost == c.inertia
        assert row.delta_e == c.delta_e
        assert row.score == pytest.approx(c.score, rel=1e-12)
    assert cold.chosen.k == pal.k
    assert cold.chosen.palette.rgb8.tobytes() == pal.rgb8.tobytes()
    alone = fit_palette(photo, 5, restarts=2, seed=4)
    assert cold.row(5).palette.rgb8.tobytes() == alone.rgb8.tobytes()
    assert {r.start for r in cold.rows} == {"fresh"}
    assert cold.settings.warm is False and pal.fit.warm is False


def test_warm_starts_are_an_explicit_setting(photo):
    warm = sweep(photo, (2, 6), restarts=1, seed=4, warm=True)
    assert warm.settings.warm and warm.to_dict()["settings"]["warm"] is True
    costs = [r.cost for r in warm.rows]
    assert all(b <= a for a, b in zip(costs, costs[1:])), costs


def test_sweep_finds_the_ink_count_of_flat_artwork():
    # Generated artwork with 6 inks (project calibration of the rule, no source).
    rgb, _ = flat_artwork(6, seed=106, jpeg_quality=85)
    s = sweep(rgb, (3, 8), restarts=4)
    assert s.chosen.k == 6
    marked = [line for line in s.table().splitlines() if line.startswith(">")]
    assert len(marked) == 1 and marked[0].split()[1] == "6"


def test_several_images_pool_with_per_image_columns():
    a, b = _blob_image(1, 3), _blob_image(2, 4, size=32)
    s = sweep([a, b], (2, 5), restarts=2, weighting="pixels")
    assert s.images == ("<array>", "<array>#2")
    for r in s.rows:
        alone_a = r.palette.apply(a).delta_e
        alone_b = r.palette.apply(b).delta_e
        assert r.per_image["<array>"] == pytest.approx(alone_a, rel=1e-9)
        assert r.per_image["<array>#2"] == pytest.approx(alone_b, rel=1e-9)
        # Pixel-weighted pooling: the pooled mean is the pixel-weighted mean of both.
        na, nb = a.shape[0] * a.shape[1], b.shape[0] * b.shape[1]
        assert r.delta_e["mean"] == pytest.approx((na * alone_a["mean"] + nb * alone_b["mean"]) / (na + nb))
        assert r.delta_e["max"] == pytest.approx(max(alone_a["max"], alone_b["max"]))
    header = s.to_csv().splitlines()[0].split(",")
    assert "de00_mean[<array>]" in header and "de00_p95[<array>#2]" in header


def test_csv_and_json_tables_round_trip(photo_sweep, tmp_path):
    rows = list(csv.DictReader(io.StringIO(photo_sweep.to_csv())))
    assert [int(r["k"]) for r in rows] == photo_sweep.ks
    for r, row in zip(rows, photo_sweep.rows):
        assert float(r["kmeans_cost"]) == pytest.approx(row.cost, rel=1e-5)
        assert float(r["de00_p95"]) == pytest.approx(row.delta_e["p95"], rel=1e-5)
        assert r["palette"].split() == row.palette.hex
    assert sum(int(r["chosen_bic"]) for r in rows) == 1
    assert sum(int(r["chosen_target"]) for r in rows) == 1
    doc = json.loads(photo_sweep.to_json())
    assert doc["format"] == "quantize.fit.sweep" and doc["chosen"] == photo_sweep.chosen.k
    assert [r["k"] for r in doc["rows"]] == photo_sweep.ks
    assert doc["choices"]["target"]["k"] == photo_sweep.choices["target"].k
    out = photo_sweep.save_csv(tmp_path / "t.csv")
    assert out.read_text(encoding="utf-8") == photo_sweep.to_csv()
    with pytest.raises(OutputError, match="exists"):
        photo_sweep.save_csv(tmp_path / "t.csv")
    photo_sweep.save_json(tmp_path / "t.json")
    assert json.loads((tmp_path / "t.json").read_text(encoding="utf-8"))["rows"][0]["k"] == 2


def test_table_formats_fit_candidates_the_same_way(photo):
    pal = fit_palette(photo, (2, 5), restarts=2, rule="bic")
    text = format_table(pal.fit.candidates, chosen=pal.k)
    lines = text.splitlines()
    assert len(lines) == 1 + 4
    assert [ln.split()[1] for ln in lines if ln.startswith(">")] == [str(pal.k)]
    assert candidate_rows(pal.fit.candidates)[0]["k"] == 2
    with pytest.raises(ValueError, match="not a sweep row"):
        format_table([{"score": 1}])


def test_locked_colour_heads_every_palette():
    img = _blob_image(5, 4)
    s = sweep(img, (2, 5), restarts=2, locked=["#ffffff"])
    for r in s.rows:
        assert r.palette.hex[0] == "#ffffff" and r.palette.locked.tolist()[0]
        assert not r.palette.locked[1:].any()


def test_same_seed_same_sweep_and_few_colours_noted():
    img = _blob_image(7, 3)
    assert sweep(img, (2, 6), seed=3).to_csv() == sweep(img, (2, 6), seed=3).to_csv()
    flat = np.zeros((6, 6, 3), np.uint8)
    flat[:, 3:] = (200, 30, 40)
    s = sweep(flat, (2, 8))
    assert s.ks == [2] and "only 2 distinct colours" in s.notes[0]


@pytest.mark.parametrize("ks, msg", [
    ((9, 4), "min > max"), ("9-4", "min > max"), ((0, 5), "at least 1"),
    ((2, MAX_SWEEP_K + 1), "up to k = 64"), ("many", "not N or MIN-MAX"),
])
def test_bad_ranges_give_clear_messages(ks, msg):
    with pytest.raises(ValueError, match=msg):
        parse_sweep_range(ks)
    with pytest.raises(ValueError, match=msg):
        sweep(_blob_image(0, 2), ks)


def test_other_bad_input():
    img = _blob_image(0, 2)
    with pytest.raises(ValueError, match="empty"):
        sweep([], (2, 4))
    with pytest.raises(ValueError, match="restarts"):
        sweep(img, (2, 4), restarts=0)
    with pytest.raises(ValueError, match="target"):
        sweep(img, (2, 4), rule="target")
    with pytest.raises(ValueError, match="bic, target"):
        sweep(img, (2, 4), rule="elbow")
    with pytest.raises(ValueError, match="locked colours do not fit"):
        sweep(img, (2, 4), locked=["#000000", "#ffffff", "#ff0000"])
    assert isinstance(sweep(img, 3), Sweep)


# -- the command line ----------------------------------------------------------

def _cli(args):
    from click.testing import CliRunner

    from quantize.cli.sweep import sweep as command

    return CliRunner().invoke(command, args, obj={}, catch_exceptions=False)


@pytest.fixture(scope="module")
def image_files(tmp_path_factory):
    d = tmp_path_factory.mktemp("imgs")
    from PIL import Image

    a, _ = flat_artwork(4, seed=104, size=120, jpeg_quality=85)
    b, _ = flat_artwork(4, seed=105, size=100)
    Image.fromarray(a).save(d / "a.png")
    Image.fromarray(b).save(d / "b.png")
    return d / "a.png", d / "b.png"


def test_cli_writes_every_output_and_marks_the_chosen_row(image_files, tmp_path):
    a, b = image_files
    out = {n: tmp_path / n for n in ("t.csv", "t.json", "plot.png", "sw.png")}
    res = _cli([str(a), str(b), "-k", "2-6", "--restarts", "2", "--target", "2.5",
                "--table-csv", str(out["t.csv"]), "--table-json", str(out["t.json"]),
                "--plot", str(out["plot.png"]), "--swatches", str(out["sw.png"]),
                "--report", str(tmp_path / "rep")])
    assert res.exit_code == 0, res.output
    marked = [ln for ln in res.output.splitlines() if ln.startswith(">")]
    assert len(marked) == 1
    doc = json.loads(out["t.json"].read_text(encoding="utf-8"))
    assert marked[0].split()[1] == str(doc["chosen"])
    assert "bic rule: k = " in res.output and "target rule: k = " in res.output
    assert "a.png" in res.output and "b.png" in res.output  # per-image lines
    for p in out.values():
        assert p.is_file()
    page = (tmp_path / "rep" / "index.html").read_text(encoding="utf-8")
    # One self-contained page: a review block per image and the sweep's table, images inline.
    assert page.count('<section class="review"') == 2 and "Palette size sweep" in page
    assert 'src="data:image/png;base64,' in page and 'src="sweep.png"' not in page
    # Same numbers as the library with the same settings.
    lib = sweep([str(a), str(b)], (2, 6), restarts=2, target=2.5, rule="target")  # --target implies it
    assert [r["k"] for r in doc["rows"]] == lib.ks and doc["chosen"] == lib.chosen.k
    for r, row in zip(doc["rows"], lib.rows):
        assert r["inertia"] == pytest.approx(row.cost, rel=1e-12)
        assert r["per_image"][str(a)] == pytest.approx(row.per_image[str(a)], rel=1e-12)


def test_cli_json_summary(image_files):
    a, _ = image_files
    res = _cli([str(a), "-k", "3-5", "--restarts", "2", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["command"] == "sweep" and [r["k"] for r in doc["rows"]] == [3, 4, 5]
    assert doc["chosen"] in (3, 4, 5) and doc["choices"]["bic"]["k"] == doc["chosen"]


@pytest.mark.parametrize("rng, msg", [("9-4", "min > max"), ("0-5", "at least 1"),
                                      ("2-65", "up to k = 64"), ("lots", "not N or MIN-MAX")])
def test_cli_bad_range_is_a_usage_error(image_files, rng, msg):
    res = _cli([str(image_files[0]), "-k", rng])
    assert res.exit_code == 2 and msg in res.output and "Traceback" not in res.output


def test_cli_refuses_existing_outputs_and_bad_files(image_files, tmp_path):
    a, _ = image_files
    taken = tmp_path / "t.csv"
    taken.write_text("keep", encoding="utf-8")
    res = _cli([str(a), "-k", "2-3", "--table-csv", str(taken)])
    assert res.exit_code == 1 and "already exists" in res.output
    assert taken.read_text(encoding="utf-8") == "keep"
    broken = tmp_path / "broken.png"
    broken.write_bytes(b"\x89PNG\r\n\x1a\nnot really")
    res = _cli([str(broken), "-k", "2-3"])
    errors = [ln for ln in res.stderr.splitlines() if ln != "sweeping"]  # the progress label
    assert res.exit_code == 1 and len(errors) == 1 and errors[0].startswith("quantize: error: ")
    assert "broken.png" in errors[0] and "Traceback" not in res.output
    res = _cli([str(a), "--plot", str(tmp_path / "p.jpg")])
    assert res.exit_code == 2 and ".png" in res.output
    res = _cli([str(a), "--rule", "target"])
    assert res.exit_code == 2 and "--target" in res.output


def test_cli_module_imports_only_click_and_runs_as_a_process(image_files):
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    code = "import sys, quantize.cli.sweep; print('numpy' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=root)
    assert out.stdout.strip() == "False"
    run = [sys.executable, "-c", "from quantize.cli.sweep import sweep; sweep(prog_name='quantize sweep', obj={})",
           str(image_files[0]), "-k", "2-4", "--restarts", "1"]
    proc = subprocess.run(run, capture_output=True, text=True, cwd=root)
    assert proc.returncode == 0, proc.stderr
    assert sum(ln.startswith(">") for ln in proc.stdout.splitlines()) == 1


def test_on_a_bare_colour_sample_the_auto_rule_picks_as_the_penalised_rule():
    # No picture, no regions to judge: the automatic pick falls back to the penalised rule.
    from quantize.core.sampling import sample_picture
    from quantize.fit.sweep import sweep_sample
    from quantize.io.read import as_picture

    img = _blob_image(11, 4)
    smp = sample_picture(as_picture(img))
    auto = sweep_sample(smp, [2, 3, 4, 5, 6], restarts=2, seed=0)
    bic = sweep_sample(smp, [2, 3, 4, 5, 6], restarts=2, seed=0, rule="bic")
    assert auto.rule == "auto" and auto.chosen.k == bic.chosen.k == bic.choices["bic"].k
