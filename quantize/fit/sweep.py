"""The palette-size sweep: colour error at every palette size, before choosing.

For each k of a range (default :data:`quantize.fit.settings.DEFAULT_K`, at
most :data:`MAX_SWEEP_K`) the sweep fits a palette with the one engine
(:func:`quantize.fit.engine.fit_sizes`) and records its k-means cost
(pixel-weighted squared error in the fitting space), its CIEDE2000
statistics, the penalised score of the ``"bic"`` rule
(:mod:`quantize.fit.selection`) and the k each rule picks.  With the same
settings, the row of size k is the palette ``fit_palette(images, k)``
gives.

``warm=True`` adds warm starts from the previous size
(:mod:`quantize.fit.warm`): the best cost then never rises with k, but each
row depends on the rows before it.

Several images are pooled into one sample (one palette shared by a product
set) and each image's own ΔE00 is reported beside the pooled figures.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, Callable, Sequence, cast

from .settings import DEFAULT_K, FitSettings
# The result objects and tables live in their own module; their names stay importable here.
from .sweep_result import Sweep, SweepRow, candidate_rows, format_table

if TYPE_CHECKING:
    from quantize.core.picture import ImageInput

__all__ = ["sweep", "sweep_sample", "Sweep", "SweepRow", "parse_sweep_range", "candidate_rows",
           "format_table", "MAX_SWEEP_K"]

#: Largest palette size a sweep fits.
MAX_SWEEP_K = 64


def parse_sweep_range(ks=DEFAULT_K) -> list[int]:
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


def sweep_sample(sample, ks: Sequence[int], settings: FitSettings | None = None, *, per_image: Sequence = (),
                 regions: Sequence | None = None, progress: Callable | None = None, **options) -> Sweep:
    """Sweep an already loaded colour sample; ``ks`` ascending and validated.

    ``settings`` and keyword ``options`` as in :func:`sweep`.  ``per_image``
    is a sequence of ``(source, ColourSample)`` pairs whose own ΔE00 is
    measured against each row's palette; ``regions`` the images' flat
    regions (:func:`quantize.core.regions.find_regions`), which the
    ``"auto"`` rule's pick needs.
    """
    from quantize.palette import Palette
    from quantize.quality.stats import delta_e_stats

    from .assign import map_sample
    from .engine import fit_sizes
    from .inkcount import auto_choice
    from .selection import choose_k

    from .engine import settings_of

    settings = settings_of(settings, options, "sweep_sample")
    settings.check_sizes(ks)
    cands = fit_sizes(sample, list(ks), settings, progress=progress)
    notes = [f"k = {c.k}: rounding to 8 bits merged colours; the palette has {c.palette.k}"
             for c in cands if c.palette.k < c.k]
    kk = [c.k for c in cands]
    stats = [c.delta_e for c in cands]
    rob = [c.robust for c in cands]
    choices = {"bic": choose_k(kk, stats, rob, rule="bic")}
    if settings.target is not None:
        choices["target"] = choose_k(kk, stats, rob, rule="target", target=settings.target,
                                     target_stat=settings.target_stat)
    if settings.rule == "auto":
        choices["auto"] = auto_choice(kk, [c.palette.lab for c in cands], stats, rob, regions, sample.n_pixels,
                                      kind=settings.kind, target=settings.target, target_stat=settings.target_stat)
    rows = []
    # FitSettings.__post_init__ resolves a None metric to its name; the field's type still admits None.
    metric = cast(str, settings.nearest)
    for c, score in zip(cands, choices["bic"].scores):
        pal = Palette(c.palette.rgb8, c.palette.locked, settings.space)
        per = {src: delta_e_stats(map_sample(smp, pal, metric=metric, compiled_always=settings.compiled_always)[1],
                                  smp.weights)
               for src, smp in per_image}
        rows.append(SweepRow(k=c.k, palette=pal, cost=c.inertia, delta_e=c.delta_e, robust=c.robust,
                             score=float(score), start=c.start, coverage=c.coverage, per_image=per))
    return Sweep(rows=rows, choices=choices, rule=settings.rule, settings=settings,
                 n_pixels=int(sample.n_pixels), n_distinct=int(sample.n_colours), notes=notes)


def sweep(images: ImageInput | Sequence[ImageInput], ks: tuple[int, int] | str | range | int = DEFAULT_K, *,
          settings: FitSettings | None = None, max_pixels: int | None = None,
          progress: Callable[[int], object] | None = None, **options: Any) -> Sweep:
    """Fit a palette at every size of a range and tabulate its error.

    Parameters
    ----------
    images : path, Picture, PIL image, ndarray, or a list of them
        Several images are pooled (one palette for the set); each also gets
        its own ΔE00 columns.
    ks : (min, max), "min-max", range or int, default=(2, 12)
        Palette sizes, inclusive, within 1 to :data:`MAX_SWEEP_K`.
    settings : FitSettings, optional
        All the options below in one object; keyword options replace its
        fields.
    max_pixels : int, optional
        Decompression-bomb limit for files.
    progress : callable, optional
        Called with each k once it is done.
    **options
        Fields of :class:`quantize.fit.settings.FitSettings`, named as the
        command line's options (``seeding`` and ``nearest``; the old names
        ``init`` and ``metric`` still work, with a DeprecationWarning):
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
        Perceptual space of the fit; the cost is measured there.
    restarts : int, default=8
        Fresh k-means++ restarts per size (warm starts come on top).
    seed : int or numpy Generator, default=0
        Same seed, same sweep; a Generator gives one integer, drawn once
        (``Sweep.settings.seed``).
    locked : sequence of colour specs, default=()
        Colours held fixed in every palette (hex or ``"L,a,b"``).
    rule : {"auto", "bic", "target"}, default="auto"
        The rule whose pick is :attr:`Sweep.chosen`; every rule that applies
        is reported.  ``"auto"`` judges the images (artwork or continuous
        tone, :mod:`quantize.fit.inkcount`) and picks among the sizes swept.
    target : float, optional
        ΔE00 target of the ``"target"`` rule.
    target_stat : {"mean", "p95"}, default="mean"
    seeding : {"k-means++", "random", "farthest"}, default="k-means++"
        Seeding of the fresh restarts (the field ``init``).
    weighting : {"equal", "pixels"}, default="equal"
        How pooled images count.
    nearest : {"ciede2000", "space", "auto"}, optional
        Nearest-colour metric used to refine and measure each palette
        (default CIEDE2000).
    refine : {"robust", "none"}, default="robust"
        The refinement after each k-means fit, as in
        :func:`quantize.fit.engine.fit_palette`; the table's k-means cost is
        that of the fit before it.
    warm : bool, default=False
        Add the warm starts from the previous size (:mod:`quantize.fit.warm`):
        the cost never rises with k, but a row then depends on the rows
        before it and may differ from ``fit_palette`` at that size.
    threads : bool, default=True
        Run independent steps on a second thread; the results are the same
        either way (:class:`quantize.fit.settings.FitSettings`).

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
    TypeError
        An option that is not a field of FitSettings.
    ImageReadError
        A file cannot be read.

    References
    ----------
    .. [1] D. Arthur and S. Vassilvitskii, "k-means++: the advantages of
       careful seeding", SODA 2007, 1027-1035.
    .. [2] Y. Linde, A. Buzo and R. M. Gray, "An algorithm for vector
       quantizer design", IEEE Transactions on Communications 28(1), 84-95,
       1980 (growing a codebook by splitting, the warm starts).
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
    from quantize.core.sampling import pool_samples

    from .engine import load_samples, settings_of

    sizes = parse_sweep_range(ks)
    settings = settings_of(settings, options, "sweep")
    settings.check_sizes(sizes)  # before any image is read
    items = list(images) if isinstance(images, (list, tuple)) else [images]
    if not items:
        raise ValueError("no images given: the image set is empty")
    samples: list = []
    sources: list[str] = []
    notes: list[str] = []
    pictures: list = []
    for item in items:
        smp, src, nts = load_samples(item, max_pixels=max_pixels, pictures=pictures)
        samples.append(smp)
        sources.extend(src)
        notes.extend(nts)
    sources = _unique_names(sources)
    pooled = pool_samples(samples, weighting=settings.weighting)
    n = pooled.n_colours
    if sizes[-1] > n:
        notes.append(f"the image set has only {n} distinct colours; sizes above {n} were not swept")
        sizes = [k for k in sizes if k <= n] or [n]
    per = list(zip(sources, samples)) if len(samples) > 1 else []
    regions = None
    if settings.rule == "auto" and all(p is not None for p in pictures):
        from quantize.core.regions import find_regions

        regions = [find_regions(p) for p in pictures]
    res = sweep_sample(pooled, sizes, settings, per_image=per, regions=regions, progress=progress)
    return res.with_inputs(sources, notes)


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
