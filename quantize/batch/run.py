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

import dataclasses
import os
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Iterator, cast

import numpy as np

from quantize.errors import OutputError, QuantizeError

from .files import DEFAULT_INCLUDE, _check_folders, discover_images
from .guard import clear_journal, journal_outputs, output_lock, remove_stale_parts
from .jobs import BatchJob, process_image, sample_image
from .manifest import (
    _MANIFEST_FORMAT,
    MANIFEST_CSV,
    MANIFEST_JSON,
    _consistency,
    _image_bytes,
    _key,
    _read_previous,
    _summary,
    _up_to_date,
    _write_manifest,
    _write_set_page,
)
from .settings import FORMATS, BatchSettings
from .workers import _executor, _one_line

if TYPE_CHECKING:
    from quantize.palette import Palette

__all__ = ["discover_images", "run_batch", "BatchResult", "BatchSettings", "DEFAULT_INCLUDE", "FORMATS",
           "MANIFEST_JSON", "MANIFEST_CSV", "SHARED_PALETTE"]

SHARED_PALETTE = "shared.palette.json"


@dataclass
class BatchResult:
    """What a batch run did.

    Attributes
    ----------
    rows : list of dict
        One per image, as in the manifest.
    summary : dict
        Counts: ``total``, ``ok``, ``skipped``, ``failed``, ``not_run``.
        The manifest's ``image_bytes`` is the size of the reduced images on disk.
    manifest : dict
        The whole JSON manifest.
    manifest_paths : tuple of Path
        The JSON and CSV manifest files.
    notes : list of str
        Anything the user should know about the run as a whole.
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


# --------------------------------------------------------------------------- shared palette

class _Pool:
    """The whole set's colours as one weighted sample, merged as images arrive to bound memory.

    The merging is :func:`quantize.core.sampling.pool_samples`'; only the
    scale of "equal" weighting (each image weighs as much as the mean image)
    waits for the last image, since the mean is not known before.
    """

    #: Distinct colours held before the parts are merged into one.
    MERGE_ROWS = 4_000_000

    def __init__(self, weighting: str):
        self.weighting = weighting
        self.parts: list = []
        self.rows = 0
        self.pixels: list[int] = []

    def add(self, s) -> None:
        """Add one image's :class:`~quantize.core.sampling.ColourSample`."""
        from quantize.core.sampling import ColourSample

        w = s.weights / s.weights.sum() if self.weighting == "equal" else s.weights
        self.parts.append(ColourSample(codes=s.codes, weights=w, bit_depth=s.bit_depth, n_pixels=s.n_pixels))
        self.rows += s.n_colours
        self.pixels.append(s.n_pixels)
        if self.rows > self.MERGE_ROWS and len(self.parts) > 1:
            self._merge()

    def _merge(self) -> None:
        from quantize.core.sampling import pool_samples

        # The weights are scaled already: "pixels" sums them as they are.
        self.parts = [pool_samples(self.parts, weighting="pixels")]
        self.rows = self.parts[0].n_colours

    def sample(self):
        """The pooled sample of every image added."""
        from quantize.core.sampling import ColourSample

        self._merge()
        s = self.parts[0]
        if self.weighting == "equal":
            s = ColourSample(codes=s.codes, weights=s.weights * np.mean(self.pixels), bit_depth=s.bit_depth,
                             n_pixels=s.n_pixels)
        return s


def _batch_fit(fit):
    """The run's FitSettings as a batch fits with them: CIEDE2000 compiled at every size.

    A batch fits many images in each process, so the compiled loops' load
    (about half a second and 100 MB) is paid once and then saves CPU on
    every fit (``FitSettings.compiled_always``; ``benchmarks/bench_batch.py --kernels``).  Set for
    every batch, whatever the number of workers, so that a batch's
    palettes never depend on it; they agree with ``reduce``'s to rounding.
    """
    import dataclasses

    return dataclasses.replace(fit, compiled_always=True)


def _fit_pooled(sample, *, k, fit, weighting, n_images):
    """One palette for the pooled sample, by :func:`quantize.fit.engine.fit_palette` with the run's ``fit``."""
    import dataclasses
    import warnings

    from quantize.fit.clustering import PaletteSizeWarning
    from quantize.fit.engine import fit_palette
    from quantize.palette import Palette

    settings = dataclasses.replace(_batch_fit(fit), weighting=weighting)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PaletteSizeWarning)  # recorded in the fit's notes
        pal = fit_palette(sample, k, settings=settings)
    # The pooled sample has no sources of its own: the record counts the images instead.
    return Palette(pal.rgb8, pal.locked, pal.space, pal.names, dataclasses.replace(pal.fit, images=n_images))


# --------------------------------------------------------------------------- the run

def _written_since(path: Path, since_ns: int) -> bool:
    try:
        return path.is_file() and path.stat().st_mtime_ns >= since_ns
    except OSError:
        return False


def _manifest_settings(s: BatchSettings) -> dict:
    """The settings the manifest records; a change in them redoes every image."""
    from quantize import __version__

    # The package version is part of the settings: a new engine redoes the images.
    settings: dict[str, Any] = {"quantize": __version__, "mode": s.mode, "k": "auto" if s.k is None else str(s.k), "space": s.space, "seed": s.seed,
                "restarts": s.restarts, "format": s.fmt, "max_pixels": s.max_pixels}
    from quantize.io.read import assumed_cmyk_profile

    profile = assumed_cmyk_profile()
    if profile is not None:  # only when given, so that earlier manifests still match
        settings["cmyk_profile"] = os.path.abspath(profile)
    f = s.fit
    # The rest of the fit, named as the command line's options (fit_nearest: the fit's --nearest).
    settings.update(rule=f.rule, kind=f.kind, target=f.target, target_stat=f.target_stat, locked=list(f.locked),
                    seeding=f.seeding, fit_nearest=f.nearest, refine=f.refine, warm=f.warm)
    from quantize.render.methods import scan_of

    settings.update(dither=s.dither, dither_strength=s.dither_strength, serpentine=scan_of(s.dither, s.serpentine),
                    nearest=s.nearest)
    if s.mode == "shared":
        settings["weighting"] = s.shared_weighting
    elif s.mode == "palette":  # the fit settings do not change a mapping onto a given palette
        for name in ("k", "space", "seed", "restarts") + _FIT_RECORDED:
            del settings[name]
    return settings


#: Fit settings the manifest records beside k, space, seed and restarts (see _manifest_settings).
_FIT_RECORDED = ("rule", "kind", "target", "target_stat", "locked", "seeding", "fit_nearest", "refine", "warm")


class _Run:
    """One batch run: its folders and settings, the previous manifest, the rows so far.

    :meth:`finish` writes the manifest; it is called once, whether the run
    ends, fails or is interrupted.
    """

    def __init__(self, src: Path, dst: Path, settings: BatchSettings):
        s = self.settings = settings
        self.src, self.dst = src, dst
        self.notes: list = []
        self.prev_doc = _read_previous(dst, self.notes, s.force)
        if s.shared and (dst / SHARED_PALETTE).is_dir():
            raise OutputError(f"{dst / SHARED_PALETTE}: is a folder; the shared palette is written there")
        if (s.shared and not s.force and (dst / SHARED_PALETTE).exists()
                and (self.prev_doc.get("shared") or {}).get("palette_file") != SHARED_PALETTE):
            raise OutputError(f"{dst / SHARED_PALETTE}: already exists; not replaced without force")
        self.prev_rows = {r.get("input"): r for r in self.prev_doc.get("images", []) if isinstance(r, dict)}
        self.journal = journal_outputs(dst)
        self.rels = discover_images(src, include=s.include, exclude=s.exclude, skip=[dst])
        self.doc: dict[str, Any] = {"format": _MANIFEST_FORMAT, "version": 1, "input_dir": str(src), "output_dir": str(dst),
                    "settings": _manifest_settings(s), "settings_key": None, "summary": None,
                    "palette_report": None, "error": None, "notes": self.notes, "images": []}
        self.rows: dict = {}
        self.planned: dict = {}  # input -> the outputs its job would write
        self.palette: Palette | None = None
        self.results: Iterator[tuple[BatchJob, Any]] | None = None  # the mapper over the images, once started
        self.written = False
        self.t_run = time.perf_counter()
        self.started_ns = time.time_ns()

    def finish(self, error: str | None = None) -> BatchResult:
        """Write the manifest: every image's row, in input order, and the summary."""
        ordered = []
        for rel in self.rels:
            r = self.rows.get(str(rel))
            if r is None:  # never reached this run: keep what an earlier run recorded
                r = dict(self.prev_rows.get(str(rel)) or {"input": str(rel), "status": "not run", "outputs": []})
                # A worker may have finished this image after the run was stopped: its
                # files are this run's own, so they are listed for the next run to replace.
                late = [o for o in self.planned.get(str(rel), ())
                        if _written_since(self.dst / o, self.started_ns)]
                late += [o for o in self.journal.get(str(rel), ()) if (self.dst / o).exists()]
                if late:
                    r["outputs"] = sorted(set(r.get("outputs") or []) | set(late))
            ordered.append(r)
        doc = self.doc
        doc["images"] = ordered
        doc["summary"] = _summary(ordered)
        doc["image_bytes"] = _image_bytes(ordered)
        doc["seconds"] = round(time.perf_counter() - self.t_run, 3)
        doc["error"] = error
        if self.palette is not None and self.settings.mode != "per-image":
            doc["palette_report"] = _consistency(ordered, self.palette, self.settings.worst)
            if error is None:
                page = _write_set_page(self.dst, ordered, self.palette, self.settings.worst)
                doc["palette_report"]["page"] = page.name
        self.written = True
        paths = _write_manifest(self.dst, doc)
        clear_journal(self.dst)  # the manifest now lists every file the journal recorded
        return BatchResult(rows=ordered, summary=doc["summary"], manifest=doc, manifest_paths=paths,
                           notes=self.notes)

    def fail(self, msg: str):
        """Write the manifest with ``msg`` as the run's error, and raise it."""
        self.finish(msg)
        raise QuantizeError(msg)

    def plan(self) -> list[BatchJob]:
        """One job per image; images whose outputs would collide are failed instead."""
        from quantize.io.read import DEFAULT_MAX_PIXELS, assumed_cmyk_profile

        s = self.settings
        owned = {o for r in self.prev_rows.values() for o in (r.get("outputs") or [])}
        # Files a killed run wrote before it could write its manifest.
        owned |= {o for outs in self.journal.values() for o in outs}
        out_root = self.dst.resolve()
        jobs: list[BatchJob] = []
        by_output: dict[str, list[BatchJob]] = {}
        # With a worker process per core the images keep the cores busy; a
        # fit's own second thread would only contend with the other worker.
        threads = s.cluster is None and (s.workers in (0, 1) or (s.workers is None and (os.cpu_count() or 1) == 1))
        fit = BatchJob.fit_fields(_batch_fit(s.fit))
        cmyk_profile = assumed_cmyk_profile()  # the caller's assume_cmyk_profile, carried to the workers
        cmyk_profile = None if cmyk_profile is None else os.path.abspath(cmyk_profile)
        for rel in self.rels:
            out_rel = rel.with_suffix("." + s.fmt).as_posix()
            outs_rel = (out_rel,) + ((rel.with_suffix(".palette.json").as_posix(),) if s.mode == "per-image" else ())
            job = BatchJob(path=os.path.abspath(self.src / rel), rel=str(rel), output_dir=str(out_root),
                           outputs_rel=outs_rel, replace=s.force or any(o in owned for o in outs_rel), k=s.k,
                           max_pixels=DEFAULT_MAX_PIXELS if s.max_pixels is None else s.max_pixels,
                           fit=fit, threads=threads, dither=s.dither, dither_strength=s.dither_strength,
                           serpentine=s.serpentine, nearest=s.nearest, cmyk_profile=cmyk_profile)
            by_output.setdefault(out_rel, []).append(job)
            jobs.append(job)
        for out_rel, same in by_output.items():
            if len(same) > 1:
                names = ", ".join(j.rel for j in same)
                for j in same:
                    self.rows[j.rel] = {"input": j.rel, "status": "failed", "outputs": [],
                                        "error": f"{names} would all be written to {out_rel}; rename one"}
        jobs = [j for j in jobs if j.rel not in self.rows]
        self.planned.update((j.rel, list(j.outputs_rel)) for j in jobs)
        return jobs

    def choose_palette(self, jobs, mapper, progress) -> int:
        """The one palette of a "palette" or "shared" run (None per image); the progress units it took."""
        mode = self.settings.mode
        if mode == "palette":
            from quantize.palette import Palette

            given = self.settings.palette
            self.palette = given if isinstance(given, Palette) else Palette.load(given)
            return 0
        if mode == "shared":
            self.palette, done = _shared_palette(self, jobs, mapper, progress)
            if self.palette is None:
                self.fail("no image of the set could be read, so no shared palette was fitted")
            return done
        return 0

    def map_images(self, jobs, mapper, palette_doc, done0: int, progress) -> BatchResult:
        """Reduce every image that is not up to date, then write the manifest."""
        key = _key(self.doc["settings"])
        self.doc["settings_key"] = key
        todo = []
        for j in jobs:
            if j.rel in self.rows:
                continue
            prev = self.prev_rows.get(j.rel)
            if not self.settings.force and _up_to_date(prev, key, Path(j.path), self.dst):
                self.rows[j.rel] = dict(cast(dict, prev), status="skipped", seconds=0.0)  # up to date: a row
            else:
                todo.append(j)
        total = done0 + len(todo)
        self.results = mapper(process_image, todo, (palette_doc,))
        for i, (job, result) in enumerate(self.results, start=1):
            if isinstance(result, BaseException):
                result = {"input": job.rel, "status": "failed", "outputs": [], "error": _one_line(result)}
            result["settings_key"] = key
            self.rows[job.rel] = result
            if progress:
                progress(done0 + i, total, job.rel)
        return self.finish()

    def stopped(self, exc: BaseException) -> None:
        """After an error or an interrupt: wait for the images in the workers, then write the manifest."""
        if self.results is not None and hasattr(self.results, "close"):
            # Let the images already in the workers finish (one per worker), so
            # that the manifest lists every file this run wrote.
            try:
                self.results.close()
            except KeyboardInterrupt:  # a second interrupt while waiting
                self.notes.append("stopped again while images were finishing in the workers; the manifest may "
                                  "not list all of their files")
            except Exception as err:  # noqa: BLE001 - the manifest is still written, and says so
                self.notes.append(f"could not wait for the images still in the workers ({_one_line(err)})")
        if not self.written:
            self.finish("interrupted" if isinstance(exc, KeyboardInterrupt) else _one_line(exc))


def _settings(settings: BatchSettings | None, options: dict) -> BatchSettings:
    if settings is None:
        return BatchSettings(**options)
    if not isinstance(settings, BatchSettings):
        raise TypeError(f"settings must be a BatchSettings, got {type(settings).__name__}")
    if "fit" in options:  # a new fit brings its own space, seed and restarts unless given beside it
        options = {**{n: None for n in ("space", "seed", "restarts")}, **options}
    return dataclasses.replace(settings, **options) if options else settings


def _prepare_output(src: Path, dst: Path, exclude) -> None:
    if not src.is_dir():
        raise QuantizeError(f"{src}: {'is not a folder' if src.exists() else 'no such folder'}")
    _check_folders(src, dst, exclude)
    try:
        dst.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{dst}: cannot create the output folder ({exc.strerror or exc})") from None


def run_batch(input_dir: str | os.PathLike[str], output_dir: str | os.PathLike[str],
              settings: BatchSettings | None = None, *,
              progress: Callable[[int, int, str], object] | None = None, **options: Any) -> BatchResult:
    """Reduce every image under ``input_dir`` into a mirrored tree under ``output_dir``.

    Parameters
    ----------
    input_dir, output_dir : path-like
        Folders; ``output_dir`` is created if missing.  It may not be or
        contain ``input_dir``, nor lie inside it unless ``exclude`` removes it.
    settings : BatchSettings, optional
        All the options below in one object; keyword options given as well
        replace its values.
    progress : callable, optional
        ``progress(done, total, rel_path)`` after each unit of work (shared
        runs count a sampling and a mapping unit per image).
    **options
        The fields of :class:`BatchSettings`, checked once:

    include, exclude : sequence of str
        Glob patterns, see :func:`discover_images`.
    palette : path-like or Palette, optional
        Map every image onto this saved palette instead of fitting.
    shared : bool, default=False
        Fit one palette to the whole set (pooled colour histograms) and map
        every image onto it.
    shared_weighting : {"equal", "pixels"}, default="equal"
        In the pool, each image counts equally, or by its pixel count.
    k : int or "min-max", optional
        Palette size, or the range the rule chooses from.  Default: the
        library's (2-12; a photo under the automatic rule, up to 256).
    fit : FitSettings, optional
        The rest of the fit (rule, ΔE00 target, locked colours, seeding, ...),
        as :func:`quantize.fit.engine.fit_palette` takes it.
    space : {"lab", "oklab", "cam16ucs"}, default="lab"
    seed : int, default=0
    restarts : int, default=8
        When given, these three replace the same fields of ``fit``.
    dither : str, default="none"
    dither_strength : float, default=1.0
    serpentine : bool, default=True
    nearest : {"auto", "ciede2000", "space"}, default="auto"
        How each image is mapped, as :meth:`quantize.palette.Palette.apply`
        takes it.
    fmt : {"png", "webp", "gif", "tif", "jpg"}, default="png"
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
        Bad settings (see :class:`BatchSettings`).
    TypeError
        An unknown keyword option.

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
    >>> brand = FitSettings(locked=["#c8102e", "white"])  # doctest: +SKIP
    >>> res = run_batch("packs", "out", k="2-12", fit=brand, dither="blue-noise")  # doctest: +SKIP
    >>> res.summary["failed"], res.manifest["palette_report"]["worst"][0]["input"]  # doctest: +SKIP
    """
    s = _settings(settings, options)
    src, dst = Path(input_dir), Path(output_dir)
    _prepare_output(src, dst, s.exclude)
    with output_lock(dst):
        stale = remove_stale_parts(dst)
        run = _Run(src, dst, s)
        if stale:
            run.notes.append(f"removed {stale} temporary file(s) left by an earlier run that was stopped")
        return _run_locked(run, s, progress)


def _run_locked(run: _Run, s: BatchSettings, progress) -> BatchResult:
    """The run, once it holds the output folder's lock."""
    src = run.src
    if not run.rels:
        run.fail(f"{src}: no images found (include {', '.join(s.include or DEFAULT_INCLUDE)}"
                 + (f"; exclude {', '.join(s.exclude)})" if s.exclude else ")"))
    jobs = run.plan()
    client = None
    try:
        client, mapper = _executor(s.cluster, s.workers)
        done0 = run.choose_palette(jobs, mapper, progress)
        palette_doc = None
        if run.palette is not None:
            palette_doc = run.palette.to_dict()
            run.doc["settings"]["palette"] = {"space": run.palette.space, "hex": run.palette.hex}
            if client is not None:
                # Sent once to every worker rather than with every task.
                palette_doc = client.scatter([palette_doc], broadcast=True, hash=False)[0]
        return run.map_images(jobs, mapper, palette_doc, done0, progress)
    except BaseException as exc:
        run.stopped(exc)
        raise
    finally:
        if client is not None:
            client.close()


def _shared_palette(run: _Run, jobs, mapper, progress):
    """Fit the shared palette once (or reuse the last run's for an unchanged set) and save it.

    Returns the palette (None if no image could be read) and the progress units done.
    """
    from quantize.palette import Palette

    src, dst, rels, rows, doc, notes = run.src, run.dst, run.rels, run.rows, run.doc, run.notes
    prev_doc, force, settings = run.prev_doc, run.settings.force, run.doc["settings"]
    fit_settings = {k: settings[k] for k in ("k", "space", "seed", "restarts", "weighting", "max_pixels")
                    + _FIT_RECORDED}
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
            doc["shared"]["fit"] = pal.fit.to_dict() if pal.fit is not None else {}
            for rel, err in prev_shared.get("sampling_failed", []):
                rows[rel] = {"input": rel, "status": "failed", "outputs": [], "error": err}
            doc["shared"]["sampling_failed"] = prev_shared.get("sampling_failed", [])
            return pal, 0
        except QuantizeError as exc:
            notes.append(f"{path}: cannot reuse the saved shared palette ({exc}); refitting")
    pool = _Pool(settings["weighting"])
    clear = False  # some image's output needs a transparent colour-index entry
    total = 2 * len(jobs)
    for i, (job, got) in enumerate(mapper(sample_image, jobs, ()), start=1):
        error = _one_line(got) if isinstance(got, BaseException) else got.error
        if error:
            rows[job.rel] = {"input": job.rel, "status": "failed", "outputs": [], "error": error}
            doc["shared"]["sampling_failed"].append([job.rel, error])
        else:
            pool.add(got.sample)
            clear = clear or got.clear
        if progress:
            progress(i, total, job.rel)
    if not pool.pixels:
        return None, len(jobs)
    from quantize.fit.index_room import sizes_with_room

    # As for one image: a range reaching 256 leaves the transparent pixels their index entry.
    k, room_note = sizes_with_room(run.settings.k, run.settings.fit, reserve=int(clear))
    if room_note:
        notes.append(f"shared palette: {room_note}")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pal = _fit_pooled(pool.sample(), k=k, fit=run.settings.fit, weighting=settings["weighting"],
                          n_images=len(pool.pixels))
    pal.save(path, force=force or prev_shared.get("palette_file") == SHARED_PALETTE)
    doc["shared"]["fit"] = pal.fit.to_dict()
    notes.extend(f"shared palette: {n}" for n in pal.fit.notes)
    return pal, len(jobs)
