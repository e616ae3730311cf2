"""Batch runs: every image of a folder tree, locally in parallel or on a Dask cluster.

Three ways to choose palettes:

* per image (default): each image gets its own fitted palette, written beside
  its output as ``NAME.palette.json``;
* ``palette=FILE``: every image is mapped onto one saved palette;
* ``shared=True``: one palette is fitted to the whole set first, from the
  pooled colour histograms of every image (each image counted equally, or by
  pixel count), saved as ``shared.palette.json`` and applied to every image.

Work is done one image per task, in worker processes
(:class:`concurrent.futures.ProcessPoolExecutor`, ``spawn`` start method) or
on a ``dask.distributed`` scheduler.  At most one task per worker is in
flight, so memory is bounded by the largest image, not by the folder size.

The output tree mirrors the input tree.  ``OUTPUT_DIR/manifest.json`` and
``manifest.csv`` hold one row per image (status, k, ΔE00 statistics, palette
entries used, outputs, seconds, peak memory, error text); a rerun reads the
JSON manifest and skips images whose outputs are newer than their input and
whose settings are unchanged.  Nothing is written outside OUTPUT_DIR and
inputs are only read.  An output folder inside the input folder is refused
unless an ``exclude`` pattern removes it from the inputs.
"""

from __future__ import annotations

import os
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from quantize.errors import OutputError, QuantizeError

from .files import DEFAULT_INCLUDE, _check_folders, _check_patterns, discover_images
from .manifest import (
    _MANIFEST_FORMAT,
    MANIFEST_CSV,
    MANIFEST_JSON,
    _consistency,
    _key,
    _read_previous,
    _summary,
    _up_to_date,
    _write_manifest,
)
from .workers import _executor, _one_line

__all__ = ["discover_images", "run_batch", "BatchResult", "DEFAULT_INCLUDE", "FORMATS", "MANIFEST_JSON",
           "MANIFEST_CSV", "SHARED_PALETTE"]

#: Output file types.
FORMATS = ("png", "tif", "jpg")
SHARED_PALETTE = "shared.palette.json"
_WEIGHTINGS = ("equal", "pixels")


@dataclass
class BatchResult:
    """What a batch run did.

    Attributes
    ----------
    rows : list of dict
        One per image, as in the manifest.
    summary : dict
        Counts: ``total``, ``ok``, ``skipped``, ``failed``, ``not_run``.
    manifest : dict
        The whole JSON manifest.
    manifest_paths : tuple of Path
        The JSON and CSV manifest files.
    """

    rows: list
    summary: dict
    manifest: dict
    manifest_paths: tuple = ()
    notes: list = field(default_factory=list)

    @property
    def failed(self) -> int:
        """Number of images that failed."""
        return self.summary["failed"]


# --------------------------------------------------------------------------- per-image work (runs in workers)

def _peak_mb() -> float | None:
    try:
        import resource
    except ImportError:  # pragma: no cover - not on Windows
        return None
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux reports KiB


def _notes(caught) -> list[str]:
    seen = []
    for w in caught:
        m = str(w.message)
        if m not in seen:
            seen.append(m)
    return seen


def process_image(job: dict, palette_doc: dict | None = None) -> dict:
    """Reduce one image of a batch and return its manifest row (never raises for bad input).

    ``job`` holds ``path``, ``rel``, ``outputs`` (absolute, image first,
    then the palette file in per-image mode), ``replace`` and the fit
    settings; ``palette_doc`` is the palette as a JSON dict, or None to fit one.
    """
    from quantize.fit.engine import fit_palette
    from quantize.io.read import load_image
    from quantize.palette import Palette

    t0 = time.perf_counter()
    row = {"input": job["rel"], "status": "failed", "k": None, "delta_e": None, "entries_used": None,
           "coverage": None, "outputs": [], "error": None}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            pic = load_image(job["path"], max_pixels=job["max_pixels"])
            if palette_doc is None:
                pal = fit_palette(pic, job["k"], space=job["space"], seed=job["seed"], restarts=job["restarts"])
            else:
                pal = Palette.from_dict(palette_doc, source="batch palette")
            res = pal.apply(pic)
            outs = [Path(p) for p in job["outputs"]]
            if not outs[0].parent.resolve().is_relative_to(job["output_dir"]):
                raise OutputError(f"{outs[0]}: its folder leads outside the output folder (a symbolic link?); "
                                  "not written")
            outs[0].parent.mkdir(parents=True, exist_ok=True)
            res.save(outs[0], force=job["replace"], inputs=[job["path"]])
            # Recorded as soon as written, so that a later run knows the file is its own to replace.
            row["outputs"].append(job["outputs_rel"][0])
            if len(outs) > 1:
                pal.save(outs[1], force=job["replace"])
                row["outputs"].append(job["outputs_rel"][1])
            row.update(status="ok", k=pal.k, delta_e={s: float(v) for s, v in res.delta_e.items()},
                       entries_used=[int(i) for i in np.flatnonzero(res.coverage > 0)],
                       coverage=[round(float(c), 4) for c in res.coverage])
        except Exception as exc:  # noqa: BLE001 - one bad image must not stop a batch; the run exits non-zero
            row["error"] = _one_line(exc)
    row["notes"] = _notes(caught)
    row["seconds"] = round(time.perf_counter() - t0, 4)
    row["peak_rss_mb"] = _peak_mb()
    return row


def sample_image(job: dict) -> dict:
    """Distinct colours and pixel counts of one image, packed at 16 bits per channel, for pooling."""
    from quantize.core.sampling import sample_picture
    from quantize.io.read import load_image

    out = {"rel": job["rel"], "error": None}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the mapping pass reports the same notes
        try:
            s = sample_picture(load_image(job["path"], max_pixels=job["max_pixels"]))
            codes = s.codes.astype(np.int64) * (257 if s.bit_depth == 8 else 1)  # 8-bit c is 16-bit 257*c
            out.update(packed=(codes[:, 0] << 32) | (codes[:, 1] << 16) | codes[:, 2], weights=s.weights,
                       n_pixels=s.n_pixels, bits=s.bit_depth)
        except Exception as exc:  # noqa: BLE001 - recorded as this image's failure
            out["error"] = _one_line(exc)
    return out


# --------------------------------------------------------------------------- shared palette

class _Pool:
    """Running weighted histogram of the whole set, merged in chunks to bound memory."""

    def __init__(self, weighting: str):
        self.weighting = weighting
        self.chunks, self.rows, self.pixels, self.bits = [], 0, [], 8

    def add(self, s: dict) -> None:
        w = s["weights"] / s["weights"].sum() if self.weighting == "equal" else s["weights"]
        self.chunks.append((s["packed"], w))
        self.rows += s["packed"].size
        self.pixels.append(s["n_pixels"])
        self.bits = max(self.bits, s["bits"])
        if self.rows > 4_000_000 and len(self.chunks) > 1:
            self._merge()

    def _merge(self) -> None:
        p = np.concatenate([c[0] for c in self.chunks])
        w = np.concatenate([c[1] for c in self.chunks])
        uniq, inv = np.unique(p, return_inverse=True)
        self.chunks = [(uniq, np.bincount(inv.ravel(), weights=w, minlength=uniq.size))]
        self.rows = uniq.size

    def sample(self):
        from quantize.core.sampling import ColourSample

        self._merge()
        packed, w = self.chunks[0]
        if self.weighting == "equal":
            w = w * np.mean(self.pixels)  # the scale pool_samples uses: each image weighs the mean image
        codes = np.stack([(packed >> 32) & 0xFFFF, (packed >> 16) & 0xFFFF, packed & 0xFFFF], axis=1)
        codes = (codes // 257).astype(np.uint8) if self.bits == 8 else codes.astype(np.uint16)
        return ColourSample(codes=codes, weights=w, bit_depth=self.bits, n_pixels=int(sum(self.pixels)))


def _fit_pooled(sample, *, k, space, seed, restarts, weighting, n_images):
    """One palette for the pooled sample, by :func:`quantize.fit.engine.fit_palette`."""
    import warnings

    from quantize.fit.clustering import PaletteSizeWarning
    from quantize.fit.engine import fit_palette

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PaletteSizeWarning)  # recorded in fit["notes"]
        pal = fit_palette(sample, k=k, space=space, seed=seed, restarts=restarts, weighting=weighting)
    pal.fit["images"] = n_images
    return pal


# --------------------------------------------------------------------------- the run

def _written_since(path: Path, since_ns: int) -> bool:
    try:
        return path.is_file() and path.stat().st_mtime_ns >= since_ns
    except OSError:
        return False


def _plan(rels, src: Path, dst: Path, base: dict, *, fmt, per_image, owned, force, rows) -> list[dict]:
    """One job per image; images whose outputs would collide are failed into ``rows`` instead."""
    jobs, by_output = [], {}
    out_root = dst.resolve()
    for rel in rels:
        out_rel = rel.with_suffix("." + fmt).as_posix()
        outs_rel = [out_rel] + ([rel.with_suffix(".palette.json").as_posix()] if per_image else [])
        job = dict(base, path=os.path.abspath(src / rel), rel=str(rel), output_dir=str(out_root),
                   outputs_rel=outs_rel, outputs=[str(out_root / o) for o in outs_rel],
                   replace=force or any(o in owned for o in outs_rel))
        by_output.setdefault(out_rel, []).append(job)
        jobs.append(job)
    for out_rel, same in by_output.items():
        if len(same) > 1:
            names = ", ".join(j["rel"] for j in same)
            for j in same:
                rows[j["rel"]] = {"input": j["rel"], "status": "failed", "outputs": [],
                                  "error": f"{names} would all be written to {out_rel}; rename one"}
    return [j for j in jobs if j["rel"] not in rows]


def _validate(*, shared, palette, shared_weighting, space, restarts, fmt, workers, worst, k):
    from quantize.colour.spaces import check_space
    from quantize.fit.engine import parse_k

    if shared and palette is not None:
        raise ValueError("give either a palette file or shared=True, not both")
    if shared_weighting not in _WEIGHTINGS:
        raise ValueError(f"shared_weighting must be one of {', '.join(_WEIGHTINGS)}, got {shared_weighting!r}")
    check_space(space)
    if restarts < 1:
        raise ValueError(f"restarts must be at least 1, got {restarts}")
    if fmt not in FORMATS:
        raise ValueError(f"unknown output format {fmt!r}; choose one of: {', '.join(FORMATS)}")
    if workers is not None and workers < 0:
        raise ValueError(f"workers must be 0 (in this process) or more, got {workers}")
    if worst < 0:
        raise ValueError(f"worst must be 0 or more, got {worst}")
    parse_k(k)


def run_batch(input_dir, output_dir, *, include: Sequence[str] | None = None, exclude: Sequence[str] = (),
              palette=None, shared: bool = False, shared_weighting: str = "equal", k="2-12",
              space: str = "lab", seed: int = 0, restarts: int = 8, fmt: str = "png",
              workers: int | None = None, cluster=None, force: bool = False, max_pixels: int | None = None,
              worst: int = 10, progress: Callable[[int, int, str], object] | None = None) -> BatchResult:
    """Reduce every image under ``input_dir`` into a mirrored tree under ``output_dir``.

    Parameters
    ----------
    input_dir, output_dir : path-like
        Folders; ``output_dir`` is created if missing.  It may not be or
        contain ``input_dir``, nor lie inside it unless ``exclude`` removes it.
    include, exclude : sequence of str
        Glob patterns, see :func:`discover_images`.
    palette : path-like or Palette, optional
        Map every image onto this saved palette instead of fitting.
    shared : bool, default=False
        Fit one palette to the whole set (pooled colour histograms) and map
        every image onto it.
    shared_weighting : {"equal", "pixels"}, default="equal"
        In the pool, each image counts equally, or by its pixel count.
    k : int or "min-max", default="2-12"
        Palette size, or the range the penalised rule chooses from.
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
    seed : int, default=0
    restarts : int, default=8
    fmt : {"png", "tif", "jpg"}, default="png"
        Output file type.
    workers : int, optional
        Worker processes (default ``os.cpu_count()``); ``0`` works in this
        process, one image after another.  Ignored with ``cluster``.
    cluster : str, optional
        Address of a ``dask.distributed`` scheduler (``"tcp://host:8786"``)
        to run the per-image work on; its workers must see the same paths.
    force : bool, default=False
        Redo every image and replace existing files.  Without it, up-to-date
        images are skipped and only files this batch wrote before are replaced.
    max_pixels : int, optional
        Decompression-bomb limit per image (default: the loader's).
    worst : int, default=10
        How many worst-fitting images the one-palette report lists.
    progress : callable, optional
        ``progress(done, total, rel_path)`` after each unit of work (shared
        runs count a sampling and a mapping unit per image).

    Returns
    -------
    BatchResult
        Images that fail are rows with ``status="failed"`` and their error
        text; the run goes on.

    Raises
    ------
    QuantizeError
        Missing input folder, bad output folder (one holding a manifest that no
        batch wrote is refused without ``force``), no images found, a palette
        file that fails to load (:class:`PaletteFileError`), Dask missing or
        unreachable.  Except for folder problems the manifest is written first.
    ValueError
        Bad settings.

    References
    ----------
    .. [1] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Research & Application 30(1),
       21-30, 2005.
    .. [2] M. Rocklin, "Dask: parallel computation with blocked algorithms
       and task scheduling", Proceedings of the 14th Python in Science
       Conference, 130-136, 2015.

    Examples
    --------
    >>> res = run_batch("photos", "out", shared=True, k=8)  # doctest: +SKIP
    >>> res.summary["failed"], res.manifest["palette_report"]["worst"][0]["input"]  # doctest: +SKIP
    """
    from quantize.io.read import DEFAULT_MAX_PIXELS

    _validate(shared=shared, palette=palette, shared_weighting=shared_weighting, space=space,
              restarts=restarts, fmt=fmt, workers=workers, worst=worst, k=k)
    src, dst = Path(input_dir), Path(output_dir)
    exclude = _check_patterns(exclude, "exclude")
    if not src.is_dir():
        raise QuantizeError(f"{src}: {'is not a folder' if src.exists() else 'no such folder'}")
    _check_folders(src, dst, exclude)
    try:
        dst.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{dst}: cannot create the output folder ({exc.strerror or exc})") from None
    notes: list = []
    prev_doc = _read_previous(dst, notes, force)
    if shared and (dst / SHARED_PALETTE).is_dir():
        raise OutputError(f"{dst / SHARED_PALETTE}: is a folder; the shared palette is written there")
    if (shared and not force and (dst / SHARED_PALETTE).exists()
            and (prev_doc.get("shared") or {}).get("palette_file") != SHARED_PALETTE):
        raise OutputError(f"{dst / SHARED_PALETTE}: already exists; not replaced without force")
    prev_rows = {r.get("input"): r for r in prev_doc.get("images", []) if isinstance(r, dict)}
    owned = {o for r in prev_rows.values() for o in (r.get("outputs") or [])}
    rels = discover_images(src, include=include, exclude=exclude, skip=[dst])
    mode = "shared" if shared else "palette" if palette is not None else "per-image"
    from quantize import __version__

    # The package version is part of the settings: a new engine redoes the images.
    settings = {"quantize": __version__, "mode": mode, "k": str(k), "space": space, "seed": seed,
                "restarts": restarts, "format": fmt, "max_pixels": max_pixels}
    if mode == "shared":
        settings["weighting"] = shared_weighting
    elif mode == "palette":  # the fit settings do not change a mapping onto a given palette
        for name in ("k", "space", "seed", "restarts"):
            del settings[name]
    doc = {"format": _MANIFEST_FORMAT, "version": 1, "input_dir": str(src), "output_dir": str(dst),
           "settings": settings, "settings_key": None, "summary": None, "palette_report": None, "error": None,
           "notes": notes, "images": []}
    rows: dict = {}
    planned: dict = {}  # input -> the outputs its job would write
    state = {"written": False}
    t_run = time.perf_counter()
    started_ns = time.time_ns()

    def finish(error: str | None = None) -> BatchResult:
        ordered = []
        for rel in rels:
            r = rows.get(str(rel))
            if r is None:  # never reached this run: keep what an earlier run recorded
                r = dict(prev_rows.get(str(rel)) or {"input": str(rel), "status": "not run", "outputs": []})
                # A worker may have finished this image after the run was stopped: its
                # files are this run's own, so they are listed for the next run to replace.
                late = [o for o in planned.get(str(rel), ()) if _written_since(dst / o, started_ns)]
                if late:
                    r["outputs"] = sorted(set(r.get("outputs") or []) | set(late))
            ordered.append(r)
        doc["images"] = ordered
        doc["summary"] = _summary(ordered)
        doc["seconds"] = round(time.perf_counter() - t_run, 3)
        doc["error"] = error
        if pal_obj is not None and mode != "per-image":
            doc["palette_report"] = _consistency(ordered, pal_obj, worst)
        state["written"] = True
        paths = _write_manifest(dst, doc)
        return BatchResult(rows=ordered, summary=doc["summary"], manifest=doc, manifest_paths=paths, notes=notes)

    pal_obj, done0 = None, 0
    if not rels:
        msg = (f"{src}: no images found (include {', '.join(include or DEFAULT_INCLUDE)}"
               + (f"; exclude {', '.join(exclude)})" if exclude else ")"))
        finish(msg)
        raise QuantizeError(msg)

    base = {"k": k, "space": space, "seed": seed, "restarts": restarts,
            "max_pixels": DEFAULT_MAX_PIXELS if max_pixels is None else max_pixels}
    jobs = _plan(rels, src, dst, base, fmt=fmt, per_image=mode == "per-image", owned=owned, force=force,
                 rows=rows)
    planned.update((j["rel"], j["outputs_rel"]) for j in jobs)
    client = None
    try:
        client, mapper = _executor(cluster, workers)
        palette_doc = None
        if mode == "palette":
            from quantize.palette import Palette

            pal_obj = palette if isinstance(palette, Palette) else Palette.load(palette)
        elif mode == "shared":
            pal_obj, done0 = _shared_palette(src, dst, rels, jobs, rows, prev_doc, settings, force, mapper,
                                             progress, doc, notes)
            if pal_obj is None:
                msg = "no image of the set could be read, so no shared palette was fitted"
                finish(msg)
                raise QuantizeError(msg)
        if pal_obj is not None:
            palette_doc = pal_obj.to_dict()
            settings["palette"] = {"space": pal_obj.space, "hex": pal_obj.hex}
            if client is not None:
                # Sent once to every worker rather than with every task.
                palette_doc = client.scatter([palette_doc], broadcast=True, hash=False)[0]
        key = _key(settings)
        doc["settings_key"] = key
        todo = []
        for j in jobs:
            if j["rel"] in rows:
                continue
            prev = prev_rows.get(j["rel"])
            if not force and _up_to_date(prev, key, Path(j["path"]), dst):
                rows[j["rel"]] = dict(prev, status="skipped", seconds=0.0)
            else:
                todo.append(j)
        total = done0 + len(todo)
        results = state["results"] = mapper(process_image, todo, (palette_doc,))
        for i, (job, result) in enumerate(results, start=1):
            if isinstance(result, BaseException):
                result = {"input": job["rel"], "status": "failed", "outputs": [], "error": _one_line(result)}
            result["settings_key"] = key
            rows[job["rel"]] = result
            if progress:
                progress(done0 + i, total, job["rel"])
        return finish()
    except BaseException as exc:
        results = state.get("results")
        if results is not None and hasattr(results, "close"):
            # Let the images already in the workers finish (one per worker), so
            # that the manifest lists every file this run wrote.
            try:
                results.close()
            except KeyboardInterrupt:  # a second interrupt while waiting
                notes.append("stopped again while images were finishing in the workers; the manifest may "
                             "not list all of their files")
            except Exception as err:  # noqa: BLE001 - the manifest is still written, and says so
                notes.append(f"could not wait for the images still in the workers ({_one_line(err)})")
        if not state["written"]:
            finish("interrupted" if isinstance(exc, KeyboardInterrupt) else _one_line(exc))
        raise
    finally:
        if client is not None:
            client.close()


def _shared_palette(src, dst, rels, jobs, rows, prev_doc, settings, force, mapper, progress, doc, notes):
    """Fit the shared palette once (or reuse the last run's for an unchanged set) and save it.

    Returns the palette (None if no image could be read) and the progress units done.
    """
    from quantize.palette import Palette

    fit_settings = {k: settings[k] for k in ("k", "space", "seed", "restarts", "weighting", "max_pixels")}
    stamp = []
    for rel in rels:
        try:
            st = (src / rel).stat()
            stamp.append([str(rel), st.st_size, st.st_mtime_ns])
        except OSError:
            stamp.append([str(rel), None, None])
    fingerprint = _key({"fit": fit_settings, "images": stamp})
    path = dst / SHARED_PALETTE
    prev_shared = prev_doc.get("shared") or {}
    doc["shared"] = {"palette_file": SHARED_PALETTE, "fingerprint": fingerprint, "weighting": settings["weighting"],
                     "reused": False, "sampling_failed": []}
    if not force and prev_shared.get("fingerprint") == fingerprint and path.exists():
        try:
            pal = Palette.load(path)
            doc["shared"]["reused"] = True
            doc["shared"]["fit"] = pal.fit
            for rel, err in prev_shared.get("sampling_failed", []):
                rows[rel] = {"input": rel, "status": "failed", "outputs": [], "error": err}
            doc["shared"]["sampling_failed"] = prev_shared.get("sampling_failed", [])
            return pal, 0
        except QuantizeError as exc:
            notes.append(f"{path}: cannot reuse the saved shared palette ({exc}); refitting")
    pool = _Pool(settings["weighting"])
    total = 2 * len(jobs)
    for i, (job, s) in enumerate(mapper(sample_image, jobs, ()), start=1):
        if isinstance(s, BaseException):
            s = {"error": _one_line(s)}
        if s["error"]:
            rows[job["rel"]] = {"input": job["rel"], "status": "failed", "outputs": [], "error": s["error"]}
            doc["shared"]["sampling_failed"].append([job["rel"], s["error"]])
        else:
            pool.add(s)
        if progress:
            progress(i, total, job["rel"])
    if not pool.pixels:
        return None, len(jobs)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pal = _fit_pooled(pool.sample(), k=settings["k"], space=settings["space"], seed=settings["seed"],
                          restarts=settings["restarts"], weighting=settings["weighting"],
                          n_images=len(pool.pixels))
    pal.save(path, force=force or prev_shared.get("palette_file") == SHARED_PALETTE)
    doc["shared"]["fit"] = pal.fit
    notes.extend(f"shared palette: {n}" for n in pal.fit["notes"])
    return pal, len(jobs)
