"""Palette sizes that leave room in a colour index: the top of a size range, lowered before the fit.

An indexed PNG, a GIF and a lossless WebP hold at most 256 colours in their
colour index, and a picture with transparent pixels needs one of those
entries for them (GIF has exactly one transparent entry).  A range whose top
is 256 (``-k 2-256``, or the automatic size for continuous tone, which goes
up to :data:`quantize.fit.inkcount.TONE_MAX_K`) could choose 256 colours and
then not be written.  :func:`sizes_with_room` lowers the top before the fit,
so the rule chooses among sizes that fit; ``reduce``, ``batch`` (one palette
per image, or one for the set) and the library's batch all call it.  Which
outputs need the entry is the writer's business
(:func:`quantize.io.write.needs_clear_entry`).
"""

from __future__ import annotations

from typing import Any

from .settings import DEFAULT_K, FitSettings

__all__ = ["INDEX_ENTRIES", "sizes_with_room"]

#: Entries of a colour index (PNG's PLTE, a GIF colour table, WebP's colour-indexing transform).
INDEX_ENTRIES = 256


def sizes_with_room(k: Any, settings: FitSettings, *, reserve: int, picture=None) -> tuple[Any, str | None]:
    """The size range ``k`` with its top lowered so that ``reserve`` index entries stay free.

    Parameters
    ----------
    k : int, range, (min, max), "min-max" or None
        The sizes asked for, as :func:`quantize.fit.engine.fit_palette`
        takes them; None is the library's default (2 to 12, and for
        continuous tone under the ``"auto"`` rule up to 256).
    settings : FitSettings
        The fit's settings: the rule and the kind decide whether the
        default can reach 256.
    reserve : int
        Index entries the output needs besides the palette (1 for
        transparent pixels; 0 leaves ``k`` as it is).
    picture : Picture, optional
        The image to be fitted.  With ``k`` None, the ``"auto"`` rule and
        kind ``"auto"``, it is judged (:func:`quantize.fit.inkcount.judge`)
        to know whether the default goes up to 256; without it (a pooled
        colour sample, which the automatic rule cannot judge) the default's
        top is 12.

    Returns
    -------
    k : same kind as given, or (min, max)
        What to pass to ``fit_palette``: ``k`` itself when it already
        leaves room; a range with its top lowered to
        ``INDEX_ENTRIES - reserve`` (a string stays a string); a fixed size
        above that is returned as it is, for the caller to refuse.
    note : str or None
        One line saying that the top was lowered and why, or None.

    Examples
    --------
    >>> sizes_with_room("2-256", FitSettings(), reserve=1)[0]
    '2-255'
    >>> sizes_with_room("2-12", FitSettings(), reserve=1)
    ('2-12', None)
    """
    from .engine import parse_k

    top = INDEX_ENTRIES - int(reserve)
    if reserve <= 0:
        return k, None
    why = f"the output's colour index keeps one of its {INDEX_ENTRIES} entries for the transparent pixels"
    if k is None:
        if not _default_reaches(settings, picture, top):
            return None, None
        lo = DEFAULT_K[0]
        return (lo, top), (f"palette size: the automatic size for continuous tone goes up to {INDEX_ENTRIES}; "
                           f"capped at {top} before the fit, as {why}")
    ks = parse_k(k)
    if max(ks) <= top or len(ks) == 1:
        return k, None  # room already, or a fixed size the caller refuses
    lo = min(ks)
    capped: Any = f"{lo}-{top}" if isinstance(k, str) else (lo, top)
    asked = k.strip() if isinstance(k, str) else f"{lo}-{max(ks)}"
    return capped, f"palette size range {asked} capped at {top} before the fit, as {why}"


def _default_reaches(settings: FitSettings, picture, top: int) -> bool:
    """Whether the default sizes can go above ``top``: only the automatic rule's continuous tone does."""
    from .inkcount import TONE_MAX_K

    if settings.rule != "auto" or settings.kind == "artwork" or TONE_MAX_K <= top:
        return False  # the default range's own top (12) leaves room
    if settings.kind == "continuous tone":
        return True
    if picture is None:
        return False
    from quantize.core.regions import find_regions

    from .inkcount import artwork_like, judge

    # The same analysis the fit runs; the picture keeps it, so the fit does not run it again.
    return judge([find_regions(picture, structures=artwork_like)]).kind == "continuous tone"
