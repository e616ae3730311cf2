"""Dithered input: told apart from flat art, so its dots are not cleaned away.

A dither (error diffusion, ordered or clustered dots, as ``quantize reduce
--dither`` makes) places inks in dots a few pixels across, on purpose. The
clean-up for flat art merges every region smaller than the minimum feature,
and the edge step reads a one-pixel run of an in-between ink as an edge
blend: on a dither both would erase the dots (a clustered-dot dither lost a
fifth of its pixels).

The measure is the share of opaque pixels whose ink differs from at least
two of their four neighbours: on flat artwork only corners and one-pixel
details do (a few percent, anti-aliased and JPEG edges included), on a
dither most dots do. At :data:`DITHER_SHARE` or more the image is taken as
dithered (common practice, no source; on the generated art of the tests,
flat art measured up to 0.05 and the dithers of ``reduce`` 0.15 to 0.37).
Art that is only partly dithered may fall below it: choose with
``dithered="keep"``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["DITHER_CHOICES", "DITHER_SHARE", "alternation_share", "dither_handling"]

#: How dithered input is handled: "auto" detects it, "keep" keeps every dot, "clean" cleans it as flat art.
DITHER_CHOICES = ("auto", "keep", "clean")
#: Share of alternating pixels from which an image is taken as dithered (common practice, no source).
DITHER_SHARE = 0.08


def alternation_share(indices: np.ndarray, opaque: np.ndarray | None = None) -> float:
    """Share of the opaque pixels whose ink differs from at least two of their four neighbours.

    Neighbours outside the image or transparent do not count as different.

    Examples
    --------
    >>> checker = np.indices((6, 6)).sum(axis=0) % 2
    >>> alternation_share(checker)
    1.0
    >>> alternation_share(np.zeros((6, 6), int))
    0.0
    """
    idx = np.asarray(indices)
    live = np.ones(idx.shape, bool) if opaque is None else np.asarray(opaque, bool)
    n = int(live.sum())
    if n == 0:
        return 0.0
    diff = np.zeros(idx.shape, np.int8)
    down = (idx[1:] != idx[:-1]) & live[1:] & live[:-1]  # pixel and the one below
    right = (idx[:, 1:] != idx[:, :-1]) & live[:, 1:] & live[:, :-1]  # pixel and the one to its right
    diff[1:] += down
    diff[:-1] += down
    diff[:, 1:] += right
    diff[:, :-1] += right
    return float(((diff >= 2) & live).sum() / n)


def dither_handling(indices: np.ndarray, opaque: np.ndarray, choice: str, *, source: str) -> tuple[dict, str | None]:
    """Whether to keep the dots of ``indices`` (skip the edge step and the clean-up), and the note to print.

    Parameters
    ----------
    indices : ndarray of shape (H, W)
        The image mapped to the inks.
    opaque : ndarray of bool, shape (H, W)
    choice : {"auto", "keep", "clean"}
    source : str
        Named in the note.

    Returns
    -------
    doc : dict
        ``choice``, ``alternating_share``, ``detected``, ``kept`` (the manifest's ``dither``).
    note : str or None

    Raises
    ------
    ValueError
        An unknown ``choice``.
    """
    if choice not in DITHER_CHOICES:
        raise ValueError(f"unknown dithered handling {choice!r}; choose one of: {', '.join(DITHER_CHOICES)}")
    share = alternation_share(indices, opaque)
    detected = share >= DITHER_SHARE
    kept = choice == "keep" or (choice == "auto" and detected)
    doc = {"choice": choice, "alternating_share": round(share, 4), "threshold": DITHER_SHARE,
           "detected": bool(detected), "kept": bool(kept)}
    note = None
    if kept:
        why = (f"looks dithered ({100 * share:.0f} % of its pixels alternate with their neighbours)" if detected
               else "is treated as dithered, as asked")
        note = (f"{source} {why}: every dot is kept (no edge step, no clean-up below the minimum feature); "
                "check that its smallest dots hold on the screen mesh, or clean it as flat art with "
                "--dithered clean")
    elif detected:
        note = (f"{source} looks dithered ({100 * share:.0f} % of its pixels alternate with their neighbours) "
                "but was cleaned as flat art, as asked: dots below the minimum feature were merged")
    return doc, note
