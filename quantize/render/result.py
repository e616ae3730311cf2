"""The reduced image: :class:`MappedImage`, and the plain nearest-colour mapping that makes one."""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Iterable, cast

import numpy as np

from quantize.core.picture import ImageWarning
from quantize.fit.assign import map_sample
from quantize.quality.perception import FilteredDeltaE
from quantize.quality.stats import coverage_percent, delta_e_stats

if TYPE_CHECKING:
    # The palette by its public name: palette.py imports the render stage, so a direct import back
    # would be a cycle (tests/test_architecture.py).
    import quantize
    from quantize.core.picture import Picture
    from quantize.io.write import PathLike, WrittenImage

__all__ = ["DitherInfo", "MappedImage", "SavedImage", "file_coverage", "file_delta_e", "nearest_image"]

#: Distinct (input colour, file colour) pairs per CIEDE2000 block: bounds the temporaries.
_DE_BLOCK = 1 << 20


@dataclass(frozen=True)
class DitherInfo:
    """How a dithered :class:`MappedImage` was made.

    Attributes
    ----------
    method : str
        The dither's name, a key of :data:`quantize.render.methods.DITHERS`.
    strength : float
        0-1: the share of each pixel's error passed on (error diffusion), or
        of the partner colour mixed in (ordered methods).
    serpentine : bool or None
        Error diffusion: True when odd rows were scanned right to left,
        False for a raster scan.  None for ordered methods, which have no
        scan order.
    choice_space : {"lab", "oklab"}
        Space whose distance chose each pixel's colour (CIELAB for a
        CAM16-UCS palette, and always with ``metric="ciede2000"``).
    metric : {"space", "ciede2000"}
        Euclidean distance in ``choice_space``, or CIEDE2000.
    error_space : str, default="linear light"
        What the dither keeps on average: every method mixes and diffuses
        linear RGB, never gamma-encoded values.
    """

    method: str
    strength: float
    serpentine: bool | None
    choice_space: str
    metric: str
    error_space: str = "linear light"


@dataclass(frozen=True, eq=False)
class MappedImage:
    """An image reduced to a palette.

    Attributes
    ----------
    indices : ndarray of shape (H, W)
        Palette index of every pixel (uint8 up to 256 colours, else uint16).
        Fully transparent pixels hold 0; ``alpha`` marks them.
    palette : Palette
    alpha : ndarray of shape (H, W) or None
        The input's alpha channel, unchanged.
    delta_e : dict
        CIEDE2000 between each opaque input pixel and its output colour:
        ``mean``, ``median``, ``p95``, ``max``.
    coverage : ndarray of shape (k,)
        Percent of opaque pixels per palette colour (0.0 for unused ones).
    source : str
    dpi : tuple or None
    bit_depth : int
        Of the input.
    notes : tuple of str
        Anything the user should know (warnings from loading, etc.).
    dither : DitherInfo or None
        How the image was dithered; None for the plain nearest-colour mapping.
    filtered : FilteredDeltaE or None
        S-CIELAB filtered ΔE00 at a viewing condition, once
        :func:`quantize.quality.perception.with_filtered_delta_e` has
        measured it; else None.
    """

    indices: np.ndarray
    palette: quantize.Palette
    alpha: np.ndarray | None
    delta_e: dict
    coverage: np.ndarray
    source: str = "<array>"
    dpi: tuple | None = None
    bit_depth: int = 8
    notes: tuple = ()
    dither: DitherInfo | None = None
    filtered: FilteredDeltaE | None = None

    @property
    def rgb(self) -> np.ndarray:
        """The reduced image as 8-bit sRGB, shape (H, W, 3)."""
        return self.palette.rgb8[self.indices]

    @property
    def unused(self) -> list[int]:
        """Indices of palette colours that no opaque pixel uses."""
        return [int(i) for i in np.flatnonzero(self.coverage == 0)]

    def save(self, path: PathLike, *, force: bool = False, inputs: Iterable[PathLike] = ()) -> Path:
        """Write the reduced image in the format its extension names; return the path.

        See :func:`quantize.io.write.save_image` for the formats and how
        transparency is kept; :meth:`write` also measures the file.
        """
        from quantize.io.write import save_image

        return save_image(path, self.indices, self.palette.rgb8, alpha=self.alpha,
                          dpi=self.dpi, force=force, inputs=self._never_overwritten(inputs))

    def _never_overwritten(self, inputs) -> list:
        """``inputs`` plus the file this image was read from: never replaced, even with force."""
        out = list(inputs)
        if self.source and not self.source.startswith("<"):
            out.append(self.source)
        return out

    def write(self, path: PathLike, *, picture: Picture | None = None, force: bool = False,
              inputs: Iterable[PathLike] = ()) -> SavedImage:
        """Write the reduced image and measure the file written.

        Parameters
        ----------
        path : str or path-like
            Output file; its extension selects the format, as for
            :func:`quantize.io.write.save_image`.
        picture : Picture, optional
            The picture this image was mapped from.  Needed to measure the
            ΔE00 of a file whose pixels differ from this image (a JPEG, or
            pixels made fully transparent by the alpha levels); without it
            that ΔE00 is not measured (None).
        force : bool, default False
            Replace an existing file.
        inputs : iterable of path-like, default ()
            Files never to overwrite.

        Returns
        -------
        SavedImage
            Its figures describe the file: for a JPEG, ΔE00, coverage and
            (when this image carries a filtered ΔE00) the filtered ΔE00 are
            measured on the decoded JPEG.

        Warns
        -----
        ImageWarning
            The file's notes: a JPEG is no longer k colours, transparency
            flattened or thresholded.
        """
        from quantize.io.write import write_image

        if picture is not None and picture.rgb.shape[:2] != self.indices.shape:
            raise ValueError(f"picture is {picture.rgb.shape[:2]} pixels, the mapped image "
                             f"{self.indices.shape}: not the picture it was mapped from")
        written = write_image(path, self.indices, self.palette.rgb8, alpha=self.alpha,
                              dpi=self.dpi, force=force, inputs=self._never_overwritten(inputs))
        coverage, filtered = self.coverage, self.filtered
        if written.decoded is None and written.cleared is None:
            de = self.delta_e  # the file holds exactly these pixels
        elif picture is None:
            de = None
        else:
            rgb, left_out = written.decoded, written.cleared
            if rgb is None:
                rgb = self.rgb
            elif picture.alpha is not None:
                # A JPEG shows partly transparent pixels flattened onto white, which no
                # input colour is to be compared with: only opaque pixels are measured.
                left_out = picture.alpha < picture.max_code
            de = file_delta_e(picture, rgb, left_out=left_out)
        if written.decoded is not None:  # a JPEG: its pixels are no longer the palette's
            shown: np.ndarray | None
            if picture is not None and picture.alpha is not None:
                shown = picture.alpha >= picture.max_code
            else:
                shown = None if self.alpha is None else self.alpha >= 2 ** self.bit_depth - 1
            coverage = file_coverage(written.decoded, self.palette, shown=shown)
            if filtered is not None:
                filtered = _file_filtered(picture, written.decoded, filtered, shown) if picture is not None else None
        for note in written.notes:
            warnings.warn(note, ImageWarning, stacklevel=2)
        return SavedImage(file=written, delta_e=de, k=len(self.palette), coverage=coverage, filtered=filtered)


@dataclass(frozen=True, eq=False)
class SavedImage:
    """A reduced image as written, with figures that describe the file.

    Attributes
    ----------
    file : quantize.io.write.WrittenImage
        Path, format, size in bytes, palette entries and alpha levels of the file.
    delta_e : dict or None
        CIEDE2000 between each input pixel with some opacity and the colour
        the file shows there (``mean``, ``median``, ``p95``, ``max``): the
        mapping's figures for a lossless file, measured on the decoded
        pixels for a JPEG (over the input's fully opaque pixels only, as
        JPEG flattens the others onto white).  Pixels the file makes fully
        transparent are left out.  None when it could not be measured (no
        picture given).
    k : int
        Colours of the palette.
    coverage : ndarray of shape (k,) or None
        Percent of pixels per palette colour: the mapping's for a lossless
        file; for a JPEG, the share of its decoded pixels nearest (by
        CIEDE2000) to each palette colour, over the pixels that are fully
        opaque in the input (see :func:`file_coverage`).
    filtered : FilteredDeltaE or None
        The S-CIELAB filtered ΔE00, when the mapped image carried one: the
        mapping's for a lossless file, measured on the decoded JPEG for a
        JPEG (at the same viewing condition, over the same pixels as
        ``delta_e``; None without a picture to compare with).
    """

    file: WrittenImage
    delta_e: dict | None
    k: int
    coverage: np.ndarray | None = None
    filtered: FilteredDeltaE | None = None

    @property
    def n_bytes(self) -> int:
        """Size of the file, in bytes."""
        return self.file.n_bytes

    def to_dict(self) -> dict:
        """The file's figures for a JSON summary."""
        f = self.file
        return {"path": str(f.path), "format": f.format, "bytes": f.n_bytes,
                "kB": round(f.n_bytes / 1000, 1), "colours": self.k, "palette_entries": f.palette_entries,
                "alpha_step": f.alpha_step, "alpha_max_change": f.alpha_max_change,
                "delta_e": self.delta_e,
                "delta_e_filtered": None if self.filtered is None else self.filtered.stats,
                # Every figure of the file (ΔE00, filtered ΔE00, coverage) is measured on the same pixels.
                "delta_e_measured_on": "decoded file" if f.lossy else "palette image",
                "warnings": list(f.notes)}

    def describe(self) -> str:
        """One line for people: the file, its format, what it holds and its size."""
        f = self.file
        what = {"PNG": "PNG", "WEBP": "lossless WebP", "GIF": "GIF", "TIFF": "TIFF", "JPEG": "JPEG"}[f.format]
        parts = [f"{f.path}: {'indexed ' if f.palette_entries and f.format == 'PNG' else ''}{what}"]
        if f.lossy:
            parts.append(f"no longer {self.k} colours (JPEG re-encodes them)")
        elif f.palette_entries is not None and f.palette_entries > self.k:
            parts.append(f"{self.k} colours in {f.palette_entries} palette entries with alpha")
        if f.alpha_step is not None:
            levels = 255 // f.alpha_step + 1
            parts.append(f"alpha in {levels} levels (at most {f.alpha_max_change}/255 from the input)"
                         if f.alpha_step < 255 else
                         f"alpha thresholded at 128 (at most {f.alpha_max_change}/255 from the input)")
        parts.append(_size_text(f.n_bytes))
        return ", ".join(parts)


def _size_text(n: int) -> str:
    return f"{n} bytes" if n < 1000 else f"{n / 1000:.1f} kB" if n < 1_000_000 else f"{n / 1e6:.2f} MB"


def file_delta_e(picture, rgb8: np.ndarray, *, left_out: np.ndarray | None = None) -> dict | None:
    """CIEDE2000 statistics between a picture and the pixels of a file made from it.

    Parameters
    ----------
    picture : Picture
        The input.
    rgb8 : ndarray of shape (H, W, 3), uint8
        The file's pixels as decoded, same size as ``picture``.
    left_out : ndarray of shape (H, W), bool, optional
        Pixels not to measure (those the file makes fully transparent); the
        picture's fully transparent ones are always left out.

    Returns
    -------
    dict or None
        ``mean``, ``median``, ``p95``, ``max`` over the pixels, each counted
        once; None when no pixel is left.

    Notes
    -----
    Computed once per distinct pair (input colour, file colour), weighted by
    its pixel count, so a photo's million colours cost what its pairs do.
    """
    from quantize.colour.spaces import delta_e_ciede2000, srgb8_to_space
    from quantize.core.sampling import sample_picture

    smp = sample_picture(picture)
    rows = cast(np.ndarray, smp.inverse)  # a sample of one picture (not pooled) has its inverse
    flat = rgb8.reshape(-1, 3).astype(np.int64)
    keep = rows >= 0
    if left_out is not None:
        keep &= ~left_out.ravel()
    key = (rows[keep].astype(np.int64) << 24) | (flat[keep, 0] << 16) | (flat[keep, 1] << 8) | flat[keep, 2]
    if key.size == 0:
        return None
    pairs, counts = np.unique(key, return_counts=True)
    lab_in = smp.points("lab")
    de = np.empty(pairs.size)
    for at in range(0, pairs.size, _DE_BLOCK):
        p = pairs[at:at + _DE_BLOCK]
        codes = np.stack([(p >> 16) & 255, (p >> 8) & 255, p & 255], axis=1).astype(np.uint8)
        de[at:at + _DE_BLOCK] = delta_e_ciede2000(lab_in[p >> 24], srgb8_to_space(codes, "lab"))
    return delta_e_stats(de, counts.astype(np.float64))


def file_coverage(rgb8: np.ndarray, palette, *, shown: np.ndarray | None = None) -> np.ndarray:
    """Percent of a file's pixels nearest to each palette colour, by CIEDE2000.

    What coverage means for a file that no longer holds the palette's
    colours (a JPEG): each decoded pixel counts for the palette colour it is
    nearest to, as nearest-colour mapping would assign it.

    Parameters
    ----------
    rgb8 : ndarray of shape (H, W, 3), uint8
        The file's pixels as decoded.
    palette : Palette
    shown : ndarray of shape (H, W), bool, optional
        The pixels to count (default: all).

    Returns
    -------
    ndarray of shape (k,)
        Percent per colour; all zero when no pixel is counted.
    """
    from quantize.core.sampling import sample_picture
    from quantize.io.read import as_picture

    k = len(palette)
    if shown is not None and not shown.any():
        return np.zeros(k)
    alpha = None if shown is None else np.where(shown, 255, 0).astype(np.uint8)[..., None]
    pic = as_picture(rgb8 if alpha is None else np.concatenate([rgb8, alpha], axis=2))
    smp = sample_picture(pic)
    labels, _ = map_sample(smp, palette, metric="ciede2000")
    return coverage_percent(labels, smp.weights, k)


def _file_filtered(picture, rgb8, like: FilteredDeltaE, shown) -> FilteredDeltaE | None:
    """The filtered ΔE00 of decoded pixels ``rgb8`` at the viewing condition of ``like``, over ``shown``."""
    from quantize.quality.perception import delta_e_map, pixel_delta_e_stats

    view = ({"ppd": like.ppd} if like.dpi is None or like.distance_mm is None
            else {"dpi": like.dpi, "distance_mm": like.distance_mm})
    de = delta_e_map(picture, rgb8, kind="filtered", **view)
    keep = ~np.isnan(de) if shown is None else ~np.isnan(de) & shown
    if not keep.any():
        return None
    return FilteredDeltaE(stats=pixel_delta_e_stats(de[keep]), dpi=like.dpi, distance_mm=like.distance_mm,
                          ppd=like.ppd)


def nearest_image(pic, palette, *, metric: str, sample=None) -> MappedImage:
    """Every pixel of ``pic`` (a Picture) onto its nearest colour of ``palette``, by ``metric``."""
    from quantize.core.sampling import sample_picture

    smp = sample if sample is not None else sample_picture(pic)
    labels, de = map_sample(smp, palette, metric=metric)
    k = len(palette)
    dtype = np.uint8 if k <= 256 else np.uint16
    idx = smp.index_image(labels, dtype=dtype)
    return MappedImage(
        indices=idx,
        palette=palette,
        alpha=pic.alpha,
        delta_e=delta_e_stats(de, smp.weights),
        coverage=coverage_percent(labels, smp.weights, k),
        source=pic.source,
        dpi=pic.dpi,
        bit_depth=pic.bit_depth,
        notes=tuple(pic.warnings),
    )
