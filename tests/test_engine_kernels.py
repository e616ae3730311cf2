"""The compiled kernels of the fitting and mapping stages against plain twins.

Sources: Sharma, Wu & Dalal (2005), Table 1, for CIEDE2000 (the 34 pairs of
``test_colourspace.SHARMA_2005``); the twins in ``tests/naive.py`` scan every
palette colour with the numpy CIEDE2000 of :mod:`quantize.colour.spaces`,
itself held to those pairs.
"""

from __future__ import annotations

import naive
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from test_colourspace import SHARMA_2005

from quantize.colour.spaces import delta_e_ciede2000, srgb8_to_space
from quantize.kernels import engine_loops as ek
from quantize.kernels import loading
from quantize.kernels import nearest as _kernels


def _srgb_lab(rng, n):
    return srgb8_to_space(rng.integers(0, 256, (n, 3)).astype(np.uint8), "lab")


def test_sharma_pairs_through_the_nearest_search():
    # Each pair as a one-colour palette: the search returns the published ΔE00
    # (Sharma et al. 2005, Table 1) to 1e-4.
    for row in SHARMA_2005:
        labels, de = _kernels.nearest_ciede2000(row[None, :3], row[None, 3:6])
        assert labels[0] == 0
        assert de[0] == pytest.approx(row[6], abs=1e-4)
    de = _kernels.ciede2000_to(SHARMA_2005[:, :3], SHARMA_2005[:, 3:6], np.arange(34))
    assert_allclose(de, SHARMA_2005[:, 6], atol=1e-4)


@pytest.mark.parametrize("k", [1, 2, 5, 16, 64])
def test_nearest_ciede2000_equals_a_full_scan(k):
    rng = np.random.default_rng(k)
    lab = _srgb_lab(rng, 4000)
    pal = _srgb_lab(rng, k)
    labels, de = _kernels.nearest_ciede2000(lab, pal)
    ref_labels, ref_de = naive.nearest_ciede2000(lab, pal)
    best = ref_de[np.arange(len(lab)), ref_labels]
    assert_allclose(de, best, rtol=0, atol=1e-9)
    # Labels agree wherever the nearest colour is not tied within rounding.
    second = np.sort(ref_de, axis=1)[:, 1] if k > 1 else np.full(len(lab), np.inf)
    clear = second - best > 1e-9
    assert clear.mean() > 0.99
    assert_array_equal(labels[clear], ref_labels[clear])


def test_nearest_ciede2000_lowest_index_wins_a_tie():
    rng = np.random.default_rng(3)
    lab = _srgb_lab(rng, 2000)
    pal = _srgb_lab(rng, 6)
    doubled = np.vstack([pal, pal])  # every colour twice: ties everywhere
    labels, de = _kernels.nearest_ciede2000(lab, doubled)
    assert labels.max() < 6
    labels1, de1 = _kernels.nearest_ciede2000(lab, pal)
    assert_array_equal(labels, labels1)
    assert_array_equal(de, de1)


def test_neutral_and_opposite_hues():
    # Zero chroma and hues 180 degrees apart take the special branches of the
    # formula (Sharma et al. 2005, eqs. 10-14): still equal to the numpy form.
    lab = np.array([[50.0, 0, 0], [50, 10, 0], [50, -10, 0], [60, 0, 20], [60, 0, -20], [0, 0, 0], [100, 0, 0]])
    pal = np.array([[50.0, 0, 0], [50, -10, 0], [60, 0, -20], [100, 0, 0]])
    labels, de = _kernels.nearest_ciede2000(lab, pal)
    ref_labels, ref_de = naive.nearest_ciede2000(lab, pal)
    assert_allclose(de, ref_de[np.arange(len(lab)), ref_labels], atol=1e-9)


lab_colour = st.tuples(st.floats(0, 100), st.floats(-128, 128), st.floats(-128, 128))


@settings(max_examples=300, deadline=None)
@given(lab_colour, lab_colour)
def test_lower_bound_never_exceeds_ciede2000(p, q):
    # The pruning bound must hold for every pair, blue region (large R_T) included.
    (L1, a1, b1), (L2, a2, b2) = p, q
    c1, c2 = np.hypot(a1, b1), np.hypot(a2, b2)
    a1p, a2p, c1p, c2p = ek.primed_c(a1, b1, c1, a2, b2, c2)
    dp2 = (a2p - a1p) ** 2 + (b2 - b1) ** 2
    bound = ek._lower_bound2(L1, L2, c2p - c1p, dp2, c1p, c2p)
    exact = float(delta_e_ciede2000([L1, a1, b1], [L2, a2, b2]))
    assert bound <= exact**2 * (1 + 1e-9) + 1e-12
    assert ek._lightness2(L1, L2) <= exact**2 * (1 + 1e-9) + 1e-12


def test_compiled_euclidean_assignment_is_bit_identical_to_numpy():
    rng = np.random.default_rng(5)
    pts = rng.normal(size=(70_000, 3)) * 30
    centres = rng.normal(size=(12, 3)) * 30
    centres[7] = centres[2]  # a tie: the lowest index must win in both
    lab_c, d_c = _kernels.assign_nearest(pts, centres)
    lab_n, d_n = _kernels.assign_nearest_numpy(pts, centres)
    assert_array_equal(lab_c, lab_n)
    assert_array_equal(d_c, d_n)
    ref_labels, ref_d = naive.assign_nearest(pts, centres)
    assert_array_equal(lab_c, ref_labels)
    assert_allclose(d_c, ref_d, rtol=1e-12)


def test_compiled_cluster_sums_are_bit_identical_to_bincount():
    # While the compiled kernels load, the cluster sums come from np.bincount;
    # a palette must not depend on which one ran.
    rng = np.random.default_rng(8)
    pts = rng.normal(size=(50_000, 3)) * 40
    w = rng.integers(1, 1000, 50_000).astype(float) / 7.0
    labels = rng.integers(0, 9, 50_000)
    wsum, sums = _kernels.centre_sums(pts, w, labels, 9)
    assert_array_equal(wsum, np.bincount(labels, weights=w, minlength=9))
    for t in range(3):
        assert_array_equal(sums[:, t], np.bincount(labels, weights=w * pts[:, t], minlength=9))


def test_map_sample_follows_the_palette_and_metric_of_each_call():
    from quantize.core.sampling import sample_picture
    from quantize.fit.assign import map_sample
    from quantize.io.read import as_picture
    from quantize.palette import Palette

    rng = np.random.default_rng(2)
    smp = sample_picture(as_picture(rng.integers(0, 256, (40, 40, 3)).astype(np.uint8)))
    a = Palette(rgb8=np.array([[0, 0, 0], [255, 255, 255], [200, 30, 40]], np.uint8), locked=np.zeros(3, bool), space="lab")
    b = Palette(rgb8=np.array([[0, 0, 0], [255, 255, 255], [30, 40, 200]], np.uint8), locked=np.zeros(3, bool), space="lab")
    la, da = map_sample(smp, a, metric="ciede2000")
    lb, db = map_sample(smp, b, metric="ciede2000")
    ref_l, ref_d = naive.nearest_ciede2000(smp.points("lab"), b.lab)
    assert_array_equal(lb, ref_l)
    assert not np.array_equal(da, db)
    la2, da2 = map_sample(smp, a, metric="ciede2000")
    assert_array_equal(la2, la) and np.array_equal(da2, da)
    ls, _ = map_sample(smp, a, metric="space")
    assert_array_equal(ls, naive.assign_nearest(smp.points("lab"), a.points())[0])


def test_compiled_ciede2000_agrees_with_colour_science():
    # colour-science's delta_E(method="CIE 2000") as the reference library,
    # on random CIELAB pairs across the sRGB gamut, within 1e-6.
    colour = pytest.importorskip("colour")
    rng = np.random.default_rng(11)
    a, b = _srgb_lab(rng, 5000), _srgb_lab(rng, 5000)
    ours = _kernels.ciede2000_to(a, b, np.arange(5000))
    ref = colour.delta_E(a, b, method="CIE 2000")
    assert_allclose(ours, ref, rtol=0, atol=1e-6)


def test_loading_the_kernels_changes_no_process_wide_state():
    # A library must not freeze the collector or hook imports behind its
    # caller's back; run in a fresh process so that the load really happens.
    import subprocess
    import sys

    code = (
        "import gc, sys\n"
        "hooks, frozen, enabled = list(sys.meta_path), gc.get_freeze_count(), gc.isenabled()\n"
        "from quantize.kernels import loading\n"
        "loading.warm_up(); loading.engine()\n"
        "assert list(sys.meta_path) == hooks, sys.meta_path\n"
        "assert gc.get_freeze_count() == frozen, gc.get_freeze_count()\n"
        "assert gc.isenabled() == enabled\n"
        "import scipy.linalg\n"
        "print('ok')\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "ok"


def test_a_kernel_load_failure_is_one_clear_line_on_the_command_line(monkeypatch, tmp_path):
    # Stands in for a broken numba install: the load recorded an error.
    import threading

    from click.testing import CliRunner
    from PIL import Image

    from quantize.cli.main import main

    done = threading.Thread(target=lambda: None)
    done.start()
    done.join()
    monkeypatch.setattr(loading, "_state", {"thread": done, "error": ImportError("libllvmlite.so: cannot open")})
    img = tmp_path / "in.png"
    Image.fromarray(np.random.default_rng(0).integers(0, 256, (20, 20, 3)).astype(np.uint8)).save(img)
    res = CliRunner().invoke(main, ["reduce", str(img), "-o", str(tmp_path / "out.png"), "-k", "3"])
    assert res.exit_code == 1
    assert "compiled kernels (numba) failed to load: libllvmlite.so: cannot open" in res.output
    assert "Traceback" not in res.output
    assert not (tmp_path / "out.png").exists()


@pytest.mark.skipif(not hasattr(__import__("os"), "fork"), reason="needs os.fork (POSIX)")
def test_a_forked_child_gets_a_fresh_thread_pool():
    # A script may fork worker processes after quantize has run: the parent's
    # pool threads do not exist in the child, so the child must make its own.
    import os

    rng = np.random.default_rng(4)
    lab = _srgb_lab(rng, 300_000)
    pal = _srgb_lab(rng, 8)
    labels, de = _kernels.nearest_ciede2000(lab, pal)  # large enough to use the pool
    assert loading._pool
    pid = os.fork()
    if pid == 0:  # the child: report by exit status only
        ok = not loading._pool
        l2, d2 = _kernels.nearest_ciede2000(lab, pal)
        ok = ok and np.array_equal(l2, labels) and np.array_equal(d2, de)
        os._exit(0 if ok else 1)
    _, status = os.waitpid(pid, 0)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0


def test_a_load_interrupted_by_fork_starts_again_in_the_child():
    saved = dict(loading._state)
    try:
        loading._state.clear()
        loading._state["thread"] = object()  # a load that was running in the parent
        loading._after_fork_in_child()
        assert "thread" not in loading._state
    finally:
        loading._state.clear()
        loading._state.update(saved)
