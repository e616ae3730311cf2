"""Chromatic adaptation of measured CIELAB to the package's D65 white.

Instruments report Lab relative to D50 (ISO 13655) or another illuminant
the file names; :mod:`quantize` works in CIELAB relative to the D65 white of
sRGB.  :func:`adapt_lab` converts with the Bradford transform
(:func:`bradford_matrix`).  The illuminants' whites are the CIE 15:2004
chromaticities (:data:`WHITE_XY`); colour-science, which ships the same table,
is the tests' reference and is not imported here (its import changes numpy's
print options in the caller's process).
"""

from __future__ import annotations

import numpy as np

__all__ = ["BRADFORD", "ILLUMINANTS", "WHITE_XY", "adapt_lab", "bradford_matrix", "check_illuminant", "check_observer"]

#: The Bradford cone-response matrix (Lam 1985), as given in ICC.1:2010 Annex E.
BRADFORD = np.array([[0.8951, 0.2664, -0.1614], [-0.7502, 1.7135, 0.0367], [0.0389, -0.0685, 1.0296]])

#: Illuminants a library may name.
ILLUMINANTS = ("A", "C", "D50", "D55", "D65", "D75")
#: Chromaticity (x, y) of each illuminant's white for the CIE 1931 2 degree and
#: CIE 1964 10 degree observers: CIE 15:2004, Colorimetry, 3rd ed., Table T.3.
WHITE_XY = {
    2: {"A": (0.44758, 0.40745), "C": (0.31006, 0.31616), "D50": (0.3457, 0.3585),
        "D55": (0.33243, 0.34744), "D65": (0.3127, 0.329), "D75": (0.29903, 0.31488)},
    10: {"A": (0.45117, 0.40594), "C": (0.31039, 0.31905), "D50": (0.34773, 0.35952),
         "D55": (0.33412, 0.34877), "D65": (0.31382, 0.331), "D75": (0.29968, 0.3174)},
}


def _white_xyz(name: str, observer: int) -> np.ndarray:
    """XYZ (Y = 1) of an illuminant's white from its chromaticity."""
    x, y = WHITE_XY[observer][name]
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


def bradford_matrix(source_white, target_white) -> np.ndarray:
    """The Bradford chromatic adaptation matrix between two whites.

    Parameters
    ----------
    source_white, target_white : array_like of shape (3,)
        CIE XYZ of the whites, Y = 1.

    Returns
    -------
    ndarray of shape (3, 3)
        ``M`` with ``XYZ_target = M @ XYZ_source``.

    References
    ----------
    .. [1] K. M. Lam, "Metamerism and colour constancy", PhD thesis,
       University of Bradford, 1985 (the Bradford cone matrix).
    .. [2] M. D. Fairchild, *Color Appearance Models*, 3rd ed., Wiley, 2013,
       ch. 9-10 (von Kries-type transforms).

    Examples
    --------
    >>> m = bradford_matrix([0.96422, 1.0, 0.82521], [0.95047, 1.0, 1.08883])
    >>> [round(float(v), 4) for v in m[0]]
    [0.9556, -0.023, 0.0632]
    """
    s = np.asarray(source_white, dtype=np.float64)
    t = np.asarray(target_white, dtype=np.float64)
    if s.shape != (3,) or t.shape != (3,) or not (s > 0).all() or not (t > 0).all():
        raise ValueError(f"whites must be positive XYZ triples, got {s} and {t}")
    # von Kries scaling of the cone responses, between the two matrices.
    return np.linalg.inv(BRADFORD) @ np.diag((BRADFORD @ t) / (BRADFORD @ s)) @ BRADFORD


def adapt_lab(lab, *, illuminant: str = "D50", observer: int = 2) -> np.ndarray:
    """CIELAB relative to ``illuminant`` -> CIELAB relative to D65 (sRGB white), by Bradford.

    Parameters
    ----------
    lab : array_like of shape (..., 3)
        L* 0-100, relative to the white of ``illuminant`` for ``observer``.
    illuminant : str, default "D50"
        One of :data:`ILLUMINANTS`.
    observer : {2, 10}, default 2

    Returns
    -------
    ndarray of shape (..., 3)
        CIELAB relative to the D65 white of IEC 61966-2-1, the package's
        working white. Lab that is already D65 (2 degree) is returned as is.

    Raises
    ------
    ValueError
        Unknown illuminant or observer.

    References
    ----------
    .. [1] ISO 13655:2017, Graphic technology - Spectral measurement and
       colorimetric computation for graphic arts images (D50, 2 degrees).
    .. [2] M. D. Fairchild, *Color Appearance Models*, 3rd ed., Wiley, 2013.
    .. [3] CIE 15:2004, *Colorimetry*, 3rd ed. (CIELAB).

    Examples
    --------
    >>> [round(float(v), 6) + 0.0 for v in adapt_lab([100.0, 0.0, 0.0])]  # D50 white -> D65 white
    [100.0, 0.0, 0.0]
    """
    from .spaces import D65_WHITE_XYZ, _lab_to_t, _t_to_lab

    ill = check_illuminant(illuminant)
    obs = check_observer(observer)
    lab = np.asarray(lab, dtype=np.float64)
    if lab.ndim == 0 or lab.shape[-1] != 3:
        raise ValueError(f"lab must have shape (..., 3), got {lab.shape}")
    if ill == "D65" and obs == 2:
        return lab.copy()
    src = _white_xyz(ill, obs)
    xyz = _lab_to_t(lab) * src
    out = xyz @ bradford_matrix(src, D65_WHITE_XYZ).T
    return _t_to_lab(out / D65_WHITE_XYZ)


def check_illuminant(name) -> str:
    key = str(name).strip().upper()
    if key not in ILLUMINANTS:
        raise ValueError(f"unknown illuminant {name!r}; choose one of: {', '.join(ILLUMINANTS)}")
    return key


def check_observer(observer) -> int:
    try:
        obs = int(str(observer).strip().rstrip("°").strip())
    except ValueError:
        obs = -1
    if obs not in WHITE_XY:
        raise ValueError(f"unknown observer {observer!r}; choose 2 or 10 (degrees)")
    return obs
