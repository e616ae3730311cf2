"""Finding the images of a batch: folder walk, include and exclude patterns, folder checks."""

from __future__ import annotations

import fnmatch
import os
from pathlib import Path, PurePosixPath
from typing import Iterable, Sequence

from quantize.errors import QuantizeError

__all__ = ["discover_images", "DEFAULT_INCLUDE"]

#: Patterns an image file must match when ``include`` is not given.
DEFAULT_INCLUDE = ("*.png", "*.jpg", "*.jpeg", "*.tif", "*.tiff", "*.bmp", "*.gif", "*.webp")



def _parts_match(rel: PurePosixPath, patterns: Sequence[str], *, whole_tree: bool) -> bool:
    """Does a relative path match a pattern (case-insensitively)?

    A pattern without ``/`` matches the file name, or with ``whole_tree`` any
    folder name on the way; one with ``/`` matches the relative path (or, with
    ``whole_tree``, any of its leading folders), and there ``*`` may cross ``/``.
    """
    parts = [p.lower() for p in rel.parts]
    names = parts if whole_tree else parts[-1:]
    paths = ["/".join(parts[:i]) for i in range(1, len(parts) + 1)] if whole_tree else ["/".join(parts)]
    for pat in patterns:
        p = pat.lower().strip("/")
        pool = paths if "/" in p else names
        if any(fnmatch.fnmatchcase(s, p) for s in pool):
            return True
    return False


def _check_patterns(patterns, what):
    out = tuple(patterns)
    for p in out:
        if not isinstance(p, str) or not p.strip("/ "):
            raise ValueError(f"{what} pattern {p!r} is empty")
    return out


def discover_images(input_dir, *, include: Sequence[str] | None = None, exclude: Sequence[str] = (),
                    skip: Iterable = ()) -> list[PurePosixPath]:
    """Image files under ``input_dir``, recursively, as sorted relative paths.

    Parameters
    ----------
    input_dir : path-like
        The folder to search.
    include : sequence of str, optional
        Glob patterns a file must match (default :data:`DEFAULT_INCLUDE`).
        A pattern without ``/`` matches the file name at any depth; one with
        ``/`` matches the path relative to ``input_dir`` (``*`` may cross
        folders there).  Matching ignores case.
    exclude : sequence of str, default=()
        Glob patterns that remove files; a pattern that matches a folder (by
        name, or by relative path if it has ``/``) removes everything in it.
    skip : iterable of path-like, default=()
        Folders never entered (the output folder).

    Returns
    -------
    list of PurePosixPath
        Hidden files and folders (names starting with ``.``) are left out.
        Symbolic links to folders are not followed.

    Raises
    ------
    QuantizeError
        ``input_dir`` is missing or not a folder.

    Examples
    --------
    >>> discover_images("sample_images", include=["*.png"])  # doctest: +SKIP
    [PurePosixPath('poster_six_inks.png')]
    """
    root = Path(input_dir)
    if not root.is_dir():
        raise QuantizeError(f"{root}: {'is not a folder' if root.exists() else 'no such folder'}")
    include = _check_patterns(DEFAULT_INCLUDE if include is None or not len(include) else include, "include")
    exclude = _check_patterns(exclude, "exclude")
    skip_real = {Path(s).resolve() for s in skip}
    found = []
    for here, dirs, files in os.walk(root, followlinks=False):
        base = Path(here)
        rel_base = PurePosixPath(base.relative_to(root).as_posix())
        keep = []
        for d in sorted(dirs):
            rel = rel_base / d
            if d.startswith(".") or (base / d).resolve() in skip_real or _parts_match(rel, exclude, whole_tree=True):
                continue
            keep.append(d)
        dirs[:] = keep
        for f in sorted(files):
            rel = rel_base / f
            if f.startswith("."):
                continue
            if _parts_match(rel, include, whole_tree=False) and not _parts_match(rel, exclude, whole_tree=True):
                found.append(rel)
    return sorted(found)


def _check_folders(input_dir: Path, output_dir: Path, exclude) -> None:
    """Refuse an output folder that would be read back as input, or would hold the input."""
    src, dst = input_dir.resolve(), output_dir.resolve()
    if src == dst:
        raise QuantizeError(f"{output_dir}: is the input folder; outputs must go to a separate folder")
    if src.is_relative_to(dst):
        raise QuantizeError(f"{output_dir}: contains the input folder {input_dir}; choose an output folder "
                            "outside it")
    if dst.is_relative_to(src):
        rel = PurePosixPath(dst.relative_to(src).as_posix())
        if not _parts_match(rel, exclude, whole_tree=True):
            raise QuantizeError(f"{output_dir}: is inside the input folder {input_dir}, so its images would be "
                                f"read back as inputs; choose a folder outside it or exclude it "
                                f"(--exclude '{rel}')")
