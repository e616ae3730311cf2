"""The Palette object and its JSON file.

A palette is what a job keeps: the colours as they are written (8-bit sRGB),
their CIELAB values, which are locked, the space they were fitted in and the
settings of the fit.  ``Palette.apply`` maps any image onto it without
refitting.

File format (JSON, UTF-8)::

    {
      "format": "quantize.palette",
      "version": 1,
      "space": "lab",
      "colours": [
        {"hex": "#1f3a5c", "lab": [24.31, -0.52, -21.77], "locked": false, "name": null},
        ...
      ],
      "fit": {... settings and results of the fit, see FitRecord ...}
    }

``hex`` is authoritative; ``lab`` is written for people and other tools and is
checked on load (a file whose Lab disagrees with its hex by more than 0.5 ΔE00
has been edited by hand inconsistently and is refused).
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field, fields
from pathlib import Path
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any, NoReturn, Sequence

import numpy as np

from quantize.core.vocabulary import accepts_renamed, renamed_keywords
from quantize.errors import PaletteFileError

if TYPE_CHECKING:
    from quantize.core.choices import DitherName, NearestName
    from quantize.core.picture import ImageInput
    from quantize.core.sampling import ColourSample
    from quantize.io.write import PathLike
    from quantize.render.result import MappedImage

__all__ = ["Palette", "FitRecord", "FitCandidate", "parse_colour", "parse_locked", "FORMAT_NAME", "FORMAT_VERSION"]

FORMAT_NAME = "quantize.palette"
FORMAT_VERSION = 1
#: Most colours a palette file may list: the fit's own limit (quantize.fit.engine.MAX_K), so every palette
#: this package writes loads. A hostile file of millions took gigabytes to build before the cap.
MAX_PALETTE_COLOURS = 4096
#: Largest palette file read (bytes). 4096 colours and their fit record take well under 1 MB; parsing
#: JSON can take some 25 times a file's size in memory, so the cap keeps a hostile file's parse near 100 MB.
MAX_PALETTE_BYTES = 4_000_000
_HEX = re.compile(r"^#?([0-9a-fA-F]{6})\Z")  # \Z: "$" would let a trailing newline through
#: The short form needs its "#": three bare letters read more like a word than a colour.
_HEX3 = re.compile(r"^#([0-9a-fA-F]{3})\Z")
_ASCII_LOWER = str.maketrans("ABCDEFGHIJKLMNOPQRSTUVWXYZ", "abcdefghijklmnopqrstuvwxyz")
_FORMS = "sRGB hex (#rgb or #rrggbb), L,a,b nor a CSS colour name"


def parse_colour(spec: str | Sequence[float]) -> np.ndarray:
    """A colour given as sRGB hex, CIELAB or a CSS colour name.

    Parameters
    ----------
    spec : str or sequence of 3 numbers
        ``"#rrggbb"`` (the ``#`` may be left out), ``"#rgb"`` (each digit
        doubled, as CSS reads it), L*, a*, b* as a comma-separated string or
        a 3-sequence (L* 0-100), or one of the 148 named colours of CSS
        Color Module Level 4 (``"rebeccapurple"``, any letter case).

    Returns
    -------
    ndarray of shape (3,), uint8
        The 8-bit sRGB colour; Lab outside the sRGB gamut is clipped.

    Raises
    ------
    ValueError
        The text is none of these forms, or L* is outside 0-100.

    Examples
    --------
    >>> parse_colour("#fa0").tolist(), parse_colour("Teal").tolist()
    ([255, 170, 0], [0, 128, 128])
    """
    from quantize.colour.spaces import clip_to_gamut, lab_to_srgb

    if isinstance(spec, str):
        from quantize.colour.css_names import CSS_COLOURS

        text = spec.strip()
        m = _HEX3.match(text)
        if m:
            text = "#" + "".join(2 * d for d in m.group(1))
        # CSS names are ASCII case-insensitive; str.lower would also fold other scripts.
        named = CSS_COLOURS.get(text.translate(_ASCII_LOWER))
        m = _HEX.match(named or text)
        if m:
            h = m.group(1)
            return np.array([int(h[i:i + 2], 16) for i in (0, 2, 4)], dtype=np.uint8)
        parts = spec.split(",")
        try:
            lab = [float(p) for p in parts]
        except ValueError:
            lab = []
        if len(lab) != 3:
            raise ValueError(f"colour {spec!r} is neither {_FORMS}")
    else:
        try:
            lab = [float(v) for v in spec]
        except (TypeError, ValueError):
            raise ValueError(f"colour {spec!r} is neither {_FORMS}") from None
        if len(lab) != 3:
            raise ValueError(f"colour {spec!r} must have 3 components (L, a, b)")
    if not 0 <= lab[0] <= 100 or not all(np.isfinite(lab)):
        raise ValueError(f"colour {spec!r}: L* must be within 0-100")
    rgb = clip_to_gamut(lab_to_srgb(np.array(lab)))
    return np.round(rgb * 255).astype(np.uint8)


@dataclass(frozen=True)
class FitCandidate:
    """One palette size a fit considered.

    Attributes
    ----------
    k : int
        Palette size.
    inertia : float
        k-means cost: pixel-weighted sum of squared distances in the fitting
        space (its units squared).
    delta_e : Mapping
        ΔE00 ``mean``, ``median``, ``p95``, ``max`` of the refined palette.
    robust_error : float
        The ``"bic"`` rule's robust error ``R_k`` (ΔE00 squared).
    score : float
        Penalised score of the ``"bic"`` rule (lower is better).
    palette : Palette or None
        This size's palette as the fit made it, kept so that a report can
        show every size without fitting again (the review page's size
        slider).  Not written to the palette file: None in a record read
        from one.
    """

    k: int
    inertia: float
    delta_e: Mapping
    robust_error: float
    score: float
    palette: Palette | None = field(default=None, compare=False, repr=False)

    def to_dict(self) -> dict[str, Any]:
        """The row as written in a palette file's ``fit.candidates``."""
        return {"k": self.k, "inertia": self.inertia, "delta_e": dict(self.delta_e),
                "robust_error": self.robust_error, "score": self.score}


#: The ``fit`` keys every fitted palette's file has had since format version 1.
_FIT_KEYS = ("k", "rule", "reason", "k_requested", "space", "restarts", "seed", "seeding", "weighting",
             "nearest", "refine", "target", "target_stat", "images", "n_pixels", "n_distinct", "inertia", "refined",
             "delta_e", "candidates", "notes")
#: Keys of the ``fit`` object renamed since version 1 files were first written: old key -> field.
#: A file with the old key loads as if it had the new one.
_OLD_FIT_KEYS = {"init": "seeding", "metric": "nearest"}
#: Record fields that hold sequences (lists in the file, tuples in the record).
_RECORD_LISTS = ("images", "notes", "locked", "candidates", "k_requested", "lost")


@accepts_renamed("init", "metric")
@dataclass(frozen=True)
class FitRecord:
    """How a palette was fitted: the settings, what the fit saw, and why it has k colours.

    Written as the ``"fit"`` object of the palette file with one key per
    field (``extra`` merged in).  Every field is optional, so files written
    by hand or by older versions load; a field missing from the file is None
    (``Palette.fit`` itself is None for a palette that was not fitted).

    Attributes
    ----------
    k : int
        Palette size chosen.
    rule : str
        ``"bic"``, ``"target"``, or ``"fixed"`` when one size was asked for.
    reason : str
        Why the palette has ``k`` colours, for people.
    k_requested : int or tuple of (int, int)
        The size, or the inclusive range, asked for.
    space, restarts, seed, seeding, weighting, nearest, refine, target, target_stat, warm
        The settings (see :class:`quantize.fit.settings.FitSettings`);
        ``seed`` is the integer actually used, also when a Generator was given.
        ``seeding`` and ``nearest`` are named as the command line's options;
        files written before the rename hold them as ``"init"`` and
        ``"metric"``, which load as the new names (``FitRecord(init=...)``
        and ``record.init`` still work, with a DeprecationWarning).
    locked : tuple of str
        The locked colours, ``#rrggbb`` (not in files written before it was
        recorded: there the palette's locked colours say it).
    images : tuple of str, or int
        The sources pooled; a batch's shared palette records their number.
    n_pixels, n_distinct : int
        Pixels and distinct colours the fit saw.
    inertia : float
        k-means cost of the chosen size (before refinement).
    refined : str
        The refinements kept: ``"none"``, ``"robust"``, ``"median"`` or
        ``"robust+median"``.
    delta_e : Mapping
        ΔE00 statistics of the chosen palette over the distinct colours.
    candidates : tuple of FitCandidate
        Every size considered, ascending.
    notes : tuple of str
        What the user should know (few colours, merged colours, image warnings).
    kind : str
        The kind the fit was told the image is (``"auto"``: judge it).
    judged : str
        What the automatic rule took the image(s) to be: ``"artwork"`` or
        ``"continuous tone"`` (None when no judgement was made).
    kind_reason : str
        Why, in one sentence.
    lost : tuple of dict
        Flat areas of at least 0.1 % whose nearest palette colour is 10 ΔE00
        or more away: colour (``lab``), ``share`` and ``where`` (percent),
        the palette colour they became (``nearest``, ``nearest_hex``) and
        ``delta_e``.
    target_met : bool
        Whether the chosen size meets the ΔE00 target (target and automatic
        rules); None where no target applied.
    for_dither : bool
        Whether the palette was fitted for a dither that follows
        (:mod:`quantize.fit.for_dither`); None in files written before it was recorded.
    compiled_always : bool
        True where every CIEDE2000 of the fit ran on the compiled loops by
        request (a batch: ``FitSettings.compiled_always``), so that a refit
        from the file takes the same path; None otherwise.
    extra : Mapping
        Other keys of the file's ``fit`` object, kept as read (e.g. what a
        separation adds: the ink library, the snapped colours).
    """

    k: int | None = None
    rule: str | None = None
    reason: str | None = None
    k_requested: Any = None
    space: str | None = None
    restarts: int | None = None
    seed: int | None = None
    seeding: str | None = None
    weighting: str | None = None
    nearest: str | None = None
    refine: str | None = None
    target: float | None = None
    target_stat: str | None = None
    warm: bool | None = None
    locked: tuple | None = None
    images: Any = None
    n_pixels: int | None = None
    n_distinct: int | None = None
    inertia: float | None = None
    refined: str | None = None
    delta_e: Mapping | None = None
    candidates: tuple | None = None
    notes: tuple | None = None
    kind: str | None = None
    judged: str | None = None
    kind_reason: str | None = None
    lost: tuple | None = None
    target_met: bool | None = None
    for_dither: bool | None = None
    compiled_always: bool | None = None
    extra: Mapping = field(default_factory=dict)

    def __post_init__(self):
        for name in _RECORD_LISTS:
            v = getattr(self, name)
            if isinstance(v, list):
                object.__setattr__(self, name, tuple(v))
        if self.candidates is not None:
            object.__setattr__(self, "candidates", tuple(
                c if isinstance(c, FitCandidate) else _candidate(c, i) for i, c in enumerate(self.candidates)))
        if self.delta_e is not None:
            object.__setattr__(self, "delta_e", dict(self.delta_e))
        object.__setattr__(self, "extra", dict(self.extra))

    def with_extra(self, **extra) -> "FitRecord":
        """A copy with ``extra`` entries added (later stages record what they did to the palette)."""
        from dataclasses import replace

        return replace(self, extra={**self.extra, **extra})

    def to_dict(self) -> dict[str, Any]:
        """The ``fit`` object of the palette file: every field that is set, then ``extra``."""
        out: dict[str, Any] = {}
        for f in fields(self):
            v = getattr(self, f.name)
            # The keys a fit has always written are written, null or not, so files keep their shape.
            if f.name == "extra" or (v is None and (self.candidates is None or f.name not in _FIT_KEYS)):
                continue
            if f.name == "candidates":
                v = [c.to_dict() for c in v]
            elif isinstance(v, tuple):
                v = list(v)
            elif isinstance(v, Mapping):
                v = dict(v)
            out[f.name] = v
        out.update(self.extra)
        return out

    @classmethod
    def from_dict(cls, doc: Mapping, *, source: str = "<palette>") -> "FitRecord":
        """A record from a palette file's ``fit`` object; unknown keys go to ``extra``.

        Raises
        ------
        PaletteFileError
            A candidate row that is not an object with ``k`` and ``delta_e``.
        """
        names = {f.name for f in fields(cls)} - {"extra"}
        # A file written before the rename: its old keys load as the new fields (a file with both keeps
        # the new key, and the old one as read in ``extra``).
        doc = {(_OLD_FIT_KEYS[k] if k in _OLD_FIT_KEYS and _OLD_FIT_KEYS[k] not in doc else k): v
               for k, v in doc.items()}
        known = {k: v for k, v in doc.items() if k in names}
        cands = known.get("candidates")
        if cands is not None and not isinstance(cands, list):
            raise PaletteFileError(f"{source}: fit.candidates: expected a list")
        for i, c in enumerate(cands or ()):
            if not isinstance(c, dict) or "k" not in c or "delta_e" not in c:
                raise PaletteFileError(f"{source}: fit.candidates[{i}]: expected an object with k and delta_e")
        return cls(**known, extra={k: v for k, v in doc.items() if k not in names})


def _candidate(c: Mapping[str, Any], i: int) -> FitCandidate:
    if not isinstance(c, Mapping):
        raise ValueError(f"fit candidate {i}: expected a FitCandidate or a mapping, got {c!r}")
    # The row's values as given: FitRecord.from_dict checks only that k and delta_e are there, so a
    # number missing from a hand-written file is None here, as it has always been.
    row: dict[str, Any] = {key: c.get(key) for key in ("k", "inertia", "delta_e", "robust_error", "score")}
    return FitCandidate(**row)


@dataclass(frozen=True, eq=False)
class Palette:
    """A fixed set of colours to reduce images to.

    Attributes
    ----------
    rgb8 : ndarray of shape (k, 3), uint8
        The colours as written into output files.
    locked : ndarray of shape (k,), bool
        Colours that were held fixed in the fit (substrate, brand colours).
    space : str
        Perceptual space of the fit and of nearest-colour mapping.
    names : tuple of str or None
        Optional names (inks); None entries are unnamed.
    fit : FitRecord or None
        How the palette was fitted (settings, seed, candidates, why k);
        None for a palette that was not fitted.  A dict is read as the
        ``fit`` object of a palette file (:meth:`FitRecord.from_dict`).
    """

    rgb8: np.ndarray
    locked: np.ndarray
    space: str = "lab"
    names: tuple = ()
    fit: FitRecord | None = None

    def __post_init__(self):
        rgb = np.asarray(self.rgb8)
        if rgb.ndim != 2 or rgb.shape[1] != 3 or rgb.shape[0] < 1:
            raise ValueError(f"palette colours must have shape (k, 3), got {rgb.shape}")
        object.__setattr__(self, "rgb8", rgb.astype(np.uint8))
        lk = np.zeros(len(rgb), bool) if self.locked is None else np.asarray(self.locked, bool)
        if lk.shape != (len(rgb),):
            raise ValueError(f"locked flags must have shape ({len(rgb)},), got {lk.shape}")
        object.__setattr__(self, "locked", lk)
        names = tuple(self.names) if self.names else (None,) * len(rgb)
        if len(names) != len(rgb):
            raise ValueError(f"{len(names)} names for {len(rgb)} colours")
        object.__setattr__(self, "names", names)
        from quantize.colour.spaces import check_space

        object.__setattr__(self, "space", check_space(self.space))
        if isinstance(self.fit, Mapping):
            object.__setattr__(self, "fit", FitRecord.from_dict(self.fit) if self.fit else None)
        elif self.fit is not None and not isinstance(self.fit, FitRecord):
            raise ValueError(f"fit must be a FitRecord or None, got {type(self.fit).__name__}")

    def __len__(self) -> int:
        return int(self.rgb8.shape[0])

    @property
    def k(self) -> int:
        """Number of colours."""
        return len(self)

    @property
    def hex(self) -> list[str]:
        """Colours as ``#rrggbb`` strings."""
        return ["#{:02x}{:02x}{:02x}".format(*map(int, c)) for c in self.rgb8]

    @property
    def lab(self) -> np.ndarray:
        """CIELAB (D65) of the written colours, shape (k, 3)."""
        from quantize.colour.spaces import srgb8_to_space

        return srgb8_to_space(self.rgb8, "lab")

    def points(self, space: str | None = None) -> np.ndarray:
        """The written colours in ``space`` (default: the fit's space)."""
        from quantize.colour.spaces import srgb8_to_space

        return srgb8_to_space(self.rgb8, space or self.space)

    def apply(self, image: ImageInput, *, dither: DitherName = "none", nearest: NearestName | None = None,
              dither_strength: float = 1.0, serpentine: bool = True, max_pixels: int | None = None,
              sample: ColourSample | None = None, **deprecated: Any) -> MappedImage:
        """Map an image onto this palette (out-of-sample, no refit).

        The keywords are named as the command line's options (``--nearest``,
        ``--dither-strength``, ...).

        Parameters
        ----------
        image : path, Picture, PIL image or ndarray
            The image to reduce.
        dither : str, default="none"
            Dithering method; ``"none"`` maps every pixel to its nearest
            colour.
        nearest : {"ciede2000", "space", "auto"}, optional
            Nearest by CIEDE2000, or by Euclidean distance in the palette's
            space.  Default (None or ``"auto"``): CIEDE2000 without
            dithering, the space's distance with it.
        dither_strength : float, default=1.0
            Share of the dither, 0 (none) to 1 (full); ignored without dithering.
        serpentine : bool, default=True
            Error diffusion scans alternate rows backwards.
        max_pixels : int, optional
            Decompression-bomb limit when ``image`` is a path.
        sample : ColourSample, optional
            This image's colour sample, if the caller has it
            (:func:`quantize.render.mapping.map_picture`).
        **deprecated
            ``metric`` (now ``nearest``) and ``strength`` (now
            ``dither_strength``): still accepted, with a DeprecationWarning.
            Other keywords go to :func:`quantize.render.mapping.map_picture`.

        Returns
        -------
        MappedImage
            ``.indices``, ``.rgb``, ``.delta_e`` (mean, median, p95, max ΔE00)
            and ``.coverage`` (percent per colour).

        Raises
        ------
        TypeError
            An unknown keyword, or an old name given with its new one.
        """
        from quantize.render.mapping import map_picture

        for old_name, new_name, given in (("metric", "nearest", nearest is not None),
                                          ("strength", "dither_strength", dither_strength != 1.0)):
            if old_name in deprecated and given:
                raise TypeError(f"Palette.apply() got both {old_name!r} and its new name {new_name!r}; "
                                f"give {new_name!r} only")
        old = renamed_keywords(deprecated, "Palette.apply", ("metric", "strength"))
        nearest = old.pop("nearest", nearest)
        dither_strength = old.pop("dither_strength", dither_strength)
        # Anything else is map_picture's to accept or refuse.
        return map_picture(image, self, dither=dither, nearest=None if nearest == "auto" else nearest,
                           dither_strength=dither_strength, serpentine=serpentine, max_pixels=max_pixels,
                           sample=sample, **old)

    # -- JSON -------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """The JSON document as a dict."""
        from quantize.io.write import to_jsonable

        lab = self.lab
        return {
            "format": FORMAT_NAME,
            "version": FORMAT_VERSION,
            "space": self.space,
            "colours": [
                {
                    "hex": h,
                    "lab": [round(float(v), 4) for v in lab[i]],
                    "locked": bool(self.locked[i]),
                    "name": self.names[i],
                }
                for i, h in enumerate(self.hex)
            ],
            "fit": to_jsonable(self.fit.to_dict()) if self.fit is not None else {},
        }

    def save(self, path: PathLike, *, force: bool = False) -> Path:
        """Write the palette as JSON, atomically.

        Raises
        ------
        OutputError
            The file exists and ``force`` is false, or cannot be written.
        """
        from quantize.io.write import atomic_write_text

        text = json.dumps(self.to_dict(), indent=2, ensure_ascii=False) + "\n"
        atomic_write_text(path, text, force=force)
        return Path(path)

    @classmethod
    def load(cls, path: PathLike) -> "Palette":
        """Read a palette JSON file written by :meth:`save`.

        Raises
        ------
        PaletteFileError
            Missing or unreadable file, not JSON, a foreign format, a newer
            version, or a bad entry; the message names the file and the
            place.
        """
        p = Path(path)
        try:
            with open(p, "rb") as fh:
                data = fh.read(MAX_PALETTE_BYTES + 1)
            text = data.decode("utf-8")
        except FileNotFoundError:
            raise PaletteFileError(f"{p}: no such palette file") from None
        except IsADirectoryError:
            raise PaletteFileError(f"{p}: is a folder, not a palette file") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise PaletteFileError(f"{p}: cannot read palette file ({exc.__class__.__name__})") from None
        if len(data) > MAX_PALETTE_BYTES:
            raise PaletteFileError(f"{p}: larger than a palette file may be ({MAX_PALETTE_BYTES / 1e6:.0f} MB); "
                                   "not a palette")
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise PaletteFileError(f"{p}: not JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
        except RecursionError:
            raise PaletteFileError(f"{p}: not a palette (JSON nested too deeply)") from None
        except ValueError:  # a number of thousands of digits (Python's limit on integer conversion)
            raise PaletteFileError(f"{p}: not a palette (a number with thousands of digits)") from None
        return cls.from_dict(doc, source=str(p))

    @classmethod
    def from_dict(cls, doc: Mapping[str, Any], *, source: str = "<palette>") -> "Palette":
        """Build a palette from its JSON document, validating every field."""
        from quantize.colour.spaces import SPACES, delta_e_ciede2000, srgb8_to_space

        def bad(where: str, what: str) -> NoReturn:
            raise PaletteFileError(f"{source}: {where}: {what}")

        if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
            bad("format", f"not a quantize palette (expected \"format\": \"{FORMAT_NAME}\")")
        ver = doc.get("version")
        if not isinstance(ver, int) or isinstance(ver, bool) or ver < 1:
            bad("version", f"expected a positive integer, got {ver!r}")
        if ver > FORMAT_VERSION:
            bad("version", f"file is version {str(ver)[:20]}; this quantize reads up to {FORMAT_VERSION}")
        space = doc.get("space", "lab")
        if not isinstance(space, str) or space not in SPACES:
            bad("space", f"unknown space {space!r}; expected one of {', '.join(SPACES)}")
        cols = doc.get("colours")
        if not isinstance(cols, list) or not cols:
            bad("colours", "expected a non-empty list")
        if len(cols) > MAX_PALETTE_COLOURS:
            bad("colours", f"{len(cols):,} colours; a palette holds at most {MAX_PALETTE_COLOURS:,}")
        rgb, locked, names, labs = [], [], [], []
        for i, c in enumerate(cols):
            where = f"colours[{i}]"
            if not isinstance(c, dict):
                bad(where, "expected an object with 'hex'")
            h = c.get("hex")
            m = _HEX.match(h) if isinstance(h, str) else None
            if not m:
                bad(f"{where}.hex", f"expected '#rrggbb', got {h!r}")
            rgb.append([int(m.group(1)[j:j + 2], 16) for j in (0, 2, 4)])
            lk = c.get("locked", False)
            if not isinstance(lk, bool):
                bad(f"{where}.locked", f"expected true or false, got {lk!r}")
            locked.append(lk)
            nm = c.get("name")
            if nm is not None and not isinstance(nm, str):
                bad(f"{where}.name", f"expected text or null, got {nm!r}")
            names.append(nm)
            lab = c.get("lab")
            if lab is not None:
                if (not isinstance(lab, list) or len(lab) != 3
                        or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in lab)):
                    bad(f"{where}.lab", f"expected [L, a, b], got {lab!r}")
                if not all(_finite(v) for v in lab):  # Python's json reads NaN, Infinity and huge integers
                    bad(f"{where}.lab", f"expected finite numbers, got {lab!r}")
                labs.append((i, lab))
        rgb8 = np.array(rgb, dtype=np.uint8)
        if labs:
            idx = [i for i, _ in labs]
            de = np.asarray(delta_e_ciede2000(srgb8_to_space(rgb8[idx], "lab"), np.array([l for _, l in labs], float)))
            worst = int(np.argmax(de))
            if de[worst] > 0.5:
                bad(f"colours[{idx[worst]}]", f"lab {labs[worst][1]} disagrees with hex "
                    f"{cols[idx[worst]]['hex']} by ΔE00 {de[worst]:.2f}")
        if len({tuple(c) for c in rgb}) != len(rgb):
            bad("colours", "the same colour is listed twice")
        fit = doc.get("fit", {})
        if not isinstance(fit, dict):
            bad("fit", "expected an object")
        record = FitRecord.from_dict(fit, source=source) if fit else None
        return cls(rgb8=rgb8, locked=np.array(locked), space=space, names=tuple(names), fit=record)


def _finite(v) -> bool:
    try:
        return bool(np.isfinite(float(v)))
    except OverflowError:
        return False


def parse_locked(locked, k_min: int) -> np.ndarray:
    """Locked colours as 8-bit sRGB, shape (m, 3), checked against the smallest palette size.

    ``locked`` is a sequence of colour specs (see :func:`parse_colour`); one
    spec on its own (a hex string, or one L, a, b triple) counts as a
    one-colour sequence, not as a sequence of characters or numbers.

    Raises
    ------
    ValueError
        A spec that is not a colour, the same colour twice, or more locked
        colours than ``k_min``.

    Examples
    --------
    >>> parse_locked("#ffffff", 4).tolist()
    [[255, 255, 255]]
    >>> parse_locked([(100, 0, 0), "#000000"], 4).tolist()
    [[255, 255, 255], [0, 0, 0]]
    """
    if locked is None:
        locked = ()
    elif isinstance(locked, str) or (isinstance(locked, (tuple, list, np.ndarray)) and len(locked) == 3
                                     and all(isinstance(v, (int, float, np.number)) for v in locked)):
        locked = (locked,)
    rgb8 = np.array([parse_colour(c) for c in locked], dtype=np.uint8).reshape(-1, 3)
    if len({tuple(c) for c in rgb8.tolist()}) != len(rgb8):
        raise ValueError("the same locked colour is given twice")
    if len(rgb8) > k_min:
        raise ValueError(f"{len(rgb8)} locked colours do not fit in a palette of {k_min}")
    return rgb8


def palette_from_colours(colours: Sequence, *, locked=None, space: str = "lab", names=()) -> Palette:
    """A palette from colour specs (hex or Lab, see :func:`parse_colour`)."""
    rgb = np.array([parse_colour(c) for c in colours], dtype=np.uint8)
    return Palette(rgb8=rgb, locked=locked, space=space, names=tuple(names))
