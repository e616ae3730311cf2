"""Choosing inks from a library: best N of M for an image, or snapping a palette.

Split from :mod:`quantize.separation.inks`, which reads the libraries.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Literal, Sequence, cast

import numpy as np

from quantize.errors import SeparationError

from .inks import InkLibrary, InkLibraryError
from .substrate import SAME_DE, infer_substrate, no_substrate_asked

if TYPE_CHECKING:
    from quantize.core.picture import ImageInput
    from quantize.palette import Palette

__all__ = ["SELECTION_METHODS", "SNAP_WARN_DE", "InkSelection", "choose_inks", "choose_palette",
           "resolve_substrate", "snap_outcomes", "snap_palette", "subset_cost"]


#: Subset-selection methods: "exact" enumerates every subset, "search" is a
#: greedy start plus swap local search with restarts, "auto" is exact when
#: there are few subsets.
SELECTION_METHODS = ("auto", "exact", "search")
_EXACT_LIMIT = 3000  # subsets enumerated by "auto" before it switches to search


@dataclass(frozen=True, eq=False)
class InkSelection:
    """The inks chosen for an image.

    Attributes
    ----------
    chosen : tuple of int
        Library indices of the chosen inks, best first by pixel share.
    cost : float
        Pixel-weighted mean ΔE00 of the image mapped onto chosen inks + substrate.
    method : str
        "exact" or "search".
    evaluated : int
        Subsets whose cost was computed.
    palette : Palette
        Substrate first (locked, when given), then the chosen inks, named.
    """

    chosen: tuple
    cost: float
    method: str
    evaluated: int
    palette: Any
    details: dict = field(default_factory=dict)


def _distance_matrix(lab_px: np.ndarray, lab_inks: np.ndarray) -> np.ndarray:
    from quantize.colour.spaces import delta_e_ciede2000

    d = np.empty((lab_px.shape[0], lab_inks.shape[0]))
    for j in range(lab_inks.shape[0]):  # column by column: no (n, M, 3) temporaries
        d[:, j] = delta_e_ciede2000(lab_px, lab_inks[j])
    return d


def subset_cost(d: np.ndarray, w: np.ndarray, subset: Sequence[int], base: np.ndarray | None = None) -> float:
    """Weighted mean of each row's smallest distance over ``subset`` (and ``base``).

    Parameters
    ----------
    d : ndarray of shape (n, M)
        Distance of every colour to every ink.
    w : ndarray of shape (n,)
        Weights (pixel counts).
    subset : sequence of int
        Ink columns in use.
    base : ndarray of shape (n,), optional
        Distance to colours that are always present (the substrate).

    Returns
    -------
    float

    Examples
    --------
    >>> d = np.array([[1.0, 5.0], [4.0, 2.0]])
    >>> subset_cost(d, np.array([1.0, 1.0]), [0])
    2.5
    """
    m = d[:, list(subset)].min(axis=1) if len(subset) else np.full(d.shape[0], np.inf)
    if base is not None:
        m = np.minimum(m, base)
    return float((w * m).sum() / w.sum())


def _exact(d, w, n, base):
    best, best_s, count = np.inf, (), 0
    for s in itertools.combinations(range(d.shape[1]), n):
        c = subset_cost(d, w, s, base)
        count += 1
        if c < best - 1e-12:
            best, best_s = c, s
    return list(best_s), best, count


def _swap_search(d, w, start, base, count):
    """Best-improvement 1-swap local search from ``start``."""
    s = list(start)
    wsum = w.sum()
    m_all = d.shape[1]
    cur = subset_cost(d, w, s, base)
    while True:
        sub = d[:, s]
        order = np.argsort(sub, axis=1)
        first = np.take_along_axis(sub, order[:, :1], axis=1)[:, 0]
        second = (np.take_along_axis(sub, order[:, 1:2], axis=1)[:, 0] if len(s) > 1
                  else np.full(d.shape[0], np.inf))
        outside = np.setdiff1d(np.arange(m_all), s)
        if outside.size == 0:
            return s, cur, count
        best = (cur, None, None)
        for pos in range(len(s)):
            # Distance to the subset without s[pos]: the second nearest where s[pos] was nearest.
            rest = np.where(order[:, 0] == pos, second, first)
            if base is not None:
                rest = np.minimum(rest, base)
            costs = w @ np.minimum(rest[:, None], d[:, outside]) / wsum
            count += outside.size
            j = int(np.argmin(costs))
            if costs[j] < best[0] - 1e-12 * max(1.0, cur):
                best = (float(costs[j]), pos, int(outside[j]))
        if best[1] is None:
            return s, cur, count
        cur = best[0]
        s[best[1]] = best[2]


def _greedy(d, w, n, base):
    s: list[int] = []
    cur = base.copy() if base is not None else np.full(d.shape[0], np.inf)
    for _ in range(n):
        costs = w @ np.minimum(cur[:, None], d)
        costs[s] = np.inf
        j = int(np.argmin(costs))
        s.append(j)
        cur = np.minimum(cur, d[:, j])
    return s


def _search(d, w, n, base, restarts, rng):
    s, c, count = _swap_search(d, w, _greedy(d, w, n, base), base, 0)
    for _ in range(restarts - 1):
        start = rng.choice(d.shape[1], size=n, replace=False)
        s2, c2, count = _swap_search(d, w, start, base, count)
        if c2 < c - 1e-12:
            s, c = s2, c2
    return s, c, count


def choose_inks(image: ImageInput, library: InkLibrary, n: int, *, substrate: int | str | Sequence[float] | None = None,
                method: Literal["auto", "exact", "search"] = "auto", restarts: int = 4,
                seed: int | np.random.Generator = 0, max_colours: int = 50_000) -> InkSelection:
    """Choose the ``n`` library inks that reproduce an image best.

    The cost of a set of inks is the pixel-weighted mean ΔE00 between every
    pixel and the nearest colour among those inks and the substrate. This is
    the k-median (facility location) problem on the ink library, NP-hard in
    general; ``"search"`` starts from the greedy choice (add the ink that
    lowers the cost most, n times), improves it by the best single swap of a
    chosen ink for an unchosen one until no swap helps, and repeats from
    ``restarts - 1`` random starts, keeping the best.

    Parameters
    ----------
    image : path, Picture, PIL image, ndarray or ColourSample
    library : InkLibrary
    n : int
        Number of inks to print (the substrate is not counted).
    substrate : int, str or colour, optional
        The substrate: a library index or ink name (then it is not a
        candidate), or a colour (hex or L,a,b). It is always present and gets
        no plate.
    method : {"auto", "exact", "search"}, default "auto"
        "auto" enumerates every subset when there are at most 3000 of them.
    restarts : int, default 4
        Local searches for "search" (the first from the greedy start).
    seed : int or numpy Generator, default 0
    max_colours : int, default 50000
        Above this many distinct colours, the weighted cell means of
        :meth:`ColourSample.binned` stand in for the distinct colours.

    Returns
    -------
    InkSelection

    Raises
    ------
    InkLibraryError
        The library has fewer candidate inks than ``n``.
    ValueError
        Bad ``n``, ``method``, ``restarts`` or substrate.

    References
    ----------
    .. [1] O. Kariv and S. L. Hakimi, "An algorithmic approach to network
       location problems. II: The p-medians", SIAM J. Appl. Math. 37(3),
       539-560, 1979 (NP-hardness).
    .. [2] M. B. Teitz and P. Bart, "Heuristic methods for estimating the
       generalized vertex median of a weighted graph", Operations Research
       16(5), 955-961, 1968 (the swap search).
    .. [3] V. Arya et al., "Local search heuristics for k-median and facility
       location problems", SIAM J. Comput. 33(3), 544-562, 2004.

    Examples
    --------
    >>> from quantize.separation.inks import parse_ink_library
    >>> lib = parse_ink_library("Red,#c8102e\\nBlue,#1f3a93\\nGold,#f2b705\\n")
    >>> img = np.zeros((4, 4, 3), np.uint8); img[:, :2] = (200, 16, 46)
    >>> sel = choose_inks(img, lib, 1, substrate="#000000")
    >>> [lib.names[i] for i in sel.chosen]
    ['Red']
    """
    if method not in SELECTION_METHODS:
        raise ValueError(f"unknown selection method {method!r}; choose one of: {', '.join(SELECTION_METHODS)}")
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"number of inks must be a whole number of at least 1, got {n!r}")
    if restarts < 1:
        raise ValueError(f"restarts must be at least 1, got {restarts}")
    sub_idx, _, sub_rgb, sub_name = _resolve_substrate(substrate, library)
    candidates = [j for j in range(len(library)) if j != sub_idx]
    if len(candidates) < n:
        extra = " besides the substrate" if sub_idx is not None else ""
        raise InkLibraryError(f"{library.source}: asked for {n} inks but the library has only "
                              f"{len(candidates)}{extra}")
    d, w, base = _costs(image, library, candidates, sub_rgb, max_colours)
    use = method
    if method == "auto":
        use = "exact" if math.comb(len(candidates), n) <= _EXACT_LIMIT else "search"
    if use == "exact":
        s, cost, count = _exact(d, w, n, base)
    else:
        rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
        s, cost, count = _search(d, w, n, base, restarts, rng)
    chosen = tuple(candidates[i] for i in _by_share(d, w, s, base))
    pal = _ink_palette(library, chosen, sub_rgb, sub_name,
                       fit={"inks": library.describe(), "selection": use, "cost_delta_e": cost})
    return InkSelection(chosen=chosen, cost=cost, method=use, evaluated=count, palette=pal,
                        details={"candidates": len(candidates), "n": n, "substrate": sub_name})


def _costs(image, library, candidates, sub_rgb, max_colours):
    """ΔE00 of the image's colours to each candidate ink (n, M), the colours' weights (n,), and their
    ΔE00 to the substrate (n,) or None."""
    from quantize.colour.spaces import srgb8_to_space
    from quantize.core.sampling import ColourSample, sample_picture

    sample = image if isinstance(image, ColourSample) else sample_picture(_picture(image))
    if sample.n_colours > max_colours:
        lab_px, w = sample.binned("lab", max_points=max_colours)
    else:
        lab_px, w = sample.points("lab"), sample.weights
    # Map by the colours actually written (preview sRGB), so the cost is what mapping gives.
    d = _distance_matrix(lab_px, srgb8_to_space(library.rgb8[candidates], "lab"))
    base = _distance_matrix(lab_px, srgb8_to_space(sub_rgb, "lab")[None])[:, 0] if sub_rgb is not None else None
    return d, w, base


def _by_share(d, w, subset, base) -> list[int]:
    """``subset`` ordered by the weight of the colours each ink is nearest to, most first."""
    full = d[:, subset] if base is None else np.column_stack([d[:, subset], base])
    share = np.bincount(np.argmin(full, axis=1), weights=w, minlength=full.shape[1])[:len(subset)]
    return [subset[i] for i in np.argsort(-share, kind="stable")]


def _ink_palette(library, chosen, sub_rgb, sub_name, *, fit):
    """The chosen inks as a palette, named, with the substrate locked in front when there is one."""
    from quantize.palette import Palette

    rgb = [library.inks[j].rgb8 for j in chosen]
    names = [library.inks[j].name for j in chosen]
    locked = [False] * len(chosen)
    if sub_rgb is not None:
        rgb, names, locked = [sub_rgb] + rgb, [sub_name] + names, [True] + locked
    return Palette(rgb8=np.array(rgb, np.uint8), locked=np.array(locked), space="lab", names=tuple(names), fit=fit)


def _picture(image, max_pixels: int | None = None):
    """A Picture of ``image``; a path is read with the decompression-bomb limit ``max_pixels``."""
    from quantize.io.read import as_picture, load_image

    if isinstance(image, (str, bytes)) or hasattr(image, "__fspath__"):
        return load_image(image) if max_pixels is None else load_image(image, max_pixels=max_pixels)
    return as_picture(image)


def _resolve_substrate(substrate, library: InkLibrary | None):
    """(library index or None, lab or None, rgb8 or None, name) of a substrate spec."""
    from quantize.colour.spaces import srgb8_to_space
    from quantize.palette import parse_colour

    if substrate is None:
        return None, None, None, None
    if isinstance(substrate, (int, np.integer)) and not isinstance(substrate, bool):
        if library is None or not 0 <= substrate < len(library):
            raise ValueError(f"substrate index {substrate} is not an ink of the library")
        ink = library.inks[int(substrate)]
        return int(substrate), ink.lab, ink.rgb8, ink.name
    if isinstance(substrate, str) and library is not None:
        j = library.find(substrate)
        if j is not None:
            ink = library.inks[j]
            return j, ink.lab, ink.rgb8, ink.name
    try:
        rgb = parse_colour(substrate)
    except ValueError:
        raise ValueError(f"substrate {substrate!r} is neither a colour (#rrggbb or L,a,b) nor an ink "
                         "of the library") from None
    return None, srgb8_to_space(rgb, "lab"), rgb, "substrate"


def snap_palette(palette: Palette, library: InkLibrary, *, substrate: str | None = None) -> tuple[Palette, list[dict]]:
    """Replace each unlocked palette colour by a library ink, each ink used once.

    The assignment minimises the total ΔE00 between fitted colours and
    inks (Hungarian method, scipy), so two fitted colours never snap to the
    same ink. Locked colours (the substrate) stay as they are.

    Parameters
    ----------
    palette : Palette
    library : InkLibrary
    substrate : str, optional
        Name of a library ink that is the substrate: it is not a candidate.

    Returns
    -------
    palette : Palette
        Locked colours first, then the snapped inks, named after them.
    snaps : list of dict
        Per unlocked colour: ``fitted`` hex, ``ink`` name, ``ink_hex``,
        ``delta_e`` (ΔE00 between the fitted colour and the ink's Lab).

    Raises
    ------
    InkLibraryError
        Fewer library inks than colours to snap.

    References
    ----------
    .. [1] H. W. Kuhn, "The Hungarian method for the assignment problem",
       Naval Research Logistics Quarterly 2, 83-97, 1955.

    Examples
    --------
    >>> from quantize.palette import Palette
    >>> from quantize.separation.inks import parse_ink_library
    >>> lib = parse_ink_library("Red,#c8102e\\nBlue,#1f3a93\\n")
    >>> pal = Palette(np.array([[198, 20, 50]], np.uint8), None)
    >>> snapped, snaps = snap_palette(pal, lib)
    >>> snaps[0]["ink"], snapped.hex
    ('Red', ['#c8102e'])
    """
    from scipy.optimize import linear_sum_assignment

    from quantize.palette import FitRecord, Palette

    free = np.flatnonzero(~palette.locked)
    skip = library.find(substrate) if isinstance(substrate, str) else None
    candidates = [j for j in range(len(library)) if j != skip]
    if len(candidates) < free.size:
        raise InkLibraryError(f"{library.source}: {free.size} colours to snap but the library has only "
                              f"{len(candidates)} inks")
    fitted_lab = palette.lab[free]
    d = _distance_matrix(fitted_lab, library.lab[candidates])
    rows, cols = linear_sum_assignment(d)
    pick = dict(zip(rows.tolist(), cols.tolist()))
    lk = np.flatnonzero(palette.locked)
    rgb = [palette.rgb8[i] for i in lk]
    names = [palette.names[i] or "substrate" for i in lk]
    snaps = []
    for r, i in enumerate(free):
        ink = library.inks[candidates[pick[r]]]
        rgb.append(ink.rgb8)
        names.append(ink.name)
        snaps.append({"fitted": palette.hex[i], "ink": ink.name, "ink_hex": ink.hex,
                      "delta_e": round(float(d[r, pick[r]]), 3)})
    snapped = {"inks": library.describe(), "snaps": snaps}
    fit = palette.fit.with_extra(**snapped) if palette.fit is not None else FitRecord.from_dict(snapped)
    out = Palette(rgb8=np.array(rgb, np.uint8), locked=np.arange(len(rgb)) < lk.size, space=palette.space,
                  names=tuple(names), fit=fit)
    return out, snaps


def choose_palette(image, *, palette=None, library=None, n: int | None = None, snap: bool = False,
                   substrate=None, seed=0, max_pixels=None) -> tuple[Any, dict]:
    """The inks to separate ``image`` into, from one of four sources.

    * ``palette`` alone: that palette, with ``substrate`` locked into it.
    * ``library`` and ``n``: the best ``n`` inks of the library
      (:func:`quantize.separation.choice.choose_inks`).
    * ``library``, ``snap`` and ``n`` (or ``palette``): a palette fitted with
      ``n`` inks (or the given one), each colour moved to its nearest library
      ink (:func:`quantize.separation.choice.snap_palette`).
    * neither: a palette fitted to the image, ``n`` inks plus the substrate
      (``n`` None: 1-8 inks, chosen by the fit's penalised rule).

    Parameters
    ----------
    image : path, Picture, PIL image or ndarray
    palette : Palette, optional
    library : InkLibrary, optional
    n : int, optional
        Printed inks, the substrate not counted.
    snap : bool, default False
    substrate : str, optional
        A colour (hex or L,a,b), the name of a library ink, or ``"none"``
        (every colour prints). Default: inferred and said
        (:func:`quantize.separation.substrate.infer_substrate`: the given
        palette's locked colour, else the colour of the image border), or
        refused when the border is mixed.
    seed : int, default 0
    max_pixels : int, optional

    Returns
    -------
    palette : Palette
        Substrate locked; its index is ``info["substrate"]``.
    info : dict
        How the inks were chosen (method, cost, snaps); ``substrate`` (its
        palette index, or None when every colour prints),
        ``substrate_from`` (a sentence saying where it came from).

    Raises
    ------
    SeparationError
        An impossible combination (a library without ``n``, a palette and a
        library without ``snap``), or no substrate given and none inferred.
    InkLibraryError
        Fewer inks in the library than asked for.

    Examples
    --------
    >>> img = np.full((8, 8, 3), 255, np.uint8); img[2:6, 2:6] = (200, 16, 46)
    >>> pal, info = choose_palette(img, n=1)
    >>> pal.hex, info["method"], info["substrate"]
    (['#ffffff', '#c8102e'], 'fitted', 0)
    """
    if n is not None and (isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1):
        raise SeparationError(f"number of inks must be at least 1, got {n!r}")
    pic = _picture(image, max_pixels)
    if library is not None and palette is not None and not snap:
        raise SeparationError("a palette and an ink library were both given: add snap to move the palette's "
                              "colours onto library inks, or give only one of them")
    if library is not None and palette is None and n is None:
        raise SeparationError("choosing inks from a library needs the number of inks (n)")
    said = "given"
    if substrate is None and palette is not None and library is None:
        palette, sub, said = resolve_substrate(pic, palette, None)
        return palette, {"method": "given palette", "substrate": sub, "substrate_from": said}
    if substrate is None:
        guess = infer_substrate(pic, palette, indices=_mapped(pic, palette))
        substrate = "none" if guess.rgb8 is None else _hex8(guess.rgb8)
        said = guess.describe()
    none = no_substrate_asked(substrate)
    if library is not None and not snap:
        # No palette here (with a library it needs snap), so n was given: both are checked above.
        sel = choose_inks(pic, library, cast(int, n), substrate=None if none else substrate, seed=seed)
        info = {"method": f"best {n} of {len(library)} library inks ({sel.method})",
                "cost_delta_e": sel.cost, "subsets_evaluated": sel.evaluated, "library": library.describe(),
                "substrate": None if none else 0, "substrate_from": said}
        return sel.palette, info
    sub_spec = substrate
    if library is not None and isinstance(substrate, str) and library.find(substrate) is not None:
        sub_spec = library.inks[library.find(substrate)].hex
    if palette is None:
        from quantize.fit.engine import fit_palette

        if none:
            palette = fit_palette(pic, n if n is not None else (1, 8), seed=seed)
        else:
            palette = fit_palette(pic, n + 1 if n is not None else (2, 9), locked=[sub_spec], seed=seed)
        method = "fitted"
    else:
        method = "given palette"
    if none:
        info = {"method": method, "substrate": None, "substrate_from": "given: none (every colour prints)"}
        if snap:
            palette, snaps = snap_palette(palette, library)
            info.update({"method": f"{method}, snapped to library inks", "snaps": snaps,
                         "library": library.describe(), "colours_snapped": len(snaps)})
        return palette, info
    palette, sub = with_substrate(palette, sub_spec)
    info = {"method": method, "substrate": sub, "substrate_from": said}
    if snap:
        palette, snap_info = _snapped(palette, sub, library, substrate)
        info.update({"method": f"{method}, snapped to library inks", **snap_info})
    return palette, info


def _snapped(palette, sub: int, library, substrate) -> tuple[Any, dict]:
    """``palette`` with its one locked colour at ``sub`` and every other colour snapped to a library ink.

    The substrate comes first in the result; it takes a library ink's name
    when ``substrate`` names one.
    """
    from quantize.palette import Palette

    others = [i for i in range(palette.k) if i != sub]
    lk = np.zeros(palette.k, bool)
    lk[sub] = True
    palette = Palette(palette.rgb8, lk, palette.space, palette.names, palette.fit)
    named = library.find(substrate) if isinstance(substrate, str) else None
    palette, snaps = snap_palette(palette, library, substrate=substrate if isinstance(substrate, str) else None)
    if named is not None:
        names = list(palette.names)
        names[0] = library.inks[named].name
        palette = Palette(palette.rgb8, palette.locked, palette.space, tuple(names), palette.fit)
    return palette, {"snaps": snaps, "library": library.describe(), "colours_snapped": len(others), "substrate": 0}


def with_substrate(palette, colour) -> tuple[Any, int]:
    """The palette with ``colour`` as its locked substrate, and the substrate's index.

    A palette colour equal to ``colour`` (same 8-bit sRGB) or named like it is
    used; otherwise the colour is added, locked, in front.

    Examples
    --------
    >>> from quantize.palette import Palette
    >>> pal = Palette(np.array([[200, 16, 46]], np.uint8), None)
    >>> pal2, i = with_substrate(pal, "#ffffff")
    >>> pal2.hex, i, bool(pal2.locked[0])
    (['#ffffff', '#c8102e'], 0, True)
    """
    from quantize.palette import Palette, parse_colour

    if isinstance(colour, str):
        for i, nm in enumerate(palette.names):
            if nm and nm.casefold() == colour.strip().casefold():
                return _lock(palette, i), i
    try:
        rgb = parse_colour(colour)
    except ValueError as exc:
        raise SeparationError(f"substrate: {exc}") from None
    hit = np.flatnonzero((palette.rgb8 == rgb).all(axis=1))
    if hit.size:
        return _lock(palette, int(hit[0])), int(hit[0])
    names = ("substrate",) + tuple(palette.names)
    pal = Palette(rgb8=np.vstack([rgb[None], palette.rgb8]), locked=np.r_[True, palette.locked],
                  space=palette.space, names=names, fit=palette.fit)
    return pal, 0


def _lock(palette, i: int):
    from quantize.palette import Palette

    lk = palette.locked.copy()
    lk[i] = True
    return Palette(rgb8=palette.rgb8, locked=lk, space=palette.space, names=palette.names, fit=palette.fit)


def _hex8(rgb8) -> str:
    return "#{:02x}{:02x}{:02x}".format(*map(int, rgb8))


def _mapped(pic, palette):
    """The picture's palette indices when the palette has several locked colours (else None: not needed)."""
    if palette is None or int(np.count_nonzero(palette.locked)) < 2:
        return None
    from quantize.render.mapping import map_picture

    return map_picture(pic, palette, nearest="ciede2000").indices


def resolve_substrate(picture, palette, substrate) -> tuple[Any, int | None, str]:
    """The palette with its substrate locked, the substrate's index (None: every colour prints), and where
    it came from, in words.

    ``substrate`` is a palette index, a palette colour's name, a colour
    (added, locked, when the palette lacks it), ``"none"``, or None: then it
    is inferred (:func:`quantize.separation.substrate.infer_substrate`); a
    border colour within ΔE00 5 of a palette colour is that colour, else it
    is added.

    Raises
    ------
    SeparationError
        An index outside the palette, a bad colour, or none given and none
        inferred.

    Examples
    --------
    >>> from quantize.palette import Palette
    >>> img = np.full((20, 20, 3), (244, 236, 214), np.uint8); img[5:15, 5:15] = (200, 16, 46)
    >>> pal = Palette(np.array([[200, 16, 46], [244, 236, 214]], np.uint8), None)
    >>> pal2, sub, said = resolve_substrate(img, pal, None)
    >>> pal2.hex[sub], bool(pal2.locked[sub]), said.split(" (")[0]
    ('#f4ecd6', True, 'substrate #f4ecd6 inferred from the image border')
    """
    from quantize.colour.spaces import delta_e_ciede2000, srgb8_to_space

    if isinstance(substrate, (int, np.integer)) and not isinstance(substrate, bool):
        if not 0 <= int(substrate) < palette.k:
            raise SeparationError(f"substrate index {substrate} is not a palette colour (0-{palette.k - 1})")
        return _lock(palette, int(substrate)), int(substrate), "given"
    if no_substrate_asked(substrate):
        return palette, None, "given: none (every colour prints)"
    if substrate is not None:
        palette, sub = with_substrate(palette, substrate)
        return palette, sub, "given"
    pic = _picture(picture)
    guess = infer_substrate(pic, palette, indices=_mapped(pic, palette))
    if guess.rgb8 is None:
        return palette, None, guess.describe()
    de = np.asarray(delta_e_ciede2000(palette.lab, srgb8_to_space(guess.rgb8, "lab")))  # one per colour
    near = int(np.argmin(de))
    if de[near] <= SAME_DE:
        return _lock(palette, near), near, guess.describe(palette.hex[near])
    palette, sub = with_substrate(palette, _hex8(guess.rgb8))
    return palette, sub, guess.describe()


#: A snap whose colour prints this far from its ink (ΔE00) is a warning (common practice, no source).
SNAP_WARN_DE = 10.0


def snap_outcomes(image, snaps: Sequence[dict], indices: np.ndarray, palette, library: InkLibrary, *,
                  substrate: int | None = None) -> tuple[list[dict], list[str]]:
    """What each snapped colour prints as, once the image is mapped and cleaned.

    Each fitted colour's pixels (those nearest to it, by ΔE00, among the
    fitted colours and the substrate) are looked up in the separation's
    ``indices``; the ink most of them print with is the one it prints as. It
    can differ from the ink the colour was assigned to, because each ink is
    used once and pixels are mapped to the nearest ink afterwards.

    Parameters
    ----------
    image : path, Picture, PIL image or ndarray
    snaps : sequence of dict
        As :func:`snap_palette` returns them (``fitted`` hex, ``ink``).
    indices : ndarray
        The separation's palette index per film pixel (read at the centre of
        each image pixel when the films have another resolution).
    palette : Palette
        The separation's palette.
    library : InkLibrary
    substrate : int, optional
        Palette index of the substrate.

    Returns
    -------
    snaps : list of dict
        Each snap with ``prints_as`` (an ink name, or "substrate"),
        ``prints_as_hex``, ``prints_share`` (fraction of the colour's pixels)
        and ``delta_e_printed`` (ΔE00 from the fitted colour to that ink's
        measured Lab, or to its preview colour when it is not a library ink).
    warnings : list of str
        One per colour that prints more than :data:`SNAP_WARN_DE` from its ink.
    """
    from quantize.colour.spaces import delta_e_ciede2000, srgb8_to_space
    from quantize.palette import Palette, parse_colour
    from quantize.render.mapping import map_picture

    pic = _picture(image)
    fitted = [parse_colour(s["fitted"]) for s in snaps]
    rgb = fitted + ([palette.rgb8[substrate]] if substrate is not None else [])
    own = map_picture(pic, Palette(np.array(rgb, np.uint8), np.zeros(len(rgb), bool)), nearest="ciede2000").indices
    opaque = pic.opaque
    if indices.shape != own.shape:  # films at another resolution: read them at each artwork pixel's centre
        from .film import sample_at_artwork

        indices = sample_at_artwork(indices, own.shape)
    out, warnings = [], []
    for j, s in enumerate(snaps):
        printed = indices[(own == j) & opaque]
        doc = dict(s)
        if printed.size == 0:
            doc.update(prints_as=None, prints_as_hex=None, prints_share=0.0, delta_e_printed=None)
            out.append(doc)
            continue
        counts = np.bincount(printed.astype(np.int64), minlength=palette.k)
        m = int(np.argmax(counts))
        name = "substrate" if m == substrate else (palette.names[m] or palette.hex[m])
        lib_j = library.find(palette.names[m]) if palette.names[m] else None
        ink_lab = library.inks[lib_j].lab if lib_j is not None else palette.lab[m]
        de = float(delta_e_ciede2000(srgb8_to_space(fitted[j], "lab"), ink_lab))
        doc.update(prints_as=name, prints_as_hex=palette.hex[m], prints_share=round(float(counts[m] / printed.size), 4),
                   delta_e_printed=round(de, 3))
        out.append(doc)
        if de > SNAP_WARN_DE:
            warnings.append(f"warning: colour {s['fitted']} prints as {name} ({palette.hex[m]}), ΔE00 {de:.1f} "
                            f"from the fitted colour (over {SNAP_WARN_DE:g}): check the ink choice or the library")
    return out, warnings
