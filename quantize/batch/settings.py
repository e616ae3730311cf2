"""The settings of a batch run: one frozen dataclass, checked when it is made.

Imports nothing heavy at module level, so the command line reads the choices
and defaults from here for ``--help`` without loading numpy.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from quantize.fit.settings import DEFAULT_K as _FIT_DEFAULT_K
from quantize.fit.settings import WEIGHTINGS

from .files import _check_patterns

__all__ = ["BatchSettings", "DEFAULT_K", "DEFAULT_RESTARTS", "DEFAULT_WORST", "FORMATS", "NEAREST", "WEIGHTINGS"]

#: Output file types.
FORMATS = ("png", "webp", "gif", "tif", "jpg")
#: The library's one default range, as the command line shows it.
DEFAULT_K = f"{_FIT_DEFAULT_K[0]}-{_FIT_DEFAULT_K[1]}"
#: k-means++ restarts per palette size.
DEFAULT_RESTARTS = 8
#: Worst-fitting images listed by the one-palette report.
DEFAULT_WORST = 10
#: Choices of the mapping's nearest-colour metric ("auto": by the dither, as Palette.apply).
NEAREST = ("auto", "ciede2000", "space")


@dataclass(frozen=True)
class BatchSettings:
    """How to reduce every image of a folder tree (see :func:`quantize.batch.run.run_batch`).

    Every value is checked when the settings are made (also by
    :func:`dataclasses.replace`), so a run never starts on bad settings.

    Attributes
    ----------
    include : tuple of str or None, default=None
        Glob patterns an image must match (None:
        :data:`quantize.batch.files.DEFAULT_INCLUDE`).
    exclude : tuple of str, default=()
        Glob patterns of files or folders to leave out.
    palette : path-like or Palette, optional
        Map every image onto this saved palette instead of fitting.
    shared : bool, default=False
        Fit one palette to the whole set and map every image onto it.
    shared_weighting : {"equal", "pixels"}, default="equal"
        In the shared fit, each image counts equally or by its pixel count.
    k : int or str, optional
        None: the library's default, as :func:`quantize.fit.engine.fit_palette`
        takes it (2-12; a photo under the automatic rule, up to 256).
        Palette size N, or "MIN-MAX" for the fit's rule to choose.
    fit : FitSettings, optional
        How palettes are fitted, per image or for the shared palette: the
        rule, ΔE00 target, locked colours, seeding and the rest, exactly as
        ``fit_palette`` and ``reduce`` take them (default: the defaults).
        After construction ``fit`` always holds the run's fit settings and
        ``space``, ``seed`` and ``restarts`` repeat its values (so
        :func:`dataclasses.replace` with a new ``fit`` alone keeps the old
        three: give them as None to take the new fit's; ``run_batch(settings,
        fit=...)`` does so).
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
        Space the palettes are fitted in; when given, replaces ``fit.space``.
    seed : int, default=0
        When given, replaces ``fit.seed``.
    restarts : int, default=8
        k-means++ restarts per palette size, at least 1; when given,
        replaces ``fit.restarts``.
    dither : str, default="none"
        Dithering method of the mapping (:data:`quantize.render.methods.DITHERS`).
    dither_strength : float, default=1.0
        Share of the dither, 0 to 1.
    serpentine : bool, default=True
        Error diffusion scans alternate rows backwards.
    nearest : {"auto", "ciede2000", "space"}, default="auto"
        Nearest-colour metric of the mapping (``"auto"``: CIEDE2000, or
        the space's distance when dithering); without ``fit``, also the
        fit's (``"auto"``: CIEDE2000).
    fmt : {"png", "webp", "gif", "tif", "jpg"}, default="png"
        Output file type (see :func:`quantize.io.write.save_image`).
    workers : int or None, default=None
        Worker processes (None: one per CPU core; 0: in this process).
    cluster : str or None, default=None
        Address of a ``dask.distributed`` scheduler to run the images on.
    force : bool, default=False
        Redo every image and replace existing files.
    max_pixels : int or None, default=None
        Decompression-bomb limit per image (None: the loader's).
    worst : int, default=10
        How many worst-fitting images the one-palette report lists.

    Raises
    ------
    ValueError
        A palette and ``shared`` together, an unknown weighting, space,
        dither, metric or format, ``restarts`` below 1, a strength outside
        0-1, negative ``workers`` or ``worst``, a bad ``k``, more locked
        colours than the smallest size or an empty pattern; the message
        names the value.
    TypeError
        ``fit`` that is not a FitSettings.

    Examples
    --------
    >>> BatchSettings(shared=True, k=8).mode
    'shared'
    >>> from quantize.fit.settings import FitSettings
    >>> BatchSettings(k="2-16", fit=FitSettings(rule="target", target=2.0, locked=["white"])).fit.locked
    ('#ffffff',)
    """

    include: tuple[str, ...] | None = None
    exclude: tuple[str, ...] = ()
    palette: Any = None
    shared: bool = False
    shared_weighting: str = "equal"
    k: Any = None
    space: str | None = None
    seed: int | None = None
    restarts: int | None = None
    fmt: str = "png"
    workers: int | None = None
    cluster: Any = None
    force: bool = False
    max_pixels: int | None = None
    worst: int = DEFAULT_WORST
    fit: Any = None
    dither: str = "none"
    dither_strength: float = 1.0
    serpentine: bool = True
    nearest: str | None = "auto"

    def __post_init__(self):
        from quantize.fit.engine import parse_k
        from quantize.fit.settings import FitSettings
        from quantize.render.methods import check_dither, check_strength

        if self.shared and self.palette is not None:
            raise ValueError("give either a palette file or shared=True, not both")
        if self.shared_weighting not in WEIGHTINGS:
            raise ValueError(f"shared_weighting must be one of {', '.join(WEIGHTINGS)}, "
                             f"got {self.shared_weighting!r}")
        if self.fit is not None and not isinstance(self.fit, FitSettings):
            raise TypeError(f"fit must be a FitSettings, got {type(self.fit).__name__}")
        nearest = "auto" if self.nearest is None else self.nearest
        if nearest not in NEAREST:
            raise ValueError(f"unknown nearest-colour metric {nearest!r}; choose one of: {', '.join(NEAREST)}")
        given = {n: getattr(self, n) for n in ("space", "seed", "restarts") if getattr(self, n) is not None}
        if self.fit is None and nearest != "auto":
            given["nearest"] = nearest
        # The fit's own settings check space, restarts, seed and the rest: one validator, one set of messages.
        fit = FitSettings.of(self.fit, **given)
        for name in ("fit", "space", "seed", "restarts"):  # frozen: normalised once, here
            object.__setattr__(self, name, fit if name == "fit" else getattr(fit, name))
        object.__setattr__(self, "nearest", nearest)
        object.__setattr__(self, "dither", check_dither(self.dither).name)
        object.__setattr__(self, "dither_strength", check_strength(self.dither_strength))
        if not isinstance(self.serpentine, bool):
            raise ValueError(f"serpentine must be True or False, got {self.serpentine!r}")
        if self.fmt not in FORMATS:
            raise ValueError(f"unknown output format {self.fmt!r}; choose one of: {', '.join(FORMATS)}")
        if self.workers is not None and self.workers < 0:
            raise ValueError(f"workers must be 0 (in this process) or more, got {self.workers}")
        if self.worst < 0:
            raise ValueError(f"worst must be 0 or more, got {self.worst}")
        fit.check_sizes(parse_k(_FIT_DEFAULT_K if self.k is None else self.k))
        include = None if self.include is None or not len(self.include) else _check_patterns(self.include, "include")
        object.__setattr__(self, "include", include)  # frozen: normalised once, here
        object.__setattr__(self, "exclude", _check_patterns(self.exclude, "exclude"))

    @property
    def mode(self) -> str:
        """``"shared"``, ``"palette"`` (one given palette) or ``"per-image"``."""
        return "shared" if self.shared else "palette" if self.palette is not None else "per-image"
