"""Print sizes: millimetres and pixels at a resolution (25.4 mm to the inch)."""

from __future__ import annotations

__all__ = ["MM_PER_INCH", "mm_to_px", "px_to_mm"]

#: Millimetres per inch, exact by definition (international inch, 1959).
MM_PER_INCH = 25.4


def mm_to_px(mm: float, dpi: float) -> float:
    """Millimetres to pixels at ``dpi``.

    Examples
    --------
    >>> mm_to_px(25.4, 300)
    300.0
    """
    return float(mm) / MM_PER_INCH * float(dpi)


def px_to_mm(px: float, dpi: float) -> float:
    """Pixels at ``dpi`` to millimetres.

    Examples
    --------
    >>> px_to_mm(300, 300)
    25.4
    """
    return float(px) / float(dpi) * MM_PER_INCH
