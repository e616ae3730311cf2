"""Fitting a palette to one image or a set: the engine's main entry point.

image(s) -> perceptual distinct colours with pixel weights -> weighted
k-means++ with restarts on a binned sample -> refinement on every distinct
colour -> 8-bit palette -> ΔE00 per candidate size -> the chosen size.
"""

from __future__ import annotations

import contextlib
import warnings
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from quantize.palette import Palette, parse_locked

from .clustering import PaletteSizeWarning, check_init, kmeans, lloyd_from, tolerance_scale
from .selection import check_rule, choose_k, robust_error

__all__ = ["fit_palette", "Candidate", "fit_candidates", "parse_k", "load_samples"]

#: Largest palette the engine fits.
MAX_K = 4096
#: Lloyd iterations on every distinct colour after the binned restarts have
#: converged: the binned solution is close, and the refinements follow.
FINE_ITER = 4


@dataclass(frozen=True, eq=False)
class Candidate:
    """One fitted palette size: its palette and what it costs."""

    k: int
    palette: Palette
    inertia: float
    delta_e: dict
    robust: float
    labels: np.ndarray
    per_colour_de: np.ndarray


def parse_k(k) -> list[int]:
    """Candidate sizes from an int, a ``range``, a ``(lo, hi)`` pair or ``"lo-hi"``.

    Ranges are inclusive of both ends for pairs and strings.

    Raises
    ------
    ValueError
        Below 1, above the engine's maximum, empty, or min > max.
    """
    if isinstance(k, str):
        text = k.strip()
        if "-" in text:
            lo, _, hi = text.partition("-")
            try:
                k = (int(lo), int(hi))
            except ValueError:
                raise ValueError(f"palette size {text!r} is not N or MIN-MAX") from None
        else:
            try:
                k = int(text)
            except ValueError:
                raise ValueError(f"palette size {text!r} is not N or MIN-MAX") from None
    if isinstance(k, (int, np.integer)) and not isinstance(k, bool):
        ks = [int(k)]
    elif isinstance(k, range):
        ks = list(k)
    elif isinstance(k, (tuple, list)) and len(k) == 2:
        if not all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in k):
            raise ValueError(f"palette size range must be two whole numbers, got {k!r}")
        lo, hi = int(k[0]), int(k[1])
        if lo > hi:
            raise ValueError(f"palette size range {lo}-{hi} has min > max")
        ks = list(range(lo, hi + 1))
    else:
        raise ValueError(f"palette size must be an int or a range, got {k!r}")
    if not ks:
        raise ValueError("palette size range is empty")
    if min(ks) < 1:
        raise ValueError(f"palette size must be at least 1, got {min(ks)}")
    if max(ks) > MAX_K:
        raise ValueError(f"palette size must be at most {MAX_K}, got {max(ks)}")
    return sorted(set(ks))


def _as_list(images) -> list:
    if isinstance(images, (list, tuple)):
        items = list(images)
    else:
        items = [images]
    if not items:
        raise ValueError("no images given: the image set is empty")
    return items


def load_samples(images, *, weighting: str = "equal", max_pixels=None):
    """Load and sample one image or several; return (pooled sample, pictures' sources, notes)."""
    from quantize.core.sampling import ColourSample, pool_samples, sample_picture
    from quantize.io.read import as_picture, load_image

    samples, sources, notes = [], [], []
    for item in _as_list(images):
        if isinstance(item, ColourSample):  # already sampled (e.g. a batch's pooled histogram)
            samples.append(item)
            sources.append("<colour sample>")
            continue
        if isinstance(item, (str, bytes)) or hasattr(item, "__fspath__"):
            pic = load_image(item) if max_pixels is None else load_image(item, max_pixels=max_pixels)
        else:
            pic = as_picture(item)
        samples.append(sample_picture(pic))
        sources.append(pic.source)
        notes.extend(f"{pic.source}: {w}" for w in pic.warnings)
    return pool_samples(samples, weighting=weighting), sources, notes


def _rng_for(seed, k):
    # A per-size stream: the k=6 palette of a 2-12 range equals a lone k=6 fit.
    if isinstance(seed, np.random.Generator):
        return seed
    return np.random.default_rng(np.random.SeedSequence([0 if seed is None else int(seed), int(k)]))


def _to_palette(centres, fixed_rgb8, space, locked_n, centre_space=None):
    from quantize.colour.spaces import clip_to_gamut, from_space

    rgb = np.round(clip_to_gamut(from_space(centres, centre_space or space)) * 255).astype(np.uint8)
    rgb[:locked_n] = fixed_rgb8
    # Rounding to 8 bits can make two centres the same colour: keep one.
    _, first = np.unique(rgb, axis=0, return_index=True)
    keep = np.sort(first)
    return Palette(rgb8=rgb[keep], locked=np.arange(len(rgb))[keep] < locked_n, space=space), keep.size < len(rgb)


REFINES = ("robust", "none")


def _binned_delta_e(sample, pal, metric):
    """ΔE00 of every cell of the refinement grid to its palette colour."""
    from quantize.kernels.nearest import assign_nearest, ciede2000_to, nearest_ciede2000

    lab = sample.binned("lab", bits=None)[0]
    if metric == "ciede2000":
        return nearest_ciede2000(lab, pal.lab)[1]
    labels = assign_nearest(sample.binned(pal.space, bits=None)[0], pal.points())[0]
    return ciede2000_to(lab, pal.lab, labels)


def refine_palette(sample, centres, fixed_rgb8, *, space: str, metric: str = "ciede2000",
                   refine: str = "robust", others=()):
    """Turn k-means centres into the 8-bit palette a job writes (the binned phase).

    With ``refine="robust"`` two explicit refinements are tried on the
    binned sample (:meth:`ColourSample.binned`), each kept only if it lowers
    the mean ΔE00 there:

    1. a truncated-loss refit (:func:`quantize.fit.refine.robust_refine`), for
       flat artwork whose anti-aliased edges would otherwise take a colour;
    2. weighted k-medians steps from the better palette so far, and for
       palettes of up to :data:`SECOND_START_K` colours from the other one
       too: under CIEDE2000 (:func:`quantize.fit.refine.ciede2000_medians`) when
       colours are mapped by CIEDE2000, else in the fitting space
       (:func:`quantize.fit.refine.median_polish`).  Mean ΔE grows with
       distance, not its square, so these move centres toward medians.
    3. for palettes of up to :data:`SECOND_START_K` colours, the same
       k-medians steps from the one of ``others`` (the centres the other
       k-means restarts converged to) whose palette has the lowest mean
       ΔE00, if that is lower than the kept restart's.  The restart of
       lowest squared error is not always the best start for an absolute
       error: with few colours, restarts a little higher in k-means cost
       can lead to palettes several per cent lower in mean ΔE00.

    Below 20 000 distinct colours the binned sample is every distinct
    colour, so the comparison is exact; above, cells of similar colours
    stand in for their members in the comparison only: the palette kept is
    then mapped and measured on every distinct colour
    (:func:`finish_palette`).  The first ``len(fixed_rgb8)`` centres are
    locked.

    Returns
    -------
    palette, merged, refined
        ``merged``: rounding to 8 bits merged colours; ``refined`` names the
        steps kept ("", "robust", "median" or "robust+median").
    """
    from .refine import ciede2000_medians, median_polish, robust_refine

    m = len(fixed_rgb8)
    pal, merged = _to_palette(centres, fixed_rgb8, space, m)
    steps = ""
    if refine == "none":
        return pal, merged, ""
    # The finest cell grid within the point budget: the refinements compare
    # mean ΔE00, which needs a closer stand-in than the restarts do.
    bin_pts, bin_w = sample.binned(space, bits=None)
    # The robust refit needs no CIEDE2000, so it runs first: in a fresh
    # process the compiled CIEDE2000 kernels may still be loading.
    robust = robust_refine(bin_pts, bin_w, centres, n_fixed=m)
    cost = float((bin_w * _binned_delta_e(sample, pal, metric)).sum())

    def medians(start):
        if metric == "ciede2000":
            return ciede2000_medians(sample.binned("lab", bits=None)[0], bin_w, start.lab, n_fixed=m,
                                     iters=15), "lab"
        return median_polish(bin_pts, bin_w, start.points(space), n_fixed=m), None

    def consider(name, c, c_space):
        nonlocal pal, merged, cost, steps
        cpal, cmerged = _to_palette(c, fixed_rgb8, space, m, c_space)
        if cpal.k != pal.k:
            return None
        ccost = float((bin_w * _binned_delta_e(sample, cpal, metric)).sum())
        if ccost < cost:
            pal, merged, cost, steps = cpal, cmerged, ccost, name
        return cpal

    kmeans_pal, kmeans_cost = pal, cost
    robust_pal = consider("robust", robust, None)
    # The k-medians start from the better palette so far, and for small
    # palettes also from the other one: with few colours the local optima
    # lie far apart, and a second start costs little.
    starts = [pal]
    other = kmeans_pal if pal is not kmeans_pal else robust_pal
    if other is not None and len(centres) <= SECOND_START_K:
        starts.append(other)
    if len(centres) <= SECOND_START_K:
        alt = _best_other(sample, bin_w, others, fixed_rgb8, space, m, metric, kmeans_pal, kmeans_cost)
        if alt is not None:
            starts.append(alt)
    for start in starts:
        consider("robust+median" if start is robust_pal else "median", *medians(start))
    return pal, merged, steps


def _best_other(sample, bin_w, others, fixed_rgb8, space, m, metric, kept, kept_cost):
    """The palette of lowest mean ΔE00 among other restarts' centres, if below ``kept_cost``."""
    best, best_cost = None, kept_cost
    for c in others:
        cpal, _ = _to_palette(c, fixed_rgb8, space, m)
        if cpal.k != kept.k or np.array_equal(cpal.rgb8, kept.rgb8):
            continue
        ccost = float((bin_w * _binned_delta_e(sample, cpal, metric)).sum())
        if ccost < best_cost:
            best, best_cost = cpal, ccost
    return best


#: Palettes up to this size start the k-medians steps from both the k-means
#: and the robust palette (:func:`refine_palette`).
SECOND_START_K = 8


def finish_palette(sample, centres, fixed_rgb8, *, space: str, metric: str = "ciede2000", refine: str = "robust",
                   others=()):
    """:func:`refine_palette`, then map and measure every distinct colour.

    Returns
    -------
    palette, merged, labels, delta_e, refined
        As :func:`refine_palette`, with ``labels`` and ``delta_e`` per
        distinct colour.
    """
    from .assign import map_sample

    pal, merged, refined = refine_palette(sample, centres, fixed_rgb8, space=space, metric=metric, refine=refine,
                                          others=others)
    labels, de = map_sample(sample, pal, metric=metric)
    return pal, merged, labels, de, refined


@contextlib.contextmanager
def size_workers(sample, space: str, parallel: bool):
    """``submit(fn, *args, **kwargs)`` for the per-size work after each k-means fit.

    Refining and measuring one palette size need nothing from the next
    size, so with ``parallel`` they run on two worker threads while the
    next size is fitted (the compiled kernels release the interpreter
    lock).  Otherwise ``submit`` runs ``fn`` at once.  Either way it returns
    a future; results do not depend on the threads.
    """
    from concurrent.futures import Future, ThreadPoolExecutor

    if not parallel:
        def now(fn, *args, **kwargs):
            done = Future()
            done.set_result(fn(*args, **kwargs))
            return done

        yield now
        return
    # Cached on the sample before the threads share it.
    sample.binned(space, bits=None)
    sample.binned("lab", bits=None)
    sample.points("lab")
    pool = ThreadPoolExecutor(max_workers=2, thread_name_prefix="quantize-size")
    try:
        yield pool.submit
    finally:
        pool.shutdown(cancel_futures=True)


def fit_candidates(sample, ks: Sequence[int], *, space="lab", restarts=8, seed=0, locked=(),
                   init="k-means++", metric="ciede2000", refine: str = "robust",
                   progress: Callable | None = None) -> list[Candidate]:
    """Fit one palette per size in ``ks`` to a colour sample.

    Each size seeds and restarts on the binned sample, then runs Lloyd on
    every distinct colour with its true weight, at most :data:`FINE_ITER`
    iterations from the binned solution (the k-means fit, whose cost is
    reported as ``inertia``).  With ``refine="robust"`` the explicit
    refinements of :func:`finish_palette` follow, each kept only if it
    lowers the mean ΔE00.
    ``palette.fit["refined"]`` names the steps kept.  Sizes above the number of
    distinct colours collapse to that number (each size appears once).
    """
    if refine not in REFINES:
        raise ValueError(f"unknown refinement {refine!r}; choose one of: {', '.join(REFINES)}")
    from quantize.colour.spaces import srgb8_to_space

    fixed_rgb8 = parse_locked(locked, min(ks))
    fixed = srgb8_to_space(fixed_rgb8, space) if len(fixed_rgb8) else None
    m = len(fixed_rgb8)
    full_pts = sample.points(space)
    full_tol = 1e-4 * tolerance_scale(full_pts, sample.weights)
    bin_pts, bin_w = sample.binned(space)
    jobs = []
    with size_workers(sample, space, len(ks) > 1) as submit:
        for k in ks:
            rng = _rng_for(seed, k)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PaletteSizeWarning)
                coarse = kmeans(bin_pts, k, weights=bin_w, restarts=restarts, seed=rng, fixed=fixed, init=init)
                fine = lloyd_from(full_pts, sample.weights, coarse.centres, n_fixed=m, max_iter=FINE_ITER,
                                  abs_tol=full_tol)
            others = [c for c, _ in coarse.runs if c is not coarse.centres]
            jobs.append((k, fine, submit(finish_palette, sample, fine.centres, fixed_rgb8, space=space,
                                         metric=metric, refine=refine, others=others)))
            if progress:
                progress(k)
        results = [(k, fine, job.result()) for k, fine, job in jobs]

    from quantize.quality.stats import delta_e_stats

    out: list[Candidate] = []
    seen = set()
    for k, fine, (pal, merged, labels, de, refined) in results:
        if pal.k in seen:
            continue
        seen.add(pal.k)
        notes = []
        if pal.k < k:
            notes.append(f"asked for {k} colours; the image has {sample.n_colours} distinct colours"
                         + (" and rounding to 8 bits merged some" if merged else "")
                         + f", so the palette has {pal.k}")
        cand = Candidate(k=pal.k, palette=Palette(pal.rgb8, pal.locked, space,
                                                  fit={"notes": notes, "refined": refined}),
                         inertia=float(fine.inertia), delta_e=delta_e_stats(de, sample.weights),
                         robust=robust_error(de, sample.weights), labels=labels, per_colour_de=de)
        out.append(cand)
    return out


def fit_palette(images, k=16, *, space: str = "lab", restarts: int = 8, seed=0, locked=(),
                rule: str = "bic", target: float | None = None, target_stat: str = "mean",
                init: str = "k-means++", weighting: str = "equal", metric: str | None = None,
                refine: str = "robust", max_pixels=None, progress: Callable | None = None) -> Palette:
    """Fit an N-colour palette to one image or a set of images.

    Parameters
    ----------
    images : path, Picture, PIL image, ndarray, ColourSample, or a list of them
        Several images are pooled into one weighted colour sample.
    k : int, range, (min, max) or "min-max", default=16
        Palette size, or the sizes to choose from by ``rule``.
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
        Perceptual space of the fit.
    restarts : int, default=8
        k-means++ restarts per size; the lowest k-means cost is kept.
    seed : int or numpy Generator, default=0
        Same seed, same palette (bit-identical).
    locked : sequence of colour specs, default=()
        Colours held fixed (hex ``"#f4efe1"`` or Lab ``"95,1,6"``); they come
        first in the palette and are written exactly.
    rule : {"bic", "target"}, default="bic"
        How k is chosen from a range; see :mod:`quantize.fit.selection`.
    target : float, optional
        ΔE00 target of the ``"target"`` rule.
    target_stat : {"mean", "p95"}, default="mean"
    init : {"k-means++", "random", "farthest"}, default="k-means++"
    weighting : {"equal", "pixels"}, default="equal"
        How pooled images count: equally, or by pixel count.
    metric : {"ciede2000", "space"}, optional
        Nearest-colour metric the palette is refined for and each candidate
        measured with (default CIEDE2000, as :meth:`Palette.apply` maps).
    refine : {"robust", "none"}, default="robust"
        After the k-means fit, try the explicit refinements of
        :func:`refine_palette`, each kept only if it lowers the mean ΔE00: a
        truncated-loss refit, so that anti-aliased edges and compression
        noise do not take colours from real inks, and weighted k-medians
        steps under CIEDE2000 (:mod:`quantize.fit.refine`).  ``"none"`` keeps the
        pure k-means palette.  The k-means cost is reported either way.
    max_pixels : int, optional
        Decompression-bomb limit for files.
    progress : callable, optional
        Called with each k as it is fitted.

    Returns
    -------
    Palette
        ``palette.fit`` records the settings, the candidates (k, k-means
        cost, ΔE00 statistics, penalised score) and the reason for the k.

    Raises
    ------
    ImageReadError
        A file cannot be read.
    ValueError
        Bad k, space, rule, seeding or locked colours; an empty image set.

    References
    ----------
    .. [1] D. Arthur and S. Vassilvitskii, "k-means++: the advantages of
       careful seeding", SODA 2007, 1027-1035.
    .. [2] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Research & Application 30(1),
       21-30, 2005.
    .. [3] G. Schwarz, "Estimating the dimension of a model", Annals of
       Statistics 6(2), 461-464, 1978.
    .. [4] E. Weiszfeld, "Sur le point pour lequel la somme des distances de
       n points donnés est minimum", Tôhoku Mathematical Journal 43,
       355-386, 1937 (the k-medians update).
    .. [5] J. A. Cuesta-Albertos, A. Gordaliza and C. Matrán, "Trimmed
       k-means: an attempt to robustify quantizers", Annals of Statistics
       25(2), 553-576, 1997 (the truncated-loss refit).

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((4, 4, 3), np.uint8); img[:, 2:] = (200, 30, 40)
    >>> pal = fit_palette(img, 2)
    >>> sorted(pal.hex)
    ['#000000', '#c81e28']
    """
    from quantize.colour.spaces import check_space

    from .assign import resolve_metric

    check_space(space)
    metric = resolve_metric(metric)
    check_rule(rule)
    check_init(init)
    if restarts < 1:
        raise ValueError(f"restarts must be at least 1, got {restarts}")
    ks = parse_k(k)
    if rule == "target" and (target is None or not target > 0):
        raise ValueError(f"the target rule needs a positive ΔE00 target, got {target!r}")
    parse_locked(locked, min(ks))  # before any image is read
    sample, sources, load_notes = load_samples(images, weighting=weighting, max_pixels=max_pixels)
    size_notes = []
    ks_eff = [kk for kk in ks if kk <= sample.n_colours] or [sample.n_colours]
    if max(ks) > sample.n_colours:
        size_notes.append(f"the image set has only {sample.n_colours} distinct colours; "
                          f"palette sizes above {sample.n_colours} were not fitted")
    cands = fit_candidates(sample, ks_eff, space=space, restarts=restarts, seed=seed, locked=locked,
                           init=init, metric=metric, refine=refine, progress=progress)
    ks_c = [c.k for c in cands]
    choice = choose_k(ks_c, [c.delta_e for c in cands], [c.robust for c in cands],
                      rule=rule if len(cands) > 1 else "bic", target=target, target_stat=target_stat)
    chosen = cands[ks_c.index(choice.k)]
    reason = choice.reason if len(cands) > 1 else "fixed palette size"
    if len(ks) == 1 and chosen.k < ks[0]:
        reason = f"asked for {ks[0]}; only {chosen.k} distinct colours are available"
    fit = {
        "k": chosen.k,
        "rule": rule if len(cands) > 1 else "fixed",
        "reason": reason,
        "k_requested": ks[0] if len(ks) == 1 else [ks[0], ks[-1]],
        "space": space,
        "restarts": restarts,
        "seed": seed if not isinstance(seed, np.random.Generator) else None,
        "init": init,
        "weighting": weighting,
        "metric": metric,
        "refine": refine,
        "target": target,
        "target_stat": target_stat,
        "images": sources,
        "n_pixels": sample.n_pixels,
        "n_distinct": sample.n_colours,
        "inertia": chosen.inertia,
        "refined": chosen.palette.fit.get("refined") or "none",
        "delta_e": chosen.delta_e,
        "candidates": [
            {"k": c.k, "inertia": c.inertia, "delta_e": c.delta_e, "robust_error": c.robust, "score": s}
            for c, s in zip(cands, choice.scores)
        ],
        "notes": load_notes + size_notes + list(chosen.palette.fit.get("notes", [])),
    }
    # Loading already warned about its own notes; these are the fit's.
    for n in size_notes + list(chosen.palette.fit.get("notes", [])):
        warnings.warn(n, PaletteSizeWarning, stacklevel=2)
    return Palette(chosen.palette.rgb8, chosen.palette.locked, space, fit=fit)
