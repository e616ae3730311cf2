"""Ink libraries: the inks a shop has on the shelf, read from CSV, JSON or CGATS files.

An ink library is read from one of three kinds of file:

* **CSV**: one ink per row, ``name,#rrggbb`` (sRGB) or ``name,L,a,b``
  (CIELAB). A header row (``name,hex`` or ``name,L,a,b``) is optional, ``#``
  starts a comment line, and a comment ``# illuminant: D65`` states the
  illuminant of the Lab rows.
* **JSON**: ``{"format": "quantize.separation.inks", "version": 1, "illuminant": "D50",
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
are adapted to D65 with the Bradford chromatic adaptation transform
(:mod:`quantize.colour.adaptation`). sRGB hex inks are D65 already and are not
adapted.

Choosing among the inks of a library for an image (:func:`choose_inks`,
:func:`snap_palette`) lives in :mod:`quantize.separation.choice`.

ΔE figures here are computed from file data; they are not measurements of a
print.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

# Adaptation lives in its own module; its public names stay importable here.
from quantize.colour.adaptation import ILLUMINANTS, check_illuminant, check_observer, adapt_lab, bradford_matrix
from quantize.errors import QuantizeError

__all__ = [
    "Ink", "InkLibrary", "InkLibraryError", "ILLUMINANTS",
    "load_ink_library", "parse_ink_library", "adapt_lab", "bradford_matrix",
]

#: Largest ink library file read: a measured library of thousands of inks is well under 1 MB. Parsing
#: JSON can take some 25 times a file's size in memory (a file of empty objects), so the cap keeps a
#: hostile file's parse near 100 MB (tests/test_memory_bound.py measures it).
MAX_LIBRARY_BYTES = 4_000_000
#: Most inks a library may hold: published spot-colour guides hold a few thousand (common practice, no
#: source). Each ink is checked against the sRGB gamut when the library is built, so a million-ink file
#: took minutes and half a gigabyte before this cap.
MAX_LIBRARY_INKS = 20_000

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


# --------------------------------------------------------------------------- reading

def load_ink_library(path: str | os.PathLike[str], *, illuminant: str | None = None) -> InkLibrary:
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
        import stat

        st = p.stat()
        if not stat.S_ISREG(st.st_mode) and not stat.S_ISDIR(st.st_mode):
            raise InkLibraryError(f"{p}: is not a regular file (a pipe, device or socket); give an ink library file")
        if st.st_size > MAX_LIBRARY_BYTES:
            raise InkLibraryError(f"{p}: {st.st_size / 1e6:.0f} MB is larger than an ink library may be "
                                  f"({MAX_LIBRARY_BYTES / 1e6:.0f} MB)")
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
            illuminant = check_illuminant(illuminant)
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
        if len(self.items) >= MAX_LIBRARY_INKS:
            raise self.bad(line, f"more than {MAX_LIBRARY_INKS:,} inks; an ink library may hold at most that many")
        self.items.append((name, colour, line, sample_id))

    def build(self, fmt: str, illuminant: str, observer: int, notes=()) -> InkLibrary:
        from quantize.colour.spaces import clip_to_gamut, delta_e_ciede2000, lab_to_srgb, srgb8_to_space

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
    shown = text if not isinstance(text, str) or len(text) <= 40 else text[:30] + "..." + text[-6:]
    try:
        v = float(text)
    except (TypeError, ValueError):
        raise rows.bad(line, f"{what} {shown!r} is not a number") from None
    if not math.isfinite(v):
        raise rows.bad(line, f"{what} {shown!r} is not finite")
    return v


def _lab_value(values, rows: _Rows, line) -> tuple:
    lab = tuple(_number(v, rows, line, n) for v, n in zip(values, ("L*", "a*", "b*")))
    if not 0.0 <= lab[0] <= 100.0:
        raise rows.bad(line, f"L* {lab[0]:g} is outside 0-100")
    # No surface colour comes near |a*| or |b*| of 200 (the sRGB gamut stays within about 130).
    for v, n in zip(lab[1:], ("a*", "b*")):
        if not -200.0 <= v <= 200.0:
            raise rows.bad(line, f"{n} {v:.6g} is outside -200 to 200, no ink's colour")
    return lab


def _hex_value(text: str, rows: _Rows, line) -> np.ndarray:
    m = _HEX.match(text.strip())
    if not m:
        shown = text if len(text) <= 40 else text[:30] + "..." + text[-6:]
        raise rows.bad(line, f"colour {shown!r} is neither sRGB hex (#rrggbb) nor L,a,b")
    h = m.group(1)
    return np.array([int(h[i:i + 2], 16) for i in (0, 2, 4)], dtype=np.uint8)


def _parse_csv(text: str, source: str, illuminant: str | None) -> InkLibrary:
    rows = _Rows(source)
    ill = illuminant
    notes: list[str] = []
    header_done = False
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            m = re.match(r"#\s*illuminant\s*[:=]\s*(\S+)", s, flags=re.IGNORECASE)
            if m:
                try:
                    ill = check_illuminant(m.group(1))
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
    except RecursionError:
        raise InkLibraryError(f"{source}: not an ink library (JSON nested too deeply)") from None
    ill, obs = illuminant, 2
    if isinstance(doc, dict):
        fmt = doc.get("format", "quantize.separation.inks")
        if fmt != "quantize.separation.inks":
            raise InkLibraryError(f"{source}: format: expected \"quantize.separation.inks\", got {fmt!r}")
        ver = doc.get("version", 1)
        if not isinstance(ver, int) or ver < 1 or ver > 1:
            raise InkLibraryError(f"{source}: version: this quantize reads version 1, got {ver!r}")
        if "illuminant" in doc:
            try:
                ill = check_illuminant(doc["illuminant"])
            except ValueError as exc:
                raise InkLibraryError(f"{source}: illuminant: {exc}") from None
        if "observer" in doc:
            try:
                obs = check_observer(doc["observer"])
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


def _cgats_illuminant(keywords: dict[str, str]) -> tuple[str | None, str | None]:
    """Illuminant and observer (its text, e.g. ``"2"``) stated by a CGATS file's keywords, if any."""
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
    reader = _CgatsReader(source)
    lines = text.splitlines()
    for lineno, line in enumerate(lines, start=1):
        toks = _cgats_tokens(line)
        if toks:
            reader.feed(lineno, toks)
    return reader.finish(len(lines), illuminant)


class _CgatsReader:
    """CGATS.17 text, one tokenised line at a time: keywords, then format and data blocks.

    Outside a block (``header``) lines are keywords or open a block; inside
    ``BEGIN_DATA_FORMAT`` they name fields; inside ``BEGIN_DATA`` each line
    is one data set, read as an ink.
    """

    _NAMES = ("LAB_L", "LAB_A", "LAB_B", "SAMPLE_ID", "SAMPLE_NAME")

    def __init__(self, source: str):
        self.rows = _Rows(source)
        self.keywords: dict[str, str] = {}
        self.state = "header"
        self.fields: list[str] = []
        self.n_fields: int | None = None
        self.n_sets: int | None = None
        self.cols: dict[str, int] = {}
        self.set_count = 0
        self.tables = 0
        self.data_line = 0

    def feed(self, lineno: int, toks: list[str]) -> None:
        if self.state == "format":
            self._format_line(lineno, toks)
        elif self.state == "data":
            self._data_line(lineno, toks)
        else:
            self._header_line(lineno, toks)

    def _format_line(self, lineno, toks) -> None:
        if toks[0] != "END_DATA_FORMAT":
            self.fields.extend(toks)
            return
        if self.n_fields is not None and len(self.fields) != self.n_fields:
            raise self.rows.bad(lineno, f"NUMBER_OF_FIELDS is {self.n_fields} but the format lists "
                                f"{len(self.fields)}")
        self.state = "header"

    def _data_line(self, lineno, toks) -> None:
        if toks[0] == "END_DATA":
            if self.n_sets is not None and self.set_count != self.n_sets:
                raise self.rows.bad(lineno, f"NUMBER_OF_SETS is {self.n_sets} but the table has "
                                    f"{self.set_count} data sets")
            self.state, self.fields, self.n_fields, self.n_sets, self.cols = "header", [], None, None, {}
            return
        if len(toks) != len(self.fields):
            raise self.rows.bad(lineno, f"expected {len(self.fields)} values ({' '.join(self.fields)}), "
                                f"got {len(toks)}")
        self.set_count += 1
        cols = self.cols
        lab = _lab_value([toks[cols[k]] for k in ("LAB_L", "LAB_A", "LAB_B")], self.rows, lineno)
        sid = toks[cols["SAMPLE_ID"]] if "SAMPLE_ID" in cols else None
        # The data format has one of the two (_begin_data refuses it otherwise).
        name = toks[cols["SAMPLE_NAME"]] if "SAMPLE_NAME" in cols else toks[cols["SAMPLE_ID"]]
        self.rows.add(name, lab, lineno, sid)

    def _header_line(self, lineno, toks) -> None:
        head = toks[0]
        if head == "BEGIN_DATA_FORMAT":
            self.state, self.fields = "format", toks[1:]
        elif head == "BEGIN_DATA":
            self._begin_data(lineno)
        elif head in ("END_DATA", "END_DATA_FORMAT"):
            raise self.rows.bad(lineno, f"{head} without a matching BEGIN")
        elif head in ("NUMBER_OF_FIELDS", "NUMBER_OF_SETS"):
            if len(toks) != 2 or not toks[1].isdigit() or len(toks[1]) > 9:
                raise self.rows.bad(lineno, f"{head} needs one whole number below a billion")
            if head == "NUMBER_OF_FIELDS":
                self.n_fields = int(toks[1])
            else:
                self.n_sets = int(toks[1])
        else:
            # Any other keyword (standard, or declared with KEYWORD) and the file
            # identifier on the first line: kept for the illuminant, otherwise ignored.
            self.keywords[head.upper()] = " ".join(toks[1:])

    def _begin_data(self, lineno) -> None:
        if not self.fields:
            raise self.rows.bad(lineno, "BEGIN_DATA before any BEGIN_DATA_FORMAT ... END_DATA_FORMAT")
        upper = [f.upper() for f in self.fields]
        self.cols = {f: upper.index(f) for f in self._NAMES if f in upper}
        missing = [f for f in ("LAB_L", "LAB_A", "LAB_B") if f not in self.cols]
        if missing:
            raise self.rows.bad(lineno, f"the data format has no {', '.join(missing)} field "
                                f"(fields: {' '.join(self.fields)})")
        if "SAMPLE_ID" not in self.cols and "SAMPLE_NAME" not in self.cols:
            raise self.rows.bad(lineno, "the data format has neither SAMPLE_NAME nor SAMPLE_ID to name the inks")
        self.state, self.set_count, self.data_line = "data", 0, lineno
        self.tables += 1

    def finish(self, n_lines: int, illuminant: str | None) -> InkLibrary:
        """The library, once the whole text has been fed; ``illuminant`` applies when the file names none."""
        source = self.rows.source
        if self.state != "header":
            block = "BEGIN_DATA" if self.state == "data" else "BEGIN_DATA_FORMAT"
            raise self.rows.bad(self.data_line if self.state == "data" else n_lines,
                                f"{block} is never closed (file ends inside it)")
        if self.tables == 0:
            raise InkLibraryError(f"{source}: no BEGIN_DATA table found")
        f_ill, f_obs = _cgats_illuminant(self.keywords)
        try:
            ill = check_illuminant(f_ill) if f_ill else (illuminant or "D50")
            obs = check_observer(f_obs) if f_obs else 2
        except ValueError as exc:
            raise InkLibraryError(f"{source}: {exc}") from None
        return self.rows.build("cgats", ill, obs)
