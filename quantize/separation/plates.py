"""Separations for screen printing: printable detail, one plate per ink.

A palette-reduced image becomes a set of 1-bit plates (films), one per printed
ink, knocked out so that no two plates print the same pixel. The substrate
(garment or paper colour) is a locked palette colour that gets no plate.

Steps of :func:`separate`:

1. **Map** every pixel to its nearest palette colour by ΔE00; then an
   anti-aliased edge pixel that blends two inks goes to the nearer of those
   two, never to a third (:mod:`quantize.separation.edges`). Dithered input
   keeps every dot (:mod:`quantize.separation.dithered`).
2. **Films at size.** Each ink's area is resampled to the film grid (the
   printed size at the film resolution, :mod:`quantize.separation.film`)
   as a coverage image; every film pixel goes to the ink of largest
   coverage. Everything below works in film pixels.
3. **Keep detail, then clean up** (:mod:`quantize.separation.cleanup`): thin
   lines on one colour are thickened to the minimum line and small elements
   grown to the minimum dot where there is room; a connected region of one
   colour (4-connected) still below that dot's area is merged whole into a
   neighbouring, larger region, of the neighbours the colour with the least
   ΔE00 from its own. The changes and their ΔE00 are reported, and what was
   dropped with its place.
4. **Report thin detail** left: parts of an ink area that a disk of the
   minimum line width does not fit (opening) and gaps narrower than it
   (closing), with their bounding boxes in pixels and millimetres.
5. **Plates**, in print order (underbase, flash, light to dark, highlight
   white unless given), each with its coverage; traps (the lighter ink
   spreads under the darker, :mod:`quantize.separation.trap`); an optional
   underbase choked inward and a highlight white
   (:mod:`quantize.separation.underbase`); guidance per film
   (:mod:`quantize.separation.guidance`); a composite preview of the plates
   printed on the substrate.

Default sizes (all "common practice, no source"; set them from the shop's
screen mesh, emulsion and ink): minimum feature 0.5 mm, minimum line
0.35 mm (about 1 pt), underbase choke 0.25 mm, 300 dpi when the image records
none, films at 600 dpi, trap 0.15 mm (from memory), registration margin 10 mm.

ΔE figures are computed from file data; they are not measurements of a print.
"""

from __future__ import annotations

import io
import json
import math
import re
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterable, Literal, Sequence, cast

import numpy as np

from quantize.core.units import MM_PER_INCH, mm_to_px, px_to_mm
from quantize.errors import OutputError, SeparationError
from quantize.io.write import PathLike, to_jsonable

from .choice import _picture, resolve_substrate
from .cleanup import CleanupReport, DetailReport, clean_small_regions, find_thin_features, keep_detail

# The default sizes live in their own module (the command line reads them
# without numpy); their names stay importable here.
from .defaults import (
    DEFAULT_CHOKE_MM,
    DEFAULT_DPI,
    DEFAULT_FILM_DPI,
    DEFAULT_HIGHLIGHT_MIN_L,
    DEFAULT_KEEP_FRACTION,
    DEFAULT_MARGIN_MM,
    DEFAULT_MIN_FEATURE_MM,
    DEFAULT_MIN_LINE_MM,
    DEFAULT_TRAP_MM,
    DEFAULT_VIEW_DISTANCE_MM,
)
from .dithered import DITHER_CHOICES, dither_handling
from .edges import SeamReport, resolve_seams
from .film import FilmGrid, film_grid, resample_indices, sample_at_artwork
from .guidance import MESH_RULE, mesh_for, mesh_for_screen, plate_guidance
from .halftone import screen_warnings
from .tonal import TONES, TonalSettings, print_error, simulate_print
from .trap import trap_plates
from .underbase import FLASH, HIGHLIGHT, UNDERBASE, BasePlan, highlight_mask, print_sequence, split_order, underbase_plan

if TYPE_CHECKING:
    from quantize.core.picture import ImageInput
    from quantize.palette import Palette

    from .inks import InkLibrary

__all__ = [
    "Plate", "Separation", "SeparationSettings", "separate", "print_order",
    "DEFAULT_MIN_FEATURE_MM", "DEFAULT_MIN_LINE_MM", "DEFAULT_CHOKE_MM", "DEFAULT_DPI", "DEFAULT_MARGIN_MM",
    "DEFAULT_FILM_DPI",
]

_MANIFEST_FORMAT = "quantize.separation.plates"
_EDGE_MAPPING = "nearest by ΔE00; edge pixels that blend two inks go to the nearer of the two"
CAUTION = ("ΔE figures are computed from file data on an assumed sRGB display; they are not a measured "
           "print. Proof physically and follow the print shop's own standards before a production run.")


#: Bounds of the settings: far beyond any real job, so that a mistyped number is refused with a message
#: instead of asking for petabytes. Name -> (lowest, highest, unit).
LIMITS = {
    "dpi": (0, 10_000, " dpi"), "film_dpi": (10, 10_000, " dpi"),
    "print_width_mm": (0, 10_000, " mm"), "print_height_mm": (0, 10_000, " mm"),
    "min_feature_mm": (0, 10, " mm"), "min_line_mm": (0, 10, " mm"), "choke_mm": (0, 10, " mm"),
    "trap_mm": (0, 10, " mm"), "keep_fraction": (0, 1, ""), "base_min_l": (0, 100, ""),
    "highlight_min_l": (0, 100, ""), "view_distance_mm": (10, 100_000, " mm"),
}
_POSITIVE = ("dpi", "print_width_mm", "print_height_mm")
#: Widest margin for marks and label, mm.
MAX_MARGIN_MM = 100.0
#: Most colours (inks and the substrate) a separation takes: a press has far fewer stations.
MAX_INKS = 64
#: Most pixels of one film (about 1.2 x 1.2 m at 600 dpi); a larger film is refused before anything is made.
MAX_FILM_PIXELS = 800_000_000


@dataclass(frozen=True, eq=False)
class Plate:
    """One film: where one ink (or the underbase) prints."""

    name: str
    index: int | None  # palette index; None for the underbase
    order: int  # 1 = printed first
    mask: np.ndarray
    coverage: float  # percent of the opaque film pixels where this ink shows (knocked out: traps not counted)
    rgb8: np.ndarray
    lab: np.ndarray
    slug: str = ""


@dataclass(frozen=True)
class SeparationSettings:
    """What a separation is asked for, and, in its manifest (``settings``), what it was made with.

    Give one to :func:`separate` (``settings=``); the fields left at their
    defaults take the defaults below. The separation's own copy records the
    values used (the artwork's resolution found, the minimum area in film
    pixels, the palette's fit record).

    Attributes
    ----------
    dpi : float or None
        The artwork's resolution: its printed size when no print size is
        given. None: the file's, else :data:`DEFAULT_DPI`.
    min_feature_mm : float, default 0.5
        Diameter of the smallest printable dot (0: no clean-up).
    min_area_px : float or None
        Area of that dot in film pixels, rounded to 3 decimals (recorded).
    min_line_mm : float, default 0.35
        Thinner lines and gaps are reported (0: not looked for).
    underbase : bool, default False
        Whether an underbase plate is made.
    choke_mm : float or None, default 0.25
        How far the underbase stays inside the print's edges; recorded as
        None without an underbase.
    order : {"given", "light to dark"}
        Where the print order came from (recorded).
    palette_fit : dict
        The palette's own record of how it was made (``Palette.fit``; recorded).
    mapping : str, default="nearest by ΔE00"
        How pixels were given inks.
    inks_from : dict or None
        How the inks were chosen, as :func:`quantize.separation.choice.choose_palette`
        reports it; None when the caller gave the palette (not listed then).
    film_dpi : float, default 600
        Resolution of the films (common practice, no source).
    print_width_mm, print_height_mm : float or None
        The printed width or height (at most one); None for both keeps the
        artwork's physical size (its pixels at ``dpi``).
    mirror : bool, default False
        Films flipped left to right (read from the emulsion side).
    negative : bool, default False
        Films clear where ink prints, black elsewhere.
    base_min_l : float, default 0
        Inks darker than this L* are left off the underbase (0: every ink
        gets one).
    highlight_white : bool, default False
        Add a highlight white plate: the areas of the inks with L* at or
        above ``highlight_min_l``, printed last.
    highlight_min_l : float, default 85
        See ``highlight_white`` (a starting point, no source).
    trap_mm : float, default 0.15
        Where two inks meet, the lighter spreads this far under the darker
        (common practice, from memory; 0: butt joins).
    trap_pairs : tuple of (str, str, float)
        Ink pairs (by name) with their own trap width in mm.
    overprint : tuple of str
        Keyline inks that overprint: the inks beside them continue under
        them, and they do not trap.
    keep_detail : bool, default True
        Before small regions are merged, thicken thin lines to
        ``min_line_mm`` and grow small elements to the minimum dot where
        there is room (:func:`quantize.separation.cleanup.keep_detail`).
    keep_fraction : float, default 0.5
        Small elements of at least this fraction of the minimum dot's area
        are grown; smaller ones are dropped whole (a starting point, no source).
    edges : bool, default True
        Give each anti-aliased edge pixel that blends two inks to one of
        those two (:func:`quantize.separation.edges.resolve_seams`).
    dithered : {"auto", "keep", "clean"}, default "auto"
        How dithered input is treated (:mod:`quantize.separation.dithered`).
    tones : {"spot", "halftone", "index"}, default "spot"
        How the inks print: flat spot areas (cleaned up, trapped), halftone
        dots of each ink's share, or index pixels
        (:mod:`quantize.separation.tonal`).
    tonal : TonalSettings
        Screens and index resolution of halftone and index plates.
    view_distance_mm : float, default 1000
        Viewing distance of the perceived error of the simulated print
        (a stated assumption, no source).
    """

    dpi: float | None = None
    min_feature_mm: float = DEFAULT_MIN_FEATURE_MM
    min_area_px: float | None = None
    min_line_mm: float = DEFAULT_MIN_LINE_MM
    underbase: bool = False
    choke_mm: float | None = DEFAULT_CHOKE_MM
    order: str = "light to dark"
    palette_fit: dict = field(default_factory=dict)
    mapping: str = "nearest by ΔE00"
    inks_from: dict | None = None
    film_dpi: float = DEFAULT_FILM_DPI
    print_width_mm: float | None = None
    print_height_mm: float | None = None
    mirror: bool = False
    negative: bool = False
    base_min_l: float = 0.0
    highlight_white: bool = False
    highlight_min_l: float = DEFAULT_HIGHLIGHT_MIN_L
    trap_mm: float = DEFAULT_TRAP_MM
    trap_pairs: tuple = ()
    overprint: tuple = ()
    keep_detail: bool = True
    keep_fraction: float = DEFAULT_KEEP_FRACTION
    edges: bool = True
    dithered: str = "auto"
    tones: str = "spot"
    tonal: TonalSettings = field(default_factory=TonalSettings)
    view_distance_mm: float = DEFAULT_VIEW_DISTANCE_MM

    def to_dict(self) -> dict:
        """The settings as the manifest lists them."""
        doc = {"dpi": self.dpi, "min_feature_mm": self.min_feature_mm, "min_area_px": self.min_area_px,
               "min_line_mm": self.min_line_mm, "underbase": self.underbase, "choke_mm": self.choke_mm,
               "order": self.order, "mapping": self.mapping, "palette_fit": self.palette_fit}
        if self.inks_from is not None:
            doc["inks_from"] = self.inks_from
        skip = set(doc) | {"inks_from"}
        doc.update({f.name: _plain(getattr(self, f.name)) for f in fields(self) if f.name not in skip})
        return doc


def _plain(v):
    """Tuples (of tuples) as lists and settings objects as dicts, for JSON."""
    if isinstance(v, TonalSettings):
        return {f.name: _plain(getattr(v, f.name)) for f in fields(v)}
    return [_plain(x) for x in v] if isinstance(v, tuple) else v


@dataclass(frozen=True, eq=False)
class Separation:
    """The result of :func:`separate`: plates and everything the manifest lists.

    Attributes
    ----------
    indices : ndarray of shape (H, W)
        Palette index of every film pixel after the clean-up (where nothing
        prints, see ``alpha``, the substrate's or 0).
    palette : Palette
        The inks and the substrate (named "substrate" when it had no name).
    substrate : int or None
        Palette index of the substrate (no plate), or None.
    plates : tuple of Plate
        The ink plates in print order.
    underbase : Plate or None
    dpi : float
        The films' resolution.
    alpha : ndarray of shape (H, W) or None
        Where the films print (255) or not (0), when the input had an alpha channel.
    source : str
    cleanup : CleanupReport or None
        What merging the regions too small to print changed (None for
        halftone and index plates: their dots are kept as screened).
    thin : list of dict
        Thin lines and gaps, largest first (at most 200); see
        :func:`quantize.separation.cleanup.find_thin_features`.
    thin_summary : dict
        ``lines``, ``gaps`` (counts over all plates), ``width_px``, ``width_mm``.
    delta_e : dict
        ΔE00 statistics of the source pixels against the cleaned image.
    settings : SeparationSettings
    notes : tuple of str
    substrate_coverage : float
        Percent of the opaque pixels left as substrate (0 without one).
    edges : SeamReport or None
        Edge pixels given to one of the two inks they blend; None when that
        step was off.
    substrate_from : str
        Where the substrate came from: "given", or the sentence that says
        how it was inferred.
    measured_lab : tuple
        Per palette colour, the ink's measured CIELAB (D65, adapted from the
        ink library's illuminant) or None (not a library ink); empty when no
        library was used. See :meth:`with_measured`.
    dither : dict or None
        Whether the input looked dithered and its dots were kept
        (:func:`quantize.separation.dithered.dither_handling`).
    film : FilmGrid or None
        The film grid and the printed size.
    art_shape : (int, int) or None
        The artwork's height and width in pixels.
    art_dpi : float or None
        The artwork's resolution used.
    highlight : Plate or None
        The highlight white, printed last.
    sequence : tuple of str
        The print sequence: film names and "flash" steps.
    base_plan : BasePlan or None
        What the underbase left out (islands, areas too thin to carry one).
    traps : tuple of dict
        Every trapped join (``lighter``, ``darker``, ``width_mm``,
        ``pixels`` added) and keyline fill (``overprint``, ``under``).
    detail : DetailReport or None
        Thin lines thickened and small elements grown before the clean-up
        merged the rest (None when ``keep_detail`` is off).
    guidance : dict or None
        Film name -> smallest dot and line, area in cm² and a mesh
        suggestion, measured on the film
        (:func:`quantize.separation.guidance.plate_guidance`).
    perceived : dict or None
        Plain and perceived (S-CIELAB filtered) ΔE00 of the simulated print
        against the artwork at ``settings.view_distance_mm``
        (:func:`quantize.separation.tonal.print_error`).
    preview : ndarray of shape (h, w, 3) or None
        The simulated print of halftone and index plates on the artwork's
        grid, 8-bit sRGB (written as the composite); None for spot plates.
    tonal : dict or None
        Halftone or index plates: ``tones``, and per film name its screen
        (``lpi``, ``angle``, ``dot_shape``, ``min_dot_mm``) or index pixel.
    """

    indices: np.ndarray
    palette: Palette
    substrate: int | None
    plates: tuple
    underbase: Plate | None
    dpi: float
    alpha: np.ndarray | None
    source: str
    cleanup: CleanupReport | None
    thin: list
    thin_summary: dict
    delta_e: dict
    settings: SeparationSettings
    notes: tuple = ()
    substrate_coverage: float = 0.0
    edges: SeamReport | None = None
    substrate_from: str = "given"
    measured_lab: tuple = ()
    dither: dict | None = None
    film: FilmGrid | None = None
    art_shape: tuple | None = None
    art_dpi: float | None = None
    highlight: Plate | None = None
    sequence: tuple = ()
    base_plan: BasePlan | None = None
    traps: tuple = ()
    detail: DetailReport | None = None
    guidance: dict | None = None
    perceived: dict | None = None
    preview: np.ndarray | None = None
    tonal: dict | None = None

    @property
    def shape(self) -> tuple[int, int]:
        return self.indices.shape

    @property
    def rgb(self) -> np.ndarray:
        """The cleaned, reduced image as 8-bit sRGB."""
        return self.palette.rgb8[self.indices]

    def with_measured(self, library: InkLibrary) -> Separation:
        """This separation with each library ink's measured Lab recorded (matched by name).

        The preview colours are the inks' nearest sRGB colours; the manifest
        lists both and the ΔE00 between them, because an ink outside sRGB
        prints unlike its preview.
        """
        out = []
        for nm in self.palette.names:
            j = library.find(nm) if nm else None
            out.append(None if j is None else np.asarray(library.inks[j].lab, np.float64))
        return replace(self, measured_lab=tuple(out))

    def coverage(self) -> dict[str, float]:
        """Percent of the artwork per plate plus the substrate; sums to 100."""
        out = {p.name: p.coverage for p in self.plates}
        if self.substrate is not None:
            out[_ink_name(self.palette, self.substrate)] = self.substrate_coverage
        return out

    def composite_indices(self) -> np.ndarray:
        """Palette indices of the plates printed in order on the substrate."""
        base = self.substrate if self.substrate is not None else 0
        comp = np.full(self.shape, base, dtype=self.indices.dtype)
        for p in self.plates:
            comp[p.mask] = p.index
        return comp

    def manifest(self, files: dict | None = None, *, composite: str | None = None, margin_px: int = 0,
                 films_pdf: str | None = None) -> dict:
        """The manifest document (JSON-ready).

        ``files`` maps each plate's name to its file names; ``composite`` is
        the preview's file name, ``margin_px`` the width of the marks margin
        and ``films_pdf`` the file name of the PDF of all films.
        """
        from quantize.colour.spaces import srgb8_to_space

        files = files or {}
        pal = self.palette
        inks = []
        for i in range(pal.k):
            inks.append({"index": i, "name": _ink_name(pal, i), "hex": pal.hex[i],
                         "lab": [round(float(v), 3) for v in pal.lab[i]],
                         "role": "substrate" if i == self.substrate else "ink", **self._measured_doc(i)})

        screens = (self.tonal or {}).get("plates", {})

        def plate_doc(p: Plate) -> dict:
            return {"name": p.name, "order": p.order, "palette_index": p.index, "hex": _hex(p.rgb8),
                    "lab": [round(float(v), 3) for v in srgb8_to_space(p.rgb8, "lab")],
                    "coverage_percent": round(p.coverage, 4), "files": files.get(p.name, []),
                    **({"screen": screens[p.name]} if p.name in screens else {}),
                    **(self._measured_doc(p.index) if p.index is not None else {})}

        h, w = self.shape
        doc = {
            "format": _MANIFEST_FORMAT,
            "version": 1,
            "source": self.source,
            "size_px": [w, h],
            "dpi": self.dpi,
            "size_mm": [round(px_to_mm(w, self.dpi), 3), round(px_to_mm(h, self.dpi), 3)],
            "film": self.film.to_dict() if self.film is not None else None,
            "artwork": None if self.art_shape is None else {
                "size_px": [self.art_shape[1], self.art_shape[0]], "dpi": self.art_dpi},
            "substrate": None if self.substrate is None else {
                "name": _ink_name(pal, self.substrate), "hex": pal.hex[self.substrate],
                "coverage_percent": round(self.substrate_coverage, 4), "from": self.substrate_from},
            "inks": inks,
            "print_order": [p.name for p in self.films()],
            "print_sequence": self.sequence_doc(),
            "flash_steps": sum(1 for step in self.sequence if step == FLASH),
            "plates": [plate_doc(p) for p in self.plates],
            "underbase": plate_doc(self.underbase) if self.underbase else None,
            "underbase_report": self.base_plan.to_dict() if self.base_plan is not None else None,
            "highlight_white": plate_doc(self.highlight) if self.highlight else None,
            "traps": list(self.traps),
            "detail": None if self.detail is None else _detail_doc(self.detail, self.palette, self.dpi),
            "guidance": None if self.guidance is None else {
                "films": self.guidance, "mesh_rule": MESH_RULE,
                "caution": "a starting point measured on the films; the shop's screens, emulsion, inks and a "
                           "physical proof decide"},
            "coverage_percent": {k: round(v, 4) for k, v in self.coverage().items()},
            "delta_e": self.delta_e,
            "tones": self.settings.tones,
            "perceived": self.perceived,
            "tonal": None if self.tonal is None else {k: v for k, v in self.tonal.items() if k != "plates"},
            "edges": self._edges_doc(),
            "dither": self.dither,
            "cleanup": None if self.cleanup is None else self.cleanup.to_dict(),
            "thin_features": {"summary": self.thin_summary, "items": self.thin},
            "settings": self.settings.to_dict(),
            "composite": composite,
            "films_pdf": films_pdf,
            "margin_px": margin_px,
            "notes": list(self.notes),
            "caution": CAUTION,
        }
        return to_jsonable(doc)

    def _edges_doc(self) -> dict | None:
        """The edge step's report, with the inks it took pixels from named."""
        if self.edges is None:
            return None
        doc = self.edges.to_dict()
        doc["taken_from"] = {_ink_name(self.palette, int(i)): n for i, n in doc["taken_from"].items()}
        return doc

    def _measured_doc(self, i: int) -> dict:
        """``lab_measured`` and its ΔE00 to the preview's Lab, for a library ink; else nothing."""
        from quantize.colour.spaces import delta_e_ciede2000

        if i >= len(self.measured_lab) or self.measured_lab[i] is None:
            return {}
        m = self.measured_lab[i]
        return {"lab_measured": [round(float(v), 3) for v in m],
                "delta_e_preview_to_measured": round(float(delta_e_ciede2000(self.palette.lab[i], m)), 3)}

    def write(self, folder: PathLike, *, force: bool = False, png: bool = False, marks: bool = False,
              margin_mm: float = DEFAULT_MARGIN_MM, stem: str | None = None, inputs: Iterable[PathLike] = (),
              pdf: bool = True,
              job: str | None = None, date: str | None = None) -> dict:
        """Write the films (1-bit TIFF, optionally PNG), a PDF of them all, the preview and the manifest.

        Every file is written atomically; existing files are checked before
        anything is written, so without ``force`` either the whole set is
        written or nothing is. Films are mirrored or negative as the
        settings ask.

        Parameters
        ----------
        folder : path
            Created if missing.
        force : bool
            Replace existing files.
        png : bool
            Also write each plate as a 1-bit PNG.
        marks : bool
            Add a margin with registration marks and a label (ink name,
            print order, job, date) around the artwork on every TIFF/PNG film.
        margin_mm : float
            Width of that margin; the PDF pages always have it.
        stem : str, optional
            Prefix of the file names (default: the source file's stem).
        inputs : sequence of path
            Files never to overwrite.
        pdf : bool, default True
            Also write ``{stem}-films.pdf``: one page per film at its exact
            physical size (the film plus the margin), with marks and label.
        job : str, optional
            Job name on the labels (default: ``stem``).
        date : str, optional
            Date on the labels (default: today, ISO 8601).

        Returns
        -------
        dict
            ``manifest`` (path), ``composite`` (path), ``plates`` (name -> paths),
            ``pdf`` (path or None).

        Raises
        ------
        OutputError
            A file exists without ``force``, or cannot be written.
        SeparationError
            A margin that is not a positive, finite size.
        """
        import datetime

        from quantize.io.write import publish_together

        if (marks or pdf) and not (isinstance(margin_mm, (int, float)) and math.isfinite(margin_mm)
                                   and 0 < margin_mm <= MAX_MARGIN_MM):
            raise SeparationError(f"margin_mm must be above 0 and at most {MAX_MARGIN_MM:g} mm, got {margin_mm!r}")
        out = Path(folder)
        if out.exists() and not out.is_dir():
            raise OutputError(f"{out}: exists and is not a folder")
        if stem is None:
            stem = "art" if self.source.startswith("<") else _slug(Path(self.source).stem)
        job = job or stem
        date = date or datetime.date.today().isoformat()
        every = self.films()
        plan = {}
        for p in every:
            base = f"{stem}-{p.order:02d}-{p.slug}"
            plan[p.name] = [out / f"{base}.tif"] + ([out / f"{base}.png"] if png else [])
        composite = out / f"{stem}-composite.png"
        manifest = out / f"{stem}-manifest.json"
        pdf_path = out / f"{stem}-films.pdf" if pdf else None
        targets = [t for ts in plan.values() for t in ts] + [composite, manifest]
        if pdf_path is not None:
            targets.append(pdf_path)
        if not force:
            for t in targets:
                if t.exists():
                    raise OutputError(f"{t}: already exists; not replaced without force")
        out.mkdir(parents=True, exist_ok=True)
        with publish_together():  # every film, the PDF, the preview and the manifest land together, or none
            return self._write_files(out, plan, composite, manifest, pdf_path, force=force, marks=marks,
                                     margin_mm=margin_mm, inputs=inputs, pdf=pdf, job=job, date=date)

    def _write_files(self, out, plan, composite, manifest, pdf_path, *, force, marks, margin_mm, inputs, pdf, job,
                     date) -> dict:
        """The files of :meth:`write`, each written atomically (published together by the caller)."""
        from quantize.io.write import atomic_write_bytes, atomic_write_text, save_image

        from .filmfiles import FilmPage, film_image, pdf_bytes

        every = self.films()
        margin_px = int(round(mm_to_px(margin_mm, self.dpi)))
        margin = margin_px if marks else 0
        total = len(every)
        st = self.settings
        pages = []
        for p in every:
            label = f"{p.name} | {p.order}/{total} | {job} | {date}"
            img = film_image(p.mask, FilmPage(margin, label if marks else None, st.mirror, st.negative))
            for t in plan[p.name]:
                fmt = "TIFF" if t.suffix == ".tif" else "PNG"
                buf = io.BytesIO()
                opts = {"compression": "group4"} if fmt == "TIFF" else {"optimize": True}
                img.save(buf, format=fmt, dpi=(self.dpi, self.dpi), **opts)
                atomic_write_bytes(t, buf.getvalue(), force=force, inputs=inputs)
            if pdf:
                pages.append(film_image(p.mask, FilmPage(margin_px, label, st.mirror, st.negative)))
        if pdf and pages:
            atomic_write_bytes(pdf_path, pdf_bytes(pages, self.dpi, title=f"{job}: films"),
                               force=force, inputs=inputs)
        if self.preview is None:
            save_image(composite, self.composite_indices(), self.palette.rgb8, alpha=self.alpha,
                       dpi=(self.dpi, self.dpi), force=force, inputs=inputs)
        else:  # the simulated print of dots or index pixels, on the artwork's grid
            from PIL import Image

            buf = io.BytesIO()
            pdpi = self.perceived["dpi"] if self.perceived else self.dpi
            Image.fromarray(self.preview, "RGB").save(buf, format="PNG", dpi=(pdpi, pdpi), optimize=True)
            atomic_write_bytes(composite, buf.getvalue(), force=force, inputs=inputs)
        files = {name: [t.name for t in ts] for name, ts in plan.items()}
        doc = self.manifest(files, composite=composite.name, margin_px=margin,
                            films_pdf=pdf_path.name if pdf and pages else None)
        atomic_write_text(manifest, json.dumps(doc, indent=2, ensure_ascii=False) + "\n",
                          force=force, inputs=inputs)
        return {"manifest": manifest, "composite": composite, "plates": plan,
                "pdf": pdf_path if pdf and pages else None}

    def films(self) -> list[Plate]:
        """Every film in print order: the underbase, the inks, the highlight white."""
        extra = [p for p in (self.underbase, self.highlight) if p is not None]
        return sorted(extra + list(self.plates), key=lambda p: p.order)

    def sequence_doc(self) -> list[dict]:
        """The print sequence as the manifest lists it: one step per film or flash."""
        return [{"step": i, "flash": True} if name == FLASH else {"step": i, "film": name}
                for i, name in enumerate(self.sequence, start=1)]


def _hex(rgb8) -> str:
    return "#{:02x}{:02x}{:02x}".format(*map(int, rgb8))


def _ink_name(palette, i: int) -> str:
    return palette.names[i] or f"ink {palette.hex[i]}"


def _slug(name: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-").lower()
    return s or "ink"


def print_order(palette, printed: Sequence[int], order: Sequence | None = None) -> list[int]:
    """Palette indices of the printed inks in print order.

    Light to dark (descending L*) unless ``order`` lists every printed ink,
    by name or palette index.

    Raises
    ------
    SeparationError
        ``order`` names an unknown ink, repeats one, or leaves one out.

    Examples
    --------
    >>> from quantize.palette import Palette
    >>> pal = Palette(np.array([[20, 20, 20], [250, 220, 0]], np.uint8), None)
    >>> print_order(pal, [0, 1])
    [1, 0]
    """
    printed = [int(i) for i in printed]
    if order is None:
        lab = palette.lab
        return sorted(printed, key=lambda i: (-lab[i, 0], i))
    names = {_ink_name(palette, i).casefold(): i for i in printed}
    names.update({palette.hex[i]: i for i in printed})
    out = []
    i: int | None
    for item in order:
        if isinstance(item, (int, np.integer)) and not isinstance(item, bool):
            i = int(item)
        else:
            i = names.get(str(item).strip().casefold())
        if i is None or i not in printed:
            raise SeparationError(f"print order: {item!r} is not a printed ink; printed inks are "
                                  + ", ".join(_ink_name(palette, j) for j in printed))
        if i in out:
            raise SeparationError(f"print order: {item!r} is listed twice")
        out.append(i)
    missing = [_ink_name(palette, i) for i in printed if i not in out]
    if missing:
        raise SeparationError(f"print order leaves out {', '.join(missing)}; list every printed ink")
    return out


def separate(image: ImageInput, palette: Palette, *, substrate: int | str | Sequence[float] | None = None,
             dpi: float | None = None, min_feature_mm: float | None = None, min_line_mm: float | None = None,
             underbase: bool | None = None, choke_mm: float | None = None,
             order: Sequence[str | int] | None = None, max_pixels: int | None = None, edges: bool | None = None,
             dithered: Literal["auto", "keep", "clean"] | None = None,
             tones: Literal["spot", "halftone", "index"] | None = None,
             settings: SeparationSettings | None = None) -> Separation:
    """Separate an image into one knocked-out 1-bit film per printed ink, at print size.

    Parameters
    ----------
    image : path, Picture, PIL image or ndarray
    palette : Palette
        The inks and the substrate.
    substrate : int, str or colour, optional
        The substrate: a palette index, a palette colour's name, a colour
        (added, locked, when the palette lacks it), or ``"none"`` (every
        colour prints). Default: inferred and noted
        (:func:`quantize.separation.choice.resolve_substrate`: the palette's
        locked colour, else the colour of the image border), or refused.
    dpi : float, optional
        The artwork's resolution (default the file's, else 300): it sets the
        printed size only when no print size is given, and a value that
        differs from the file's is reported with the size it gives.
    min_feature_mm : float, default 0.5
        Diameter of the smallest printable dot; regions of smaller area are
        merged (0 turns the clean-up off).
    min_line_mm : float, default 0.35
        Thinner lines and knock-out gaps are reported (0 turns it off).
    underbase : bool, default False
        Add a white underbase plate, printed first.
    choke_mm : float, default 0.25
        How far the underbase stays inside the edges of the print.
    order : sequence of str or int, optional
        Print order of the inks; default light to dark.
    max_pixels : int, optional
        Decompression-bomb limit when ``image`` is a path.
    edges : bool, default True
        Give each anti-aliased edge pixel that blends two inks to one of
        those two (:func:`quantize.separation.edges.resolve_seams`), so no
        plate gets a hairline of a third ink along an edge.
    dithered : {"auto", "keep", "clean"}, default "auto"
        Dithered input (:mod:`quantize.separation.dithered`): "auto" keeps
        every dot of an image that looks dithered (no edge step, no
        clean-up; noted), "keep" does so always, "clean" treats it as flat art.
    tones : {"spot", "halftone", "index"}, default "spot"
        Flat spot plates, or tonal plates: halftone dots of each ink's share
        of the colour, or index pixels (:mod:`quantize.separation.tonal`;
        screens and index resolution in ``settings.tonal``). Tonal plates
        need a substrate to mix on, and get no clean-up, trap or highlight
        white; an underbase under them is solid and choked.
    settings : SeparationSettings, optional
        Every other option (film resolution, print size, mirror, negative);
        the keywords above, when given, take precedence over its fields.

    Returns
    -------
    Separation
        Films on the film grid: ``settings.film_dpi``, printed at the size
        asked for (``Separation.film``).

    Raises
    ------
    SeparationError
        A negative size, a minimum feature size that would erase the image,
        or a bad print order or substrate.
    ImageReadError
        The image cannot be read.

    Notes
    -----
    Each ink's area is resampled to the film grid as a coverage image and
    every film pixel goes to the ink of largest coverage
    (:func:`quantize.separation.film.resample_indices`); the clean-up and
    everything after it work in film pixels, sizes in mm at the film
    resolution.

    References
    ----------
    .. [1] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Res. Appl. 30(1), 21-30, 2005.
    .. [2] J. Serra, *Image Analysis and Mathematical Morphology*, Academic
       Press, 1982 (opening, closing, erosion).

    Examples
    --------
    >>> from quantize.palette import Palette
    >>> img = np.full((40, 40, 3), 255, np.uint8); img[10:30, 10:30] = (200, 16, 46)
    >>> pal = Palette(np.array([[255, 255, 255], [200, 16, 46]], np.uint8), np.array([True, False]))
    >>> sep = separate(img, pal, dpi=300)
    >>> [(p.name, round(p.coverage, 2)) for p in sep.plates], sep.shape
    ([('ink #c8102e', 25.0)], (80, 80))
    """
    from quantize.core.sampling import sample_picture
    from quantize.render.mapping import map_picture

    given: dict[str, Any] = {"dpi": dpi, "min_feature_mm": min_feature_mm, "min_line_mm": min_line_mm, "underbase": underbase,
             "choke_mm": choke_mm, "edges": edges, "dithered": dithered, "tones": tones}
    st = replace(settings or SeparationSettings(), **{k: v for k, v in given.items() if v is not None})
    _check_settings(st)
    if not hasattr(palette, "rgb8"):
        raise SeparationError(f"palette must be a Palette, got {type(palette).__name__}")
    if palette.k > MAX_INKS:
        raise SeparationError(f"a separation takes at most {MAX_INKS} colours (inks and the substrate); the "
                              f"palette has {palette.k}")
    pic = _picture(image, max_pixels)
    notes = [w if w.startswith(f"{pic.source}: ") else f"{pic.source}: {w}" for w in pic.warnings]
    palette, sub, said = _with_named_substrate(pic, palette, substrate, notes)
    art_dpi = _resolve_dpi(pic, st.dpi, notes)
    grid = _film_grid(pic, art_dpi, st, notes)
    if st.tones != "spot":
        return _tonal_separation(pic, palette, sub, said, art_dpi, grid, st, order, notes)
    smp = sample_picture(pic)
    mapped = map_picture(pic, palette, nearest="ciede2000", sample=smp)
    dither, dither_note = dither_handling(mapped.indices, pic.opaque, st.dithered, source=pic.source)
    if dither_note:
        notes.append(dither_note)
    seams = None
    if st.edges and not dither["kept"]:
        inverse = cast(np.ndarray, smp.inverse)  # a sample of one picture (not pooled) has its inverse
        seamed, seams = resolve_seams(mapped.indices, smp.points("lab"), inverse.reshape(pic.shape),
                                      palette.lab, opaque=pic.opaque)
        mapped = replace(mapped, indices=seamed.astype(mapped.indices.dtype))
    art_idx = mapped.indices
    film_idx, film_op = resample_indices(art_idx, pic.opaque, grid.shape, fill=0 if sub is None else sub)
    # A dither's dots are deliberate: neither edge blends nor specks to merge or grow.
    clean_st = replace(st, min_feature_mm=0.0, keep_detail=False) if dither["kept"] else st
    cleaned, cleanup, detail = _clean(pic, smp, film_idx, film_op, mapped, sub, clean_st, dpi=grid.dpi, notes=notes)
    n_opaque = int(film_op.sum())
    ink_order, layout = split_order(order)
    plates = _ink_plates(cleaned, film_op, palette, sub, order=ink_order, first=1, notes=notes)
    plates, traps = _trapped(cleaned, film_op, palette, plates, st, dpi=grid.dpi, notes=notes)
    ub, base_plan = _underbase_plate(cleaned, film_op, palette, sub, plates, st, min_area_px=cleanup.min_area_px,
                                     dpi=grid.dpi, notes=notes) if st.underbase else (None, None)
    hl = _highlight_plate(cleaned, film_op, palette, plates, st, min_area_px=cleanup.min_area_px,
                          notes=notes) if st.highlight_white else None
    seq = print_sequence([p.name for p in plates], underbase=ub is not None, highlight=hl is not None,
                         layout=layout)
    plates, ub, hl = _numbered(seq, plates, ub, hl)
    thin, thin_summary = _thin_detail(plates, min_line_mm=st.min_line_mm, dpi=grid.dpi)
    st = replace(st, dpi=art_dpi, min_area_px=round(cleanup.min_area_px, 3),
                 choke_mm=st.choke_mm if st.underbase else None,
                 order="given" if order is not None else "light to dark",
                 palette_fit=palette.fit.to_dict() if palette.fit is not None else {},
                 mapping=_EDGE_MAPPING if st.edges else "nearest by ΔE00")
    sub_cov = float(100.0 * ((cleaned == sub) & film_op).sum() / n_opaque) if sub is not None else 0.0
    alpha = None if pic.alpha is None else np.where(film_op, 255, 0).astype(np.uint8)
    delta_e = cast(dict, cleanup.delta_e_after)  # _clean always sets it
    sep = Separation(indices=cleaned, palette=palette, substrate=sub, plates=tuple(plates), underbase=ub,
                      dpi=grid.dpi, alpha=alpha, source=pic.source, cleanup=cleanup, thin=thin,
                      thin_summary=thin_summary, delta_e=delta_e, settings=st,
                      notes=tuple(notes + list(mapped.notes)), substrate_coverage=sub_cov, edges=seams,
                      substrate_from=said, dither=dither, film=grid,
                      art_shape=tuple(art_idx.shape), art_dpi=art_dpi, highlight=hl, sequence=tuple(seq),
                      base_plan=base_plan, traps=tuple(traps), detail=detail,
                      guidance={p.name: plate_guidance(p.mask, grid.dpi, white=p.index is None)
                                for p in sorted([*plates, *(x for x in (ub, hl) if x)], key=lambda p: p.order)})
    # The one number that compares spot, halftone and index plates: the print as seen from a distance.
    top = sep.composite_indices().astype(np.int32)
    top[~film_op] = -1
    preview = simulate_print(top, palette.rgb8, pic.shape)
    return replace(sep, perceived=print_error(pic, preview, width_mm=grid.width_mm,
                                              distance_mm=st.view_distance_mm))


# --------------------------------------------------------------------------- the steps of separate


def _tonal_separation(pic, palette, sub, said, art_dpi, grid, st, order, notes: list) -> Separation:
    """Halftone or index plates (:mod:`quantize.separation.tonal`), with an optional solid underbase."""
    if sub is None:
        raise SeparationError(f"{pic.source}: {st.tones} plates mix the inks with the bare substrate between "
                              "them; give the substrate's colour instead of 'none'")
    ink_order, layout = split_order(order)
    ordered = print_order(palette, [i for i in range(palette.k) if i != sub], ink_order)
    if st.highlight_white:
        notes.append(f"no highlight white with {st.tones} plates: the inks' shares already set how light each "
                     "area prints")
    shape, white = grid.shape, np.array([255, 255, 255], np.uint8)
    make = _halftone_plan if st.tones == "halftone" else _index_plan
    films, printable, base_need, screens, mapping = make(pic, palette, sub, ordered, grid, st, notes)
    n_op = max(int(printable.sum()), 1)
    names = [_ink_name(palette, i) for i in ordered]
    if len({nm.casefold() for nm in names}) != len(names):
        raise SeparationError("two printed colours have the same name; plates are named after inks, so every "
                              "ink needs its own name")
    plates: list[Plate] = []
    for i, nm, sl, film in zip(ordered, names, _unique_slugs(names), films, strict=True):
        if not film.any():
            notes.append(f"no pixel prints {nm}: no plate for it")
            continue
        plates.append(Plate(name=nm, index=i, order=len(plates) + 1, mask=film,
                            coverage=float(100.0 * film.sum() / n_op), rgb8=palette.rgb8[i], lab=palette.lab[i],
                            slug=sl))
    d_px = mm_to_px(st.min_feature_mm, grid.dpi)
    min_area = math.pi * d_px * d_px / 4.0
    ub = base_plan = None
    if base_need is not None:
        base_plan = underbase_plan(base_need, choke_px=mm_to_px(st.choke_mm, grid.dpi), min_area_px=min_area,
                                   dpi=grid.dpi)
        ub = _white_plate(UNDERBASE, base_plan.mask, n_op)
    seq = print_sequence([p.name for p in plates], underbase=ub is not None, highlight=False, layout=layout)
    plates, ub, _ = _numbered(seq, plates, ub, None)
    # What shows at every film pixel: the last ink printed there, else the underbase, else the substrate.
    top = np.zeros(shape, np.int16)
    top[~printable] = -1
    if ub is not None:
        top[ub.mask] = 1
    for j, p in enumerate(plates):
        top[p.mask] = 2 + j
    colours = np.vstack([palette.rgb8[sub], white] + [p.rgb8 for p in plates]).astype(np.uint8)
    preview = simulate_print(top, colours, pic.shape)
    perceived = print_error(pic, preview, width_mm=grid.width_mm, distance_mm=st.view_distance_mm)
    lut = np.array([sub, sub] + [p.index for p in plates], dtype=np.int64)
    indices = lut[np.maximum(top, 0)].astype(np.uint8 if palette.k <= 256 else np.uint16)
    st = replace(st, dpi=art_dpi, min_area_px=round(min_area, 3), choke_mm=st.choke_mm if st.underbase else None,
                 order="given" if order is not None else "light to dark",
                 palette_fit=palette.fit.to_dict() if palette.fit is not None else {}, mapping=mapping)
    px_cm = MM_PER_INCH / 10.0 / grid.dpi
    guidance = {p.name: _tonal_guidance(p, screens[p.name], px_cm) for p in plates}
    if ub is not None:
        guidance[ub.name] = plate_guidance(ub.mask, grid.dpi, white=True)
    alpha = None if pic.alpha is None else np.where(printable, 255, 0).astype(np.uint8)
    return Separation(indices=indices, palette=palette, substrate=sub, plates=tuple(plates), underbase=ub,
                      dpi=grid.dpi, alpha=alpha, source=pic.source, cleanup=None, thin=[],
                      thin_summary={"lines": 0, "gaps": 0, "width_px": 0, "width_mm": 0.0},
                      delta_e=perceived["plain"], settings=st, notes=tuple(notes),
                      substrate_coverage=float(100.0 * (top == 0).sum() / n_op), substrate_from=said,
                      film=grid, art_shape=tuple(pic.shape), art_dpi=art_dpi, sequence=tuple(seq),
                      base_plan=base_plan, guidance=guidance, perceived=perceived, preview=preview,
                      tonal={"tones": st.tones, "plates": screens,
                             "coverage": "each film's inked share of the print; halftone films overlap, so "
                                         "they need not sum to 100 with the substrate"})


def _halftone_plan(pic, palette, sub, ordered, grid, st, notes: list):
    """Halftone films of the inks ``ordered``: (films, printable, underbase need, screens, mapping)."""
    from quantize.core.sampling import sample_picture

    from .tonal import film_coverage, halftone_films, share_maps

    tn, shape, white = st.tonal, grid.shape, np.array([255, 255, 255], np.uint8)
    scr = tn.screens(len(ordered))
    shares, on_base = share_maps(sample_picture(pic), pic.shape, palette.rgb8[ordered], palette.rgb8[sub],
                                 base_rgb8=white if st.underbase else None, yule_nielsen=tn.yule_nielsen)
    printable = film_coverage(pic.float_alpha(), shape) if pic.alpha is not None else np.ones(shape, bool)
    films, specks = halftone_films(shares, scr, shape, grid.dpi, printable)
    base_need = film_coverage(on_base.astype(np.float32), shape) & printable if st.underbase else None
    screens = {}
    for i, sc, (dropped, filled) in zip(ordered, scr, specks, strict=True):
        screens[_ink_name(palette, i)] = {"lpi": sc.lpi, "angle": sc.angle, "dot_shape": sc.shape,
                                          "min_dot_mm": sc.min_dot_mm, "specks_removed": dropped,
                                          "holes_filled": filled}
    for w in dict.fromkeys(w for sc in scr for w in screen_warnings(sc, grid.dpi, tn.mesh)):
        notes.append(f"warning: {w}")
    mapping = ("halftone: ink shares by the Murray-Davies area law in linear light"
               + (f" (Yule-Nielsen n = {tn.yule_nielsen:g})" if tn.yule_nielsen != 1 else "")
               + ", screened at each ink's angle, overlaps by Demichel's equations")
    return films, printable, base_need, screens, mapping


def _index_plan(pic, palette, sub, ordered, grid, st, notes: list):
    """Index films of the inks ``ordered``: (films, printable, underbase need, screens, mapping)."""
    from .tonal import index_films, index_grid

    tn = st.tonal
    ih, iw = index_grid(grid.width_mm, grid.height_mm, tn.index_dpi)
    film_idx, printable = index_films(pic, palette, (ih, iw), grid.shape, dither=tn.index_dither)
    films = [(film_idx == i) & printable for i in ordered]
    light = [i for i in ordered if palette.lab[i, 0] >= st.base_min_l]
    base_need = np.isin(film_idx, light) & printable if st.underbase else None
    side = MM_PER_INCH / tn.index_dpi
    screens = {_ink_name(palette, i): {"index_dpi": tn.index_dpi, "square_mm": round(side, 4),
                                       "dither": tn.index_dither} for i in ordered}
    if abs(grid.dpi / tn.index_dpi - round(grid.dpi / tn.index_dpi)) > 1e-6:
        notes.append(f"the film's {grid.dpi:g} dpi is not a whole multiple of the index's {tn.index_dpi:g} dpi: "
                     "index squares differ by a film pixel")
    mapping = f"index: resampled to {iw} x {ih} squares of {side:.3f} mm, dithered ({tn.index_dither})"
    return films, printable, base_need, screens, mapping

def _tonal_guidance(p: Plate, screen: dict, px_cm: float) -> dict:
    """Area and mesh of a halftone or index film, from its screen (its dots are too many to measure one by one)."""
    finest = screen.get("min_dot_mm") or screen.get("square_mm")
    mesh = mesh_for_screen(screen["lpi"]) if "lpi" in screen else mesh_for(finest)
    return {"smallest_dot_mm": finest, "smallest_line_mm": None,
            "area_cm2": round(float(p.mask.sum()) * px_cm * px_cm, 3), "pieces": None, "mesh": mesh}


def _white_plate(name: str, mask: np.ndarray, n_opaque: int) -> Plate:
    """An underbase or highlight white film (no palette index), numbered later."""
    return Plate(name=name, index=None, order=0, mask=mask, coverage=float(100.0 * mask.sum() / max(n_opaque, 1)),
                 rgb8=np.array([255, 255, 255], np.uint8), lab=np.array([100.0, 0, 0]), slug=_slug(name))


def _check_settings(st: SeparationSettings) -> None:
    """Refuse a value no job can use; every size has a bound far beyond a real job's (see LIMITS)."""
    def number(v, lo, hi) -> bool:
        return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and lo <= v <= hi

    if st.tones not in TONES:
        raise SeparationError(f"tones must be one of {', '.join(TONES)}, got {st.tones!r}")
    if not isinstance(st.tonal, TonalSettings):
        raise SeparationError(f"tonal must be a TonalSettings, got {type(st.tonal).__name__}")
    st.tonal.check()
    for nm, (lo, hi, unit) in LIMITS.items():
        v = getattr(st, nm)
        if nm in _POSITIVE:
            if v is not None and not (number(v, lo, hi) and v > 0):
                raise SeparationError(f"{nm} must be above 0 and at most {hi:g}{unit}, got {v!r}")
        elif not number(v, lo, hi):
            raise SeparationError(f"{nm} must be from {lo:g} to {hi:g}{unit}, got {v!r}")
    for pair in st.trap_pairs:
        if not (isinstance(pair, (tuple, list)) and len(pair) == 3 and number(pair[2], 0, LIMITS["trap_mm"][1])):
            raise SeparationError(f"a trap pair is (ink, ink, width of 0 to {LIMITS['trap_mm'][1]:g} mm), got {pair!r}")
    if st.dithered not in DITHER_CHOICES:
        raise SeparationError(f"dithered must be one of {', '.join(DITHER_CHOICES)}, got {st.dithered!r}")


def _film_grid(pic, art_dpi: float, st: SeparationSettings, notes: list) -> FilmGrid:
    """The film grid; says where the printed size came from when it could surprise."""
    h, w = pic.opaque.shape
    grid = film_grid((h, w), art_dpi, film_dpi=st.film_dpi, print_width_mm=st.print_width_mm,
                     print_height_mm=st.print_height_mm)
    if grid.width_px * grid.height_px > MAX_FILM_PIXELS:
        raise SeparationError(f"{pic.source}: films of {grid.width_px} x {grid.height_px} px ({grid.width_mm:.0f} x "
                              f"{grid.height_mm:.0f} mm at {grid.dpi:g} dpi) exceed {MAX_FILM_PIXELS / 1e6:.0f} "
                              "million pixels; lower the film resolution or the print size")
    recorded = _recorded_dpi(pic)
    if st.print_width_mm is None and st.print_height_mm is None and recorded and abs(recorded - art_dpi) > 0.01:
        notes.append(f"the artwork's resolution was given as {art_dpi:g} dpi; the file records {recorded:g} dpi: "
                     f"it prints {grid.width_mm:.1f} x {grid.height_mm:.1f} mm, not "
                     f"{px_to_mm(w, recorded):.1f} x {px_to_mm(h, recorded):.1f} mm "
                     "(give a print width or height to set the size)")
    return grid


def _with_named_substrate(pic, palette, substrate, notes: list) -> tuple[Any, int | None, str]:
    """The palette with its substrate locked and named, the substrate's index (or None), and where it
    came from (an inferred one is also a note)."""
    palette, sub, said = resolve_substrate(pic, palette, substrate)
    if not said.startswith("given"):
        notes.append(said)
    if sub is not None and not palette.names[sub]:
        from quantize.palette import Palette

        names = list(palette.names)
        names[sub] = "substrate"
        palette = Palette(palette.rgb8, palette.locked, palette.space, tuple(names), palette.fit)
    return palette, sub, said


def _recorded_dpi(pic) -> float | None:
    if pic.dpi and pic.dpi[0] > 0:
        dpi = float(pic.dpi[0])
        # PNG stores whole pixels per metre: 300 dpi reads as 299.9994, 150 as 150.012 (up to 0.0127 off).
        if abs(dpi - round(dpi)) < 0.02:
            dpi = float(round(dpi))
        return dpi
    return None


def _resolve_dpi(pic, dpi, notes: list) -> float:
    if dpi is not None:
        return dpi
    recorded = _recorded_dpi(pic)
    if recorded:
        return recorded
    notes.append(f"the image records no resolution; {DEFAULT_DPI:g} dpi assumed")
    return DEFAULT_DPI


def _clean(pic, smp, film_idx, film_op, mapped, sub, st, *, dpi,
           notes: list) -> tuple[np.ndarray, CleanupReport, DetailReport | None]:
    """Keep the detail that can be kept, merge the rest below the minimum dot; refuse a clean-up that erases the print."""
    min_feature_mm = st.min_feature_mm
    n_opaque = int(film_op.sum())
    ink_lab = mapped.palette.lab
    d_px = mm_to_px(min_feature_mm, dpi)
    min_area = math.pi * d_px * d_px / 4.0
    if min_area > n_opaque:
        raise SeparationError(f"{pic.source}: a minimum feature of {min_feature_mm:g} mm ({min_area:.0f} px at "
                              f"{dpi:g} dpi) is larger than the whole print ({n_opaque} px): it would erase it")
    printed_before = int((film_op & (film_idx != sub)).sum()) if sub is not None else n_opaque
    inks = [int(i) for i in np.unique(film_idx[film_op]) if i != sub]
    detail = None
    if st.keep_detail:
        film_idx, detail = keep_detail(film_idx, film_op, inks, min_area=min_area,
                                       line_px=mm_to_px(st.min_line_mm, dpi), keep_fraction=st.keep_fraction)
        _detail_notes(detail, mapped.palette, dpi, min_feature_mm, notes)
    cleaned, report = clean_small_regions(film_idx, ink_lab, min_area=min_area, opaque=film_op)
    printed_after = film_op & (cleaned != sub) if sub is not None else film_op
    if printed_before and not printed_after.any():
        raise SeparationError(f"{pic.source}: a minimum feature of {min_feature_mm:g} mm ({min_area:.0f} px at "
                              f"{dpi:g} dpi) would erase the image: every printed area is smaller than that")
    lost = [_ink_name(mapped.palette, i) for i in inks if not ((cleaned == i) & film_op).any()]
    if lost:
        notes.append(f"warning: the clean-up removed every area of {', '.join(lost)} (all smaller than the "
                     f"{min_feature_mm:g} mm minimum dot): no plate for it; lower the minimum feature to keep it")
    at_art = sample_at_artwork(cleaned, pic.opaque.shape)
    report = replace(report, min_feature_mm=min_feature_mm, delta_e_before=mapped.delta_e,
                     delta_e_after=_source_delta_e(smp, at_art, ink_lab))
    return cleaned, report, detail


def _detail_notes(detail: DetailReport, palette, dpi: float, min_feature_mm: float, notes: list) -> None:
    if detail.lines_thickened or detail.elements_grown:
        notes.append(f"kept detail: {detail.lines_thickened} thin line part(s) thickened and "
                     f"{detail.elements_grown} small element(s) grown to the minimum "
                     f"({detail.pixels_added} film pixels)")
    if detail.dropped_count:
        d = detail.dropped[0]
        notes.append(f"warning: {detail.dropped_count} small element(s) below the {min_feature_mm:g} mm minimum dot "
                     f"are dropped whole (merged into a neighbour); the largest, {_ink_name(palette, d['ink'])}, at "
                     f"x {px_to_mm(d['x'], dpi):.1f} mm, y {px_to_mm(d['y'], dpi):.1f} mm "
                     f"({px_to_mm(d['w'], dpi):.1f} x {px_to_mm(d['h'], dpi):.1f} mm); the manifest lists them")


def _detail_doc(detail: DetailReport, palette, dpi: float) -> dict:
    def mm(v):
        return round(px_to_mm(v, dpi), 3)

    return {"lines_thickened": detail.lines_thickened, "elements_grown": detail.elements_grown,
            "pixels_added": detail.pixels_added, "dropped_count": detail.dropped_count,
            "dropped": [{"ink": _ink_name(palette, d["ink"]), "pixels": d["pixels"], "x_mm": mm(d["x"]),
                         "y_mm": mm(d["y"]), "w_mm": mm(d["w"]), "h_mm": mm(d["h"])} for d in detail.dropped]}


def _ink_plates(cleaned, opaque, palette, sub, *, order, first: int, notes: list) -> list[Plate]:
    """One plate per printed ink, in print order, numbered from ``first``."""
    n_opaque = int(opaque.sum())
    printed = [i for i in range(palette.k) if i != sub and ((cleaned == i) & opaque).any()]
    unused = [_ink_name(palette, i) for i in range(palette.k) if i != sub and i not in printed]
    if unused:
        notes.append(f"no pixel prints {', '.join(unused)} (after clean-up): no plate for it")
    ordered = print_order(palette, printed, order)
    names = [_ink_name(palette, i) for i in ordered]
    seen: dict[str, str] = {}
    for nm in names:
        if nm.casefold() in seen:
            raise SeparationError(f"two printed colours are both called {nm!r}; plates are named after "
                                  "inks, so every ink needs its own name")
        seen[nm.casefold()] = nm
    plates: list[Plate] = []
    for o, (i, nm, sl) in enumerate(zip(ordered, names, _unique_slugs(names), strict=True)):
        m = (cleaned == i) & opaque
        plates.append(Plate(name=nm, index=i, order=first + o, mask=m, coverage=float(100.0 * m.sum() / n_opaque),
                            rgb8=palette.rgb8[i], lab=palette.lab[i], slug=sl))
    return plates


def _trapped(cleaned, opaque, palette, plates, st, *, dpi, notes: list) -> tuple[list[Plate], list[dict]]:
    """The ink plates with their traps and keyline fills (see :mod:`quantize.separation.trap`)."""
    by_name = {p.name.casefold(): p.index for p in plates}
    by_name.update({palette.hex[p.index]: p.index for p in plates})

    def ink(name) -> int:
        i = by_name.get(str(name).strip().casefold())
        if i is None:
            raise SeparationError(f"trap: {name!r} is not a printed ink; printed inks are "
                                  + ", ".join(p.name for p in plates))
        return i

    pair_px = {}
    for a, b, mm in st.trap_pairs:
        ia, ib = ink(a), ink(b)
        if ia == ib:
            raise SeparationError(f"trap: a pair needs two inks, got {a!r} twice")
        pair_px[frozenset((ia, ib))] = mm_to_px(mm, dpi)
    keys = tuple(ink(k) for k in st.overprint)
    res = trap_plates(cleaned, opaque, [p.index for p in plates], palette.lab[:, 0], width_px=mm_to_px(st.trap_mm, dpi),
                      pair_px=pair_px, overprint=keys)
    # Coverage stays the knock-out share (the plates and the substrate sum to 100 %); the trap is on the film.
    plates = [replace(p, mask=res.masks[p.index]) for p in plates]
    name = {p.index: p.name for p in plates}
    pos = {p.index: p.order for p in plates}
    joins = []
    for j in res.joins:
        if "overprint" in j:
            joins.append({"overprint": name[j["overprint"]], "under": name[j["under"]], "pixels": j["pixels"]})
            continue
        joins.append({"lighter": name[j["lighter"]], "darker": name[j["darker"]],
                      "width_mm": round(px_to_mm(j["width_px"], dpi), 4), "pixels": j["pixels"]})
        if pos[j["lighter"]] > pos[j["darker"]]:
            notes.append(f"trap: {name[j['lighter']]} spreads under {name[j['darker']]} but prints after it, "
                         "so the spread shows on top; print the lighter ink first or set that pair's trap to 0")
    return plates, joins


def _underbase_plate(cleaned, opaque, palette, sub, plates, st, *, min_area_px, dpi,
                     notes: list) -> tuple[Plate, BasePlan]:
    """The white underbase under the inks at or above ``st.base_min_l``, choked, printed first."""
    if UNDERBASE in [p.name.casefold() for p in plates]:
        raise SeparationError("an ink is called 'underbase'; rename it, the underbase plate uses that name")
    on_base = [p.index for p in plates if palette.lab[p.index, 0] >= st.base_min_l]
    left_off = [p.name for p in plates if p.index not in on_base]
    base = np.isin(cleaned, on_base) & opaque
    plan = underbase_plan(base, choke_px=mm_to_px(st.choke_mm, dpi), min_area_px=min_area_px, dpi=dpi)
    ub = _white_plate(UNDERBASE, plan.mask, int(opaque.sum()))
    if left_off:
        notes.append(f"left off the underbase (L* below {st.base_min_l:g}): {', '.join(left_off)}")
    if plan.islands_removed:
        notes.append(f"underbase: {plan.islands_removed} piece(s) smaller than the minimum dot removed")
    if plan.bare_count:
        b = plan.bare[0]
        notes.append(f"warning: {plan.bare_count} printed area(s) are too thin to carry an underbase after the "
                     f"{st.choke_mm:g} mm choke and print without one; the largest at x {b['x_mm']:.1f} mm, "
                     f"y {b['y_mm']:.1f} mm ({b['w_mm']:.1f} x {b['h_mm']:.1f} mm); all are in the manifest")
    if sub is not None and palette.lab[sub, 0] > 60:
        notes.append("an underbase on a light substrate is usually not needed")
    return ub, plan


def _highlight_plate(cleaned, opaque, palette, plates, st, *, min_area_px, notes: list) -> Plate | None:
    """The highlight white: the lightest inks' areas, printed again in white at the end."""
    if HIGHLIGHT in [p.name.casefold() for p in plates]:
        raise SeparationError(f"an ink is called {HIGHLIGHT!r}; rename it, the highlight plate uses that name")
    mask = highlight_mask(cleaned, opaque, palette.lab[:, 0], [p.index for p in plates], min_l=st.highlight_min_l,
                          min_area_px=min_area_px)
    if not mask.any():
        notes.append(f"no ink is as light as L* {st.highlight_min_l:g}: no highlight white plate")
        return None
    return _white_plate(HIGHLIGHT, mask, int(opaque.sum()))


def _numbered(seq: list[str], plates: list[Plate], ub: Plate | None, hl: Plate | None):
    """The plates numbered by their place in the print sequence (flashes are not films)."""
    films = [name for name in seq if name != FLASH]
    pos = {name: i + 1 for i, name in enumerate(films)}
    plates = sorted((replace(p, order=pos[p.name]) for p in plates), key=lambda p: p.order)
    return (plates, replace(ub, order=pos[UNDERBASE]) if ub else None,
            replace(hl, order=pos[HIGHLIGHT]) if hl else None)


def _thin_detail(plates, *, min_line_mm, dpi) -> tuple[list, dict]:
    """Thin lines and gaps of every plate, largest first (at most 200), and their counts."""
    thin: list[dict] = []
    summary = {"lines": 0, "gaps": 0, "width_px": 0, "width_mm": 0.0}
    if min_line_mm <= 0:
        return thin, summary
    w_px = mm_to_px(min_line_mm, dpi)
    for p in plates:
        items, summ = find_thin_features(p.mask, width_px=w_px, dpi=dpi, name=p.name)
        thin.extend(items)
        summary["lines"] += summ["lines"]
        summary["gaps"] += summ["gaps"]
        summary["width_px"], summary["width_mm"] = summ["width_px"], summ["width_mm"]
    thin.sort(key=lambda d: -d["pixels"])
    return thin[:200], summary


def _unique_slugs(names: Sequence[str]) -> list[str]:
    out, seen = [], set()
    for nm in names:
        base = _slug(nm)
        s, k = base, 2
        while s in seen:
            s, k = f"{base}-{k}", k + 1
        seen.add(s)
        out.append(s)
    return out


def _source_delta_e(smp, indices, ink_lab) -> dict:
    """ΔE00 statistics between the source pixels and the cleaned-up colours."""
    from quantize.colour.spaces import delta_e_ciede2000
    from quantize.quality.stats import delta_e_stats

    inv = smp.inverse
    live = inv >= 0
    k = ink_lab.shape[0]
    key = inv[live].astype(np.int64) * k + indices.ravel()[live]
    uniq, counts = np.unique(key, return_counts=True)
    de = delta_e_ciede2000(smp.points("lab")[uniq // k], ink_lab[uniq % k])
    return delta_e_stats(de, counts)
