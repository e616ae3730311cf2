"""Reading images: the first stage of the pipeline.

Everything downstream works in sRGB (IEC 61966-2-1).  Any embedded ICC profile
is converted away here, when the file is read. Files are written as untagged
sRGB. A :class:`Picture` holds the integer codes as decoded (8 or 16 bits per
channel), and :meth:`Picture.float_rgb` gives the 0-1 floats the rest of the
package uses.

How :func:`load_image` reads a file

* Pillow reads what it can represent in full: modes 1, L, LA, P and PA
  (palette transparency included), RGB, RGBA, RGBX, CMYK, YCbCr, I;16 in either
  byte order, I and F.
* 16-bit colour PNG (IHDR bit depth 16, colour type 2, 4 or 6): Pillow has no
  16-bit colour mode and keeps only the high byte of each sample. Its own PNG
  decoder still does the work (inflate, the five filters, Adam7, CRC checks).
  For colour types 2 and 6 the decoded stream is unpacked twice, once
  big-endian (the high bytes) and once as if little-endian (the low bytes). For
  colour type 4 it is unpacked once as raw 8-bit RGBA bytes. This keeps every
  PNG feature Pillow supports without a decoder of our own. It does depend on
  Pillow's tile list, so if a future Pillow changes that structure the file is
  read at 8 bits with an :class:`ImageWarning`. It is never read wrongly
  without a warning.
* 16-bit colour or grey-plus-alpha TIFF goes through tifffile. Some compressions
  need the optional imagecodecs package when tifffile reads them (LZW, for
  one). Without it, chunky RGB(A) files are decoded by Pillow's libtiff with the
  same byte-order trick, and other layouts fall back to 8 bits with a warning.
* CIELAB and ICCLAB TIFF (8 or 16 bits) and Pillow's LAB mode are decoded to
  CIELAB under the file's white (its WhitePoint tag, else D50), adapted to D65
  by Bradford and encoded as sRGB, at the file's depth (:mod:`quantize.io._lab`).
  Colours outside sRGB are clipped, with one warning counting the pixels.

Colour management

An embedded profile is converted to sRGB with the relative colorimetric intent
(ICC.1 intent 1) and without black-point compensation. In-gamut colours keep
their measured values, which is what matching them to inks needs; out-of-gamut
colours are clipped. For matrix/TRC profiles, LittleCMS offers only this intent
anyway. Pillow's LittleCMS binding converts colour only at 8 bits per channel.
For 16-bit data with a matrix/TRC or grey-TRC profile (Adobe RGB, Display P3,
ProPhoto and most working spaces), the profile is evaluated here in float64
from its colorant and TRC tags, following ICC.1 (F.3). 16-bit data with a
table-based profile are reduced to 8 bits and then converted by LittleCMS,
with a warning. A file with no profile is taken to be sRGB. CMYK without a
profile goes through Pillow's naive formula, with a warning.

Writing results (atomically) lives in :mod:`quantize.io.write`.
"""

from __future__ import annotations

import contextlib
import contextvars
import io
import logging
import os
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Union

import numpy as np
from PIL import Image, ImageOps

from quantize.core.picture import ImageWarning, Picture, ProfileWarning
from quantize.errors import ImageReadError, QuantizeError
from quantize.io._decode import (
    DECODE_ERRORS,
    PNG16_RAWMODE,
    check_pixels,
    check_png_chunks,
    dpi_pair,
    exif_orientation,
    open_pil,
    to_8bit,
)
from quantize.io._icc import convert_8bit, convert_deep

__all__ = [
    "check_regular_file",
    "DEFAULT_MAX_PIXELS",
    "ImageWarning",
    "Picture",
    "ProfileWarning",
    "as_picture",
    "assume_cmyk_profile",
    "assumed_cmyk_profile",
    "check_image_file",
    "load_image",
]

PathLike = Union[str, "os.PathLike[str]"]

#: Pillow's decompression-bomb limit at import time (about 89.5 million pixels).
DEFAULT_MAX_PIXELS: int | None = Image.MAX_IMAGE_PIXELS



# --------------------------------------------------------------------------- reading

_Note = tuple[type, str]
#: What a decoder hands :func:`_finish`: colour, alpha (or None), bit depth, dpi (or None), and the
#: description of the colour profile converted from (or None).
_Decoded = tuple[np.ndarray, np.ndarray | None, int, tuple[float, float] | None, str | None]
_PIL_8BIT_MODES = {"1", "L", "LA", "La", "P", "PA", "RGB", "RGBA", "RGBa", "RGBX", "CMYK", "YCbCr"}
_PIL_DEEP_GREY = {"I;16", "I;16L", "I;16B", "I;16N", "I", "F"}
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")


_log = logging.getLogger(__name__)


def load_image(path: PathLike, *, max_pixels: int | None = DEFAULT_MAX_PIXELS,
               cmyk_profile: PathLike | None = None) -> Picture:
    """Read an image file as sRGB codes, upright, with its alpha.

    Parameters
    ----------
    path : str or path-like
        The image file: PNG, JPEG, TIFF, or any other format Pillow opens. Only
        the first frame of an animated or multi-page file is used (with a warning).
    max_pixels : int or None, default DEFAULT_MAX_PIXELS
        Refuse images with more pixels than this, to guard against
        decompression bombs. ``None`` removes the limit.
    cmyk_profile : str or path-like, optional
        An ICC profile of CMYK colour space (the press characterisation the
        file was separated for) to read a CMYK file that has no embedded
        profile through. An embedded profile always wins. Without one (and
        outside :func:`assume_cmyk_profile`), such a file is converted with the
        naive formula, with a :class:`ProfileWarning`.

    Returns
    -------
    Picture
        ``rgb`` holds uint8 codes for 8-bit sources, and uint16 for 16-bit ones
        and for modes I and F. EXIF orientation has been applied. ``alpha`` is
        ``None`` when every pixel is fully opaque.

    Raises
    ------
    ImageReadError
        ``"<path>: <problem>"`` when the file is missing, a folder, empty,
        truncated or damaged, not an image, in an unsupported mode, over
        `max_pixels`, or fully transparent; ``"<profile>: <problem>"`` when
        `cmyk_profile` is not a readable CMYK ICC profile.

    Warns
    -----
    ProfileWarning
        The embedded ICC profile is unreadable or does not fit the pixels (they
        are taken as sRGB), or a CMYK file has no profile.
    ImageWarning
        Only the first frame was read, values were clipped, or 16-bit data were
        read at 8 bits.

    Notes
    -----
    Modes I (32-bit integers) and F (32-bit floats) become 16-bit codes.
    I is taken as 0-65535 codes, the scale Pillow uses for deep greyscale; values
    outside that range are clipped with a warning. F is scaled by the smallest
    of 1, 255 and 65535 that covers its maximum. Values below 0 or above 65535
    are clipped with a warning, and NaN or infinity is an error.

    References
    ----------
    .. [1] IEC 61966-2-1:1999, Multimedia systems and equipment - Colour
       measurement and management - Part 2-1: Default RGB colour space - sRGB.
    .. [2] ISO 15076-1:2010 (ICC.1:2010), Image technology colour management -
       Architecture, profile format and data structure.
    .. [3] ISO/IEC 15948:2004, Portable Network Graphics (PNG) specification.
    .. [4] Adobe Systems, TIFF Revision 6.0, 1992.
    .. [5] CIPA DC-008-2019, Exchangeable image file format for digital still
       cameras: Exif version 2.32 (tag 0x0112, Orientation).

    Examples
    --------
    >>> pic = load_image("sample_images/poster_six_inks.png")  # doctest: +SKIP
    >>> pic.shape, pic.bit_depth  # doctest: +SKIP
    ((1200, 900), 8)
    """
    with assume_cmyk_profile(cmyk_profile):  # None: the context's own, if any
        picture, notes = _read_file(path, max_pixels)
    for category, text in notes:
        warnings.warn(text, category, stacklevel=2)
    return picture


# The CMYK profile :func:`assume_cmyk_profile` set for this context: (file name, profile bytes).
_ASSUMED_CMYK: contextvars.ContextVar[tuple[str, bytes] | None] = contextvars.ContextVar(
    "quantize_assumed_cmyk_profile", default=None)
#: Largest ICC profile file read (bytes); press characterisations with big tables are a few MB.
MAX_PROFILE_BYTES = 64 * 1024 * 1024


@contextlib.contextmanager
def assume_cmyk_profile(path: PathLike | None):
    """Read CMYK files without an embedded profile through the ICC profile at ``path``, within the block.

    Every :func:`load_image` and :func:`as_picture` of a path in this thread's context (the fit, sweep
    and separation functions read their paths through them) uses it, unless given its own
    ``cmyk_profile``. ``None`` does nothing. The setting is restored when the block ends.

    Raises
    ------
    ImageReadError
        ``"<path>: <problem>"`` when the file is missing, not an ICC profile, or not for CMYK data.

    Examples
    --------
    >>> with assume_cmyk_profile("press.icc"):  # doctest: +SKIP
    ...     pic = load_image("catalogue_cmyk.tif")
    """
    if path is None:
        yield
        return
    token = _ASSUMED_CMYK.set(_cmyk_profile_file(path))
    try:
        yield
    finally:
        _ASSUMED_CMYK.reset(token)


def assumed_cmyk_profile() -> str | None:
    """The file :func:`assume_cmyk_profile` set for the current context, or None."""
    current = _ASSUMED_CMYK.get()
    return None if current is None else current[0]


def _cmyk_profile_file(path: PathLike) -> tuple[str, bytes]:
    """(name, bytes) of a CMYK ICC profile file, checked: ICC.1:2010 7.2.6 puts the data colour space
    signature at bytes 16-19 of the header, 'CMYK' for four-colour press data."""
    name = os.fspath(path)
    if not os.path.exists(path):
        raise ImageReadError(f"{name}: no such CMYK profile file")
    check_regular_file(path, name)
    try:
        with open(path, "rb") as fh:
            data = fh.read(MAX_PROFILE_BYTES + 1)
    except OSError as exc:
        raise ImageReadError(f"{name}: cannot read the file ({exc.strerror or exc})") from exc
    if len(data) > MAX_PROFILE_BYTES:
        raise ImageReadError(f"{name}: larger than {MAX_PROFILE_BYTES // 2**20} MB; not an ICC profile")
    if len(data) < 132 or data[36:40] != b"acsp":  # the profile file signature (ICC.1:2010 7.2.9)
        raise ImageReadError(f"{name}: not an ICC profile")
    if data[16:20] != b"CMYK":
        space = data[16:20].decode("latin-1").strip() or "?"
        raise ImageReadError(f"{name}: an ICC profile for {space!r} data, not CMYK")
    from PIL import ImageCms

    try:
        ImageCms.ImageCmsProfile(io.BytesIO(data))
    except (ImageCms.PyCMSError, OSError, ValueError, TypeError) as exc:
        raise ImageReadError(f"{name}: damaged ICC profile ({_reason(exc)})") from exc
    return name, data


def as_picture(obj: Picture | PathLike | Image.Image | np.ndarray) -> Picture:
    """Turn any supported image input into a :class:`Picture`.

    Parameters
    ----------
    obj : Picture, str, path-like, PIL.Image.Image or ndarray
        A Picture is returned as it is. A path is read with :func:`load_image`.
        A PIL image is treated like a decoded file, with its ``icc_profile`` and
        EXIF orientation honoured, but it stays at whatever depth Pillow gave
        it. An array may be (H, W) grey, (H, W, 3) RGB or (H, W, 4) RGBA sRGB,
        of dtype uint8, uint16, or float in 0-1. Floats become uint16 codes,
        ``rint(x * 65535)`` with rounding half to even, so they keep about
        16 bits of precision rather than 8.

    Returns
    -------
    Picture

    Raises
    ------
    ValueError
        An array of the wrong shape or dtype, or floats outside 0-1 or not finite.
    TypeError
        `obj` is none of the types above.
    ImageReadError
        The file or image cannot be decoded, or every pixel is fully transparent.

    Examples
    --------
    >>> import numpy as np
    >>> pic = as_picture(np.full((2, 2, 3), 0.5))
    >>> pic.bit_depth, int(pic.rgb[0, 0, 0])
    (16, 32768)
    """
    if isinstance(obj, Picture):
        return obj
    notes: list[_Note]
    if isinstance(obj, (str, os.PathLike)):
        picture, notes = _read_file(obj, DEFAULT_MAX_PIXELS)
    elif isinstance(obj, Image.Image):
        name = getattr(obj, "filename", "") or "<image>"
        notes = []
        with _decode_errors(name):
            obj.load()
            picture = _finish(name, *_from_pil(obj, name, notes, _ASSUMED_CMYK.get()), notes)
    elif isinstance(obj, np.ndarray):
        return _picture_from_array(obj)
    else:
        raise TypeError(
            f"cannot make a picture from {type(obj).__name__}; "
            "expected a Picture, a path, a PIL image or a numpy array"
        )
    for category, text in notes:
        warnings.warn(text, category, stacklevel=2)
    return picture


@contextlib.contextmanager
def _decode_errors(name: str, head: bytes = b""):
    try:
        yield
    except QuantizeError:
        raise
    except DECODE_ERRORS as exc:
        raise ImageReadError(f"{name}: {_reason(exc, head)}") from exc
    except (TypeError, AttributeError, ZeroDivisionError, OverflowError, RuntimeError) as exc:
        # Damaged tags reach Pillow's and tifffile's own code paths with values of the wrong kind
        # ("Missing dimensions" is a TypeError). Raised inside a decoder, it is the file's fault;
        # raised in this package's code, it is a bug and keeps its traceback.
        if not _raised_in_decoder(exc):
            raise
        raise ImageReadError(f"{name}: {_reason(exc, head)}") from exc


@contextlib.contextmanager
def _decoder_warnings(name: str, notes: list[_Note]):
    """Keep what Pillow warns while decoding (a tag with too many values, say) as a note naming the file.

    Such a warning would otherwise print without the file's name. The warning filters are restored on exit.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    seen = set()
    for w in caught:
        text = " ".join(str(w.message).split())[:150]
        if text not in seen:
            seen.add(text)
            notes.append((w.category if issubclass(w.category, (ImageWarning, ProfileWarning)) else ImageWarning,
                          f"{name}: {text}"))


def _raised_in_decoder(exc: BaseException) -> bool:
    import tifffile

    roots = tuple(os.path.dirname(m.__file__) + os.sep for m in (Image, tifffile) if m.__file__)
    tb = exc.__traceback__
    while tb is not None:
        if tb.tb_frame.f_code.co_filename.startswith(roots):
            return True
        tb = tb.tb_next
    return False


def _reason(exc: BaseException, head: bytes = b"") -> str:
    if isinstance(exc, Image.UnidentifiedImageError):
        if head[:4] in _TIFF_MAGIC:
            # A TIFF header, but Pillow gives up on the tags: damage, or a compression it lacks.
            return "a TIFF file that cannot be read (damaged tags, or a compression or layout Pillow does not read)"
        return "not an image file (or not in a format Pillow can read)"
    if isinstance(exc, MemoryError):
        return "not enough memory to decode the image"
    text = (str(exc).splitlines() or [type(exc).__name__])[0][:120]
    if isinstance(exc, EOFError) or "truncated" in text.lower() or "failed to read" in text:
        return f"file is truncated or damaged ({text})"
    return f"cannot decode the image ({text})"


def _file_head(path: PathLike, max_pixels: int | None) -> tuple[str, Path, bytes]:
    if max_pixels is not None and max_pixels < 1:
        raise ValueError(f"max_pixels must be a positive integer or None, got {max_pixels!r}")
    name = os.fspath(path)
    p = Path(path)
    if p.is_dir():
        raise ImageReadError(f"{name}: is a folder, not an image file")
    if not p.exists():
        raise ImageReadError(f"{name}: no such file")
    check_regular_file(p, name)
    try:
        with open(p, "rb") as fh:
            head = fh.read(32)
    except OSError as exc:
        raise ImageReadError(f"{name}: cannot read the file ({exc.strerror or exc})") from exc
    if not head:
        raise ImageReadError(f"{name}: file is empty (0 bytes)")
    return name, p, head


def check_regular_file(path: PathLike, name: str | None = None) -> None:
    """Refuse a path that is not a regular file (a named pipe, device or socket would block or never end).

    Raises
    ------
    ImageReadError
        Naming the file and what it is.
    """
    import stat

    name = os.fspath(path) if name is None else name
    try:
        mode = os.stat(path).st_mode
    except OSError as exc:
        raise ImageReadError(f"{name}: cannot read the file ({exc.strerror or exc})") from exc
    if not stat.S_ISREG(mode):
        kind = ("a named pipe" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
                else "a socket" if stat.S_ISSOCK(mode) else "a folder" if stat.S_ISDIR(mode) else "not a file")
        raise ImageReadError(f"{name}: is {kind}, not a regular file")


def check_image_file(path: PathLike, *, max_pixels: int | None = DEFAULT_MAX_PIXELS) -> tuple[int, int]:
    """Check that ``path`` is an image this package can open, from its header alone.

    A cheap test before a run that writes one output per input, so that a
    file that is missing, empty, not an image or over the pixel limit stops
    the run before anything is written.  Damage past the header shows only
    when the pixels are decoded (:func:`load_image`).

    Returns
    -------
    (width, height)

    Raises
    ------
    ImageReadError
        As :func:`load_image` for those faults.
    """
    name, p, head = _file_head(path, max_pixels)
    if head[:4] in _TIFF_MAGIC:
        from ._lab import lab_tiff_size
        from ._tiff_tables import check_tiff_tables

        with _decode_errors(name, head):
            check_tiff_tables(p, name)
            size = lab_tiff_size(p, name)  # Pillow opens no 16-bit Lab
        if size is not None:
            check_pixels(name, size, max_pixels)
            return size
    with _decode_errors(name, head), open_pil(p) as img:
        check_pixels(name, img.size, max_pixels)
        return int(img.size[0]), int(img.size[1])


def _read_file(path: PathLike, max_pixels: int | None) -> tuple[Picture, list[_Note]]:
    """Decode a file: the one place a file's pixels are read (:func:`load_image` and
    :func:`as_picture` both come here; tests/test_decode_once.py counts the calls)."""
    name, p, head = _file_head(path, max_pixels)
    cmyk = _ASSUMED_CMYK.get()

    from quantize.io import _deep as _deep
    from quantize.io import _lab as _lab
    from quantize.io._tiff_tables import check_tiff_tables

    notes: list[_Note] = []
    with _decode_errors(name, head), _decoder_warnings(name, notes):
        if head[:8] == _PNG_SIGNATURE:
            check_png_chunks(p, name)
        deep = lab = None
        if head[:8] == _PNG_SIGNATURE and head[12:16] == b"IHDR" and head[24] == 16 and head[25] in PNG16_RAWMODE:
            deep = _deep.read_png16(p, name, head[25], max_pixels, notes)
        elif head[:4] in _TIFF_MAGIC:
            check_tiff_tables(p, name)
            lab = _lab.read_lab_tiff(p, name, max_pixels, notes)
            if lab is None:
                deep = _deep.read_tiff16(p, name, max_pixels, notes)
        if lab is not None:
            picture = _finish_lab(name, lab, notes)
        elif deep is not None:
            if head[:8] == _PNG_SIGNATURE:
                colour, alpha = deep[0], deep[1]
                tail = colour[-2:].reshape(min(2, len(colour)), -1)
                if alpha is not None:
                    tail = np.concatenate([tail, alpha[-2:].reshape(len(tail), -1)], axis=1)
                _check_png_complete(tail, p, name)
            picture = _finish(name, *_finish_deep(name, *deep, notes), notes)
        else:
            with open_pil(p) as img:
                check_pixels(name, img.size, max_pixels)
                frames = getattr(img, "n_frames", 1)
                if frames > 1:
                    notes.append((ImageWarning, f"{name}: holds {frames} frames or pages; only the first is used"))
                img.load()
                if img.format == "PNG":
                    h = img.size[1]
                    tail = np.asarray(img.crop((0, max(0, h - 2), img.size[0], h)))
                    _check_png_complete(tail.reshape(tail.shape[0], -1), p, name)
                picture = _finish(name, *_from_pil(img, name, notes, cmyk), notes)
    _log.info("read %s: %d x %d px, %d bit%s%s", name, picture.shape[1], picture.shape[0], picture.bit_depth,
              ", alpha" if picture.alpha is not None else "",
              f", profile {picture.profile!r}" if picture.profile else "")
    return picture, notes


def _check_png_complete(tail: np.ndarray, path: Path, name: str) -> None:
    """Refuse a PNG whose image data ends before its last row.

    Pillow fills the missing rows with zeros and reports nothing when the
    compressed data ends cleanly, early.  Missing rows come out as zeros at
    the bottom (or in every other row, interlaced), so the data is counted
    only when one of the last two stored rows (``tail``, one row of samples
    per line, alpha included) is all zeros.
    """
    if tail.any(axis=1).all():
        return
    from ._png import image_data_bytes

    with open(path, "rb") as fh:
        counted = image_data_bytes(fh)
    if counted is not None and counted[0] < counted[1]:
        got, expected = counted
        raise ImageReadError(f"{name}: file is truncated or damaged (its image data stops after "
                             f"{100.0 * got / expected:.0f} % of the image)")








# Exif 2.32 tag 0x0112 says how to turn the stored rows upright. These are the
# same operations PIL.ImageOps.exif_transpose applies, for arrays Pillow can't hold.
_ORIENT: dict[int, Callable[[np.ndarray], np.ndarray]] = {
    2: lambda a: a[:, ::-1],
    3: lambda a: a[::-1, ::-1],
    4: lambda a: a[::-1],
    5: lambda a: a.swapaxes(0, 1),
    6: lambda a: np.rot90(a, -1),
    7: lambda a: a[::-1, ::-1].swapaxes(0, 1),
    8: lambda a: np.rot90(a, 1),
}


def _from_pil(img: Image.Image, name: str, notes: list[_Note], cmyk: tuple[str, bytes] | None = None) -> _Decoded:
    """A decoded Pillow image -> (colour, alpha, bit_depth, dpi, profile description).

    ``cmyk`` is the (file name, bytes) of the profile assumed for CMYK without an embedded one."""
    dpi = dpi_pair(img.info.get("dpi"))
    orientation = exif_orientation(img, name, notes)
    if orientation in _ORIENT:
        img = ImageOps.exif_transpose(img)
        if orientation >= 5 and dpi:
            dpi = (dpi[1], dpi[0])
    icc = img.info.get("icc_profile") or None
    mode = img.mode
    if mode in _PIL_DEEP_GREY:
        grey = _deep_grey(img, name, notes)
        trns = img.info.get("transparency")
        alpha = None
        if isinstance(trns, int) and mode != "F":
            alpha = np.where(grey == trns, 0, 65535).astype(np.uint16)
        colour, depth, desc = convert_deep(grey[..., None], icc, name, notes)
        return colour, alpha, depth, dpi, desc
    if mode == "LAB":
        from ._lab import pil_lab_to_srgb

        return pil_lab_to_srgb(img, name, notes), None, 8, dpi, "CIELAB (Pillow LAB mode), D50 white assumed"
    if mode not in _PIL_8BIT_MODES:
        raise ImageReadError(f"{name}: unsupported colour mode {mode!r}")
    if mode == "La":  # Pillow unpremultiplies La only on the way to LA
        img, mode = img.convert("LA"), "LA"
    alpha = None
    if "A" in mode or "a" in mode or "transparency" in img.info:
        # Pillow turns tRNS, palette alpha and premultiplied alpha into plain alpha here.
        rgba = img.convert("RGBA")
        alpha = np.asarray(rgba)[..., 3]
        if mode in ("P", "PA"):
            img = rgba  # palette colours with the alpha already taken out
    if mode in ("1", "L", "LA"):
        base = img.convert("L")
    elif mode == "CMYK":
        base = img
    else:
        # convert() copies even when the mode is already right: skip it then.
        base = img if img.mode == "RGB" else img.convert("RGB")
    if mode == "CMYK" and not icc and cmyk is not None:
        colour, desc = convert_8bit(base, cmyk[1], name, notes)
        desc = f"{desc} (assumed: {cmyk[0]})" if desc else None
        _log.info("%s: CMYK without an embedded profile, read through %s", name, cmyk[0])
        return colour, alpha, 8, dpi, desc
    colour, desc = convert_8bit(base, icc, name, notes)
    return colour, alpha, 8, dpi, desc


def _deep_grey(img: Image.Image, name: str, notes: list[_Note]) -> np.ndarray:
    a = np.asarray(img)
    if img.mode.startswith("I;16"):
        return a.astype(np.uint16)
    if img.mode == "I":
        if a.min() < 0 or a.max() > 65535:
            notes.append((ImageWarning, f"{name}: 32-bit integer values outside 0-65535 were clipped"))
        return np.clip(a, 0, 65535).astype(np.uint16)
    a = a.astype(np.float64)
    if not np.isfinite(a).all():
        raise ImageReadError(f"{name}: floating-point image holds NaN or infinite values")
    top = float(a.max())
    scale = 1.0 if top <= 1.0 else 255.0 if top <= 255.0 else 65535.0
    if a.min() < 0 or top > 65535.0:
        notes.append((ImageWarning, f"{name}: floating-point values outside 0-{scale:g} were clipped"))
    return np.rint(np.clip(a / scale, 0.0, 1.0) * 65535).astype(np.uint16)




def _finish_deep(name: str, colour: np.ndarray, alpha: np.ndarray | None, icc: bytes | None, orientation: int,
                 dpi: tuple[float, float] | None, notes: list[_Note]) -> _Decoded:
    """Orient and colour-convert the arrays from a 16-bit route."""
    if orientation in _ORIENT:
        colour = _ORIENT[orientation](colour)
        alpha = None if alpha is None else _ORIENT[orientation](alpha)
        if orientation >= 5 and dpi:
            dpi = (dpi[1], dpi[0])
    colour, depth, desc = convert_deep(colour, icc, name, notes)
    return colour, alpha, depth, dpi, desc


def _finish_lab(name, lab, notes) -> Picture:
    """Orient the sRGB codes decoded from a Lab TIFF (:func:`quantize.io._lab.read_lab_tiff`)."""
    colour, alpha, depth, orientation, dpi, desc = lab
    if orientation in _ORIENT:
        colour = _ORIENT[orientation](colour)
        alpha = None if alpha is None else _ORIENT[orientation](alpha)
        if orientation >= 5 and dpi:
            dpi = (dpi[1], dpi[0])
    return _finish(name, colour, alpha, depth, dpi, desc, notes)


def _finish(name, colour, alpha, depth, dpi, desc, notes) -> Picture:
    if colour.shape[2] == 1:
        colour = np.repeat(colour, 3, axis=2)
    if alpha is not None:
        if alpha.dtype != colour.dtype:
            alpha = (alpha.astype(np.uint32) * 257).astype(np.uint16) if depth == 16 else to_8bit(alpha)
        if not alpha.any():
            raise ImageReadError(f"{name}: every pixel is fully transparent; nothing to reduce")
        if (alpha == (1 << depth) - 1).all():
            alpha = None
    return Picture(
        rgb=np.ascontiguousarray(colour),
        alpha=None if alpha is None else np.ascontiguousarray(alpha),
        bit_depth=depth,
        dpi=dpi,
        source=name,
        profile=desc,
        warnings=tuple(text for _, text in notes),
    )




def _picture_from_array(arr: np.ndarray) -> Picture:
    a = arr[..., None] if arr.ndim == 2 else arr
    if a.ndim != 3 or a.shape[2] not in (1, 3, 4) or a.shape[0] == 0 or a.shape[1] == 0:
        raise ValueError(f"an image array must be (H, W), (H, W, 3) or (H, W, 4), got shape {arr.shape}")
    if a.dtype == np.uint8 or a.dtype == np.uint16:
        depth = 8 if a.dtype == np.uint8 else 16
        a = a.copy()
    elif a.dtype.kind == "f":
        if not np.isfinite(a).all():
            raise ValueError(f"float image array of shape {arr.shape} holds NaN or infinite values")
        lo, hi = float(a.min()), float(a.max())
        if lo < 0.0 or hi > 1.0:
            raise ValueError(f"float image values must lie in 0-1, got {lo:g} to {hi:g} ({arr.dtype})")
        a, depth = np.rint(a.astype(np.float64) * 65535).astype(np.uint16), 16
    else:
        raise ValueError(f"image array dtype must be uint8, uint16 or float (0-1), got {arr.dtype}")
    colour = a[..., :3] if a.shape[2] >= 3 else a
    alpha = a[..., 3] if a.shape[2] == 4 else None
    return _finish("<array>", colour, alpha, depth, None, None, [])
