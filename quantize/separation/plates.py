"""Separations for screen printing: printable detail, one plate per ink.

A palette-reduced image becomes a set of 1-bit plates (films), one per printed
ink, knocked out so that no two plates print the same pixel. The substrate
(garment or paper colour) is a locked palette colour that gets no plate.

Steps of :func:`separate`:

1. **Map** every pixel to its nearest palette colour by ΔE00; then an
   anti-aliased edge pixel that blends two inks goes to the nearer of those
   two, never to a third (:mod:`quantize.separation.edges`).
2. **Clean up printable detail.** A connected region of one colour
   (4-connected, labelled by :func:`skimage.measure.label`) whose area is
   below that of a dot of the minimum feature diameter is merged into a
   neighbouring, larger region; of the neighbours, the colour with the least
   ΔE00 from the region's colour is taken (ties: the longest shared border).
   Passes repeat until no region is too small. The number of changed pixels
   and the ΔE00 the change costs are reported.
3. **Report thin detail.** Per plate, parts of the ink area that a disk of the
   minimum line width does not fit (morphological opening with a disk,
   :mod:`skimage.morphology`) are thin positive lines; gaps in the ink area
   narrower than it (closing) are thin knock-out gaps. Each is
   reported with its bounding box in pixels and millimetres. They are not
   changed: whether they hold is the printer's call.
4. **Plates**, in print order (light to dark unless given), each with its
   coverage; an optional underbase (the union of printed areas, choked
   inward); a composite preview of the plates printed on the substrate.

Default sizes (all "common practice, no source"; set them from the shop's
screen mesh, emulsion and ink): minimum feature 0.5 mm, minimum line
0.35 mm (about 1 pt), underbase choke 0.25 mm, 300 dpi when the image records
none, registration margin 10 mm.

ΔE figures are computed from file data; they are not measurements of a print.
"""

from __future__ import annotations

import io
import json
import math
import re
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from quantize.core.units import mm_to_px, px_to_mm
from quantize.errors import OutputError, SeparationError
from quantize.io.write import to_jsonable

from .choice import _picture, resolve_substrate
from .cleanup import CleanupReport, clean_small_regions, find_thin_features, underbase_mask

# The default sizes live in their own module (the command line reads them
# without numpy); their names stay importable here.
from .defaults import DEFAULT_CHOKE_MM, DEFAULT_DPI, DEFAULT_MARGIN_MM, DEFAULT_MIN_FEATURE_MM, DEFAULT_MIN_LINE_MM
from .dithered import DITHER_CHOICES, dither_handling
from .edges import SeamReport, resolve_seams

__all__ = [
    "Plate", "Separation", "SeparationSettings", "separate", "print_order",
    "DEFAULT_MIN_FEATURE_MM", "DEFAULT_MIN_LINE_MM", "DEFAULT_CHOKE_MM", "DEFAULT_DPI", "DEFAULT_MARGIN_MM",
]

_MANIFEST_FORMAT = "quantize.separation.plates"
_EDGE_MAPPING = "nearest by ΔE00; edge pixels that blend two inks go to the nearer of the two"
CAUTION = ("ΔE figures are computed from file data on an assumed sRGB display; they are not a measured "
           "print. Proof physically and follow the print shop's own standards before a production run.")


@dataclass(frozen=True, eq=False)
class Plate:
    """One film: where one ink (or the underbase) prints."""

    name: str
    index: int | None  # palette index; None for the underbase
    order: int  # 1 = printed first
    mask: np.ndarray
    coverage: float  # percent of the artwork's opaque pixels
    rgb8: np.ndarray
    lab: np.ndarray
    slug: str = ""


@dataclass(frozen=True)
class SeparationSettings:
    """The settings a separation was made with, as its manifest lists them (``settings``).

    Attributes
    ----------
    dpi : float
        Output resolution (the image's, the caller's, or :data:`DEFAULT_DPI`).
    min_feature_mm : float
        Diameter of the smallest printable dot.
    min_area_px : float
        Area of that dot in pixels at ``dpi``, rounded to 3 decimals.
    min_line_mm : float
        Thinner lines and gaps are reported (0: not looked for).
    underbase : bool
        Whether an underbase plate was made.
    choke_mm : float or None
        How far the underbase stays inside the print's edges; None without one.
    order : {"given", "light to dark"}
        Where the print order came from.
    palette_fit : dict
        The palette's own record of how it was made (``Palette.fit``).
    mapping : str, default="nearest by ΔE00"
        How pixels were given inks.
    inks_from : dict or None
        How the inks were chosen, as :func:`quantize.separation.choice.choose_palette`
        reports it; None when the caller gave the palette (not listed then).
    """

    dpi: float
    min_feature_mm: float
    min_area_px: float
    min_line_mm: float
    underbase: bool
    choke_mm: float | None
    order: str
    palette_fit: dict
    mapping: str = "nearest by ΔE00"
    inks_from: dict | None = None

    def to_dict(self) -> dict:
        """The settings as the manifest lists them."""
        doc = {"dpi": self.dpi, "min_feature_mm": self.min_feature_mm, "min_area_px": self.min_area_px,
               "min_line_mm": self.min_line_mm, "underbase": self.underbase, "choke_mm": self.choke_mm,
               "order": self.order, "mapping": self.mapping, "palette_fit": self.palette_fit}
        if self.inks_from is not None:
            doc["inks_from"] = self.inks_from
        return doc


@dataclass(frozen=True, eq=False)
class Separation:
    """The result of :func:`separate`: plates and everything the manifest lists.

    Attributes
    ----------
    indices : ndarray of shape (H, W)
        Palette index of every pixel after the clean-up.
    palette : Palette
        The inks and the substrate (named "substrate" when it had no name).
    substrate : int or None
        Palette index of the substrate (no plate), or None.
    plates : tuple of Plate
        The ink plates in print order.
    underbase : Plate or None
    dpi : float
    alpha : ndarray of shape (H, W) or None
        The input's alpha channel.
    source : str
    cleanup : CleanupReport
        What merging the regions too small to print changed.
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
    """

    indices: np.ndarray
    palette: Any
    substrate: int | None
    plates: tuple
    underbase: Plate | None
    dpi: float
    alpha: np.ndarray | None
    source: str
    cleanup: CleanupReport
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

    @property
    def shape(self) -> tuple[int, int]:
        return self.indices.shape

    @property
    def rgb(self) -> np.ndarray:
        """The cleaned, reduced image as 8-bit sRGB."""
        return self.palette.rgb8[self.indices]

    def with_measured(self, library) -> Separation:
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

    def manifest(self, files: dict | None = None, *, composite: str | None = None, margin_px: int = 0) -> dict:
        """The manifest document (JSON-ready).

        ``files`` maps each plate's name to its file names; ``composite`` is
        the preview's file name and ``margin_px`` the width of the marks margin.
        """
        from quantize.colour.spaces import srgb8_to_space

        files = files or {}
        pal = self.palette
        inks = []
        for i in range(pal.k):
            inks.append({"index": i, "name": _ink_name(pal, i), "hex": pal.hex[i],
                         "lab": [round(float(v), 3) for v in pal.lab[i]],
                         "role": "substrate" if i == self.substrate else "ink", **self._measured_doc(i)})

        def plate_doc(p: Plate) -> dict:
            return {"name": p.name, "order": p.order, "palette_index": p.index, "hex": _hex(p.rgb8),
                    "lab": [round(float(v), 3) for v in srgb8_to_space(p.rgb8, "lab")],
                    "coverage_percent": round(p.coverage, 4), "files": files.get(p.name, []),
                    **(self._measured_doc(p.index) if p.index is not None else {})}

        h, w = self.shape
        doc = {
            "format": _MANIFEST_FORMAT,
            "version": 1,
            "source": self.source,
            "size_px": [w, h],
            "dpi": self.dpi,
            "size_mm": [round(px_to_mm(w, self.dpi), 3), round(px_to_mm(h, self.dpi), 3)],
            "substrate": None if self.substrate is None else {
                "name": _ink_name(pal, self.substrate), "hex": pal.hex[self.substrate],
                "coverage_percent": round(self.substrate_coverage, 4), "from": self.substrate_from},
            "inks": inks,
            "print_order": ([self.underbase.name] if self.underbase else []) + [p.name for p in self.plates],
            "plates": [plate_doc(p) for p in self.plates],
            "underbase": plate_doc(self.underbase) if self.underbase else None,
            "coverage_percent": {k: round(v, 4) for k, v in self.coverage().items()},
            "delta_e": self.delta_e,
            "edges": self._edges_doc(),
            "dither": self.dither,
            "cleanup": self.cleanup.to_dict(),
            "thin_features": {"summary": self.thin_summary, "items": self.thin},
            "settings": self.settings.to_dict(),
            "composite": composite,
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

    def write(self, folder, *, force: bool = False, png: bool = False, marks: bool = False,
              margin_mm: float = DEFAULT_MARGIN_MM, stem: str | None = None, inputs=()) -> dict:
        """Write plates (1-bit TIFF, optionally PNG), the composite preview and the manifest.

        Every file is written atomically; existing files are checked before
        anything is written, so without ``force`` either the whole set is
        written or nothing is.

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
            order, file name) around the artwork on every plate.
        margin_mm : float
            Width of that margin.
        stem : str, optional
            Prefix of the file names (default: the source file's stem).
        inputs : sequence of path
            Files never to overwrite.

        Returns
        -------
        dict
            ``manifest`` (path), ``composite`` (path), ``plates`` (name -> paths).

        Raises
        ------
        OutputError
            A file exists without ``force``, or cannot be written.
        SeparationError
            ``marks`` with a margin that is not a positive, finite size.
        """
        from quantize.io.write import atomic_write_bytes, atomic_write_text, save_image

        if marks and not (isinstance(margin_mm, (int, float)) and math.isfinite(margin_mm) and margin_mm > 0):
            raise SeparationError(f"margin_mm must be a positive size in mm, got {margin_mm!r}")
        out = Path(folder)
        if out.exists() and not out.is_dir():
            raise OutputError(f"{out}: exists and is not a folder")
        if stem is None:
            stem = "art" if self.source.startswith("<") else _slug(Path(self.source).stem)
        every = ([self.underbase] if self.underbase else []) + list(self.plates)
        plan = {}
        for p in every:
            base = f"{stem}-{p.order:02d}-{p.slug}"
            plan[p.name] = [out / f"{base}.tif"] + ([out / f"{base}.png"] if png else [])
        composite = out / f"{stem}-composite.png"
        manifest = out / f"{stem}-manifest.json"
        targets = [t for ts in plan.values() for t in ts] + [composite, manifest]
        if not force:
            for t in targets:
                if t.exists():
                    raise OutputError(f"{t}: already exists; not replaced without force")
        out.mkdir(parents=True, exist_ok=True)
        margin = int(round(mm_to_px(margin_mm, self.dpi))) if marks else 0
        total = len(every)
        for p in every:
            label = f"{p.name} | {p.order}/{total} | {plan[p.name][0].name}"
            img = _plate_image(p.mask, margin, label if marks else None)
            for t in plan[p.name]:
                fmt = "TIFF" if t.suffix == ".tif" else "PNG"
                buf = io.BytesIO()
                opts = {"compression": "group4"} if fmt == "TIFF" else {"optimize": True}
                img.save(buf, format=fmt, dpi=(self.dpi, self.dpi), **opts)
                atomic_write_bytes(t, buf.getvalue(), force=force, inputs=inputs)
        save_image(composite, self.composite_indices(), self.palette.rgb8, alpha=self.alpha,
                   dpi=(self.dpi, self.dpi), force=force, inputs=inputs)
        files = {name: [t.name for t in ts] for name, ts in plan.items()}
        doc = self.manifest(files, composite=composite.name, margin_px=margin)
        atomic_write_text(manifest, json.dumps(doc, indent=2, ensure_ascii=False) + "\n",
                          force=force, inputs=inputs)
        return {"manifest": manifest, "composite": composite, "plates": plan}


def _plate_image(mask: np.ndarray, margin: int, label: str | None):
    """A 1-bit film: ink black (0), clear white (1); marks and label in the margin."""
    from PIL import Image, ImageDraw

    h, w = mask.shape
    canvas = np.zeros((h + 2 * margin, w + 2 * margin), bool)
    canvas[margin:margin + h, margin:margin + w] = mask
    img = Image.fromarray(~canvas)
    if margin >= 8:
        draw = ImageDraw.Draw(img)
        r = max(2, int(margin * 0.3))
        lw = max(1, margin // 40)
        cx = [margin // 2, w + margin + margin // 2]
        cy = [margin // 2, h + margin + margin // 2]
        for x in cx:  # the four corners, outside the artwork
            for y in cy:
                draw.ellipse([x - r, y - r, x + r, y + r], outline=0, width=lw)
                draw.line([x - r - lw, y, x + r + lw, y], fill=0, width=lw)
                draw.line([x, y - r - lw, x, y + r + lw], fill=0, width=lw)
        if label:
            size = max(6, int(margin * 0.3))
            font = _font(size)
            room = max(1, w - 2 * lw)
            while size > 6 and draw.textlength(label, font=font) > room:
                size -= 1
                font = _font(size)
            # Draw on a scratch strip and paste only the margin, so nothing reaches the artwork.
            strip = Image.new("1", (w, margin), 1)
            ImageDraw.Draw(strip).text((lw, (margin - size) // 2), label, fill=0, font=font)
            img.paste(strip, (margin, h + margin))
    return img


def _font(size: int):
    from PIL import ImageFont

    try:
        return ImageFont.load_default(size=size)
    except (TypeError, OSError, ImportError):  # a Pillow without FreeType: fixed-size bitmap font
        return ImageFont.load_default()


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


def separate(image, palette, *, substrate=None, dpi: float | None = None,
             min_feature_mm: float = DEFAULT_MIN_FEATURE_MM, min_line_mm: float = DEFAULT_MIN_LINE_MM,
             underbase: bool = False, choke_mm: float = DEFAULT_CHOKE_MM, order: Sequence | None = None,
             max_pixels=None, edges: bool = True, dithered: str = "auto") -> Separation:
    """Separate an image into one knocked-out 1-bit plate per printed ink.

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
        Output resolution; default the image's, else 300.
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

    Returns
    -------
    Separation

    Raises
    ------
    SeparationError
        A negative size, a minimum feature size that would erase the image,
        or a bad print order or substrate.
    ImageReadError
        The image cannot be read.

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
    >>> [(p.name, round(p.coverage, 2)) for p in sep.plates]
    [('ink #c8102e', 25.0)]
    """
    from quantize.core.sampling import sample_picture
    from quantize.render.mapping import map_picture

    _check_sizes(dpi=dpi, min_feature_mm=min_feature_mm, min_line_mm=min_line_mm, choke_mm=choke_mm)
    if dithered not in DITHER_CHOICES:
        raise SeparationError(f"dithered must be one of {', '.join(DITHER_CHOICES)}, got {dithered!r}")
    pic = _picture(image, max_pixels)
    notes = [f"{pic.source}: {w}" for w in pic.warnings]
    palette, sub, said = _with_named_substrate(pic, palette, substrate, notes)
    dpi = _resolve_dpi(pic, dpi, notes)
    smp = sample_picture(pic)
    mapped = map_picture(pic, palette, metric="ciede2000", sample=smp)
    dither, dither_note = dither_handling(mapped.indices, pic.opaque, dithered, source=pic.source)
    if dither_note:
        notes.append(dither_note)
    # A dither's dots are deliberate: neither edge blends nor specks to merge.
    clean_mm = 0.0 if dither["kept"] else min_feature_mm
    seams = None
    if edges and not dither["kept"]:
        seamed, seams = resolve_seams(mapped.indices, smp.points("lab"), smp.inverse.reshape(pic.shape),
                                      palette.lab, opaque=pic.opaque)
        mapped = replace(mapped, indices=seamed.astype(mapped.indices.dtype))
    cleaned, cleanup = _clean(pic, smp, mapped, sub, min_feature_mm=clean_mm, dpi=dpi)
    n_opaque = int(pic.opaque.sum())
    plates = _ink_plates(cleaned, pic.opaque, palette, sub, order=order, first=2 if underbase else 1, notes=notes)
    ub = _underbase_plate(cleaned, pic.opaque, palette, sub, plates, choke_mm=choke_mm, dpi=dpi,
                          notes=notes) if underbase else None
    thin, thin_summary = _thin_detail(plates, min_line_mm=min_line_mm, dpi=dpi)
    settings = SeparationSettings(dpi=dpi, min_feature_mm=min_feature_mm,
                                  min_area_px=round(cleanup.min_area_px, 3), min_line_mm=min_line_mm,
                                  underbase=underbase, choke_mm=choke_mm if underbase else None,
                                  order="given" if order is not None else "light to dark",
                                  palette_fit=palette.fit.to_dict() if palette.fit is not None else {},
                                  mapping=_EDGE_MAPPING if edges else "nearest by ΔE00")
    sub_cov = float(100.0 * ((cleaned == sub) & pic.opaque).sum() / n_opaque) if sub is not None else 0.0
    return Separation(indices=cleaned, palette=palette, substrate=sub, plates=tuple(plates), underbase=ub,
                      dpi=dpi, alpha=pic.alpha, source=pic.source, cleanup=cleanup, thin=thin,
                      thin_summary=thin_summary, delta_e=cleanup.delta_e_after, settings=settings,
                      notes=tuple(notes + list(mapped.notes)), substrate_coverage=sub_cov, edges=seams,
                      substrate_from=said, dither=dither)


# --------------------------------------------------------------------------- the steps of separate


def _check_sizes(*, dpi, min_feature_mm, min_line_mm, choke_mm) -> None:
    for nm, v in (("min_feature_mm", min_feature_mm), ("min_line_mm", min_line_mm), ("choke_mm", choke_mm)):
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
            raise SeparationError(f"{nm} must be a size of 0 mm or more, got {v!r}")
    if dpi is not None and not (math.isfinite(dpi) and dpi > 0):
        raise SeparationError(f"dpi must be positive, got {dpi!r}")


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


def _resolve_dpi(pic, dpi, notes: list) -> float:
    if dpi is not None:
        return dpi
    if pic.dpi and pic.dpi[0] > 0:
        dpi = float(pic.dpi[0])
        if abs(dpi - round(dpi)) < 0.01:  # PNG stores pixels per metre: 300 dpi reads as 299.9994
            dpi = float(round(dpi))
        return dpi
    notes.append(f"the image records no resolution; {DEFAULT_DPI:g} dpi assumed")
    return DEFAULT_DPI


def _clean(pic, smp, mapped, sub, *, min_feature_mm, dpi) -> tuple[np.ndarray, CleanupReport]:
    """Merge the regions smaller than a dot of ``min_feature_mm``; refuse a clean-up that erases the print."""
    opaque = pic.opaque
    n_opaque = int(opaque.sum())
    idx = mapped.indices
    ink_lab = mapped.palette.lab
    d_px = mm_to_px(min_feature_mm, dpi)
    min_area = math.pi * d_px * d_px / 4.0
    if min_area > n_opaque:
        raise SeparationError(f"{pic.source}: a minimum feature of {min_feature_mm:g} mm ({min_area:.0f} px at "
                              f"{dpi:g} dpi) is larger than the whole image ({n_opaque} px): it would erase the image")
    printed_before = int((opaque & (idx != sub)).sum()) if sub is not None else n_opaque
    cleaned, report = clean_small_regions(idx, ink_lab, min_area=min_area, opaque=opaque)
    printed_after = opaque & (cleaned != sub) if sub is not None else opaque
    if printed_before and not printed_after.any():
        raise SeparationError(f"{pic.source}: a minimum feature of {min_feature_mm:g} mm ({min_area:.0f} px at "
                              f"{dpi:g} dpi) would erase the image: every printed area is smaller than that")
    report = replace(report, min_feature_mm=min_feature_mm, delta_e_before=mapped.delta_e,
                     delta_e_after=_source_delta_e(smp, cleaned, ink_lab))
    return cleaned, report


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
    plates = []
    for o, (i, nm, sl) in enumerate(zip(ordered, names, _unique_slugs(names), strict=True)):
        m = (cleaned == i) & opaque
        plates.append(Plate(name=nm, index=i, order=first + o, mask=m, coverage=float(100.0 * m.sum() / n_opaque),
                            rgb8=palette.rgb8[i], lab=palette.lab[i], slug=sl))
    return plates


def _underbase_plate(cleaned, opaque, palette, sub, plates, *, choke_mm, dpi, notes: list) -> Plate:
    """The white underbase: every printed pixel, choked by ``choke_mm``, printed first."""
    printed = opaque & (cleaned != sub) if sub is not None else opaque.copy()
    ub_mask = underbase_mask(printed, mm_to_px(choke_mm, dpi))
    ub = Plate(name="underbase", index=None, order=1, mask=ub_mask,
               coverage=float(100.0 * ub_mask.sum() / int(opaque.sum())), rgb8=np.array([255, 255, 255], np.uint8),
               lab=np.array([100.0, 0, 0]), slug="underbase")
    if "underbase" in [p.name.casefold() for p in plates]:
        raise SeparationError("an ink is called 'underbase'; rename it, the underbase plate uses that name")
    if sub is not None and palette.lab[sub, 0] > 60:
        notes.append("an underbase on a light substrate is usually not needed")
    return ub


def _thin_detail(plates, *, min_line_mm, dpi) -> tuple[list, dict]:
    """Thin lines and gaps of every plate, largest first (at most 200), and their counts."""
    thin, summary = [], {"lines": 0, "gaps": 0, "width_px": 0, "width_mm": 0.0}
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
