"""Writing results: reduced images and atomic file writes.

Every output goes to a temporary file in the target folder and is renamed
into place, so an interrupted run leaves no half-written file; an existing
file is replaced only with ``force``, and an input never.  How each format
holds a palette and its transparency is in :mod:`quantize.io._encode`.
Readers are in :mod:`quantize.io.read`.
"""


import contextlib
import contextvars
import logging
import os
import re
import tempfile
import warnings
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Union

import numpy as np

from quantize.core.picture import ImageWarning
from quantize.errors import OutputError
from quantize.io._decode import dpi_pair, to_8bit
from quantize.io._encode import ALPHA_STEPS, ALPHA_THRESHOLD, encode

__all__ = ["ALPHA_STEPS", "ALPHA_THRESHOLD", "SAVE_FORMATS", "WrittenImage", "atomic_write_bytes",
           "atomic_write_text", "needs_clear_entry", "publish_together", "save_image", "to_jsonable", "write_image"]

PathLike = Union[str, "os.PathLike[str]"]


@dataclass(frozen=True, eq=False)
class WrittenImage:
    """What :func:`write_image` put on disk, measured from the encoded file.

    Attributes
    ----------
    path : pathlib.Path
    format : str
        "PNG", "WEBP", "GIF", "TIFF" or "JPEG".
    n_bytes : int
        Size of the file, in bytes.
    palette_entries : int or None
        Entries of the file's colour index (indexed PNG, GIF, lossless WebP
        with at most 256 colours): the palette, then a fully transparent
        entry and (colour, alpha) entries where there is transparency.
        None for a file without one.
    alpha_step : int or None
        Spacing, on the 0-255 scale, of the alpha levels written: 1 keeps
        alpha exactly, 255 thresholds it at :data:`ALPHA_THRESHOLD`.  None
        without transparency, and for TIFF (exact) and JPEG (flattened).
    alpha_max_change : int
        Largest change of one pixel's alpha, 0-255.
    decoded : ndarray of shape (H, W, 3), uint8, or None
        A lossy file's pixels as Pillow decodes them; None for lossless files,
        whose pixels are exactly the entries written.
    cleared : ndarray of shape (H, W), bool, or None
        Pixels given some opacity (alpha > 0) but written fully transparent
        by the alpha levels; None if there are none.
    notes : tuple of str
        Warnings about the file (a JPEG's colours, flattened or thresholded alpha).
    """

    path: Path
    format: str
    n_bytes: int
    palette_entries: int | None = None
    alpha_step: int | None = None
    alpha_max_change: int = 0
    decoded: np.ndarray | None = field(default=None, repr=False)
    cleared: np.ndarray | None = field(default=None, repr=False)
    notes: tuple = ()

    @property
    def lossy(self) -> bool:
        """True when the file's pixels differ from the palette image given (JPEG)."""
        return self.decoded is not None


_log = logging.getLogger(__name__)


def write_image(
    path: PathLike,
    indices: np.ndarray,
    palette_rgb: np.ndarray,
    *,
    alpha: np.ndarray | None = None,
    dpi: tuple[float, float] | None = None,
    force: bool = False,
    inputs: Iterable[PathLike] = (),
) -> WrittenImage:
    """Write a palette-reduced image, atomically, and describe the file written.

    Parameters and errors as :func:`save_image`, which calls this and warns
    the notes.  Nothing is warned here: the notes come back in the result.

    Returns
    -------
    WrittenImage

    Examples
    --------
    >>> import numpy as np
    >>> w = write_image("out.webp", np.zeros((4, 4), int), np.array([[200, 30, 40]], np.uint8))  # doctest: +SKIP
    >>> w.format, w.palette_entries  # doctest: +SKIP
    ('WEBP', 1)
    """
    target = Path(path)
    fmt = SAVE_FORMATS.get(target.suffix.lower())
    if fmt is None:
        raise OutputError(
            f"{os.fspath(path)}: unsupported output extension {target.suffix or '(none)'!r}; "
            f"use one of {', '.join(SAVE_FORMATS)}"
        )
    idx, palette, a8 = _check_raster(indices, palette_rgb, alpha)
    dpi = _check_dpi(dpi)
    enc = encode(fmt, idx, palette, a8, dpi if fmt in _KEEPS_DPI else None, os.fspath(path))
    written = _atomic_write(target, lambda fh: fh.write(enc.data), force=force, inputs=inputs)
    _log.info("wrote %s: %s, %d bytes", os.fspath(path), fmt, len(enc.data))
    return WrittenImage(written, fmt, len(enc.data), enc.palette_entries, enc.alpha_step,
                        enc.alpha_max_change, enc.decoded, enc.cleared, enc.notes)


def save_image(
    path: PathLike,
    indices: np.ndarray,
    palette_rgb: np.ndarray,
    *,
    alpha: np.ndarray | None = None,
    dpi: tuple[float, float] | None = None,
    force: bool = False,
    inputs: Iterable[PathLike] = (),
) -> Path:
    """Write a palette-reduced image, atomically, in the format its extension names.

    Parameters
    ----------
    path : str or path-like
        Output file. Its extension selects the format (see `SAVE_FORMATS`):
        ``.png``, ``.webp``, ``.gif``, ``.tif``/``.tiff`` or ``.jpg``/``.jpeg``.
    indices : (H, W) ndarray of int
        Palette index of every pixel.
    palette_rgb : (k, 3) ndarray of uint8
        sRGB colour of each palette entry.
    alpha : (H, W) ndarray of uint8, uint16 or bool, optional
        Opacity, 0 = fully transparent.
    dpi : (float, float), optional
        Resolution to record in the file (PNG, TIFF and JPEG; WebP and GIF
        have no field for it).
    force : bool, default False
        Replace `path` if it already exists.
    inputs : iterable of path-like, default ()
        The images this output was made from. `path` is never allowed to be
        one of them, even with `force`.

    Returns
    -------
    pathlib.Path
        `path`, once it is complete on disk.

    Raises
    ------
    OutputError
        Unknown extension; the colours (and transparency) do not fit a GIF's
        or indexed PNG's 256 entries; the path is a folder, an input, or
        already exists without `force`; the folder is missing or not
        writable; writing failed.  A file already at `path` is left as it was.
    ValueError
        `indices`, `palette_rgb`, `alpha` or `dpi` have the wrong shape, dtype
        or range.

    Warns
    -----
    ImageWarning
        A JPEG: it is no longer k colours (the count in the file is given),
        and transparent pixels are flattened onto white.  Partly transparent
        pixels thresholded at :data:`ALPHA_THRESHOLD`.

    Notes
    -----
    PNG and WebP with k <= 256 are palette images; transparency goes into the
    palette (PNG: one tRNS alpha per entry): entries 0 to k-1 are the palette,
    opaque and in order, then one fully transparent entry and one entry per
    (colour, alpha level) the image uses.  Alpha is rounded to levels spaced
    by the finest of `ALPHA_STEPS` that keeps the entries within 256; the
    coarsest thresholds at `ALPHA_THRESHOLD` (alpha 128 and above opaque).
    WebP is lossless and keeps the colour under transparent pixels, so it
    decodes to exactly the PNG's colours and alpha.  GIF: one transparent
    entry, alpha thresholded at `ALPHA_THRESHOLD`.  k = 256 with
    transparency fits none of these and is refused.  With k > 256, PNG and
    WebP are RGB(A) and keep alpha exactly.  TIFF: RGB or RGBA (unassociated
    alpha, exact), LZW-compressed.  JPEG: RGB, quality 95, no chroma
    subsampling (4:4:4), so flat-colour edges stay crisp; it re-encodes the
    colours, so the file holds many more than k.  No ICC profile is
    embedded; the values are sRGB.  Indexed PNGs come from
    :mod:`quantize.io._png` (unfiltered rows, zlib level 6, compressed on
    several threads), the others from Pillow. PNG records the resolution as
    whole pixels per metre, so 300 dpi reads back as 299.9994.

    Examples
    --------
    >>> import numpy as np
    >>> save_image("out.png", np.zeros((4, 4), int), np.array([[200, 30, 40]], np.uint8))  # doctest: +SKIP
    PosixPath('out.png')
    """
    written = write_image(path, indices, palette_rgb, alpha=alpha, dpi=dpi, force=force, inputs=inputs)
    for note in written.notes:
        warnings.warn(note, ImageWarning, stacklevel=2)
    return written.path

#: Output extensions :func:`save_image` understands, and the format each selects.
SAVE_FORMATS: dict[str, str] = {
    ".png": "PNG",
    ".webp": "WEBP",
    ".gif": "GIF",
    ".tif": "TIFF",
    ".tiff": "TIFF",
    ".jpg": "JPEG",
    ".jpeg": "JPEG",
}
#: Formats written through a colour index of at most 256 entries (a WebP above 256 colours is not).
_INDEXED = ("PNG", "GIF", "WEBP")


def needs_clear_entry(path: PathLike, alpha: np.ndarray | None, max_code: int = 255) -> bool:
    """Whether writing an image with this opacity to ``path`` needs a fully transparent colour-index entry.

    True for an indexed output (``.png``, ``.gif``, ``.webp``) of an image
    with some pixel below :data:`ALPHA_THRESHOLD` once its alpha is rounded
    to 8 bits: with 256 colours such a file has no entry left for it, and
    with 255 the entry is there (any partly transparent pixel is then
    thresholded).  The palette-size range is capped from this before a fit
    (:func:`quantize.fit.index_room.sizes_with_room`).

    Parameters
    ----------
    path : str or path-like
        The output; its extension names the format.
    alpha : ndarray of shape (H, W) or None
        Opacity, 0 = fully transparent, on the scale 0 to ``max_code``.
    max_code : int, default 255
        Code of full opacity (65535 for 16-bit alpha).

    Examples
    --------
    >>> import numpy as np
    >>> needs_clear_entry("a.gif", np.array([[0, 255]], np.uint8)), needs_clear_entry("a.tif", np.zeros((1, 1)))
    (True, False)
    """
    if alpha is None or SAVE_FORMATS.get(Path(path).suffix.lower()) not in _INDEXED:
        return False
    return bool((np.rint(np.asarray(alpha) * (255.0 / max_code)) < ALPHA_THRESHOLD).any())


#: Formats that record a resolution.
_KEEPS_DPI = ("PNG", "TIFF", "JPEG")


def _check_raster(indices, palette_rgb, alpha):
    idx = np.asarray(indices)
    if idx.ndim != 2 or idx.size == 0 or idx.dtype.kind not in "iu":
        raise ValueError(f"indices must be a non-empty (H, W) integer array, got shape {idx.shape} dtype {idx.dtype}")
    palette = np.asarray(palette_rgb)
    if palette.ndim != 2 or palette.shape[1] != 3 or len(palette) == 0 or palette.dtype != np.uint8:
        raise ValueError(
            f"palette_rgb must be a non-empty (k, 3) uint8 array, got shape {palette.shape} dtype {palette.dtype}"
        )
    lo, hi = int(idx.min()), int(idx.max())
    if lo < 0 or hi >= len(palette):
        raise ValueError(f"indices run from {lo} to {hi}, outside the palette's 0 to {len(palette) - 1}")
    if alpha is None:
        return idx, palette, None
    a = np.asarray(alpha)
    if a.shape != idx.shape or a.dtype not in (np.uint8, np.uint16, np.bool_):
        raise ValueError(
            f"alpha must be a {idx.shape} uint8, uint16 or bool array, got shape {a.shape} dtype {a.dtype}"
        )
    a8 = a.astype(np.uint8) * 255 if a.dtype == np.bool_ else to_8bit(a) if a.dtype == np.uint16 else a
    return idx, palette, None if (a8 == 255).all() else a8


def _check_dpi(dpi) -> tuple[float, float] | None:
    if dpi is None:
        return None
    checked = dpi_pair(dpi)
    if checked is None:
        raise ValueError(f"dpi must be two positive finite numbers, got {dpi!r}")
    return checked


def atomic_write_bytes(
    path: PathLike, data: bytes, *, force: bool = False, inputs: Iterable[PathLike] = ()
) -> Path:
    """Write `data` to `path` atomically: the file is complete, or not there at all.

    Parameters
    ----------
    path : str or path-like
        Destination file.
    data : bytes
        The whole content.
    force : bool, default False
        Replace an existing file.
    inputs : iterable of path-like, default ()
        Files that must never be overwritten, even with `force`.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    OutputError
        As for :func:`save_image`.

    Examples
    --------
    >>> atomic_write_bytes("palette.bin", b"\\x00\\x01")  # doctest: +SKIP
    PosixPath('palette.bin')
    """
    return _atomic_write(Path(path), lambda fh: fh.write(data), force=force, inputs=inputs)


def atomic_write_text(
    path: PathLike, text: str, *, force: bool = False, inputs: Iterable[PathLike] = ()
) -> Path:
    """Write `text` as UTF-8 to `path` atomically. Options as :func:`atomic_write_bytes`.

    A file name whose bytes are not UTF-8 comes into Python as lone surrogates U+DC80-U+DCFF
    (PEP 383), which UTF-8 cannot hold. Each is written as the escape ``\\udcXX``: in a JSON file
    (palette, manifest) that is a JSON string escape, so ``json.loads`` gives back the same name
    and ``os.fsencode`` its bytes; in a CSV or HTML file it reads as the same six characters.

    Examples
    --------
    >>> atomic_write_text("report.txt", "6 inks\\n", force=True)  # doctest: +SKIP
    PosixPath('report.txt')
    """
    text = re.sub("[\ud800-\udfff]", lambda m: f"\\u{ord(m.group()):04x}", text)
    return atomic_write_bytes(path, text.encode("utf-8"), force=force, inputs=inputs)


#: The set of files being written together (:func:`publish_together`), or None: each file lands alone.
_TOGETHER: contextvars.ContextVar[list | None] = contextvars.ContextVar("quantize_publish_together", default=None)


@contextlib.contextmanager
def publish_together():
    """Write every file of a block so that they all land, or none does.

    Inside the block each atomic write (:func:`save_image`, :func:`write_image`,
    :func:`atomic_write_bytes`, ``Palette.save``, ...) writes and syncs its
    temporary file but does not yet give it its name; when the block ends
    without an error, every file is named in turn (a rename, which needs no
    space), and on any error, a full disk or an interrupt, every temporary
    file is removed and no output of the block appears. An image and its
    palette, or a set of plates, are never half-written.

    The pending set is per context (a :class:`contextvars.ContextVar`), not
    process-wide: threads and other callers are unaffected.

    Examples
    --------
    >>> with publish_together():  # doctest: +SKIP
    ...     atomic_write_text("a.txt", "one")
    ...     atomic_write_text("b.txt", "two")
    """
    if _TOGETHER.get() is not None:  # nested: the outer block publishes
        yield
        return
    pending: list = []
    token = _TOGETHER.set(pending)
    try:
        yield
    except BaseException:
        for tmp, _target, _name, _force in pending:
            _discard(tmp)
        raise
    finally:
        _TOGETHER.reset(token)
    for i, (tmp, target, name, force) in enumerate(pending):
        try:
            _publish(tmp, target, name, force)
        except BaseException as exc:
            for later, *_ in pending[i:]:
                _discard(later)
            if isinstance(exc, OSError):
                raise OutputError(f"{name}: writing failed ({exc.strerror or exc})") from exc
            raise


def _atomic_write(target: Path, write: Callable[[IO[bytes]], object], *, force: bool, inputs) -> Path:
    name = os.fspath(target)
    _check_target(target, name, force, inputs)
    mode = _new_file_mode(target)
    _remove_stale_temporaries(target)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    except OSError as exc:
        raise OutputError(f"{name}: cannot create a file in {target.parent} ({exc.strerror or exc})") from exc
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        pending = _TOGETHER.get()
        if pending is None:
            _publish(tmp, target, name, force)
        else:
            pending.append((tmp, target, name, force))
    except OSError as exc:
        _discard(tmp)
        raise OutputError(f"{name}: writing failed ({exc.strerror or exc})") from exc
    except BaseException:
        _discard(tmp)
        raise
    return target


#: A temporary file of this writer older than this (seconds) was left by a process that was killed
#: mid-write (a write holds its temporary file for the time of one disk write, never minutes).
_STALE_SECONDS = 600.0


def _remove_stale_temporaries(target: Path) -> None:
    """Remove this writer's leftover temporary files for ``target`` (``.NAME.XXXXXXXX.part``, as mkstemp
    names them), left by a run that was killed; only those older than :data:`_STALE_SECONDS`."""
    import time

    prefix, now = f".{target.name}.", time.time()
    with contextlib.suppress(OSError):
        for entry in os.scandir(target.parent):
            name = entry.name
            if (name.startswith(prefix) and name.endswith(".part") and len(name) == len(prefix) + 8 + 5
                    and entry.is_file(follow_symlinks=False)
                    and now - entry.stat(follow_symlinks=False).st_mtime > _STALE_SECONDS):
                with contextlib.suppress(OSError):
                    os.unlink(entry.path)


def _check_target(target: Path, name: str, force: bool, inputs) -> None:
    if target.is_dir():
        raise OutputError(f"{name}: is a folder; give a file name")
    folder = target.parent
    if not folder.is_dir():
        raise OutputError(f"{name}: folder {os.fspath(folder) or '.'} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{name}: folder {os.fspath(folder) or '.'} is not writable")
    resolved = target.resolve()
    for source in inputs:
        src = Path(source)
        same = src.resolve() == resolved
        if not same and src.exists() and target.exists():
            same = os.path.samefile(src, target)
        if same:
            raise OutputError(f"{name}: is one of the input images; refusing to overwrite an input")
    if not force and os.path.lexists(target):
        raise OutputError(f"{name}: already exists; not replaced without force")


def _new_file_mode(target: Path) -> int:
    with contextlib.suppress(OSError):
        return os.stat(target).st_mode & 0o7777  # a replaced file keeps its permissions
    # mkstemp creates 0600. A new file should get the usual 0666 less the umask,
    # which can only be read by setting it.
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def _publish(tmp: str, target: Path, name: str, force: bool) -> None:
    if force:
        os.replace(tmp, target)
        return
    # A hard link fails if the name is taken, so a file created since the check is never clobbered.
    try:
        os.link(tmp, target)
    except FileExistsError:
        raise OutputError(f"{name}: already exists; not replaced without force") from None
    except OSError:  # a filesystem without hard links
        if os.path.lexists(target):
            raise OutputError(f"{name}: already exists; not replaced without force") from None
        os.replace(tmp, target)
        return
    os.unlink(tmp)


def _discard(tmp: str) -> None:
    with contextlib.suppress(FileNotFoundError):
        os.unlink(tmp)


def to_jsonable(obj):
    """``obj`` with numpy arrays and scalars as plain lists and numbers, NaN/inf as None.

    Used for every JSON document the package writes (palettes, sweeps,
    manifests), so they load in any JSON reader.
    """
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return to_jsonable(obj.item())
    if isinstance(obj, float) and not np.isfinite(obj):
        return None
    return obj
