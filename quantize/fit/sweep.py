"""The palette-size sweep: colour error at every palette size, before choosing.

For each k of a range (default 2 to 16, at most :data:`MAX_SWEEP_K`) the sweep
fits a palette and records its k-means cost (pixel-weighted squared error in
the fitting space), its CIEDE2000 statistics, the penalised score of the
``"bic"`` rule (:mod:`quantize.fit.selection`) and the k each rule picks.

Warm starts make it cheap and keep the best cost non-increasing in k.  The
k + 1 fit has, beside the fresh k-means++ restarts, two candidates started
from the k solution: the worst cluster split in two along its principal
axis, and the k centres plus one greedy k-means++ addition.  The candidate
of lowest cost is kept.  Adding a centre to a solution cannot raise its
cost, and Lloyd iterations never do, so the cost at k + 1 is at most the
cost at k; a final check on every distinct colour enforces this exactly.

Several images are pooled into one sample (one palette shared by a product
set) and each image's own ΔE00 is reported beside the pooled figures.
"""

from __future__ import annotations

import warnings
from typing import Callable, Sequence

import numpy as np

# The result objects and tables live in their own module; their names stay importable here.
from .sweep_result import Sweep, SweepRow, candidate_rows, format_table

__all__ = ["sweep", "sweep_sample", "Sweep", "SweepRow", "parse_sweep_range", "candidate_rows",
           "format_table", "MAX_SWEEP_K", "DEFAULT_RANGE", "STARTS"]

#: Largest palette size a sweep fits.
MAX_SWEEP_K = 64
#: The range swept when none is given.
DEFAULT_RANGE = (2, 16)
#: How the kept candidate of a row was started.
STARTS = {
    "fresh": "best of the fresh k-means++ restarts",
    "split": "the k-1 palette with its worst cluster split in two",
    "add": "the k-1 palette plus one k-means++ addition",
}
#: Lloyd steps on every distinct colour per size.  A sweep fits every size
#: in the range, so it takes one step (the binned restarts have converged,
#: and one step cannot raise the cost) where a single fit takes
#: :data:`quantize.fit.engine.FINE_ITER`.
SWEEP_FINE_ITER = 1
def parse_sweep_range(ks=DEFAULT_RANGE) -> list[int]:
    """The sizes of a sweep from ``(lo, hi)``, ``"lo-hi"``, a ``range``, or one int.

    Raises
    ------
    ValueError
        min > max, below 1, above :data:`MAX_SWEEP_K`, or not a size.

    Examples
    --------
    >>> parse_sweep_range("3-6")
    [3, 4, 5, 6]
    """
    from .engine import parse_k

    out = parse_k(ks)
    if out[-1] > MAX_SWEEP_K:
        raise ValueError(f"a sweep goes up to k = {MAX_SWEEP_K}, got {out[-1]}")
    return out


def _rng(seed, k: int, stream: int) -> np.random.Generator:
    # Stream 0 is the one quantize.fit.engine uses for size k, so that the fresh
    # restarts of a sweep are exactly those of ``fit_palette`` with the same seed.
    if isinstance(seed, np.random.Generator):
        return seed
    words = [0 if seed is None else int(seed), int(k)] + ([stream] if stream else [])
    return np.random.default_rng(np.random.SeedSequence(words))


def _split_worst(points, weights, res, n_fixed):
    """Start centres for k + 1: the costliest cluster split along its principal axis.

    A Gaussian cut through its mean along an axis of variance ``lam`` has
    half-means at ``+-sqrt(2 lam / pi)``: the two new centres go there.  A
    locked centre stays and gains a partner on one side.  None when the
    worst cluster is a single colour.
    """
    from quantize.kernels.nearest import assign_nearest

    centres = res.centres
    labels, d2 = assign_nearest(points, centres)
    cost = np.bincount(labels, weights=weights * d2, minlength=len(centres))
    j = int(np.argmax(cost))
    members = labels == j
    w = weights[members]
    if cost[j] <= 0 or w.sum() <= 0:
        return None
    x = points[members]
    mu = (w[:, None] * x).sum(axis=0) / w.sum()
    cov = ((x - mu).T * w) @ (x - mu) / w.sum()
    lam, vec = np.linalg.eigh(cov)
    step = np.sqrt(2.0 * max(lam[-1], 0.0) / np.pi) * vec[:, -1]
    if not np.any(step):
        return None
    start = np.vstack([centres, centres[j] + step])
    if j >= n_fixed:
        start[j] = centres[j] - step
    return start


def _add_one(points, weights, res, fixed, rng):
    """Start centres for k + 1: the k centres plus one greedy k-means++ draw."""
    from .clustering import INITS

    return INITS["k-means++"](points, weights, len(res.centres) + 1, res.centres, rng)


def _run_from(points, weights, start, n_fixed, abs_tol, max_iter=300):
    from .clustering import lloyd_from

    return lloyd_from(points, weights, start, n_fixed=n_fixed, max_iter=max_iter, abs_tol=abs_tol)


def _guarded(points, weights, start, n_fixed, abs_tol):
    """Lloyd from ``start``, or ``start`` itself if rounding made Lloyd end higher.

    The cost of ``start`` (old centres plus one) is at most the old cost
    even in floating point: each squared distance can only fall, and the
    sum is taken in the same order.
    """
    from quantize.kernels.nearest import assign_nearest

    from .clustering import KMeansResult

    res = _run_from(points, weights, start, n_fixed, abs_tol, max_iter=SWEEP_FINE_ITER)
    labels, d2 = assign_nearest(points, start)
    c0 = float((weights * d2).sum())
    if res.inertia <= c0:
        return res
    return KMeansResult(centres=start, labels=labels, inertia=c0, n_iter=0, history=(c0,), k_requested=len(start))


def _finish_row(sample, centres, fixed_rgb8, k, start, space, metric, refine, per_image, others=()) -> dict:
    """One sweep row after its k-means fit: the refined palette and its figures on every distinct colour.

    The same explicit refinements as :mod:`quantize.fit.engine`: the k-means
    cost is reported, the refined palette is what a job would print.
    """
    from quantize.palette import Palette
    from quantize.quality.stats import coverage_percent, delta_e_stats

    from .assign import map_sample
    from .engine import finish_palette
    from .selection import robust_error

    pal, _, labels, de, refined = finish_palette(sample, centres, fixed_rgb8, space=space, metric=metric,
                                                 refine=refine, others=others)
    pal = Palette(pal.rgb8, pal.locked, space, fit={"k": k, "start": start, "refined": refined})
    w = sample.weights
    per = {}
    for src, smp in per_image:
        per[src] = delta_e_stats(map_sample(smp, pal, metric=metric)[1], smp.weights)
    return dict(palette=pal, delta_e=delta_e_stats(de, w), robust=robust_error(de, w),
                coverage=coverage_percent(labels, w, pal.k), per_image=per)


def sweep_sample(sample, ks: Sequence[int], *, space: str = "lab", restarts: int = 8, seed=0,
                 locked=(), init: str = "k-means++", metric: str = "ciede2000", refine: str = "robust",
                 warm: bool = True, rule: str = "bic", target: float | None = None, target_stat: str = "mean",
                 per_image: Sequence = (), progress: Callable | None = None) -> Sweep:
    """Sweep an already loaded colour sample; ``ks`` ascending and validated.

    ``per_image`` is a sequence of ``(source, ColourSample)`` pairs whose
    own ΔE00 is measured against each row's palette.  Other parameters as
    in :func:`sweep`.
    """
    from quantize.colour.spaces import srgb8_to_space
    from quantize.palette import parse_locked

    from .clustering import PaletteSizeWarning, kmeans, tolerance_scale
    from .engine import size_workers
    from .selection import choose_k

    fixed_rgb8 = parse_locked(locked, ks[0])
    n_fixed = len(fixed_rgb8)
    fixed = srgb8_to_space(fixed_rgb8, space) if n_fixed else None
    full_pts, full_w = sample.points(space), sample.weights
    bin_pts, bin_w = sample.binned(space)
    full_tol = 1e-4 * tolerance_scale(full_pts, full_w)
    bin_tol = 1e-4 * tolerance_scale(bin_pts, bin_w)

    rows, notes, pending = [], [], []
    prev_coarse = prev_fine = None
    with size_workers(sample, space, True) as submit:
        for k in ks:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PaletteSizeWarning)
                coarse = fresh = kmeans(bin_pts, k, weights=bin_w, restarts=restarts, seed=_rng(seed, k, 0),
                                        fixed=fixed, init=init)
                start = "fresh"
                warm_ok = warm and prev_coarse is not None and len(prev_coarse.centres) == k - 1
                if warm_ok:
                    for name, c0 in (("split", _split_worst(bin_pts, bin_w, prev_coarse, n_fixed)),
                                     ("add", _add_one(bin_pts, bin_w, prev_coarse, fixed, _rng(seed, k, 1)))):
                        if c0 is None or len(c0) != k:
                            continue
                        cand = _run_from(bin_pts, bin_w, c0, n_fixed, bin_tol)
                        if cand.inertia < coarse.inertia:
                            coarse, start = cand, name
                # Every fresh restart but the kept one: the k-medians may start there too.
                others = [c for c, _ in fresh.runs if c is not coarse.centres]
                fine = _run_from(full_pts, full_w, coarse.centres, n_fixed, full_tol, max_iter=SWEEP_FINE_ITER)
                if warm and prev_fine is not None and len(prev_fine.centres) == k - 1 \
                        and fine.inertia > prev_fine.inertia:
                    # Binning can mislead the choice; one addition to the previous
                    # full-data solution cannot cost more than it did.
                    c0 = _add_one(full_pts, full_w, prev_fine, fixed, _rng(seed, k, 2))
                    alt = _guarded(full_pts, full_w, c0, n_fixed, full_tol) if len(c0) == k else None
                    if alt is not None and alt.inertia <= fine.inertia:
                        fine, start = alt, "add"
            prev_coarse, prev_fine = coarse, fine
            # Refining and measuring a size need nothing from the next size:
            # they run on worker threads while the next size is fitted.
            pending.append((dict(k=k, cost=float(fine.inertia), start=start),
                            submit(_finish_row, sample, fine.centres, fixed_rgb8, k, start, space, metric,
                                   refine, per_image, others)))
            if progress:
                progress(k)
        for row, job in pending:
            row.update(job.result())
            if row["palette"].k < row["k"]:
                notes.append(f"k = {row['k']}: rounding to 8 bits merged colours; the palette has "
                             f"{row['palette'].k}")
            rows.append(row)

    kk = [r["k"] for r in rows]
    stats = [r["delta_e"] for r in rows]
    rob = [r["robust"] for r in rows]
    choices = {"bic": choose_k(kk, stats, rob, rule="bic")}
    if target is not None:
        choices["target"] = choose_k(kk, stats, rob, rule="target", target=target, target_stat=target_stat)
    if rule == "target" and "target" not in choices:
        raise ValueError(f"the target rule needs a positive ΔE00 target, got {target!r}")
    scores = choices["bic"].scores
    out_rows = [SweepRow(score=float(s), **r) for r, s in zip(rows, scores)]
    settings = {"space": space, "restarts": restarts, "init": init, "metric": metric, "refine": refine,
                "warm": warm,
                "seed": seed if not isinstance(seed, np.random.Generator) else None,
                "locked": [f"#{c[0]:02x}{c[1]:02x}{c[2]:02x}" for c in fixed_rgb8.tolist()],
                "target": target, "target_stat": target_stat, "k_range": [ks[0], ks[-1]],
                "n_pixels": int(sample.n_pixels), "n_distinct": int(sample.n_colours)}
    return Sweep(rows=out_rows, choices=choices, rule=rule, settings=settings, notes=notes)


def sweep(images, ks=DEFAULT_RANGE, *, space: str = "lab", restarts: int = 8, seed=0, locked=(),
          rule: str = "bic", target: float | None = None, target_stat: str = "mean",
          init: str = "k-means++", weighting: str = "equal", metric: str | None = None,
          refine: str = "robust", warm: bool = True, max_pixels=None, progress: Callable | None = None) -> Sweep:
    """Fit a palette at every size of a range and tabulate its error.

    Parameters
    ----------
    images : path, Picture, PIL image, ndarray, or a list of them
        Several images are pooled (one palette for the set); each also gets
        its own ΔE00 columns.
    ks : (min, max), "min-max", range or int, default=(2, 16)
        Palette sizes, inclusive, within 1 to :data:`MAX_SWEEP_K`.
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
        Perceptual space of the fit; the cost is measured there.
    restarts : int, default=8
        Fresh k-means++ restarts per size (the warm starts come on top).
    seed : int or numpy Generator, default=0
        Same seed, same sweep.
    locked : sequence of colour specs, default=()
        Colours held fixed in every palette (hex or ``"L,a,b"``).
    rule : {"bic", "target"}, default="bic"
        The rule whose pick is :attr:`Sweep.chosen`; both are reported.
    target : float, optional
        ΔE00 target of the ``"target"`` rule.
    target_stat : {"mean", "p95"}, default="mean"
    init : {"k-means++", "random", "farthest"}, default="k-means++"
        Seeding of the fresh restarts.
    weighting : {"equal", "pixels"}, default="equal"
        How pooled images count.
    metric : {"ciede2000", "space"}, optional
        Nearest-colour metric used to refine and measure each palette
        (default CIEDE2000).
    refine : {"robust", "none"}, default="robust"
        The refinement after each k-means fit, as in
        :func:`quantize.fit.engine.fit_palette`; the table's k-means cost is
        that of the fit before it.
    warm : bool, default=True
        Add the warm starts from the previous size (False: fresh restarts
        only, as :func:`quantize.fit.engine.fit_palette` does).
    max_pixels : int, optional
        Decompression-bomb limit for files.
    progress : callable, optional
        Called with each k once it is done.

    Returns
    -------
    Sweep
        ``.rows`` (cost, ΔE00, score, palette per k), ``.choices`` (the k
        each rule picks) and ``.table()``, ``.to_csv()``, ``.to_json()``.

    Raises
    ------
    ValueError
        A range with min > max, k below 1 or above 64, an empty image set,
        or a bad space, rule, seeding, target or locked colour.
    ImageReadError
        A file cannot be read.

    References
    ----------
    .. [1] D. Arthur and S. Vassilvitskii, "k-means++: the advantages of
       careful seeding", SODA 2007, 1027-1035.
    .. [2] Y. Linde, A. Buzo and R. M. Gray, "An algorithm for vector
       quantizer design", IEEE Transactions on Communications 28(1), 84-95,
       1980 (growing a codebook by splitting).
    .. [3] G. Schwarz, "Estimating the dimension of a model", Annals of
       Statistics 6(2), 461-464, 1978.
    .. [4] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Research & Application 30(1),
       21-30, 2005.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((8, 8, 3), np.uint8); img[:, 4:] = (200, 30, 40); img[:2] = (250, 250, 250)
    >>> s = sweep(img, (2, 4))
    >>> s.ks, s.chosen.k
    ([2, 3], 3)
    """
    from quantize.colour.spaces import check_space
    from quantize.core.sampling import pool_samples

    from .assign import resolve_metric
    from .clustering import check_init
    from .engine import REFINES, load_samples
    from .selection import check_rule

    ks = parse_sweep_range(ks)
    check_space(space)
    check_rule(rule)
    check_init(init)
    metric = resolve_metric(metric)
    if refine not in REFINES:
        raise ValueError(f"unknown refinement {refine!r}; choose one of: {', '.join(REFINES)}")
    if isinstance(restarts, bool) or int(restarts) != restarts or restarts < 1:
        raise ValueError(f"restarts must be a whole number of at least 1, got {restarts!r}")
    if weighting not in ("equal", "pixels"):
        raise ValueError(f"weighting must be 'equal' or 'pixels', got {weighting!r}")
    if target is not None and not target > 0:
        raise ValueError(f"a ΔE00 target must be positive, got {target!r}")
    if rule == "target" and target is None:
        raise ValueError("the target rule needs a positive ΔE00 target, got None")
    from quantize.palette import parse_locked

    parse_locked(locked, ks[0])  # before any image is read
    items = list(images) if isinstance(images, (list, tuple)) else [images]
    if not items:
        raise ValueError("no images given: the image set is empty")
    samples, sources, notes = [], [], []
    for item in items:
        smp, src, nts = load_samples(item, max_pixels=max_pixels)
        samples.append(smp)
        sources.extend(src)
        notes.extend(nts)
    sources = _unique_names(sources)
    pooled = pool_samples(samples, weighting=weighting)
    n = pooled.n_colours
    if ks[-1] > n:
        notes.append(f"the image set has only {n} distinct colours; sizes above {n} were not swept")
        ks = [k for k in ks if k <= n] or [n]
    per = list(zip(sources, samples)) if len(samples) > 1 else []
    res = sweep_sample(pooled, ks, space=space, restarts=int(restarts), seed=seed, locked=locked, init=init,
                       metric=metric, refine=refine, warm=warm, rule=rule, target=target, target_stat=target_stat,
                       per_image=per, progress=progress)
    res.settings.update(images=sources, weighting=weighting)
    res.notes[:0] = notes
    return res


def _unique_names(sources: list[str]) -> list[str]:
    # Two in-memory images are both "<array>": number them so columns differ.
    seen: dict[str, int] = {}
    out = []
    for s in sources:
        seen[s] = seen.get(s, 0) + 1
        out.append(s if seen[s] == 1 else f"{s}#{seen[s]}")
    if len(set(out)) != len(out):
        return [f"{s}#{i + 1}" for i, s in enumerate(sources)]
    return out
