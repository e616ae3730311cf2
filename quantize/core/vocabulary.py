"""The library's keyword vocabulary: old keyword names and the command line's names that replaced them.

One table for every public function (:func:`quantize.fit.engine.fit_palette`,
:func:`quantize.fit.sweep.sweep`, :meth:`quantize.palette.Palette.apply`,
:func:`quantize.render.mapping.map_picture`) and for the settings and record
classes whose fields were renamed (:class:`quantize.fit.settings.FitSettings`,
:class:`quantize.palette.FitRecord`, see :func:`accepts_renamed`), kept in the
lowest layer so that any stage can use it.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Mapping

__all__ = ["RENAMED_KEYWORDS", "renamed_keywords", "accepts_renamed"]


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


def accepts_renamed(*old_names: str):
    """Class decorator: a dataclass whose fields ``old_names`` were renamed (see :data:`RENAMED_KEYWORDS`).

    The class's constructor (and so :func:`dataclasses.replace`) still
    accepts each old name as a keyword, and each old name still reads as an
    attribute; both with a DeprecationWarning that names the new field.
    The fields themselves, their order and ``dataclasses.fields`` are the
    new names only.

    Examples
    --------
    >>> import dataclasses
    >>> @accepts_renamed("init")
    ... @dataclasses.dataclass(frozen=True)
    ... class S:
    ...     seeding: str = "k-means++"
    >>> S().seeding
    'k-means++'
    """
    def decorate(cls):
        made = cls.__init__

        @functools.wraps(made)
        def __init__(self, *args, **kwargs):
            made(self, *args, **renamed_keywords(kwargs, cls.__name__, old_names))

        cls.__init__ = __init__
        for old in old_names:
            setattr(cls, old, _old_attribute(cls.__name__, old, RENAMED_KEYWORDS[old]))
        return cls

    return decorate


def _old_attribute(owner: str, old: str, new: str) -> property:
    def read(self):
        warnings.warn(f"{owner}.{old} is now {owner}.{new}, as the command line's --{new.replace('_', '-')}; "
                      f"{old!r} will be removed", DeprecationWarning, stacklevel=2)
        return getattr(self, new)

    return property(read, doc=f"Deprecated: the old name of :attr:`{new}`.")
