"""Which colour is the substrate (garment or paper) when the user did not say.

A colour that is not the substrate gets a screen. Taking white by default
made a screen of cream paper, so the substrate is inferred, said, or refused:

1. a palette with one locked colour: that colour (the user fixed it);
   several locked colours: the one that covers most pixels;
2. else the image border: the colour that holds at least
   :data:`BORDER_SHARE` of the opaque pixels of the outer ring
   (:data:`BORDER_PX` wide) and at least :data:`BORDER_LEAD` times the share
   of the next colour, counting every pixel within ΔE00 :data:`SAME_DE` of
   it (JPEG noise, scanner grain);
3. a border that is mostly transparent (less than half of the ring at least
   half opaque): no substrate (the art floats on whatever it is printed on,
   and every colour prints);
4. else a :class:`~quantize.errors.SeparationError` that names the option.

The thresholds are common practice, no source: artwork on paper or a garment
is usually framed by the bare substrate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from quantize.errors import SeparationError

__all__ = ["BORDER_LEAD", "BORDER_PX", "BORDER_SHARE", "SAME_DE", "SubstrateGuess", "border_colour", "infer_substrate",
           "no_substrate_asked"]

#: Width of the outer ring of pixels read, px.
BORDER_PX = 2
#: Share of the ring one colour must hold to be taken as the substrate (common practice, no source).
BORDER_SHARE = 0.5
#: ... and how many times the next colour's share (common practice, no source).
BORDER_LEAD = 1.5
#: ΔE00 within which ring pixels count as that colour (common practice, no source).
SAME_DE = 5.0
_CANDIDATES = 64  # most frequent ring colours tried as the centre of the substrate colour

_REFUSE = ("give the substrate (the garment or paper colour, left unprinted): --substrate COLOUR on the "
           "command line (#rrggbb, L,a,b or an ink name), or --substrate none to print every colour")


@dataclass(frozen=True)
class SubstrateGuess:
    """The substrate chosen without being given.

    Attributes
    ----------
    rgb8 : ndarray of shape (3,) or None
        Its colour; None when every colour prints (a transparent border).
    source : str
        "locked colour", "largest locked colour", "image border" or "transparent border".
    share : float or None
        Fraction of the border ring it holds (border inference only).
    """

    rgb8: np.ndarray | None
    source: str
    share: float | None = None

    def describe(self, hex_: str | None = None) -> str:
        """One line for the summary and the manifest's notes."""
        if self.rgb8 is None:
            return "substrate: none (the image border is transparent, so every colour prints)"
        hx = hex_ or "#{:02x}{:02x}{:02x}".format(*map(int, self.rgb8))
        if self.source == "image border" and self.share is not None:
            return (f"substrate {hx} inferred from the image border ({100 * self.share:.0f} % of its pixels); "
                    "it gets no plate (--substrate to give another)")
        return f"substrate {hx}: the palette's {self.source} (--substrate to give another)"


def no_substrate_asked(substrate) -> bool:
    """Whether ``substrate`` is the word that asks for none (every colour prints)."""
    return isinstance(substrate, str) and substrate.strip().casefold() == "none"


def _ring(picture) -> tuple[np.ndarray, int]:
    """The 8-bit colours of the outer ring's solid pixels (at least half opaque), and the ring's pixel
    count."""
    h, w = picture.shape
    b = max(1, min(BORDER_PX, h // 2, w // 2))
    ring = np.zeros((h, w), bool)
    ring[:b], ring[-b:], ring[:, :b], ring[:, -b:] = True, True, True, True
    rgb = np.asarray(picture.rgb)
    if picture.max_code != 255:  # 16-bit input: the ring is read at 8 bits
        rgb = np.round(rgb.astype(np.float64) * (255.0 / picture.max_code)).astype(np.uint8)
    # A faint shadow (alpha of a few codes) is not a substrate colour: only solid pixels count.
    solid = ring if picture.alpha is None else ring & (picture.alpha.astype(np.float64) * 2 >= picture.max_code)
    return rgb[solid], int(ring.sum())


def border_colour(picture) -> tuple[np.ndarray | None, float, float]:
    """The colour that holds most of the image border, its share of the border's opaque pixels, and the
    share of the next colour.

    Returns ``(None, 0.0, 0.0)`` when less than half of the border is solid
    (at least half opaque): the art floats on whatever it is printed on.

    Examples
    --------
    >>> from quantize.io.read import as_picture
    >>> img = np.full((20, 30, 3), (244, 236, 214), np.uint8); img[5:15, 5:25] = (31, 45, 84)
    >>> rgb, share, runner_up = border_colour(as_picture(img))
    >>> rgb.tolist(), share, runner_up
    ([244, 236, 214], 1.0, 0.0)
    """
    from quantize.colour.spaces import srgb8_to_space

    px, n_ring = _ring(picture)
    if px.shape[0] == 0 or 2 * px.shape[0] < n_ring:
        return None, 0.0, 0.0
    uniq, counts = np.unique(px.reshape(-1, 3), axis=0, return_counts=True)
    lab = srgb8_to_space(uniq.astype(np.uint8), "lab")
    best = _densest(lab, counts)
    w = counts[best].astype(np.float64)
    mean = (uniq[best].astype(np.float64) * w[:, None]).sum(axis=0) / w.sum()
    rest = counts * ~best
    second = _densest(lab, rest)
    return (np.round(mean).astype(np.uint8), float(w.sum() / px.shape[0]),
            float(rest[second].sum() / px.shape[0]))


def _densest(lab: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Mask of the colours within ΔE00 SAME_DE of the frequent colour that gathers the most pixels."""
    from quantize.colour.spaces import delta_e_ciede2000

    best, best_n = np.zeros(counts.size, bool), 0
    for c in np.argsort(-counts, kind="stable")[:_CANDIDATES]:
        if counts[c] == 0:
            break
        near = np.asarray(delta_e_ciede2000(lab, lab[c])) <= SAME_DE  # one per colour of lab
        n = int(counts[near].sum())
        if n > best_n:
            best, best_n = near, n
    return best


def infer_substrate(picture, palette=None, *, indices=None) -> SubstrateGuess:
    """The substrate of ``picture`` when none was given (see the module's rules).

    Parameters
    ----------
    picture : Picture
    palette : Palette, optional
        Its locked colours come first.
    indices : ndarray of shape (H, W), optional
        The picture mapped to ``palette``: with several locked colours, the
        one on most pixels is taken.

    Raises
    ------
    SeparationError
        The border is mixed (no colour holds :data:`BORDER_SHARE` of it) and
        the palette has no locked colour.
    """
    if palette is not None:
        lk = np.flatnonzero(palette.locked)
        if lk.size == 1:
            return SubstrateGuess(palette.rgb8[int(lk[0])].copy(), "locked colour")
        if lk.size > 1 and indices is not None:
            opaque = picture.opaque
            n = [int(((indices == i) & opaque).sum()) for i in lk]
            return SubstrateGuess(palette.rgb8[int(lk[int(np.argmax(n))])].copy(), "largest locked colour")
    rgb, share, second = border_colour(picture)
    if rgb is None:
        return SubstrateGuess(None, "transparent border")
    if share >= BORDER_SHARE and share >= BORDER_LEAD * second:
        return SubstrateGuess(rgb, "image border", share)
    hx = "#{:02x}{:02x}{:02x}".format(*map(int, rgb))
    raise SeparationError(f"{picture.source}: cannot tell the substrate from the image border: its most common "
                          f"colour, {hx}, holds {100 * share:.0f} % of it and the next {100 * second:.0f} % "
                          f"(a substrate needs {100 * BORDER_SHARE:.0f} % and {BORDER_LEAD:g} times the next); "
                          + _REFUSE)
