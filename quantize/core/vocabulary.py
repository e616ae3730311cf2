"""The library's keyword vocabulary: old keyword names and the command line's names that replaced them.

One table for every public function (:func:`quantize.fit.engine.fit_palette`,
:func:`quantize.fit.sweep.sweep`, :meth:`quantize.palette.Palette.apply`,
:func:`quantize.render.mapping.map_picture`), kept in the lowest layer so that
any stage can use it.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping

__all__ = ["RENAMED_KEYWORDS", "renamed_keywords"]


#: Library keywords renamed to the command line's option names: old name -> new name
#: (``init`` -> ``seeding`` as ``--seeding``, and so on).  The old names still work, with a
#: DeprecationWarning.
RENAMED_KEYWORDS = {"init": "seeding", "metric": "nearest", "strength": "dither_strength"}


def renamed_keywords(options: Mapping, where: str, old_names, *, stacklevel: int = 3) -> dict:
    """``options`` with each old keyword of ``old_names`` under its new name (see :data:`RENAMED_KEYWORDS`).

    Each old keyword found is warned about with a :class:`DeprecationWarning`
    (through :func:`warnings.warn`; filters are the caller's business).
    ``nearest="auto"``, the command line's default, becomes None, which
    every function reads as "the default metric".

    Parameters
    ----------
    options : mapping
        Keyword arguments as the caller gave them.
    where : str
        The public function's name, for the messages.
    old_names : iterable of str
        The old names this function still accepts.
    stacklevel : int, default=3
        Points the warning at the caller of the public function that calls this.

    Raises
    ------
    TypeError
        An old name given together with its new one.
    """
    out = dict(options)
    for old in old_names:
        if old not in out:
            continue
        new = RENAMED_KEYWORDS[old]
        if new in out:
            raise TypeError(f"{where}() got both {old!r} and its new name {new!r}; give {new!r} only")
        warnings.warn(f"{where}(): the keyword {old!r} is now {new!r}, as the command line's "
                      f"--{new.replace('_', '-')}; {old!r} will be removed", DeprecationWarning,
                      stacklevel=stacklevel)
        out[new] = out.pop(old)
    if out.get("nearest") == "auto":
        out["nearest"] = None
    return out
