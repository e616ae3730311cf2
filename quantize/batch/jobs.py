"""One image's work in a batch, as a worker process or a Dask worker runs it.

A :class:`BatchJob` says everything a worker needs about one image; it holds
only strings and numbers, so it pickles for process pools and Dask.  Neither
task raises for a bad image: :func:`process_image` returns the image's
manifest row with its error text, :func:`sample_image` a
:class:`SampledImage` with the error.  Split out of :mod:`quantize.batch.run`.
"""

from __future__ import annotations

import dataclasses
import threading
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from quantize.errors import OutputError

from .guard import journal_output
from .workers import _one_line

__all__ = ["BatchJob", "SampledImage", "process_image", "sample_image"]


@dataclass(frozen=True)
class BatchJob:
    """One image of a batch and where its outputs go.

    Attributes
    ----------
    path : str
        The input file, absolute.
    rel : str
        The input's path relative to the input folder; the manifest's key.
    output_dir : str
        The output folder, absolute and resolved: no output may leave it.
    outputs_rel : tuple of str
        Outputs relative to ``output_dir``: the reduced image, then (per-image
        mode) its palette file.
    replace : bool
        Existing outputs may be replaced: with ``force``, or because an
        earlier run of this batch wrote them.
    k : int or str
        Palette size, or "MIN-MAX" (per-image fits only).
    max_pixels : int or None
        Decompression-bomb limit for reading the input.
    fit : tuple of (name, value) pairs, default=()
        The fields of the run's :class:`quantize.fit.settings.FitSettings`
        but ``threads``, as plain values; the worker rebuilds the settings
        from them (:meth:`fit_settings`).  Empty: the defaults.
    threads : bool, default=True
        Whether the fit may use a second thread (``FitSettings.threads``):
        off when the run already has a worker process per core.
    dither : str, default="none"
    dither_strength : float, default=1.0
    serpentine : bool, default=True
    nearest : str, default="auto"
        How the image is mapped, as :meth:`quantize.palette.Palette.apply` takes it.
    cmyk_profile : str or None, default=None
        ICC profile for CMYK inputs without an embedded one (``load_image``'s ``cmyk_profile``).
    """

    path: str
    rel: str
    output_dir: str
    outputs_rel: tuple[str, ...]
    replace: bool
    k: Any
    max_pixels: int | None
    fit: tuple = ()
    threads: bool = True
    dither: str = "none"
    dither_strength: float = 1.0
    serpentine: bool = True
    nearest: str | None = "auto"
    cmyk_profile: str | None = None

    @staticmethod
    def fit_fields(settings) -> tuple:
        """``settings`` (a FitSettings) as the plain (name, value) pairs a job carries."""
        return tuple((f.name, getattr(settings, f.name)) for f in dataclasses.fields(settings) if f.name != "threads")

    def fit_settings(self):
        """The run's FitSettings, rebuilt in the worker (checked again there, as any FitSettings)."""
        from quantize.fit.settings import FitSettings

        return FitSettings(**dict(self.fit), threads=self.threads)

    def mapping(self) -> dict:
        """Keyword arguments of :meth:`quantize.palette.Palette.apply` for this image."""
        return {"dither": self.dither, "dither_strength": self.dither_strength, "serpentine": self.serpentine,
                "nearest": self.nearest}

    @property
    def outputs(self) -> tuple[str, ...]:
        """The outputs as absolute paths, in the order of ``outputs_rel``."""
        return tuple(str(Path(self.output_dir) / o) for o in self.outputs_rel)


@dataclass(frozen=True, eq=False)
class SampledImage:
    """One image's colours for the shared fit, or why they could not be read.

    Attributes
    ----------
    sample : ColourSample or None
        Distinct colours, pixel counts, bit depth and opaque pixel count
        (no per-pixel index: only what pooling needs crosses to the parent).
    error : str or None
        One line saying why the image could not be read.
    clear : bool
        Its output needs a transparent colour-index entry
        (:func:`quantize.io.write.needs_clear_entry`), so the shared
        palette must leave one free.
    """

    sample: Any = None
    error: str | None = None
    clear: bool = False


def _peak_mb() -> float | None:
    try:
        import resource
    except ImportError:  # pragma: no cover - not on Windows
        return None
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux reports KiB


#: warnings.catch_warnings swaps process-wide state: images run on threads
#: (a threaded Dask worker) would record each other's notes.  One at a time.
_WARNINGS_LOCK = threading.Lock()


def _notes(caught) -> list[str]:
    seen = []
    for w in caught:
        m = str(w.message)
        if m not in seen:
            seen.append(m)
    return seen


def process_image(job: BatchJob, palette_doc: dict | None = None) -> dict:
    """Reduce one image of a batch and return its manifest row (never raises for bad input).

    ``palette_doc`` is the palette as a JSON dict, or None to fit one with
    the job's settings.
    """
    from quantize.fit.clustering import PaletteSizeWarning
    from quantize.fit.engine import fit_palette
    from quantize.fit.index_room import sizes_with_room
    from quantize.io.read import load_image
    from quantize.io.write import needs_clear_entry, publish_together
    from quantize.palette import Palette

    t0 = time.perf_counter()
    row: dict[str, Any] = {"input": job.rel, "status": "failed", "k": None, "delta_e": None, "entries_used": None,
           "coverage": None, "outputs": [], "bytes": None, "error": None}
    with _WARNINGS_LOCK, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            pic = load_image(job.path, max_pixels=job.max_pixels, cmyk_profile=job.cmyk_profile)
            if palette_doc is None:
                settings = job.fit_settings()
                # As reduce: a range reaching 256 leaves transparent pixels their index entry.
                k, room_note = sizes_with_room(job.k, settings, picture=pic,
                                               reserve=int(needs_clear_entry(job.outputs[0], pic.alpha, pic.max_code)))
                if room_note:
                    warnings.warn(room_note, PaletteSizeWarning, stacklevel=1)
                pal = fit_palette(pic, k, settings=settings)
            else:
                pal = Palette.from_dict(palette_doc, source="batch palette")
            res = pal.apply(pic, **job.mapping())
            outs = [Path(p) for p in job.outputs]
            if not outs[0].parent.resolve().is_relative_to(job.output_dir):
                raise OutputError(f"{outs[0]}: its folder leads outside the output folder (a symbolic link?); "
                                  "not written")
            outs[0].parent.mkdir(parents=True, exist_ok=True)
            with publish_together():  # the image and its palette land together, or neither does
                saved = res.write(outs[0], picture=pic, force=job.replace, inputs=[job.path])
                if len(outs) > 1:
                    pal.save(outs[1], force=job.replace)
            # Recorded as soon as written, so that a later run knows the files are its own to replace,
            # in the row and, in case this run is killed before its manifest, in the folder's journal.
            for rel_out in job.outputs_rel[:len(outs)]:
                row["outputs"].append(rel_out)
                journal_output(job.output_dir, job.rel, rel_out)
            # The ΔE00 of the file written (of the decoded pixels for a JPEG) and its size.
            de = saved.delta_e  # None: a JPEG with no fully opaque pixel to measure
            cov = saved.coverage if saved.coverage is not None else np.zeros(pal.k)  # of the decoded file for a JPEG
            row.update(status="ok", k=pal.k, delta_e=None if de is None else {s: float(v) for s, v in de.items()},
                       bytes=saved.n_bytes, entries_used=[int(i) for i in np.flatnonzero(cov > 0)],
                       coverage=[round(float(c), 4) for c in cov])
        except Exception as exc:  # noqa: BLE001 - one bad image must not stop a batch; the run exits non-zero
            row["error"] = _one_line(exc)
    row["notes"] = _notes(caught)
    row["seconds"] = round(time.perf_counter() - t0, 4)
    row["peak_rss_mb"] = _peak_mb()
    return row


def sample_image(job: BatchJob) -> SampledImage:
    """Distinct colours and pixel counts of one image, for the shared fit (never raises for bad input)."""
    from quantize.core.sampling import ColourSample, sample_picture
    from quantize.io.read import load_image
    from quantize.io.write import needs_clear_entry

    with _WARNINGS_LOCK, warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the mapping pass reports the same notes
        try:
            pic = load_image(job.path, max_pixels=job.max_pixels, cmyk_profile=job.cmyk_profile)
            s = sample_picture(pic)
        except Exception as exc:  # noqa: BLE001 - recorded as this image's failure
            return SampledImage(error=_one_line(exc))
    return SampledImage(ColourSample(codes=s.codes, weights=s.weights, bit_depth=s.bit_depth, n_pixels=s.n_pixels),
                        clear=bool(job.outputs) and needs_clear_entry(job.outputs[0], pic.alpha, pic.max_code))
