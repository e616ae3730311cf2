"""Fitting a palette to one image or a set: the engine's main entry point.

image(s) -> perceptual distinct colours with pixel weights -> weighted
k-means++ with restarts on a binned sample -> refinement on every distinct
colour -> 8-bit palette -> ΔE00 per candidate size -> the chosen size.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import logging
import warnings
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Callable, Sequence, cast

import numpy as np

from quantize.core.regions import find_regions
from quantize.core.vocabulary import renamed_keywords
from quantize.palette import FitCandidate, FitRecord, Palette
from quantize.quality.stats import coverage_percent, delta_e_stats

from .clustering import PaletteSizeWarning, kmeans, lloyd_from, tolerance_scale
from .selection import bic_scores, choose_k, robust_error
from .settings import DEFAULT_K, FitSettings

if TYPE_CHECKING:
    from quantize.core.choices import SeedingName
    from quantize.core.picture import ImageInput
    from quantize.core.sampling import ColourSample

__all__ = ["fit_palette", "Candidate", "fit_sizes", "parse_k", "load_samples", "MAX_K", "FINE_ITER"]

#: Largest palette the engine fits.
MAX_K = 4096
#: Lloyd iterations on every distinct colour after the binned restarts have
#: converged: the binned solution is close, and the refinements follow.
#: One step against four, on scikit-image's astronaut, chelsea, coffee and
#: rocket photos at k = 4, 8, 16: mean ΔE00 within 0.22 % (larger by at
#: most 0.01); on a 12 MP photo's 586 000 colours the three steps saved
#: are most of a size's time outside the refinements.
FINE_ITER = 1


@dataclass(frozen=True, eq=False)
class Candidate:
    """One fitted palette size: its palette and what it costs.

    Attributes
    ----------
    k : int
        Palette size asked for; ``palette.k`` is smaller when rounding to
        8 bits merged colours or the sample has fewer distinct colours.
    palette : Palette
        The refined palette (no fit record: the caller writes one).
    inertia : float
        k-means cost on every distinct colour, before the refinements
        (squared units of the fitting space, pixel-weighted).
    delta_e : dict
        ΔE00 ``mean``, ``median``, ``p95``, ``max`` over the sample.
    robust : float
        The ``"bic"`` rule's robust error ``R_k``.
    labels, per_colour_de : ndarray of shape (n_distinct,)
        Each distinct colour's palette index and ΔE00.
    coverage : ndarray of shape (palette.k,)
        Percent of the sample's pixels per colour.
    refined : str
        The refinements kept (``"none"`` if none).
    start : str
        How the kept k-means solution started, a key of
        :data:`quantize.fit.warm.STARTS` (``"fresh"`` without warm starts).
    merged : bool
        Rounding to 8 bits merged colours.
    """

    k: int
    palette: Palette
    inertia: float
    delta_e: dict
    robust: float
    labels: np.ndarray
    per_colour_de: np.ndarray
    coverage: np.ndarray
    refined: str
    start: str = "fresh"
    merged: bool = False


_log = logging.getLogger(__name__)


def parse_k(k) -> list[int]:
    """Candidate sizes from an int, a ``range``, a ``(lo, hi)`` pair or ``"lo-hi"``.

    Ranges are inclusive of both ends for pairs and strings.

    Raises
    ------
    ValueError
        Below 1, above the engine's maximum, empty, or min > max.
    """
    spec: Any = k  # a string is parsed into the same forms as the other inputs
    if isinstance(spec, str):
        text = spec.strip()
        if "-" in text:
            first, _, last = text.partition("-")
            try:
                spec = (int(first), int(last))
            except ValueError:
                raise ValueError(f"palette size {text!r} is not N or MIN-MAX") from None
        else:
            try:
                spec = int(text)
            except ValueError:
                raise ValueError(f"palette size {text!r} is not N or MIN-MAX") from None
    if isinstance(spec, (int, np.integer)) and not isinstance(spec, bool):
        ks = [int(spec)]
    elif isinstance(spec, range):
        ks = list(spec)
    elif isinstance(spec, (tuple, list)) and len(spec) == 2:
        if not all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in spec):
            raise ValueError(f"palette size range must be two whole numbers, got {spec!r}")
        lo, hi = int(spec[0]), int(spec[1])
        if lo > hi:
            raise ValueError(f"palette size range {lo}-{hi} has min > max")
        ks = list(range(lo, hi + 1))
    else:
        raise ValueError(f"palette size must be an int or a range, got {spec!r}")
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


def load_samples(images, *, weighting: str = "equal", max_pixels=None, pictures: list | None = None,
                 on_picture: Callable | None = None):
    """Load and sample one image or several; return (pooled sample, pictures' sources, notes).

    ``pictures``, if given, receives each input's Picture (None for an input
    that was already a colour sample).  ``on_picture``, if given, is called
    with each Picture once it is decoded, before it is sampled.
    """
    from quantize.core.sampling import ColourSample, pool_samples, sample_picture
    from quantize.io.read import as_picture, load_image

    samples: list = []
    sources: list[str] = []
    notes: list[str] = []
    for item in _as_list(images):
        if isinstance(item, ColourSample):  # already sampled (e.g. a batch's pooled histogram)
            samples.append(item)
            sources.append("<colour sample>")
            if pictures is not None:
                pictures.append(None)
            continue
        if isinstance(item, (str, bytes)) or hasattr(item, "__fspath__"):
            pic = load_image(item) if max_pixels is None else load_image(item, max_pixels=max_pixels)
        else:
            pic = as_picture(item)
        if on_picture is not None:
            on_picture(pic)
        samples.append(sample_picture(pic))
        sources.append(pic.source)
        if pictures is not None:
            pictures.append(pic)
        notes.extend(w if w.startswith(f"{pic.source}: ") else f"{pic.source}: {w}" for w in pic.warnings)
    return pool_samples(samples, weighting=weighting), sources, notes


def size_rng(seed: int, k: int, stream: int = 0) -> np.random.Generator:
    """The random stream of palette size ``k``: ``SeedSequence([seed, k])``.

    Each size draws only from its own stream, so the k = 6 palette of a
    4-8 range equals a fit of k = 6 alone.  Streams 1 and 2 are the warm
    starts' k-means++ additions (:mod:`quantize.fit.warm`).
    """
    return np.random.default_rng(np.random.SeedSequence([int(seed), int(k)] + ([stream] if stream else [])))


def _to_palette(centres, fixed_rgb8, space, locked_n, centre_space=None):
    from quantize.colour.spaces import clip_to_gamut, from_space

    rgb = np.round(clip_to_gamut(from_space(centres, centre_space or space)) * 255).astype(np.uint8)
    rgb[:locked_n] = fixed_rgb8
    # Rounding to 8 bits can make two centres the same colour: keep one.
    _, first = np.unique(rgb, axis=0, return_index=True)
    keep = np.sort(first)
    return Palette(rgb8=rgb[keep], locked=np.arange(len(rgb))[keep] < locked_n, space=space), keep.size < len(rgb)


def _binned_delta_e(sample, pal, metric, compiled_always=False):
    """ΔE00 of every cell of the refinement grid to its palette colour."""
    from quantize.kernels.nearest import assign_nearest, ciede2000_to, nearest_ciede2000

    lab = sample.binned("lab", bits=None)[0]
    if metric == "ciede2000":
        return nearest_ciede2000(lab, pal.lab, compiled_always=compiled_always)[1]
    labels = assign_nearest(sample.binned(pal.space, bits=None)[0], pal.points())[0]
    return ciede2000_to(lab, pal.lab, labels, compiled_always=compiled_always)


def refine_palette(sample, centres, fixed_rgb8, *, space: str, metric: str = "ciede2000",
                   refine: str = "robust", others=(), threads: bool = False, compiled_always: bool = False):
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

    With ``threads`` the truncated-loss refit and the k-medians steps that
    start from it run on a second thread while this one runs the k-medians
    steps from the k-means palette and the other restarts.  Each branch is
    computed exactly as without threads and the candidates are compared in
    the same order, so the palette does not depend on ``threads``; for
    palettes above :data:`SECOND_START_K` colours the k-medians from the
    k-means palette are then started before it is known whether they will
    be needed (about a tenth of a second that may be wasted, on the core
    that would otherwise wait).

    ``compiled_always`` runs every CIEDE2000 measurement on the compiled
    loops whatever the size (``FitSettings.compiled_always``).

    Returns
    -------
    palette, merged, refined
        ``merged``: rounding to 8 bits merged colours; ``refined`` names the
        steps kept ("", "robust", "median" or "robust+median").
    """
    m = len(fixed_rgb8)
    pal, merged = _to_palette(centres, fixed_rgb8, space, m)
    if refine == "none":
        return pal, merged, ""
    # The finest cell grid within the point budget: the refinements compare
    # mean ΔE00, which needs a closer stand-in than the restarts do.
    bin_pts, bin_w = sample.binned(space, bits=None)
    bin_lab = sample.binned("lab", bits=None)[0]
    small = len(centres) <= SECOND_START_K
    kmeans_pal = pal
    kmeans_cost = float((bin_w * _binned_delta_e(sample, pal, metric, compiled_always)).sum())

    def scored(c, c_space=None):
        """(palette, merged, binned ΔE00 sum) of centres ``c``, or None if rounding merged colours."""
        cpal, cmerged = _to_palette(c, fixed_rgb8, space, m, c_space)
        if cpal.k != kmeans_pal.k:
            return None
        return cpal, cmerged, float((bin_w * _binned_delta_e(sample, cpal, metric, compiled_always)).sum())

    def medians(start):
        from .refine import ciede2000_medians, median_polish

        if metric == "ciede2000":
            return scored(ciede2000_medians(bin_lab, bin_w, start.lab, n_fixed=m, iters=15,
                                            compiled_always=compiled_always), "lab")
        return scored(median_polish(bin_pts, bin_w, start.points(space), n_fixed=m))

    def robust_branch():
        """The truncated-loss refit, and the k-medians from it where they will be wanted."""
        from .refine import robust_refine

        robust = scored(robust_refine(bin_pts, bin_w, centres, n_fixed=m))
        wanted = robust is not None and (small or robust[2] < kmeans_cost)
        return robust, medians(robust[0]) if wanted else None

    with _second_thread(threads) as run:
        robust_job = run(robust_branch)
        # The k-medians from the k-means palette: always wanted for small
        # palettes; for larger ones only if the refit does not win, which
        # with threads is not known yet.
        from_kmeans = medians(kmeans_pal) if small or threads else None
        alt = alt_medians = None
        if small:
            alt = _best_other(sample, bin_w, others, fixed_rgb8, space, m, metric, kmeans_pal, kmeans_cost,
                              compiled_always)
            alt_medians = medians(alt) if alt is not None else None
        robust, from_robust = robust_job.result()

    best = (kmeans_pal, merged, kmeans_cost)
    steps = ""
    robust_pal = None
    if robust is not None:
        robust_pal = robust[0]
        if robust[2] < best[2]:
            best, steps = robust, "robust"
    # The k-medians start from the better palette so far, and for small
    # palettes also from the other one: with few colours the local optima
    # lie far apart, and a second start costs little.
    starts = [best[0]]
    other = kmeans_pal if best[0] is not kmeans_pal else robust_pal
    if other is not None and small:
        starts.append(other)
    if alt is not None:
        starts.append(alt)
    for start in starts:
        if start is kmeans_pal:
            cand = from_kmeans if from_kmeans is not None else medians(kmeans_pal)
        else:
            cand = from_robust if start is robust_pal else alt_medians
        if cand is not None and cand[2] < best[2]:
            best, steps = cand, "robust+median" if start is robust_pal else "median"
    return best[0], best[1], steps


@contextlib.contextmanager
def _second_thread(enabled: bool):
    """``run(fn)``: a future of ``fn()``, computed on a second thread if ``enabled``, else at once."""
    from concurrent.futures import Future, ThreadPoolExecutor

    if not enabled:
        def now(fn):
            done = Future()
            done.set_result(fn())
            return done

        yield now
        return
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="quantize-refine") as pool:
        yield pool.submit


def _best_other(sample, bin_w, others, fixed_rgb8, space, m, metric, kept, kept_cost, compiled_always):
    """The palette of lowest mean ΔE00 among other restarts' centres, if below ``kept_cost``."""
    best, best_cost = None, kept_cost
    for c in others:
        cpal, _ = _to_palette(c, fixed_rgb8, space, m)
        if cpal.k != kept.k or np.array_equal(cpal.rgb8, kept.rgb8):
            continue
        ccost = float((bin_w * _binned_delta_e(sample, cpal, metric, compiled_always)).sum())
        if ccost < best_cost:
            best, best_cost = cpal, ccost
    return best


#: Palettes up to this size start the k-medians steps from both the k-means
#: and the robust palette (:func:`refine_palette`).
SECOND_START_K = 8


def finish_palette(sample, centres, fixed_rgb8, *, space: str, metric: str = "ciede2000", refine: str = "robust",
                   others=(), threads: bool = False, compiled_always: bool = False):
    """:func:`refine_palette`, then map and measure every distinct colour.

    Returns
    -------
    palette, merged, labels, delta_e, refined
        As :func:`refine_palette`, with ``labels`` and ``delta_e`` per
        distinct colour.
    """
    from .assign import map_sample

    pal, merged, refined = refine_palette(sample, centres, fixed_rgb8, space=space, metric=metric, refine=refine,
                                          others=others, threads=threads, compiled_always=compiled_always)
    labels, de = map_sample(sample, pal, metric=metric, compiled_always=compiled_always)
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


def fit_sizes(sample, ks: Sequence[int], settings: FitSettings, *,
              progress: Callable | None = None) -> list[Candidate]:
    """The engine: fit one palette per size in ``ks`` to a colour sample.

    Every caller (:func:`fit_palette`, :func:`quantize.fit.sweep.sweep`,
    the commands, a batch's shared palette) fits through this loop.  Size
    ``k`` restarts ``settings.restarts`` times on the binned sample from its
    own random stream (:func:`size_rng`), then runs at most
    :data:`FINE_ITER` Lloyd steps on every distinct colour with its true
    weight (its cost is ``inertia``).  With ``settings.warm`` the size also
    starts from the size before it (:mod:`quantize.fit.warm`).  The
    refinements of :func:`finish_palette` follow, on worker threads while
    the next size is fitted; results do not depend on the threads.

    Parameters
    ----------
    sample : ColourSample
        The distinct colours and their pixel weights.
    ks : sequence of int
        Sizes, ascending, each at most ``sample.n_colours`` and at least the
        number of locked colours (the caller checks).
    settings : FitSettings
    progress : callable, optional
        Called with each k once it is fitted.

    Returns
    -------
    list of Candidate
        One per size of ``ks``, in order.
    """
    from quantize.colour.spaces import srgb8_to_space
    from quantize.kernels.nearest import load_for

    from .warm import warm_coarse, warm_fine

    # A job whose final mapping needs the compiled loops loads them first,
    # so that every restart's assignment runs on them too (bit-identical).
    compiled_always = _runs_compiled(sample, settings)
    load_for(sample.n_colours, max(ks), always=compiled_always)
    space, m = settings.space, len(settings.locked)
    # FitSettings has turned the seed into an int and checked the seeding's name.
    seed, seeding = cast(int, settings.seed), cast("SeedingName", settings.seeding)
    fixed_rgb8 = settings.locked_rgb8
    fixed = srgb8_to_space(fixed_rgb8, space) if m else None
    full_pts, full_w = sample.points(space), sample.weights
    full_tol = 1e-4 * tolerance_scale(full_pts, full_w)
    bin_pts, bin_w = sample.binned(space)
    bin_tol = 1e-4 * tolerance_scale(bin_pts, bin_w) if settings.warm else 0.0
    jobs = []
    prev_coarse = prev_fine = None
    with size_workers(sample, space, len(ks) > 1 and settings.threads) as submit:
        for k in ks:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PaletteSizeWarning)
                fresh = coarse = kmeans(bin_pts, k, weights=bin_w, restarts=settings.restarts,
                                        seed=size_rng(seed, k), fixed=fixed, init=seeding,
                                        polish=False)
                start = "fresh"
                if settings.warm and prev_coarse is not None and len(prev_coarse.centres) == k - 1:
                    coarse, start = warm_coarse(bin_pts, bin_w, fresh, prev_coarse, m, bin_tol,
                                                size_rng(seed, k, 1))
                fine = lloyd_from(full_pts, full_w, coarse.centres, n_fixed=m, max_iter=FINE_ITER,
                                  abs_tol=full_tol)
                if settings.warm and prev_fine is not None and len(prev_fine.centres) == k - 1:
                    fine, added = warm_fine(full_pts, full_w, fine, prev_fine, m, full_tol, FINE_ITER,
                                            size_rng(seed, k, 2))
                    start = "add" if added else start
            prev_coarse, prev_fine = coarse, fine
            # The k-medians may also start from every fresh restart but the kept one.
            others = [c for c, _ in fresh.runs if c is not coarse.centres]
            # One size alone refines on two threads; several keep two busy with sizes.
            jobs.append(submit(_finished, sample, k, fine, start, fixed_rgb8, space=space,
                               metric=settings.nearest, refine=settings.refine, others=others,
                               threads=len(ks) == 1 and settings.threads,
                               compiled_always=compiled_always))
            if progress:
                progress(k)
        return [job.result() for job in jobs]


def _runs_compiled(sample, settings: FitSettings) -> bool:
    """Whether every CIEDE2000 measured on ``sample`` runs compiled: asked for, or by the sample's size.

    One decision for the fit and for measuring its candidates on the sample
    (:func:`quantize.kernels.nearest.sample_runs_compiled`).
    """
    from quantize.kernels.nearest import sample_runs_compiled

    return settings.compiled_always or sample_runs_compiled(sample.n_colours)


def _finished(sample, k: int, fine, start: str, fixed_rgb8, **options) -> Candidate:
    """Size ``k``'s :class:`Candidate`: :func:`finish_palette` and the statistics of its mapping.

    Measured on the worker thread that refined it, while the next size is fitted.
    """
    pal, merged, labels, de, refined = finish_palette(sample, fine.centres, fixed_rgb8, **options)
    w = sample.weights
    return Candidate(k=k, palette=pal, inertia=float(fine.inertia), delta_e=delta_e_stats(de, w),
                     robust=robust_error(de, w), labels=labels, per_colour_de=de,
                     coverage=coverage_percent(labels, w, pal.k), refined=refined or "none", start=start,
                     merged=merged)


def settings_of(settings: FitSettings | None, options: dict, where: str) -> FitSettings:
    """The :class:`FitSettings` of a public function's keyword options.

    The keywords are named as the command line's options, as the fields
    are: ``seeding`` (``--seeding``) and ``nearest`` (``--nearest``;
    ``"auto"`` is the default).  The old names ``init`` and
    ``metric`` still work, with a DeprecationWarning pointed at the caller
    of ``where``.
    """
    opts = renamed_keywords(options, where, ("init", "metric"), stacklevel=4)
    return FitSettings.of(settings, **opts)


def fit_palette(images: ImageInput | ColourSample | Sequence[ImageInput | ColourSample],
                k: int | tuple[int, int] | range | str | None = None, *, settings: FitSettings | None = None,
                max_pixels: int | None = None, progress: Callable[[int], object] | None = None,
                **options: Any) -> Palette:
    """Fit an N-colour palette to one image or a set of images.

    Parameters
    ----------
    images : path, Picture, PIL image, ndarray, ColourSample, or a list of them
        Several images are pooled into one weighted colour sample.
    k : int, range, (min, max) or "min-max", optional
        Palette size, or the sizes to choose from by ``rule``.  Default
        :data:`quantize.fit.settings.DEFAULT_K` (2 to 12), and for an image
        the ``"auto"`` rule judges continuous tone, up to 256.
    settings : FitSettings, optional
        All the options below in one object; keyword options replace its
        fields.
    max_pixels : int, optional
        Decompression-bomb limit for files.
    progress : callable, optional
        Called with each k as it is fitted.
    **options
        Fields of :class:`quantize.fit.settings.FitSettings`, named as the
        command line's options (``seeding`` and ``nearest``; the old names
        ``init`` and ``metric`` still work, with a DeprecationWarning):
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
        Perceptual space of the fit.
    restarts : int, default=8
        k-means++ restarts per size; the lowest k-means cost is kept.
    seed : int or numpy Generator, default=0
        Same seed, same palette (bit-identical).  A Generator gives one
        integer, drawn once; ``palette.fit.seed`` records the integer used.
    locked : sequence of colour specs, default=()
        Colours held fixed (hex ``"#f4efe1"`` or Lab ``"95,1,6"``); they come
        first in the palette and are written exactly.
    rule : {"auto", "bic", "target"}, default="auto"
        How k is chosen from a range.  ``"auto"`` judges the image first
        (:mod:`quantize.fit.inkcount`): artwork gets the fewest inks that
        print every flat area of at least 0.1 % within ΔE00 5; continuous
        tone the smallest palette whose mean ΔE00 meets ``target`` (default
        2.5) and, unless ``target`` is given, that leaves no flat area of
        0.1 % or more mapped ΔE00 10 or more away.  ``"bic"`` and
        ``"target"``: :mod:`quantize.fit.selection`.
    kind : {"auto", "artwork", "continuous tone"}, default="auto"
        Overrides the ``"auto"`` rule's judgement of the image.
    target : float, optional
        ΔE00 target of the ``"target"`` rule.
    target_stat : {"mean", "p95"}, default="mean"
    seeding : {"k-means++", "random", "farthest"}, default="k-means++"
        How each restart picks its first centres.
    weighting : {"equal", "pixels"}, default="equal"
        How pooled images count: equally, or by pixel count.
    nearest : {"ciede2000", "space", "auto"}, optional
        Nearest-colour metric the palette is refined for and each candidate
        measured with (default CIEDE2000, as :meth:`Palette.apply` maps).
    refine : {"robust", "none"}, default="robust"
        After the k-means fit, try the explicit refinements of
        :func:`refine_palette`, each kept only if it lowers the mean ΔE00: a
        truncated-loss refit, so that anti-aliased edges and compression
        noise do not take colours from real inks, and weighted k-medians
        steps under CIEDE2000 (:mod:`quantize.fit.refine`).  ``"none"`` keeps the
        pure k-means palette.  The k-means cost is reported either way.
    warm : bool, default=False
        Also start each size from the one before (:mod:`quantize.fit.warm`);
        a size's palette then depends on the range.
    threads : bool, default=True
        Run independent steps on a second thread; the results are the same
        either way (:class:`quantize.fit.settings.FitSettings`).
    for_dither : bool, default=False
        A dither follows: spread the chosen palette's free colours so that
        their mixtures reach the image's extreme colours
        (:mod:`quantize.fit.for_dither`); the record gets a note.

    Returns
    -------
    Palette
        ``palette.fit`` (:class:`quantize.palette.FitRecord`) records the
        settings with the seed used, the candidates (k, k-means cost, ΔE00
        statistics, penalised score) and the reason for the k.

    Raises
    ------
    ImageReadError
        A file cannot be read.
    ValueError
        Bad k, space, rule, seeding or locked colours; an empty image set.
    TypeError
        An option that is not a field of FitSettings.

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
    settings = settings_of(settings, options, "fit_palette")
    ks = parse_k(DEFAULT_K if k is None else k)
    settings.check_sizes(ks)  # before any image is read
    pictures: list = []
    # The flat-region analysis of each picture runs on a second thread
    # while the pictures are sampled and, at a fixed size, fitted: it is
    # wanted only to choose the size from a range and to name lost areas.
    with _second_thread(settings.threads) as run:
        region_jobs: list = []
        sample, sources, load_notes = load_samples(
            images, weighting=settings.weighting, max_pixels=max_pixels, pictures=pictures,
            on_picture=lambda pic: region_jobs.append(run(functools.partial(find_regions, pic,
                                                                            structures=_structures_wanted(settings)))))
        has_regions = bool(pictures) and all(p is not None for p in pictures)
        size_notes = []
        ks_eff = [kk for kk in ks if kk <= sample.n_colours] or [sample.n_colours]
        if max(ks) > sample.n_colours:
            size_notes.append(f"the image set has only {sample.n_colours} distinct colours; "
                              f"palette sizes above {sample.n_colours} were not fitted")
        auto = None
        if settings.rule == "auto" and len(ks_eff) > 1 and has_regions:
            auto = _auto(sample, [j.result() for j in region_jobs], ks_eff, settings, k_given=k is not None,
                         progress=progress, pictures=pictures)
        if auto is None:
            cands: list[Candidate] = []
            for c in _fitted_for_rule(sample, ks_eff, settings, progress):
                if all(c.palette.k != o.palette.k for o in cands):  # sizes that collapsed appear once
                    cands.append(c)
            record = _record(sample, ks, cands, settings, sources, load_notes + size_notes)
            if has_regions:  # say what was lost, whatever chose the size
                chosen = cands[[c.palette.k for c in cands].index(cast(int, record.k))]
                record = _with_lost(record, [j.result() for j in region_jobs], chosen, sample, pictures, settings)
        else:
            cands, record = auto.candidates, _auto_record(auto, sample, ks, settings, sources,
                                                          load_notes + size_notes)
    # A fit's record always names its size, its notes and its ΔE00 (_record, _auto_record).
    k_chosen = cast(int, record.k)
    chosen = cands[[c.palette.k for c in cands].index(k_chosen)]
    notes = (record.notes or ()) + tuple(_locked_notes(chosen))
    record = dataclasses.replace(record, notes=notes)
    # Loading already warned about its own notes; these are the fit's.
    for n in notes[len(load_notes):]:
        warnings.warn(n, PaletteSizeWarning, stacklevel=2)
    pal = Palette(chosen.palette.rgb8, chosen.palette.locked, settings.space, fit=record)
    _log.info("fitted %d colours (rule %s; sizes tried %s): mean ΔE00 %.3f", pal.k, record.rule,
              ",".join(str(c.palette.k) for c in cands), cast(dict, record.delta_e)["mean"])
    if settings.for_dither:
        from .for_dither import palette_for_dither

        pal, moved = palette_for_dither(pal, sample)
        if moved:
            return pal  # the sample's mapping below is the unmoved palette's
    # Mapping this sample's picture onto the palette returned (as reduce does) then reuses this.
    sample.keep_mapping(pal, settings.nearest, chosen.labels, chosen.per_colour_de)
    return pal


def _fitted_for_rule(sample, ks: list[int], settings: FitSettings, progress) -> list[Candidate]:
    """The sizes a rule needs fitted: all of ``ks``, or for the target rule over a range, a search.

    The target rule's answer is the smallest size meeting the target; over
    a range of consecutive sizes it is found as the continuous-tone size is
    (:func:`_tone_search`, the top of the range first), with a few full fits
    instead of one per size (a ``-k 2-256`` range would otherwise fit 255
    sizes), under the same assumption that a larger palette never has a
    higher error.  Only the sizes fitted are recorded.
    """
    if settings.rule == "target" and len(ks) > 2 and ks == list(range(ks[0], ks[-1] + 1)):
        return _tone_search(sample, ks[0], ks[-1], settings, cast(float, settings.target), progress, top_first=True)
    return fit_sizes(sample, ks, settings, progress=progress)


def _structures_wanted(settings: FitSettings):
    """Whether the region analysis looks for spots and strokes: always for artwork, never for continuous tone,
    and for an image judged by its flat regions only where they alone would not call it continuous tone."""
    from .inkcount import artwork_like

    if settings.kind == "auto":
        return artwork_like
    return settings.kind == "artwork"


@dataclass(frozen=True, eq=False)
class _Auto:
    """What the automatic rule decided: the candidates measured on the image, the one chosen, and why."""

    candidates: list
    chosen: Candidate
    judgement: Any
    reason: str
    lost: tuple
    target_met: bool | None


def _measured(cand: Candidate, sample, settings: FitSettings) -> Candidate:
    """``cand`` (fitted on another sample) measured on every distinct colour of ``sample``."""
    from .assign import map_sample

    labels, de = map_sample(sample, cand.palette, metric=cast(str, settings.nearest),  # FitSettings resolved it
                            compiled_always=_runs_compiled(sample, settings))
    w = sample.weights
    pts, centres = sample.points(settings.space), cand.palette.points(settings.space)
    inertia = float((w * ((pts - centres[labels]) ** 2).sum(axis=1)).sum())
    return dataclasses.replace(cand, inertia=inertia, delta_e=delta_e_stats(de, w), robust=robust_error(de, w),
                               labels=labels, per_colour_de=de, coverage=coverage_percent(labels, w, cand.palette.k))


def _locked_notes(chosen: Candidate) -> list[str]:
    """Locked colours no pixel uses, and locked colours a fitted colour all but repeats (ΔE00 < 3)."""
    from quantize.colour.spaces import delta_e_ciede2000

    pal, notes = chosen.palette, []
    locked = np.flatnonzero(pal.locked)
    free = np.flatnonzero(~pal.locked)
    for i in locked:
        if chosen.coverage[i] == 0:
            notes.append(f"the locked colour {pal.hex[i]} is not used by any pixel")
        if free.size:
            de = np.asarray(delta_e_ciede2000(np.broadcast_to(pal.lab[i], pal.lab[free].shape), pal.lab[free]))
            j = int(np.argmin(de))
            if de[j] < 3.0:
                notes.append(f"the locked colour {pal.hex[i]} and the fitted colour {pal.hex[free[j]]} are only "
                             f"ΔE00 {de[j]:.1f} apart: one ink may do for both")
    return notes


def _with_lost(record: FitRecord, regions, chosen: Candidate, sample, pictures, settings: FitSettings) -> FitRecord:
    """``record`` naming the flat areas the palette lost (ΔE00 10 or more from every colour)."""
    from .inkcount import ink_groups

    lost = _lost_rows(_lost_areas(ink_groups(regions), regions, chosen, sample, pictures, settings), chosen.palette)
    said = (f"{len(lost)} flat area(s) of at least 0.1 % are ΔE00 10 or more from every palette colour",)
    notes = (record.notes or ()) + (said if lost else ())
    return dataclasses.replace(record, lost=tuple(lost), notes=notes)


def _area_errors(sample, regions, per_colour_de: np.ndarray) -> np.ndarray:
    """The median ΔE00 at which each flat area's pixels are mapped (at the analysis scale; inf if none read)."""
    from quantize.core.regions import sorted_by_region

    # The analysis reads every scale-th pixel of every scale-th row: the same pixels as the step.
    de = sample.index_image(per_colour_de, dtype=np.float32, step=regions.scale)
    inside = regions.labels > 0
    n = len(regions.share)
    d, start, count = sorted_by_region(de[inside], regions.labels[inside], n)
    out = np.full(n, np.inf)
    have = count > 0
    out[have] = d[start[have] + count[have] // 2]
    return out


def _served_groups(groups, regions, errors) -> np.ndarray:
    """Per ink group: whether its flat areas, by share, are mostly mapped within ΔE00 10 (read from pixels).

    ``errors`` holds :func:`_area_errors` of each image's regions.  A
    photograph's smooth gradient can be one flat area whose median colour
    it does not hold: it is served when its own pixels are.
    """
    from .inkcount import DISTINCT_DE

    served = np.concatenate([e < DISTINCT_DE for e in errors]) if errors else np.zeros(0, bool)
    share = np.concatenate([r.share / len(regions) for r in regions]) if regions else np.zeros(0)
    held = np.bincount(groups.of_region, weights=share * served, minlength=len(groups))
    total = np.bincount(groups.of_region, weights=share, minlength=len(groups))
    return held >= 0.5 * total


def _lost_areas(groups, regions, cand: Candidate, sample, pictures, settings: FitSettings) -> list[dict]:
    """The ink groups ``cand``'s palette loses, each image read from its pixels.

    :func:`~quantize.fit.inkcount.lost_inks`, with each group's flat areas
    judged by their pixels (:func:`_served_groups`).  An image's pixels come
    from ``sample`` (one image) or from its own sample (a set: each image
    mapped onto the palette); without pictures, from the groups' colours
    alone.
    """
    from quantize.core.sampling import sample_picture

    from .assign import map_sample
    from .inkcount import lost_inks

    if len(regions) == 1 and sample.shape is not None:
        errors = [_area_errors(sample, regions[0], cand.per_colour_de)]
    elif len(pictures) == len(regions) and all(p is not None for p in pictures):
        errors = []
        for pic, r in zip(pictures, regions):
            own = sample_picture(pic)
            de = map_sample(own, cand.palette, metric=cast(str, settings.nearest),
                            compiled_always=_runs_compiled(own, settings))[1]
            errors.append(_area_errors(own, r, de))
    else:
        return lost_inks(groups, cand.palette.lab)
    return lost_inks(groups, cand.palette.lab, served=_served_groups(groups, regions, errors))


def _lost_rows(lost, palette) -> list:
    return [{**item, "nearest_hex": "#{:02x}{:02x}{:02x}".format(*(int(v) for v in palette.rgb8[item["nearest"]]))}
            for item in lost]


def _auto(sample, regions, ks, settings: FitSettings, *, k_given: bool, progress, pictures=()) -> _Auto:
    """The automatic rule (:mod:`quantize.fit.inkcount`) on the images' flat regions."""
    from .inkcount import TONE_MAX_K, group_sample, ink_groups, judge, missing_inks

    judgement = judge(regions)
    kind = judgement.kind if settings.kind == "auto" else settings.kind
    groups = ink_groups(regions)
    lost_by_size: dict[int, list] = {}

    def lost_of(c: Candidate) -> list:
        """The flat areas ``c`` loses, read once per size (the search and the choice both ask)."""
        if c.palette.k not in lost_by_size:
            lost_by_size[c.palette.k] = _lost_areas(groups, regions, c, sample, pictures, settings)
        return lost_by_size[c.palette.k]
    if kind == "artwork":
        gs = group_sample(groups, sample.n_pixels)
        top = len(gs.weights) + len(settings.locked)  # a locked colour may print none of the groups
        ks_art = [k for k in ks if k <= top] or [top]
        cands = [_measured(c, sample, settings) for c in fit_sizes(gs, ks_art, settings, progress=progress)]
        found = [len(missing_inks(groups, c.palette.lab, sample.n_pixels)) == 0 for c in cands]
        chosen = cands[found.index(True)] if any(found) else cands[-1]
        reason = (f"artwork: the fewest inks ({chosen.palette.k}) within ΔE00 5 of every flat area of at least "
                  "0.1 % of the image" if any(found) else
                  f"artwork: even {chosen.palette.k} colours leave flat areas more than ΔE00 5 from every colour "
                  "(the largest size of the range)")
        target_met = None
    else:
        target = settings.target or _tone_target()
        top = TONE_MAX_K if not k_given else ks[-1]
        top = min(top, sample.n_colours)

        def keeps(c: Candidate) -> bool:
            """No flat area of 0.1 % or more is lost, in any image (docs/method.md §5)."""
            return not lost_of(c)

        stat = settings.target_stat
        # A target the user gave is taken as given: the smallest size meeting it (a lost area is still named).
        guard = keeps if settings.target is None else None
        cands = _tone_search(sample, ks[0], top, settings, target, progress, top_first=k_given, keeps=guard)
        met_stat = [c for c in cands if c.delta_e[stat] <= target]
        met = [c for c in met_stat if guard is None or guard(c)]
        chosen = min(met, key=lambda c: c.palette.k) if met else max(cands, key=lambda c: c.palette.k)
        target_met = bool(chosen.delta_e[stat] <= target)
        if met:
            reason = f"continuous tone: the smallest palette with ΔE00 {stat} {chosen.delta_e[stat]:.2f} <= {target:g}"
            fewer = [c.palette.k for c in met_stat if c.palette.k < chosen.palette.k]
            if fewer:
                reason += (f" that keeps every flat area of at least 0.1 % within ΔE00 10 ({max(fewer)} colours met "
                           "the target but lost one)")
        elif met_stat:
            reason = (f"continuous tone: ΔE00 {stat} {chosen.delta_e[stat]:.2f} <= {target:g}, but even {top} "
                      "colours leave a flat area of at least 0.1 % ΔE00 10 or more from every colour; "
                      "took the largest")
        else:
            reason = (f"continuous tone: no palette up to {top} colours meets ΔE00 {stat} <= {target:g} "
                      f"(best {chosen.delta_e[stat]:.2f}); took the largest")
    lost = tuple(lost_of(chosen))
    if settings.kind != "auto":
        judgement = dataclasses.replace(judgement, kind=kind, reason=f"set as {kind} (the image would have been "
                                        f"judged {judgement.kind}: {judgement.reason})")
    return _Auto(candidates=cands, chosen=chosen, judgement=judgement, reason=reason, lost=lost, target_met=target_met)


def _tone_target() -> float:
    from .inkcount import TONE_TARGET_DE

    return TONE_TARGET_DE


def _tone_search(sample, lo: int, hi: int, settings: FitSettings, target: float, progress, *,
                 top_first: bool = False, keeps: Callable[[Candidate], bool] | None = None) -> list:
    """The fully fitted sizes that find the smallest one in ``lo``..``hi`` meeting the target.

    Each size is fitted on its own stream, so the size found is the one a
    fixed ``-k`` of that size gives.  The k-means fits alone (no
    refinements: a fifth to a tenth of a full fit's cost) guess where the
    target is crossed (:mod:`quantize.fit.size_search`); full fits are then
    spent around the guess, usually two.  With ``top_first`` (a range the
    user gave) ``hi`` is fitted first: a photo rarely meets the target
    within a screen-print range such as 2-12, and then ``hi`` is the answer
    after one fit.  The search assumes that a larger palette never has a
    higher error, so the answer does not depend on the guess; only the
    candidates recorded do.  ``keeps``, if given, is a second condition a
    size must meet, assumed to hold from some size on as the target does
    (the automatic rule's: no flat area lost).
    """
    from .size_search import REFINE_GAIN, guess_size, smallest_meeting

    fitted: dict[int, Candidate] = {}
    stat = settings.target_stat

    def meets(k):
        if k not in fitted:
            fitted[k] = fit_sizes(sample, [k], settings, progress=progress)[0]
        return fitted[k].delta_e[stat] <= target and (keeps is None or keeps(fitted[k]))

    lo = max(lo, 1)
    if top_first and not meets(hi):
        return [fitted[hi]]
    cheap = dataclasses.replace(settings, refine="none")
    guess = guess_size(lambda k: fit_sizes(sample, [k], cheap)[0].delta_e[stat], lo, hi, target / REFINE_GAIN)
    # A right guess needs the size below it too: fitted together, one's
    # refinements overlap the other's k-means on the second core.
    pair = [j for j in (guess - 1, guess) if j >= lo and j not in fitted]
    fitted.update(zip(pair, fit_sizes(sample, pair, settings, progress=progress)))
    smallest_meeting(meets, guess, lo, hi)
    return [fitted[j] for j in sorted(fitted)]


def _auto_record(auto: _Auto, sample, ks, settings: FitSettings, sources, notes) -> FitRecord:
    """The fit record of the automatic rule's choice."""
    chosen = auto.chosen
    lost = _lost_rows(auto.lost, chosen.palette)
    if lost:
        notes = notes + [f"{len(lost)} flat area(s) of at least 0.1 % are ΔE00 10 or more from every palette colour"]
    scores = bic_scores([c.palette.k for c in auto.candidates], [c.robust for c in auto.candidates])
    return _fit_record(sample, ks, chosen, auto.candidates, scores, settings, sources, notes, rule="auto",
                       reason=auto.reason, kind=settings.kind, judged=auto.judgement.kind,
                       kind_reason=auto.judgement.reason, lost=tuple(lost), target_met=auto.target_met)


def _record(sample, ks, cands, settings: FitSettings, sources, notes) -> FitRecord:
    """Choose among the candidates by the rule, and record how the palette was made."""
    ks_c = [c.palette.k for c in cands]
    # One candidate is a fixed size, unless a target search over a range stopped after one fit (its top).
    one = len(cands) == 1 and not (settings.rule == "target" and len(ks) > 1)
    choice = choose_k(ks_c, [c.delta_e for c in cands], [c.robust for c in cands],
                      rule="bic" if one else settings.rule, target=settings.target,
                      target_stat=settings.target_stat)
    chosen = cands[ks_c.index(choice.k)]
    reason = "fixed palette size" if one else choice.reason
    if len(ks) == 1 and chosen.palette.k < ks[0]:
        reason = f"asked for {ks[0]}; only {chosen.palette.k} distinct colours are available"
    if chosen.palette.k < chosen.k:
        notes = notes + [f"asked for {chosen.k} colours; the image has {sample.n_colours} distinct colours"
                         + (" and rounding to 8 bits merged some" if chosen.merged else "")
                         + f", so the palette has {chosen.palette.k}"]
    return _fit_record(sample, ks, chosen, cands, choice.scores, settings, sources, notes,
                       rule="fixed" if one else settings.rule, reason=reason)


def _fit_record(sample, ks, chosen: Candidate, cands, scores, settings: FitSettings, sources, notes,
                **fields) -> FitRecord:
    """The record of ``chosen`` among ``cands``: the settings, what the fit saw, and ``fields``."""
    return FitRecord(
        k=chosen.palette.k, k_requested=ks[0] if len(ks) == 1 else (ks[0], ks[-1]),
        space=settings.space, restarts=settings.restarts, seed=cast(int, settings.seed), seeding=settings.seeding,
        weighting=settings.weighting, nearest=settings.nearest, refine=settings.refine, target=settings.target,
        target_stat=settings.target_stat, warm=settings.warm, locked=tuple(settings.locked), images=tuple(sources),
        for_dither=settings.for_dither, compiled_always=settings.compiled_always or None,
        n_pixels=int(sample.n_pixels), n_distinct=int(sample.n_colours), inertia=chosen.inertia,
        refined=chosen.refined, delta_e=chosen.delta_e,
        candidates=tuple(FitCandidate(k=c.palette.k, inertia=c.inertia, delta_e=c.delta_e, robust_error=c.robust,
                                      score=float(sc), palette=c.palette) for c, sc in zip(cands, scores)),
        notes=tuple(notes), **fields)
