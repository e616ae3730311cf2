"""Ink libraries: the inks a shop has on the shelf, and choosing among them.

An ink library is read from one of three kinds of file:

* **CSV**: one ink per row, ``name,#rrggbb`` (sRGB) or ``name,L,a,b``
  (CIELAB). A header row (``name,hex`` or ``name,L,a,b``) is optional, ``#``
  starts a comment line, and a comment ``# illuminant: D65`` states the
  illuminant of the Lab rows.
* **JSON**: ``{"format": "quantize.inks", "version": 1, "illuminant": "D50",
  "inks": [{"name": "...", "lab": [L, a, b]} or {"name": "...", "hex": "#..."}]}``.
* **CGATS.17 text**, as measuring instruments write it (ANSI CGATS.17, an open
  exchange format): keyword lines, ``BEGIN_DATA_FORMAT``/``END_DATA_FORMAT``
  naming the fields, ``BEGIN_DATA``/``END_DATA`` with one data set per line.
  The fields ``LAB_L``, ``LAB_A``, ``LAB_B`` give the colour and
  ``SAMPLE_NAME`` (or else ``SAMPLE_ID``) the ink's name; other fields,
  keywords and ``#`` comments are read past. ``NUMBER_OF_FIELDS`` and
  ``NUMBER_OF_SETS`` are checked when present.

Measured Lab values are normally relative to D50 (ISO 13655), while this
package works in CIELAB relative to the D65 white of sRGB. Each library
records its illuminant (D50 unless the file says otherwise) and its Lab values
are adapted to D65 with the Bradford chromatic adaptation transform, through
colour-science (imported only when a Lab library is read). sRGB hex inks are
D65 already and are not adapted.

Selection. :func:`choose_inks` picks N inks from a library for an image,
minimising the pixel-weighted ΔE00 of the image mapped onto the chosen inks
(plus the substrate, which is always there). :func:`snap_palette` instead
moves each colour of a fitted palette to its nearest library ink (each ink
used once) and reports the ΔE00 of every snap.

ΔE figures here are computed from file data; they are not measurements of a
print.
"""

from __future__ import annotations

import csv
import io
import itertools
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from .errors import QuantizeError

__all__ = [
    "Ink", "InkLibrary", "InkLibraryError", "InkSelection", "ILLUMINANTS",
    "load_ink_library", "parse_ink_library", "adapt_lab", "bradford_matrix",
    "choose_inks", "subset_cost", "snap_palette", "SELECTION_METHODS",
]

#: Illuminants a library may name; their whites come from colour-science
#: (CIE 15:2004 chromaticities for the 2 and 10 degree observers).
ILLUMINANTS = ("A", "C", "D50", "D55", "D65", "D75")
_OBSERVERS = {2: "CIE 1931 2 Degree Standard Observer", 10: "CIE 1964 10 Degree Standard Observer"}
_HEX = re.compile(r"^#?([0-9a-fA-F]{6})$")
# A CGATS token: a double-quoted string (may hold spaces) or a run of non-blanks.
_CGATS_TOKEN = re.compile(r'"((?:[^"]|"")*)"|(\S+)')


class InkLibraryError(QuantizeError):
    """An ink library file is missing or malformed, or cannot serve the request."""


@dataclass(frozen=True)
class Ink:
    """One ink of a library.

    Attributes
    ----------
    name : str
    lab : ndarray of shape (3,)
        CIELAB relative to D65 (after chromatic adaptation), L* 0-100.
    rgb8 : ndarray of shape (3,), uint8
        The nearest sRGB colour, used for previews and mapping.
    gamut_de : float
        ΔE00 between ``lab`` and ``rgb8``: above about 1 the ink lies outside
        sRGB and its preview is only an approximation.
    measured : tuple of float or None
        Lab as written in the file (before adaptation); None for hex inks.
    line : int
        Line of the file the ink was read from (entry index + 1 for JSON).
    sample_id : str or None
        CGATS ``SAMPLE_ID``, when the file has one.
    """

    name: str
    lab: np.ndarray
    rgb8: np.ndarray
    gamut_de: float
    measured: tuple | None = None
    line: int = 0
    sample_id: str | None = None

    @property
    def hex(self) -> str:
        """The preview colour as ``#rrggbb``."""
        return "#{:02x}{:02x}{:02x}".format(*map(int, self.rgb8))


@dataclass(frozen=True, eq=False)
class InkLibrary:
    """The inks read from one file.

    Attributes
    ----------
    inks : tuple of Ink
    source : str
        The file it was read from.
    illuminant : str
        Illuminant of the file's Lab values ("D50" unless the file said otherwise).
    observer : int
        2 or 10 (degrees).
    file_format : {"csv", "json", "cgats"}
    notes : tuple of str
    """

    inks: tuple
    source: str = "<inks>"
    illuminant: str = "D50"
    observer: int = 2
    file_format: str = "csv"
    notes: tuple = ()

    def __len__(self) -> int:
        return len(self.inks)

    @property
    def names(self) -> list[str]:
        """Ink names, in file order."""
        return [i.name for i in self.inks]

    @property
    def lab(self) -> np.ndarray:
        """(M, 3) CIELAB (D65) of every ink."""
        return np.array([i.lab for i in self.inks], dtype=np.float64).reshape(-1, 3)

    @property
    def rgb8(self) -> np.ndarray:
        """(M, 3) uint8 sRGB preview colours."""
        return np.array([i.rgb8 for i in self.inks], dtype=np.uint8).reshape(-1, 3)

    def find(self, name: str) -> int | None:
        """Index of the ink called ``name`` (case-insensitive), or None."""
        key = name.strip().casefold()
        for j, ink in enumerate(self.inks):
            if ink.name.casefold() == key:
                return j
        return None

    def describe(self) -> dict[str, Any]:
        """A JSON-ready summary (for manifests and reports)."""
        return {"source": self.source, "format": self.file_format, "illuminant": self.illuminant,
                "observer": self.observer, "adapted_to": "D65" if self.illuminant != "D65" else None,
                "n_inks": len(self)}


# --------------------------------------------------------------------------- adaptation

def _white_xyz(name: str, observer: int) -> np.ndarray:
    import colour

    xy = colour.CCS_ILLUMINANTS[_OBSERVERS[observer]][name]
    return colour.xy_to_XYZ(xy)


def bradford_matrix(source_white, target_white) -> np.ndarray:
    """The Bradford chromatic adaptation matrix between two whites.

    Parameters
    ----------
    source_white, target_white : array_like of shape (3,)
        CIE XYZ of the whites, Y = 1.

    Returns
    -------
    ndarray of shape (3, 3)
        ``M`` with ``XYZ_target = M @ XYZ_source``.

    References
    ----------
    .. [1] K. M. Lam, "Metamerism and colour constancy", PhD thesis,
       University of Bradford, 1985 (the Bradford cone matrix).
    .. [2] M. D. Fairchild, *Color Appearance Models*, 3rd ed., Wiley, 2013,
       ch. 9-10 (von Kries-type transforms).

    Examples
    --------
    >>> m = bradford_matrix([0.96422, 1.0, 0.82521], [0.95047, 1.0, 1.08883])
    >>> [round(float(v), 4) for v in m[0]]
    [0.9556, -0.023, 0.0632]
    """
    from colour.adaptation import matrix_chromatic_adaptation_VonKries

    s = np.asarray(source_white, dtype=np.float64)
    t = np.asarray(target_white, dtype=np.float64)
    if s.shape != (3,) or t.shape != (3,) or not (s > 0).all() or not (t > 0).all():
        raise ValueError(f"whites must be positive XYZ triples, got {s} and {t}")
    return np.asarray(matrix_chromatic_adaptation_VonKries(s, t, transform="Bradford"), dtype=np.float64)


def adapt_lab(lab, *, illuminant: str = "D50", observer: int = 2) -> np.ndarray:
    """CIELAB relative to ``illuminant`` -> CIELAB relative to D65 (sRGB white), by Bradford.

    Parameters
    ----------
    lab : array_like of shape (..., 3)
        L* 0-100, relative to the white of ``illuminant`` for ``observer``.
    illuminant : str, default "D50"
        One of :data:`ILLUMINANTS`.
    observer : {2, 10}, default 2

    Returns
    -------
    ndarray of shape (..., 3)
        CIELAB relative to the D65 white of IEC 61966-2-1, the package's
        working white. Lab that is already D65 (2 degree) is returned as is.

    Raises
    ------
    ValueError
        Unknown illuminant or observer.

    References
    ----------
    .. [1] ISO 13655:2017, Graphic technology - Spectral measurement and
       colorimetric computation for graphic arts images (D50, 2 degrees).
    .. [2] M. D. Fairchild, *Color Appearance Models*, 3rd ed., Wiley, 2013.
    .. [3] CIE 15:2004, *Colorimetry*, 3rd ed. (CIELAB).

    Examples
    --------
    >>> [round(float(v), 6) + 0.0 for v in adapt_lab([100.0, 0.0, 0.0])]  # D50 white -> D65 white
    [100.0, 0.0, 0.0]
    """
    from .colourspace import _WHITE_XYZ, _lab_to_t, _t_to_lab

    ill = _check_illuminant(illuminant)
    obs = _check_observer(observer)
    lab = np.asarray(lab, dtype=np.float64)
    if lab.ndim == 0 or lab.shape[-1] != 3:
        raise ValueError(f"lab must have shape (..., 3), got {lab.shape}")
    if ill == "D65" and obs == 2:
        return lab.copy()
    src = _white_xyz(ill, obs)
    xyz = _lab_to_t(lab) * src
    out = xyz @ bradford_matrix(src, _WHITE_XYZ).T
    return _t_to_lab(out / _WHITE_XYZ)


def _check_illuminant(name) -> str:
    key = str(name).strip().upper()
    if key not in ILLUMINANTS:
        raise ValueError(f"unknown illuminant {name!r}; choose one of: {', '.join(ILLUMINANTS)}")
    return key


def _check_observer(observer) -> int:
    try:
        obs = int(str(observer).strip().rstrip("°").strip())
    except ValueError:
        obs = -1
    if obs not in _OBSERVERS:
        raise ValueError(f"unknown observer {observer!r}; choose 2 or 10 (degrees)")
    return obs


# --------------------------------------------------------------------------- reading

def load_ink_library(path, *, illuminant: str | None = None) -> InkLibrary:
    """Read an ink library file (CSV, JSON or CGATS.17 text).

    Parameters
    ----------
    path : str or path-like
    illuminant : str, optional
        Illuminant of the file's Lab values when the file does not say;
        default D50 (ISO 13655). A file that names its illuminant wins.

    Returns
    -------
    InkLibrary
        Every ink with its Lab adapted to D65 (Bradford).

    Raises
    ------
    InkLibraryError
        ``"<file>: line <n>: <problem>"`` for a malformed line (or
        ``inks[i]`` for JSON), a missing or unreadable file, no inks, or two
        inks with the same name.

    References
    ----------
    .. [1] ANSI CGATS.17-2009, Graphic technology - Exchange format for
       colour and process control data using XML or ASCII text
       (also ISO 28178:2009).
    .. [2] ISO 13655:2017, Graphic technology - Spectral measurement and
       colorimetric computation for graphic arts images.

    Examples
    --------
    >>> lib = load_ink_library("docs/demo_inks.csv")  # doctest: +SKIP
    >>> lib.names[:2]  # doctest: +SKIP
    ['Harbour Fog', 'Quay Red']
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise InkLibraryError(f"{p}: no such ink library file") from None
    except IsADirectoryError:
        raise InkLibraryError(f"{p}: is a folder, not an ink library file") from None
    except OSError as exc:
        raise InkLibraryError(f"{p}: cannot read ink library ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")  # instruments often write Latin-1 (e.g. the degree sign)
    return parse_ink_library(text, source=str(p), illuminant=illuminant, suffix=p.suffix.lower())


def parse_ink_library(text: str, *, source: str = "<inks>", illuminant: str | None = None,
                      suffix: str = "") -> InkLibrary:
    """Parse the text of an ink library; see :func:`load_ink_library`.

    The format is taken from the content: JSON if it starts with ``{`` or
    ``[``, CGATS if it has a ``BEGIN_DATA_FORMAT`` line, else CSV.

    Examples
    --------
    >>> lib = parse_ink_library("name,hex\\nQuay Red,#c8102e\\n")
    >>> lib.names, lib.inks[0].hex
    (['Quay Red'], '#c8102e')
    """
    if illuminant is not None:
        try:
            illuminant = _check_illuminant(illuminant)
        except ValueError as exc:
            raise InkLibraryError(f"{source}: {exc}") from None
    stripped = text.lstrip()
    if stripped[:1] in ("{", "[") or suffix == ".json":
        return _parse_json(text, source, illuminant)
    if re.search(r"^\s*BEGIN_DATA_FORMAT\b", text, flags=re.MULTILINE):
        return _parse_cgats(text, source, illuminant)
    return _parse_csv(text, source, illuminant)


class _Rows:
    """Collects (name, hex-or-lab, line, id) and builds the library once."""

    def __init__(self, source: str):
        self.source = source
        self.items: list[tuple[str, Any, int, str | None]] = []

    def bad(self, line, what) -> InkLibraryError:
        where = f"line {line}" if isinstance(line, int) else line
        return InkLibraryError(f"{self.source}: {where}: {what}")

    def add(self, name: str, colour, line, sample_id=None):
        name = " ".join(str(name).split())
        if not name:
            raise self.bad(line, "ink has no name")
        self.items.append((name, colour, line, sample_id))

    def build(self, fmt: str, illuminant: str, observer: int, notes=()) -> InkLibrary:
        from .colourspace import clip_to_gamut, delta_e_ciede2000, lab_to_srgb, srgb8_to_space

        if not self.items:
            raise InkLibraryError(f"{self.source}: no inks found")
        seen: dict[str, Any] = {}
        for name, _, line, _ in self.items:
            key = name.casefold()
            if key in seen:
                raise InkLibraryError(f"{self.source}: {_where(line)}: ink name {name!r} is already used "
                                      f"at {_where(seen[key])}; every ink needs its own name (plates are "
                                      "named after inks)")
            seen[key] = line
        labs = [c for _, c, _, _ in self.items if not isinstance(c, np.ndarray)]
        adapted = iter(adapt_lab(np.array(labs, float).reshape(-1, 3), illuminant=illuminant,
                                 observer=observer)) if labs else iter(())
        inks = []
        for name, colour, line, sid in self.items:
            if isinstance(colour, np.ndarray):  # sRGB hex: already D65
                rgb8 = colour
                lab = srgb8_to_space(rgb8, "lab")
                measured = None
            else:
                lab = next(adapted)
                rgb8 = np.round(clip_to_gamut(lab_to_srgb(lab)) * 255).astype(np.uint8)
                measured = tuple(float(v) for v in colour)
            gde = float(delta_e_ciede2000(lab, srgb8_to_space(rgb8, "lab")))
            inks.append(Ink(name=name, lab=np.asarray(lab, float), rgb8=rgb8, gamut_de=gde,
                            measured=measured, line=line if isinstance(line, int) else 0, sample_id=sid))
        notes = list(notes)
        far = [i.name for i in inks if i.gamut_de > 1.0]
        if far:
            notes.append(f"{len(far)} ink(s) lie outside sRGB and are previewed approximately: "
                         + ", ".join(far[:5]) + ("..." if len(far) > 5 else ""))
        return InkLibrary(inks=tuple(inks), source=self.source, illuminant=illuminant, observer=observer,
                          file_format=fmt, notes=tuple(notes))


def _where(line) -> str:
    return f"line {line}" if isinstance(line, int) else str(line)


def _number(text: str, rows: _Rows, line, what: str) -> float:
    try:
        v = float(text)
    except (TypeError, ValueError):
        raise rows.bad(line, f"{what} {text!r} is not a number") from None
    if not math.isfinite(v):
        raise rows.bad(line, f"{what} {text!r} is not finite")
    return v


def _lab_value(values, rows: _Rows, line) -> tuple:
    lab = tuple(_number(v, rows, line, n) for v, n in zip(values, ("L*", "a*", "b*")))
    if not 0.0 <= lab[0] <= 100.0:
        raise rows.bad(line, f"L* {lab[0]:g} is outside 0-100")
    return lab


def _hex_value(text: str, rows: _Rows, line) -> np.ndarray:
    m = _HEX.match(text.strip())
    if not m:
        raise rows.bad(line, f"colour {text!r} is neither sRGB hex (#rrggbb) nor L,a,b")
    h = m.group(1)
    return np.array([int(h[i:i + 2], 16) for i in (0, 2, 4)], dtype=np.uint8)


def _parse_csv(text: str, source: str, illuminant: str | None) -> InkLibrary:
    rows = _Rows(source)
    ill = illuminant
    notes = []
    header_done = False
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            m = re.match(r"#\s*illuminant\s*[:=]\s*(\S+)", s, flags=re.IGNORECASE)
            if m:
                try:
                    ill = _check_illuminant(m.group(1))
                except ValueError as exc:
                    raise rows.bad(lineno, str(exc)) from None
            continue
        try:
            cells = next(csv.reader(io.StringIO(line)))
        except csv.Error as exc:
            raise rows.bad(lineno, f"not CSV ({exc})") from None
        cells = [c.strip() for c in cells]
        while cells and cells[-1] == "":
            cells.pop()
        if not header_done:
            header_done = True
            if cells and cells[0].casefold() in ("name", "ink", "ink name"):
                continue
        if len(cells) == 2:
            rows.add(cells[0], _hex_value(cells[1], rows, lineno), lineno)
        elif len(cells) == 4:
            rows.add(cells[0], _lab_value(cells[1:], rows, lineno), lineno)
        else:
            raise rows.bad(lineno, f"expected 'name,#rrggbb' or 'name,L,a,b', got {len(cells)} field(s)")
    return rows.build("csv", ill or "D50", 2, notes)


def _parse_json(text: str, source: str, illuminant: str | None) -> InkLibrary:
    rows = _Rows(source)
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InkLibraryError(f"{source}: line {exc.lineno}: not JSON ({exc.msg}, column {exc.colno})") from None
    ill, obs = illuminant, 2
    if isinstance(doc, dict):
        fmt = doc.get("format", "quantize.inks")
        if fmt != "quantize.inks":
            raise InkLibraryError(f"{source}: format: expected \"quantize.inks\", got {fmt!r}")
        ver = doc.get("version", 1)
        if not isinstance(ver, int) or ver < 1 or ver > 1:
            raise InkLibraryError(f"{source}: version: this quantize reads version 1, got {ver!r}")
        if "illuminant" in doc:
            try:
                ill = _check_illuminant(doc["illuminant"])
            except ValueError as exc:
                raise InkLibraryError(f"{source}: illuminant: {exc}") from None
        if "observer" in doc:
            try:
                obs = _check_observer(doc["observer"])
            except ValueError as exc:
                raise InkLibraryError(f"{source}: observer: {exc}") from None
        entries = doc.get("inks")
    else:
        entries = doc
    if not isinstance(entries, list):
        raise InkLibraryError(f"{source}: inks: expected a list of inks")
    for i, e in enumerate(entries):
        where = f"inks[{i}]"
        if not isinstance(e, dict) or not isinstance(e.get("name"), str):
            raise rows.bad(where, "expected an object with a text 'name'")
        if "lab" in e:
            lab = e["lab"]
            if not isinstance(lab, list) or len(lab) != 3 or any(isinstance(v, bool) for v in lab):
                raise rows.bad(where, f"lab: expected [L, a, b], got {lab!r}")
            rows.add(e["name"], _lab_value([str(v) for v in lab], rows, where), where)
        elif "hex" in e:
            rows.add(e["name"], _hex_value(str(e["hex"]), rows, where), where)
        else:
            raise rows.bad(where, "needs 'lab' [L, a, b] or 'hex' '#rrggbb'")
    return rows.build("json", ill or "D50", obs)


def _cgats_tokens(line: str) -> list[str]:
    # A '#' outside quotes starts a comment.
    out = []
    for m in _CGATS_TOKEN.finditer(line):
        if m.group(2) is not None:
            tok = m.group(2)
            if tok.startswith("#"):
                break
            out.append(tok)
        else:
            out.append(m.group(1).replace('""', '"'))
    return out


def _cgats_illuminant(keywords: dict[str, str]) -> tuple[str | None, int | None]:
    """Illuminant and observer stated by a CGATS file's keywords, if any."""
    ill = keywords.get("ILLUMINATION_NAME")
    obs = keywords.get("OBSERVER_ANGLE")
    # Instruments also write them inside MEASUREMENT_SOURCE, e.g. "Illumination=D50 ObserverAngle=2°".
    ms = keywords.get("MEASUREMENT_SOURCE", "")
    m = re.search(r"Illumination\s*=\s*([A-Za-z0-9]+)", ms)
    if ill is None and m:
        ill = m.group(1)
    m = re.search(r"ObserverAngle\s*=\s*(\d+)", ms)
    if obs is None and m:
        obs = m.group(1)
    return ill, obs


def _parse_cgats(text: str, source: str, illuminant: str | None) -> InkLibrary:
    rows = _Rows(source)
    keywords: dict[str, str] = {}
    state = "header"
    fields: list[str] = []
    n_fields = n_sets = None
    set_count = 0
    cols = None
    tables = 0
    data_line = 0
    for lineno, line in enumerate(text.splitlines(), start=1):
        toks = _cgats_tokens(line)
        if not toks:
            continue
        head = toks[0]
        if state == "format":
            if head == "END_DATA_FORMAT":
                if n_fields is not None and len(fields) != n_fields:
                    raise rows.bad(lineno, f"NUMBER_OF_FIELDS is {n_fields} but the format lists {len(fields)}")
                state = "header"
            else:
                fields.extend(toks)
            continue
        if state == "data":
            if head == "END_DATA":
                if n_sets is not None and set_count != n_sets:
                    raise rows.bad(lineno, f"NUMBER_OF_SETS is {n_sets} but the table has {set_count} data sets")
                state, fields, n_fields, n_sets, cols = "header", [], None, None, None
                continue
            if len(toks) != len(fields):
                raise rows.bad(lineno, f"expected {len(fields)} values ({' '.join(fields)}), got {len(toks)}")
            set_count += 1
            lab = _lab_value([toks[cols[k]] for k in ("LAB_L", "LAB_A", "LAB_B")], rows, lineno)
            sid = toks[cols["SAMPLE_ID"]] if "SAMPLE_ID" in cols else None
            name = toks[cols["SAMPLE_NAME"]] if "SAMPLE_NAME" in cols else sid
            rows.add(name, lab, lineno, sid)
            continue
        # header: keywords and the start of a format or data block
        if head == "BEGIN_DATA_FORMAT":
            state, fields = "format", toks[1:]
        elif head == "BEGIN_DATA":
            if not fields:
                raise rows.bad(lineno, "BEGIN_DATA before any BEGIN_DATA_FORMAT ... END_DATA_FORMAT")
            upper = [f.upper() for f in fields]
            cols = {f: upper.index(f) for f in ("LAB_L", "LAB_A", "LAB_B", "SAMPLE_ID", "SAMPLE_NAME")
                    if f in upper}
            missing = [f for f in ("LAB_L", "LAB_A", "LAB_B") if f not in cols]
            if missing:
                raise rows.bad(lineno, f"the data format has no {', '.join(missing)} field "
                               f"(fields: {' '.join(fields)})")
            if "SAMPLE_ID" not in cols and "SAMPLE_NAME" not in cols:
                raise rows.bad(lineno, "the data format has neither SAMPLE_NAME nor SAMPLE_ID to name the inks")
            state, set_count, data_line = "data", 0, lineno
            tables += 1
        elif head in ("END_DATA", "END_DATA_FORMAT"):
            raise rows.bad(lineno, f"{head} without a matching BEGIN")
        elif head in ("NUMBER_OF_FIELDS", "NUMBER_OF_SETS"):
            if len(toks) != 2 or not toks[1].isdigit():
                raise rows.bad(lineno, f"{head} needs one whole number")
            if head == "NUMBER_OF_FIELDS":
                n_fields = int(toks[1])
            else:
                n_sets = int(toks[1])
        else:
            # Any other keyword (standard, or declared with KEYWORD) and the file
            # identifier on the first line: kept for the illuminant, otherwise ignored.
            keywords[head.upper()] = " ".join(toks[1:])
    if state != "header":
        block = "BEGIN_DATA" if state == "data" else "BEGIN_DATA_FORMAT"
        raise rows.bad(data_line if state == "data" else len(text.splitlines()),
                       f"{block} is never closed (file ends inside it)")
    if tables == 0:
        raise InkLibraryError(f"{source}: no BEGIN_DATA table found")
    f_ill, f_obs = _cgats_illuminant(keywords)
    try:
        ill = _check_illuminant(f_ill) if f_ill else (illuminant or "D50")
        obs = _check_observer(f_obs) if f_obs else 2
    except ValueError as exc:
        raise InkLibraryError(f"{source}: {exc}") from None
    return rows.build("cgats", ill, obs)


# --------------------------------------------------------------------------- choosing inks

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
    from .colourspace import delta_e_ciede2000

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


def choose_inks(image, library: InkLibrary, n: int, *, substrate=None, method: str = "auto",
                restarts: int = 4, seed=0, max_colours: int = 50_000) -> InkSelection:
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
    >>> lib = parse_ink_library("Red,#c8102e\\nBlue,#1f3a93\\nGold,#f2b705\\n")
    >>> img = np.zeros((4, 4, 3), np.uint8); img[:, :2] = (200, 16, 46)
    >>> sel = choose_inks(img, lib, 1, substrate="#000000")
    >>> [lib.names[i] for i in sel.chosen]
    ['Red']
    """
    from .colourspace import srgb8_to_space
    from .palette import Palette
    from .sampling import ColourSample, sample_picture

    if method not in SELECTION_METHODS:
        raise ValueError(f"unknown selection method {method!r}; choose one of: {', '.join(SELECTION_METHODS)}")
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"number of inks must be a whole number of at least 1, got {n!r}")
    if restarts < 1:
        raise ValueError(f"restarts must be at least 1, got {restarts}")
    sub_idx, sub_lab, sub_rgb, sub_name = _resolve_substrate(substrate, library)
    candidates = [j for j in range(len(library)) if j != sub_idx]
    if len(candidates) < n:
        extra = " besides the substrate" if sub_idx is not None else ""
        raise InkLibraryError(f"{library.source}: asked for {n} inks but the library has only "
                              f"{len(candidates)}{extra}")
    sample = image if isinstance(image, ColourSample) else sample_picture(_picture(image))
    if sample.n_colours > max_colours:
        lab_px, w = sample.binned("lab", max_points=max_colours)
    else:
        lab_px, w = sample.points("lab"), sample.weights
    # Map by the colours actually written (preview sRGB), so the cost is what mapping gives.
    ink_lab = srgb8_to_space(library.rgb8[candidates], "lab")
    d = _distance_matrix(lab_px, ink_lab)
    base = _distance_matrix(lab_px, srgb8_to_space(sub_rgb, "lab")[None])[:, 0] if sub_rgb is not None else None
    use = method
    if method == "auto":
        use = "exact" if math.comb(len(candidates), n) <= _EXACT_LIMIT else "search"
    if use == "exact":
        s, cost, count = _exact(d, w, n, base)
    else:
        rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
        s, cost, count = _search(d, w, n, base, restarts, rng)
    # Order by pixel share, most used first.
    full = d[:, s] if base is None else np.column_stack([d[:, s], base])
    share = np.bincount(np.argmin(full, axis=1), weights=w, minlength=full.shape[1])[:len(s)]
    s = [s[i] for i in np.argsort(-share, kind="stable")]
    chosen = tuple(candidates[i] for i in s)
    rgb = [library.inks[j].rgb8 for j in chosen]
    names = [library.inks[j].name for j in chosen]
    locked = [False] * len(chosen)
    if sub_rgb is not None:
        rgb, names, locked = [sub_rgb] + rgb, [sub_name] + names, [True] + locked
    pal = Palette(rgb8=np.array(rgb, np.uint8), locked=np.array(locked), space="lab", names=tuple(names),
                  fit={"inks": library.describe(), "selection": use, "cost_delta_e": cost})
    return InkSelection(chosen=chosen, cost=cost, method=use, evaluated=count, palette=pal,
                        details={"candidates": len(candidates), "n": n, "substrate": sub_name})


def _picture(image):
    from .images import as_picture, load_image

    if isinstance(image, (str, bytes)) or hasattr(image, "__fspath__"):
        return load_image(image)
    return as_picture(image)


def _resolve_substrate(substrate, library: InkLibrary | None):
    """(library index or None, lab or None, rgb8 or None, name) of a substrate spec."""
    from .colourspace import srgb8_to_space
    from .palette import parse_colour

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


def snap_palette(palette, library: InkLibrary, *, substrate=None) -> tuple[Any, list[dict]]:
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
    >>> lib = parse_ink_library("Red,#c8102e\\nBlue,#1f3a93\\n")
    >>> pal = Palette(np.array([[198, 20, 50]], np.uint8), None)
    >>> snapped, snaps = snap_palette(pal, lib)
    >>> snaps[0]["ink"], snapped.hex
    ('Red', ['#c8102e'])
    """
    from scipy.optimize import linear_sum_assignment

    from .palette import Palette

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
    fit = dict(palette.fit)
    fit.update({"inks": library.describe(), "snaps": snaps})
    out = Palette(rgb8=np.array(rgb, np.uint8), locked=np.arange(len(rgb)) < lk.size, space=palette.space,
                  names=tuple(names), fit=fit)
    return out, snaps
