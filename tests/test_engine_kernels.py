"""The kernels of the fitting and mapping stages, numpy and compiled, against plain twins.

Sources: Sharma, Wu & Dalal (2005), Table 1, for CIEDE2000 (the 34 pairs of
``test_colourspace.SHARMA_2005``); colour-science's ``delta_E(method="CIE
2000")`` as the reference library; the twins in ``tests/naive.py`` scan
every palette colour with the numpy CIEDE2000 of
:mod:`quantize.colour.spaces`, itself held to those pairs.  Each kernel runs
both ways: the numpy code of :mod:`quantize.kernels.vectorised` and the
compiled loops, by moving the size from which the compiled loops run
(``COMPILED_FROM``).
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
from quantize.kernels import loading, vectorised
from quantize.kernels import nearest as _kernels


@pytest.fixture(params=["numpy", "compiled"])
def path(request, monkeypatch):
    """Run the kernels of :mod:`quantize.kernels.nearest` the numpy way or the compiled way."""
    monkeypatch.setattr(_kernels, "COMPILED_FROM", 0 if request.param == "compiled" else 1 << 62)
    return request.param


def _srgb_lab(rng, n):
    return srgb8_to_space(rng.integers(0, 256, (n, 3)).astype(np.uint8), "lab")


def test_sharma_pairs_through_the_nearest_search(path):
    # Each pair as a one-colour palette: the search returns the published ΔE00
    # (Sharma et al. 2005, Table 1) to 1e-4.
    for row in SHARMA_2005:
        labels, de = _kernels.nearest_ciede2000(row[None, :3], row[None, 3:6])
        assert labels[0] == 0
        assert de[0] == pytest.approx(row[6], abs=1e-4)
    de = _kernels.ciede2000_to(SHARMA_2005[:, :3], SHARMA_2005[:, 3:6], np.arange(34))
    assert_allclose(de, SHARMA_2005[:, 6], atol=1e-4)


@pytest.mark.parametrize("k", [1, 2, 5, 16, 64])
def test_nearest_ciede2000_equals_a_full_scan(k, path):
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


def test_nearest_ciede2000_lowest_index_wins_a_tie(path):
    rng = np.random.default_rng(3)
    lab = _srgb_lab(rng, 2000)
    pal = _srgb_lab(rng, 6)
    doubled = np.vstack([pal, pal])  # every colour twice: ties everywhere
    labels, de = _kernels.nearest_ciede2000(lab, doubled)
    assert labels.max() < 6
    labels1, de1 = _kernels.nearest_ciede2000(lab, pal)
    assert_array_equal(labels, labels1)
    assert_array_equal(de, de1)


def test_neutral_and_opposite_hues(path):
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


def test_compiled_euclidean_assignment_is_bit_identical_to_numpy(monkeypatch):
    # Both paths may serve the same size class, so they must agree bit for bit.
    rng = np.random.default_rng(5)
    pts = rng.normal(size=(70_000, 3)) * 30
    centres = rng.normal(size=(12, 3)) * 30
    centres[7] = centres[2]  # a tie: the lowest index must win in both
    monkeypatch.setattr(_kernels, "COMPILED_FROM", 0)
    lab_c, d_c = _kernels.assign_nearest(pts, centres)
    lab_n, d_n = _kernels.assign_nearest_numpy(pts, centres)
    assert_array_equal(lab_c, lab_n)
    assert_array_equal(d_c, d_n)
    ref_labels, ref_d = naive.assign_nearest(pts, centres)
    assert_array_equal(lab_c, ref_labels)
    assert_allclose(d_c, ref_d, rtol=1e-12)


def test_with_no_centres_every_point_is_infinitely_far(monkeypatch):
    # Removing the only free centre leaves none to fall back to; both paths
    # must say so the same way.
    pts = np.arange(12.0).reshape(4, 3)
    labels, d2 = _kernels.assign_nearest(pts, np.empty((0, 3)))
    assert_array_equal(labels, 0)
    assert_array_equal(d2, np.inf)
    monkeypatch.setattr(_kernels, "COMPILED_FROM", 0)
    labels_c, d2_c = _kernels.assign_nearest(pts, np.empty((0, 3)))
    assert_array_equal(labels_c, labels)
    assert_array_equal(d2_c, d2)


def test_cluster_sums_equal_a_point_by_point_sum():
    rng = np.random.default_rng(8)
    pts = rng.normal(size=(3000, 3)) * 40
    w = rng.integers(1, 1000, 3000).astype(float) / 7.0
    labels = rng.integers(0, 9, 3000)
    labels[labels == 4] = 5  # an empty cluster sums to zero
    wsum, sums = _kernels.centre_sums(pts, w, labels, 9)
    ref_w, ref_s = naive.centre_sums(pts, w, labels, 9)
    assert_allclose(wsum, ref_w, rtol=1e-12)
    assert_allclose(sums, ref_s, rtol=1e-12, atol=1e-9)
    assert wsum[4] == 0 and not sums[4].any()


def test_numpy_ciede2000_pairs_follow_sharma_2005():
    # Table 1 of Sharma et al. (2005), both orders of each pair, to 1e-4.
    a, b, ref = SHARMA_2005[:, :3], SHARMA_2005[:, 3:6], SHARMA_2005[:, 6]
    assert_allclose(vectorised.ciede2000_pairs(*a.T, *b.T), ref, atol=1e-4)
    assert_allclose(vectorised.ciede2000_pairs(*b.T, *a.T), ref, atol=1e-4)


def test_numpy_and_compiled_nearest_colour_agree():
    # Both paths find the same colour wherever it is not tied within
    # rounding, and the same ΔE00 to rounding.
    rng = np.random.default_rng(21)
    lab = _srgb_lab(rng, 20_000)
    for k in (1, 3, 12, 40):
        pal = _srgb_lab(rng, k)
        l_np, d_np = vectorised.nearest_ciede2000(lab, pal)
        l_c, d_c = np.empty(len(lab), np.intp), np.empty(len(lab))
        order = np.argsort(pal[:, 0], kind="stable")
        ek.assign_ciede2000(lab, pal, order, 1.5, l_c, d_c)  # S_L <= 1.5 for L* in 0-100
        assert_allclose(d_np, d_c, rtol=0, atol=1e-10)
        ref = naive.nearest_ciede2000(lab, pal)[1]
        clear = (np.sort(ref, axis=1)[:, 1] - ref.min(axis=1) > 1e-9) if k > 1 else np.ones(len(lab), bool)
        assert_array_equal(l_np[clear], l_c[clear])


def test_the_path_depends_on_the_input_size_alone():
    assert not _kernels.uses_compiled(_kernels.COMPILED_FROM // 16 - 1, 16)
    assert _kernels.uses_compiled(_kernels.COMPILED_FROM // 16, 16)
    assert _kernels.uses_compiled(_kernels.COMPILED_FROM, 1)


def test_a_large_sample_is_searched_compiled_at_every_palette_size(monkeypatch):
    # A sample of SAMPLE_COMPILED_FROM colours (moved down here to 300) runs
    # the compiled loops for 2 colours too; one colour fewer and 2 colours
    # stay on numpy.  Which path ran is seen by the compiled kernel's calls.
    calls = []
    kernel = ek.assign_ciede2000

    def counted(*args):
        calls.append(len(args[0]))
        return kernel(*args)

    monkeypatch.setattr(ek, "assign_ciede2000", counted)
    monkeypatch.setattr(_kernels, "SAMPLE_COMPILED_FROM", 300)
    rng = np.random.default_rng(7)
    lab, pal = _srgb_lab(rng, 300), _srgb_lab(rng, 2)
    labels, de = _kernels.nearest_ciede2000(lab, pal)
    assert sum(calls) == 300
    ref = naive.nearest_ciede2000(lab, pal)[1]  # the numpy CIEDE2000 held to Sharma et al. (2005)
    assert_allclose(de, ref.min(axis=1), rtol=0, atol=1e-10)
    calls.clear()
    _kernels.nearest_ciede2000(lab[:299], pal)
    assert calls == []


def test_a_result_does_not_depend_on_whether_the_compiler_is_loaded():
    # In a fresh process: the same input gives bit-identical palettes before
    # and after the compiled loops were loaded by a larger job.
    import subprocess
    import sys

    code = (
        "import sys, numpy as np\n"
        "from quantize import fit_palette\n"
        "from quantize.kernels.nearest import nearest_ciede2000\n"
        "rng = np.random.default_rng(3)\n"
        "img = rng.integers(0, 256, (60, 80, 3)).astype(np.uint8)\n"
        "before = fit_palette(img, (2, 5), seed=4)\n"
        "assert 'numba' not in sys.modules\n"
        # A batch's setting (FitSettings.compiled_always) loads the compiled loops whatever the size.
        "fit_palette(img, (2, 5), seed=4, compiled_always=True)\n"
        "assert 'quantize.kernels.engine_loops' in sys.modules\n"
        "lab = rng.uniform(0, 60, (1 << 21, 3)); nearest_ciede2000(lab, lab[:8])\n"
        "assert 'numba' in sys.modules\n"
        "after = fit_palette(img, (2, 5), seed=4)\n"
        "assert np.array_equal(before.rgb8, after.rgb8) and before.fit.inertia == after.fit.inertia\n"
        "print('ok')\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "ok"


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


def test_ciede2000_agrees_with_colour_science(path):
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
        "import numpy as np\n"
        "ek = loading.compiled('engine_loops')\n"
        "ek.assign_euclid(np.zeros((2, 3)), np.zeros((2, 3)), np.zeros(2, np.intp), np.zeros(2))\n"
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
    # Stands in for a broken numba install: importing a kernel module fails.
    # Error diffusion always needs the compiled loops.
    import sys

    from click.testing import CliRunner
    from PIL import Image

    from quantize.cli.main import main

    def broken(name):
        raise ImportError("libllvmlite.so: cannot open")

    monkeypatch.setattr(loading, "_import", broken)
    for name in loading.KERNEL_MODULES:
        monkeypatch.delitem(sys.modules, f"quantize.kernels.{name}", raising=False)
    img = tmp_path / "in.png"
    Image.fromarray(np.random.default_rng(0).integers(0, 256, (20, 20, 3)).astype(np.uint8)).save(img)
    res = CliRunner().invoke(main, ["reduce", str(img), "-o", str(tmp_path / "out.png"), "-k", "3",
                                    "--dither", "floyd-steinberg"])
    assert res.exit_code == 1
    assert "compiled kernels (numba) failed to load: libllvmlite.so: cannot open" in res.output
    assert "reinstall" in res.output
    assert "Traceback" not in res.output
    assert not (tmp_path / "out.png").exists()


@pytest.mark.skipif(not hasattr(__import__("os"), "fork"), reason="needs os.fork (POSIX)")
def test_a_forked_child_gets_a_fresh_thread_pool(monkeypatch):
    # A script may fork worker processes after quantize has run: the parent's
    # pool threads do not exist in the child, so the child must make its own.
    import os

    rng = np.random.default_rng(4)
    lab = _srgb_lab(rng, 300_000)
    pal = _srgb_lab(rng, 8)
    monkeypatch.setattr(_kernels, "COMPILED_FROM", 0)
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


def test_compiled_two_nearest_is_bit_identical_to_numpy():
    # The compiled nearest-and-second scan serves large inputs of the same
    # Lloyd loops, so it must agree with the numpy scan bit for bit, ties included.
    rng = np.random.default_rng(9)
    pts = rng.normal(size=(5_000, 3)) * 30
    centres = rng.normal(size=(9, 3)) * 30
    centres[6] = centres[1]
    n = len(pts)
    labels, d2, second = np.empty(n, np.intp), np.empty(n), np.empty(n)
    ek.assign_euclid_two(pts, centres, labels, d2, second)
    ref = vectorised.assign_euclid_two(pts, centres)
    assert_array_equal(labels, ref[0])
    assert_array_equal(d2, ref[1])
    assert_array_equal(second, ref[2])
    brute = ((pts[:, None, :] - centres[None]) ** 2).sum(axis=2)
    assert_allclose(second, np.sort(brute, axis=1)[:, 1], rtol=1e-12)


@pytest.mark.parametrize("k", [2, 5, 16])
@pytest.mark.parametrize("compiled_path", [False, True])
def test_lloyd_assigner_gives_every_step_what_a_full_scan_gives(k, compiled_path, monkeypatch):
    if compiled_path:
        monkeypatch.setattr(_kernels, "COMPILED_FROM", 0)
    # The bounds of the step-after-step assigner (Hamerly 2010) may skip
    # work, never change a result: at every step of a Lloyd loop, with
    # small moves, a large jump, a centre landing on another (a tie) and
    # the centres going back, its labels equal the brute-force twin's and
    # its squared distances the full numpy scan's, bit for bit.
    rng = np.random.default_rng(k)
    pts = np.ascontiguousarray(np.concatenate([rng.normal(c, 4, (600, 3)) for c in rng.uniform(0, 100, (6, 3))]))
    centres = pts[rng.choice(len(pts), k, replace=False)].copy()
    steps = []
    for _ in range(6):
        labels = naive.assign_nearest(pts, centres)[0]
        new = centres.copy()
        for j in range(k):
            if (labels == j).any():
                new[j] = pts[labels == j].mean(axis=0)
        steps.append(new)
        centres = new
    jump = centres.copy(); jump[0] += 40.0
    tie = jump.copy(); tie[-1] = tie[0]
    steps += [jump, tie, steps[0]]
    assigner = _kernels.LloydAssigner(pts)
    for c in steps:
        labels, d2 = assigner.assign(c)
        ref_labels = naive.assign_nearest(pts, c)[0]
        full_labels, full_d2 = _kernels.assign_nearest_numpy(pts, c)
        assert_array_equal(labels, ref_labels)
        assert_array_equal(labels, full_labels)
        assert_array_equal(d2, full_d2)


def test_compiled_cluster_sums_are_bit_identical_to_bincount():
    # Once the compiled loops are loaded every fit's sums run on them, so
    # they must add exactly what np.bincount adds, in the same order.
    from quantize.kernels import vectorised
    from quantize.kernels.loading import compiled

    rng = np.random.default_rng(11)
    pts = rng.normal(50, 30, (5000, 3))
    w = rng.integers(1, 1000, 5000).astype(float) * rng.random(5000)
    labels = rng.integers(0, 7, 5000).astype(np.intp)
    wsum, sums = np.zeros(7), np.zeros((7, 3))
    compiled("engine_loops").centre_sums(pts, w, labels, wsum, sums)
    ref_w, ref_s = vectorised.centre_sums(pts, w, labels, 7)
    assert_array_equal(wsum, ref_w)
    assert_array_equal(sums, ref_s)
    np.testing.assert_allclose(sums, naive.centre_sums(pts, w, labels, 7)[1], rtol=1e-12)
