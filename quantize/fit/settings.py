"""The settings of a fit: one frozen object, validated once, shared by every entry point.

:func:`quantize.fit.engine.fit_palette`, :func:`quantize.fit.sweep.sweep`,
the ``fit``, ``reduce`` and ``sweep`` commands and a batch's shared palette
all build a :class:`FitSettings` and hand it to the one engine
(:func:`quantize.fit.engine.fit_sizes`), so a bad value gets the same
message wherever it comes from.

Randomness: a seed is a non-negative integer, or a numpy ``Generator`` from
which one integer is drawn, once, when the settings are made.  Palette size
``k`` then draws from its own stream, ``SeedSequence([seed, k])``, so a
palette does not depend on which other sizes were fitted beside it (unless
``warm`` starts are asked for).  The integer is what a palette's fit record
keeps, so the palette can be refitted from its JSON file.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Sequence

from quantize.core.vocabulary import accepts_renamed, renamed_keywords

if TYPE_CHECKING:
    import numpy as np

    from quantize.palette import FitRecord

__all__ = ["FitSettings", "DEFAULT_K", "REFINES", "WEIGHTINGS", "TARGET_STATS", "SEED_BOUND"]

#: The palette sizes the library and every command choose from when none is given.
DEFAULT_K = (2, 12)
#: Refinements after the k-means fit (see :func:`quantize.fit.engine.refine_palette`).
REFINES = ("robust", "none")
#: How pooled images count.
WEIGHTINGS = ("equal", "pixels")
#: ΔE00 statistics a target may apply to.
TARGET_STATS = ("mean", "p95")
#: A Generator seed becomes an integer below this bound: 2**53 is exact in
#: every JSON reader, so the recorded seed survives any tool that reads it.
SEED_BOUND = 2**53


@accepts_renamed("init", "metric")
@dataclass(frozen=True)
class FitSettings:
    """How palettes are fitted, for every size of a range.

    Attributes
    ----------
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
        Perceptual space of the fit.
    restarts : int, default=8
        Fresh seedings per palette size; the lowest k-means cost is kept.
    seed : int, numpy Generator or None, default=0
        A non-negative integer; a Generator gives one integer, drawn once
        when the settings are made; None means 0.  After construction
        ``seed`` is always that integer.
    seeding : {"k-means++", "random", "farthest"}, default="k-means++"
        How each restart picks its first centres (the command line's
        ``--seeding``; ``init=`` is its old name, still accepted with a
        DeprecationWarning).
    locked : sequence of colour specs, default=()
        Colours held fixed (hex ``"#f4efe1"`` or Lab ``"95,1,6"``); kept as
        ``#rrggbb`` strings of the 8-bit colours actually written.
    refine : {"robust", "none"}, default="robust"
        The refinements tried after the k-means fit, each kept only if it
        lowers the mean ΔE00.
    rule : {"auto", "bic", "target"}, default="auto"
        How the palette size is chosen from a range.  ``"auto"`` judges the
        image first (:mod:`quantize.fit.inkcount`): artwork gets the fewest
        inks that print every flat area of ink, continuous tone the smallest
        palette meeting ``target`` (default mean ΔE00 2.5).
    target : float, optional
        ΔE00 target of the ``"target"`` rule (required by it), > 0.
    target_stat : {"mean", "p95"}, default="mean"
        The ΔE00 statistic the target applies to.
    nearest : {"ciede2000", "space", "auto"} or None, default="ciede2000"
        Nearest-colour metric the palettes are refined for and measured
        with (the command line's ``--nearest``); None or ``"auto"`` means
        CIEDE2000.  ``metric=`` is its old name, still accepted with a
        DeprecationWarning.
    weighting : {"equal", "pixels"}, default="equal"
        How pooled images count: equally, or by pixel count.
    kind : {"auto", "artwork", "continuous tone"}, default="auto"
        What the ``"auto"`` rule takes the image to be; ``"auto"`` judges it.
    warm : bool, default=False
        Also start size k from the size k - 1 solution (its worst cluster
        split, and one k-means++ addition), keeping the start of lowest
        cost: the k-means cost then never rises with k, but a size's
        palette depends on the sizes fitted before it.
    for_dither : bool, default=False
        A dither will follow: after the fit, spread the palette's free
        colours so that mixtures of them reach the image's extreme colours
        (:func:`quantize.fit.for_dither.palette_for_dither`).  Without it
        the palette is fitted for nearest-colour mapping, and a dither
        cannot reproduce colours outside the palette's hull.
    threads : bool, default=True
        Run independent steps on a second thread (the region analysis beside
        the sampling and fit, a single size's refinements beside each
        other, several sizes' refinements beside the next fit).  The results
        are the same either way; a caller that already keeps every core
        busy (a batch with one worker process per core) turns it off.
    compiled_always : bool, default=False
        Measure CIEDE2000 with the compiled loops at every size.  By default
        a fit's CIEDE2000 runs on numpy below
        :data:`quantize.kernels.nearest.COMPILED_FROM` point-palette pairs,
        so that one small file never loads the compiler (about half a
        second and 100 MB); a process that fits many images (a batch
        worker, a batch's shared palette) pays that once and then fits
        each photo for less CPU (``benchmarks/bench_batch.py --kernels``).  The palette then
        depends on this setting, the image and the seed alone, never on
        timing, load or the number of workers; it agrees with the
        default's to rounding, not bit for bit by construction: the two
        paths round ΔE00 differently (the numpy k-medians in float32), and
        a near tie, within the last bits of a ΔE00, may go either way.  A
        sample of 2^18 distinct colours or more runs compiled whatever
        this says (:func:`quantize.kernels.nearest.sample_runs_compiled`).

    Raises
    ------
    ValueError
        Any value outside the above, with the value and what was expected.

    Examples
    --------
    >>> FitSettings(space="oklab", restarts=4).restarts
    4
    >>> FitSettings(restarts=2.5)
    Traceback (most recent call last):
    ...
    ValueError: restarts must be a whole number of at least 1, got 2.5
    """

    space: str = "lab"
    restarts: int = 8
    seed: int | np.random.Generator | None = 0
    seeding: str = "k-means++"
    locked: Sequence[str] = ()
    refine: str = "robust"
    rule: str = "auto"
    target: float | None = None
    target_stat: str = "mean"
    nearest: str | None = "ciede2000"
    weighting: str = "equal"
    warm: bool = False
    kind: str = "auto"
    threads: bool = True
    for_dither: bool = False
    compiled_always: bool = False

    def __post_init__(self):
        from quantize.colour.spaces import check_space

        from .assign import resolve_metric
        from .clustering import check_init
        from .selection import check_rule

        check_space(self.space)
        check_init(self.seeding)
        check_rule(self.rule)
        object.__setattr__(self, "nearest", resolve_metric(None if self.nearest == "auto" else self.nearest))
        object.__setattr__(self, "restarts", _whole(self.restarts, "restarts", 1))
        object.__setattr__(self, "seed", _seed_int(self.seed))
        object.__setattr__(self, "locked", _locked_hex(self.locked))
        _choice(self.refine, "refinement", REFINES)
        _choice(self.weighting, "weighting", WEIGHTINGS)
        _choice(self.target_stat, "target statistic", TARGET_STATS)
        _choice(self.kind, "image kind", ("auto", "artwork", "continuous tone"))
        for name in ("warm", "threads", "for_dither", "compiled_always"):
            if not isinstance(getattr(self, name), bool):
                raise ValueError(f"{name} must be True or False, got {getattr(self, name)!r}")
        if self.target is not None:
            if isinstance(self.target, bool) or not isinstance(self.target, (int, float)) or not self.target > 0 \
                    or self.target == float("inf"):
                raise ValueError(f"a ΔE00 target must be a positive number, got {self.target!r}")
            object.__setattr__(self, "target", float(self.target))
        if self.rule == "target" and self.target is None:
            raise ValueError("the target rule needs a positive ΔE00 target, got None")

    @classmethod
    def of(cls, settings: FitSettings | None = None, **options: Any) -> FitSettings:
        """``settings`` (default: the defaults) with ``options`` replacing its fields.

        Raises
        ------
        TypeError
            An option that is not a field; the message names it and lists the fields.
        ValueError
            A bad value (see :class:`FitSettings`).
        """
        options = renamed_keywords(options, "FitSettings.of", ("init", "metric"))
        names = [f.name for f in dataclasses.fields(cls)]
        unknown = sorted(set(options) - set(names))
        if unknown:
            raise TypeError(f"unknown fit option{'s' if len(unknown) > 1 else ''} {', '.join(map(repr, unknown))}; "
                            f"the options are: {', '.join(names)}")
        if settings is None:
            return cls(**options)
        if not isinstance(settings, cls):
            raise TypeError(f"settings must be a FitSettings, got {type(settings).__name__}")
        return dataclasses.replace(settings, **options) if options else settings

    @classmethod
    def from_record(cls, record: FitRecord) -> FitSettings:
        """The settings a palette's fit record (:class:`quantize.palette.FitRecord`) was made with."""
        keep = {f.name: getattr(record, f.name) for f in dataclasses.fields(cls)
                if getattr(record, f.name, None) is not None}
        if keep.get("rule") == "fixed":  # one size: no rule was applied
            del keep["rule"]
        return cls(**keep)

    @property
    def locked_rgb8(self):
        """The locked colours as 8-bit sRGB, shape (m, 3)."""
        from quantize.palette import parse_locked

        return parse_locked(list(self.locked), len(self.locked))

    def check_sizes(self, ks: Sequence[int]) -> None:
        """Raise ValueError if the locked colours do not fit the smallest size of ``ks``."""
        if len(self.locked) > min(ks):
            raise ValueError(f"{len(self.locked)} locked colours do not fit in a palette of {min(ks)}")


def _choice(value, what: str, valid) -> None:
    if value not in valid:
        raise ValueError(f"unknown {what} {value!r}; choose one of: {', '.join(valid)}")


def _whole(value, name: str, least: int) -> int:
    import numpy as np

    ok = not isinstance(value, bool) and isinstance(value, (int, float, np.integer, np.floating))
    if not ok or value != value or value in (float("inf"), float("-inf")) or int(value) != value or value < least:
        raise ValueError(f"{name} must be a whole number of at least {least}, got {value!r}")
    return int(value)


def _seed_int(seed) -> int:
    import numpy as np

    if seed is None:
        return 0
    if isinstance(seed, np.random.Generator):
        return int(seed.integers(SEED_BOUND))
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a whole number of at least 0 or a numpy Generator, got {seed!r}")
    return int(seed)


def _locked_hex(locked) -> tuple:
    from quantize.palette import parse_locked

    rgb8 = parse_locked(locked, 10**9)
    return tuple("#{:02x}{:02x}{:02x}".format(*map(int, c)) for c in rgb8)
