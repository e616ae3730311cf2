"""Plain-numpy twins of the compiled kernels, for checking them."""

import numpy as np


def assign_nearest(points, centres):
    """Nearest centre by brute force: labels (lowest index on ties) and squared distances."""
    d2 = ((points[:, None, :] - centres[None, :, :]) ** 2).sum(axis=2)
    labels = d2.argmin(axis=1)
    return labels, d2[np.arange(points.shape[0]), labels]


def inertia(points, weights, centres):
    """Weighted sum of squared distances to the nearest centre."""
    return float(weights @ assign_nearest(points, centres)[1])


def nearest_ciede2000(lab, pal_lab):
    """Nearest palette colour by CIEDE2000, trying every colour (numpy ΔE00)."""
    from quantize.colour.spaces import delta_e_ciede2000

    de = np.stack([delta_e_ciede2000(lab, c) for c in pal_lab], axis=1)
    labels = de.argmin(axis=1)
    return labels, de


def centre_sums(points, weights, labels, k):
    """Per-label sums of weights and of weighted points, one point at a time."""
    wsum = np.zeros(k)
    sums = np.zeros((k, points.shape[1]))
    for p, w, j in zip(points, weights, labels):
        wsum[j] += w
        sums[j] += w * p
    return wsum, sums
