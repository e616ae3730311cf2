"""The result of a palette-size sweep: its rows, the k each rule picks, its tables and files.

:func:`quantize.fit.sweep.sweep` computes a :class:`Sweep`; this module holds
what a caller does with one: look up rows, print the terminal table
(:func:`format_table`, shared with ``reduce`` over a range), and write the
table as CSV or as a JSON document with a format name and version.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field, replace
from typing import Sequence
from pathlib import Path

import numpy as np

from quantize.io.write import PathLike, to_jsonable
from quantize.palette import FitCandidate, Palette

from .settings import FitSettings

__all__ = ["Sweep", "SweepRow", "candidate_rows", "format_table", "SWEEP_FORMAT", "SWEEP_VERSION"]

SWEEP_FORMAT = "quantize.fit.sweep"
SWEEP_VERSION = 1


@dataclass(frozen=True, eq=False)
class SweepRow:
    """One palette size of a sweep.

    Attributes
    ----------
    k : int
        Palette size asked for.
    palette : Palette
        The fitted palette (``palette.k`` can be below ``k`` when rounding
        to 8 bits merged two colours).
    cost : float
        k-means cost: pixel-weighted sum of squared distances in the fitting
        space, over every distinct colour.
    delta_e : dict
        Pooled ΔE00 ``mean``, ``median``, ``p95``, ``max``.
    robust : float
        The rule's robust error ``R_k`` (ΔE00 squared).
    score : float
        Penalised score of the ``"bic"`` rule (lower is better).
    start : str
        Which candidate was kept, a key of :data:`quantize.fit.warm.STARTS`
        (always ``"fresh"`` without warm starts).
    coverage : ndarray of shape (palette.k,)
        Percent of pooled pixels per colour.
    per_image : dict
        Image source -> ΔE00 statistics of that image alone (several images).
    """

    k: int
    palette: Palette
    cost: float
    delta_e: dict
    robust: float
    score: float
    start: str
    coverage: np.ndarray
    per_image: dict = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class Sweep:
    """Result of :func:`sweep`: one row per k and the k each rule picks.

    Attributes
    ----------
    rows : list of SweepRow
        Ascending k.
    choices : dict
        Rule name -> :class:`quantize.fit.selection.Choice`; ``"target"`` only
        when a target was given.
    rule : str
        The rule whose pick is :attr:`chosen`.
    settings : FitSettings
        The settings every row was fitted with (``settings.seed`` is the
        integer used, also when a Generator was given).
    n_pixels, n_distinct : int
        Pixels and distinct colours of the pooled sample.
    images : tuple of str
        The sources pooled (empty for a sweep of a sample).
    notes : list of str
    """

    rows: list
    choices: dict
    rule: str
    settings: FitSettings
    n_pixels: int = 0
    n_distinct: int = 0
    images: tuple = ()
    notes: list = field(default_factory=list)

    def with_inputs(self, images: Sequence[str], notes: Sequence[str]) -> "Sweep":
        """A copy naming the pooled ``images``, with ``notes`` (from loading them) first."""
        return replace(self, images=tuple(images), notes=list(notes) + list(self.notes))

    def settings_dict(self) -> dict:
        """The settings as written in the JSON table's ``settings`` object."""
        s = self.settings
        return {"space": s.space, "restarts": s.restarts, "seeding": s.seeding, "nearest": s.nearest, "refine": s.refine,
                "warm": s.warm, "seed": s.seed, "locked": list(s.locked), "target": s.target,
                "target_stat": s.target_stat, "k_range": [self.ks[0], self.ks[-1]], "n_pixels": self.n_pixels,
                "n_distinct": self.n_distinct, "images": list(self.images), "weighting": s.weighting}

    @property
    def ks(self) -> list[int]:
        """The swept sizes."""
        return [r.k for r in self.rows]

    @property
    def chosen(self) -> SweepRow:
        """The row picked by :attr:`rule`."""
        return self.row(self.choices[self.rule].k)

    def row(self, k: int) -> SweepRow:
        """The row of palette size ``k``."""
        for r in self.rows:
            if r.k == k:
                return r
        raise KeyError(f"k = {k} was not swept (swept {self.ks[0]}..{self.ks[-1]})")

    def candidates(self) -> list[dict]:
        """Rows as written in the JSON table, with the keys of a palette file's ``fit.candidates``."""
        out = []
        for r in self.rows:
            d = {"k": r.k, "colours": r.palette.k, "inertia": r.cost, "delta_e": dict(r.delta_e),
                 "robust_error": r.robust, "score": r.score, "start": r.start,
                 "palette": list(r.palette.hex)}
            if r.per_image:
                d["per_image"] = {s: dict(v) for s, v in r.per_image.items()}
            out.append(d)
        return out

    def to_dict(self) -> dict:
        """The JSON table as a dict."""
        return {
            "format": SWEEP_FORMAT,
            "version": SWEEP_VERSION,
            "settings": self.settings_dict(),
            "rule": self.rule,
            "chosen": self.chosen.k,
            "choices": {name: {"k": c.k, "reason": c.reason} for name, c in self.choices.items()},
            "rows": self.candidates(),
            "notes": list(self.notes),
        }

    def to_json(self) -> str:
        """The table as JSON text (UTF-8, indented)."""
        return json.dumps(to_jsonable(self.to_dict()), indent=2, ensure_ascii=False) + "\n"

    def to_csv(self) -> str:
        """The table as CSV: one row per k, per-image ΔE00 columns after the pooled ones."""
        sources = list(self.rows[0].per_image) if self.rows and self.rows[0].per_image else []
        head = ["k", "colours", "kmeans_cost", "de00_mean", "de00_median", "de00_p95", "de00_max",
                "robust_error", "penalised_score", "start"]
        head += [f"chosen_{name}" for name in self.choices]
        for s in sources:
            head += [f"de00_mean[{s}]", f"de00_p95[{s}]", f"de00_max[{s}]"]
        head.append("palette")
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(head)
        for r in self.rows:
            line = [r.k, r.palette.k, _g(r.cost), _g(r.delta_e["mean"]), _g(r.delta_e["median"]),
                    _g(r.delta_e["p95"]), _g(r.delta_e["max"]), _g(r.robust), _g(r.score), r.start]
            line += [int(c.k == r.k) for c in self.choices.values()]
            for s in sources:
                st = r.per_image[s]
                line += [_g(st["mean"]), _g(st["p95"]), _g(st["max"])]
            line.append(" ".join(r.palette.hex))
            w.writerow(line)
        return buf.getvalue()

    def save_csv(self, path: PathLike, *, force: bool = False) -> Path:
        """Write :meth:`to_csv` atomically; raises OutputError if it exists and not ``force``."""
        from quantize.io.write import atomic_write_text

        return atomic_write_text(path, self.to_csv(), force=force)

    def save_json(self, path: PathLike, *, force: bool = False) -> Path:
        """Write :meth:`to_json` atomically; raises OutputError if it exists and not ``force``."""
        from quantize.io.write import atomic_write_text

        return atomic_write_text(path, self.to_json(), force=force)

    def table(self) -> str:
        """The terminal table, the chosen row marked (see :func:`format_table`)."""
        return format_table(self.candidates(), chosen=self.chosen.k,
                            picks={n: c.k for n, c in self.choices.items()})


def _g(x: float) -> str:
    return f"{float(x):.6g}"


def candidate_rows(candidates) -> list[dict]:
    """Normalise a Sweep, its rows, or ``palette.fit.candidates`` to table dicts."""
    if isinstance(candidates, Sweep):
        return candidates.candidates()
    out = []
    for c in candidates:
        if isinstance(c, SweepRow):
            c = {"k": c.k, "inertia": c.cost, "delta_e": c.delta_e, "robust_error": c.robust,
                 "score": c.score, "start": c.start}
        elif isinstance(c, FitCandidate):
            c = c.to_dict()
        if not isinstance(c, dict) or "k" not in c or "delta_e" not in c:
            raise ValueError(f"not a sweep row or fit candidate: {c!r}")
        out.append(c)
    return out


def format_table(candidates, *, chosen: int | None = None, picks: dict | None = None) -> str:
    """A fixed-width text table of candidates, the chosen row marked with ``>``.

    Parameters
    ----------
    candidates : Sweep, list of SweepRow, FitCandidate or dict
        ``palette.fit.candidates``, or dicts with its keys (``k``,
        ``inertia``, ``delta_e``, ``robust_error``, ``score``), so that
        ``reduce`` with a range explains its choice with the same table.
    chosen : int, optional
        The k to mark; for a Sweep, its chosen row by default.
    picks : dict, optional
        Rule name -> k, listed in a last column ("bic", "target").

    Returns
    -------
    str
        Lines joined by newlines, no trailing newline.

    Examples
    --------
    >>> rows = [{"k": 2, "inertia": 9.0, "delta_e": {"mean": 5, "p95": 9, "max": 12},
    ...          "robust_error": 30.0, "score": 250.0}]
    >>> print(format_table(rows, chosen=2))  # doctest: +NORMALIZE_WHITESPACE
         k   k-means cost  ΔE00 mean   p95    max  penalised score
    >    2              9       5.00   9.00  12.00           250.00
    """
    if isinstance(candidates, Sweep):
        if chosen is None:
            chosen = candidates.chosen.k
        if picks is None:
            picks = {n: c.k for n, c in candidates.choices.items()}
    rows = candidate_rows(candidates)
    lines = ["     k   k-means cost  ΔE00 mean   p95    max  penalised score"
             + ("  picked by" if picks else "")]
    for c in rows:
        de = c["delta_e"]
        mark = ">" if c["k"] == chosen else " "
        line = (f"{mark} {c['k']:>4} {c['inertia']:>14.6g} {de['mean']:>10.2f} {de['p95']:>6.2f} "
                f"{de['max']:>6.2f} {c['score']:>16.2f}")
        if picks:
            by = [name for name, k in picks.items() if k == c["k"]]
            line += ("  " + ", ".join(by)) if by else ""
        lines.append(line.rstrip())
    return "\n".join(lines)
