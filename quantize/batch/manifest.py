"""The batch manifest: one row per image, read back to skip work that is up to date.

``OUTPUT_DIR/manifest.json`` (the whole run) and ``manifest.csv`` (one line
per image) are written atomically at the end of every run, also one that
stopped.  A rerun reads the JSON back: a manifest this tool did not write is
someone else's file and is replaced only with ``force``; rows of the wrong
shape (a hand edit) are dropped and their images redone.  Split out of
:mod:`quantize.batch.run`.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
from pathlib import Path

import numpy as np

from quantize.errors import OutputError

from .workers import _one_line

__all__ = ["MANIFEST_JSON", "MANIFEST_CSV"]

MANIFEST_JSON = "manifest.json"
MANIFEST_CSV = "manifest.csv"
_MANIFEST_FORMAT = "quantize.batch-manifest"
_CSV_FIELDS = ("input", "status", "k", "de_mean", "de_median", "de_p95", "de_max", "entries_used",
               "outputs", "bytes", "seconds", "peak_rss_mb", "error")


def _key(obj) -> str:
    return hashlib.sha256(json.dumps(obj, sort_keys=True).encode()).hexdigest()[:16]


def _read_previous(output_dir: Path, notes: list, force: bool) -> dict:
    """The last run's manifest, checked before any work: a manifest that is not ours is someone
    else's file, and is replaced only with ``force``."""
    path, csv_path = output_dir / MANIFEST_JSON, output_dir / MANIFEST_CSV
    for p in (path, csv_path):
        if p.is_dir():
            raise OutputError(f"{p}: is a folder; the batch writes its manifest there")
    if not path.exists():
        if csv_path.exists() and not force:
            raise OutputError(f"{csv_path}: exists without a batch {MANIFEST_JSON} beside it; not replaced "
                              "without force")
        return {}
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
        if not isinstance(doc, dict) or doc.get("format") != _MANIFEST_FORMAT or not isinstance(doc.get("images"),
                                                                                                 list):
            raise ValueError(f'no "format": "{_MANIFEST_FORMAT}" with its images')
    except (OSError, ValueError, RecursionError) as exc:
        if not force:
            raise OutputError(f"{path}: exists and is not a readable batch manifest ({_one_line(exc)}); "
                              "not replaced without force") from None
        notes.append(f"{path}: previous manifest unreadable ({_one_line(exc)}); every image is redone")
        return {}
    rows = [r for r in doc["images"] if _usable_row(r)]
    if len(rows) < len(doc["images"]):
        notes.append(f"{path}: {len(doc['images']) - len(rows)} unreadable row(s) in the previous manifest; "
                     "those images are redone")
    doc["images"] = rows
    if not isinstance(doc.get("shared"), (dict, type(None))):
        doc["shared"] = None
    return doc


def _usable_row(r) -> bool:
    # A hand-edited manifest must not stop the run: a row of the wrong shape is dropped.
    outs = (r.get("outputs") or []) if isinstance(r, dict) else None
    return (isinstance(r, dict) and isinstance(r.get("input"), str) and isinstance(outs, list)
            and all(isinstance(o, str) for o in outs))


def _up_to_date(prev: dict | None, key: str, src: Path, output_dir: Path) -> bool:
    if not prev or prev.get("status") not in ("ok", "skipped") or prev.get("settings_key") != key:
        return False
    try:
        t_in = src.stat().st_mtime_ns
        return all((output_dir / o).stat().st_mtime_ns >= t_in for o in prev["outputs"]) and bool(prev["outputs"])
    except (OSError, KeyError, TypeError):
        return False


def _csv_text(rows) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=_CSV_FIELDS, lineterminator="\n")
    w.writeheader()
    for r in rows:
        de = r.get("delta_e") or {}
        w.writerow({
            "input": r["input"], "status": r["status"], "k": r.get("k") or "",
            **{f"de_{s}": ("" if de.get(s) is None else f"{de[s]:.4f}") for s in ("mean", "median", "p95", "max")},
            "entries_used": " ".join(map(str, r.get("entries_used") or [])),
            "outputs": ";".join(r.get("outputs") or []),
            "bytes": "" if r.get("bytes") is None else r["bytes"],
            "seconds": "" if r.get("seconds") is None else f"{r['seconds']:.3f}",
            "peak_rss_mb": "" if r.get("peak_rss_mb") is None else f"{r['peak_rss_mb']:.1f}",
            "error": r.get("error") or "",
        })
    return buf.getvalue()


def _summary(rows) -> dict:
    counts = {s: sum(r["status"] == s for r in rows) for s in ("ok", "skipped", "failed", "not run")}
    return {"total": len(rows), "ok": counts["ok"], "skipped": counts["skipped"], "failed": counts["failed"],
            "not_run": counts["not run"]}


def _image_bytes(rows) -> int:
    """Size of the reduced images on disk, written now or kept from the last run (rows of
    manifests older than this figure count 0)."""
    return sum(r.get("bytes") or 0 for r in rows if r["status"] in ("ok", "skipped"))


def _write_manifest(output_dir: Path, doc: dict) -> tuple[Path, Path]:
    from quantize.io.write import atomic_write_text, to_jsonable

    j = atomic_write_text(output_dir / MANIFEST_JSON,
                          json.dumps(to_jsonable(doc), indent=2, ensure_ascii=False) + "\n", force=True)
    c = atomic_write_text(output_dir / MANIFEST_CSV, _csv_text(doc["images"]), force=True)
    return j, c


#: The page of a one-palette run: the set's consistency (worst images, coverage per image).
SET_REPORT_PAGE = "palette-report.html"


def _write_set_page(output_dir: Path, rows, palette, worst: int) -> Path:
    """The set's consistency as a page beside the manifest (rewritten every run, as the manifest is).

    Built from the rows alone: the page decodes no image again (each input
    is decoded once, by its job).
    """
    from quantize.report.set_report import SetImage, write_set_report

    done = [r for r in rows if r["status"] in ("ok", "skipped") and r.get("delta_e")]
    images = [SetImage(r["input"], r["delta_e"], r.get("coverage")) for r in done]
    notes = []
    left = len(rows) - len(done)
    if left:
        notes.append(f"{left} of {len(rows)} images failed or were not run; they are not in this page "
                     f"(see {MANIFEST_JSON}).")
    return write_set_report(output_dir / SET_REPORT_PAGE, palette=palette, images=images, worst=worst,
                            title=f"One palette across {len(done)} images", notes=notes, force=True)


def _consistency(rows, palette, worst: int) -> dict:
    """How well one palette serves the set: images by ΔE00, and how many images use each entry."""
    done = [r for r in rows if r["status"] in ("ok", "skipped") and r.get("delta_e")]
    ranked = sorted(done, key=lambda r: (-r["delta_e"]["mean"], -r["delta_e"]["p95"], r["input"]))
    use = [0] * palette.k
    for r in done:
        for i in r.get("entries_used") or []:
            use[i] += 1
    means = [r["delta_e"]["mean"] for r in done]
    return {
        "k": palette.k, "hex": palette.hex,
        "images_using_entry": use,
        "unused_entries": [i for i, n in enumerate(use) if n == 0],
        "delta_e_mean_over_images": {"median": float(np.median(means)), "max": float(np.max(means))} if means
        else None,
        "worst": [{"input": r["input"], "delta_e": r["delta_e"]} for r in ranked[:worst]],
    }
