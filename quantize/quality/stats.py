"""Error and coverage statistics of a reduced image.

All statistics are over opaque pixels.  They are computed on distinct
colours with their pixel counts as weights, which gives exactly the values a
per-pixel computation would.  Percentiles use the inverted empirical CDF
(the smallest value whose cumulative pixel share reaches q), so they are
always a ΔE that some pixel really has.
"""

from __future__ import annotations

import numpy as np

__all__ = ["weighted_quantile", "delta_e_stats", "coverage_percent", "STAT_NAMES"]

#: Keys of the ΔE statistics dict, in report order.
STAT_NAMES = ("mean", "median", "p95", "max")


def weighted_quantile(values, weights, q) -> np.ndarray:
    """Quantiles of ``values`` where each value stands for ``weights`` pixels.

    Equal to ``numpy.quantile(np.repeat(values, weights), q,
    method="inverted_cdf")`` for integer weights, without the repeat.

    Parameters
    ----------
    values : array_like of shape (n,)
    weights : array_like of shape (n,)
        Non-negative; not all zero.
    q : float or array_like
        Quantiles in [0, 1].

    Returns
    -------
    ndarray
        Same shape as ``q``.

    References
    ----------
    .. [1] R. J. Hyndman and Y. Fan, "Sample quantiles in statistical
       packages", The American Statistician 50(4), 361-365, 1996
       (definition 1, the inverse of the empirical CDF).
    """
    v = np.asarray(values, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    qq = np.asarray(q, dtype=np.float64)
    if v.size > _SORT_BELOW and np.isfinite(v).all() and v.max() > v.min():
        return _bucketed_quantile(v, w, qq)
    order = np.argsort(v, kind="stable")
    cum = np.cumsum(w[order])
    # A tiny relative slack makes 0.95 * 100 pixels count as 95, not 95.0000001.
    idx = np.searchsorted(cum, qq * cum[-1] * (1 - 1e-12), side="left")
    return v[order][np.minimum(idx, v.size - 1)]


#: Above this many values, :func:`weighted_quantile` selects instead of sorting.
_SORT_BELOW = 1 << 16
_BUCKETS = 4096


def _bucketed_quantile(v, w, qq):
    """The same quantiles as the sorted form, sorting only one bucket per quantile.

    Values go into equal-width buckets, a monotone map, so the bucket in
    which the cumulative weight crosses ``q`` holds the answer; only its
    members are sorted, with the weight of all lower buckets carried in.
    """
    lo, hi = float(v.min()), float(v.max())
    b = np.minimum(((v - lo) * (_BUCKETS / (hi - lo))).astype(np.intp), _BUCKETS - 1)
    bw = np.bincount(b, weights=w, minlength=_BUCKETS)
    cum_b = np.cumsum(bw)
    targets = qq.ravel() * cum_b[-1] * (1 - 1e-12)
    out = np.empty(targets.size)
    for t, target in enumerate(targets):
        j = min(int(np.searchsorted(cum_b, target, side="left")), _BUCKETS - 1)
        members = np.flatnonzero(b == j)
        order = np.argsort(v[members], kind="stable")
        before = cum_b[j - 1] if j > 0 else 0.0
        cum = before + np.cumsum(w[members][order])
        i = int(np.searchsorted(cum, target, side="left"))
        if i >= members.size:  # the bucket sums rounded differently: sort after all
            order = np.argsort(v, kind="stable")
            i = int(np.searchsorted(np.cumsum(w[order]), target, side="left"))
            out[t] = v[order][min(i, v.size - 1)]
            continue
        out[t] = v[members][order][i]
    return out.reshape(qq.shape)


def delta_e_stats(delta_e, weights) -> dict[str, float]:
    """Mean, median, 95th percentile and maximum of per-pixel ΔE.

    Parameters
    ----------
    delta_e : array_like of shape (n,)
        ΔE of each distinct colour to the colour it was mapped to.
    weights : array_like of shape (n,)
        Pixel count of each distinct colour.

    Returns
    -------
    dict
        Keys ``mean``, ``median``, ``p95``, ``max`` (floats).
    """
    de = np.asarray(delta_e, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    live = w > 0
    de, w = de[live], w[live]
    med, p95 = weighted_quantile(de, w, [0.5, 0.95])
    return {
        "mean": float((w * de).sum() / w.sum()),
        "median": float(med),
        "p95": float(p95),
        "max": float(de.max()),
    }


def coverage_percent(labels, weights, k: int) -> np.ndarray:
    """Share of opaque pixels taken by each palette entry, in percent.

    Entries that no pixel uses get 0.0.  The shares sum to 100 (up to
    rounding).
    """
    cov = np.bincount(np.asarray(labels), weights=np.asarray(weights, float), minlength=k)
    return 100.0 * cov / cov.sum()
