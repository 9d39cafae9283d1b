"""False-discovery-rate control: Benjamini–Hochberg step-up q-values.

References
----------
Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate: a practical and
powerful approach to multiple testing. J R Stat Soc B 57(1):289-300.
doi:10.1111/j.2517-6161.1995.tb02031.x
"""

from __future__ import annotations

import numpy as np

from shapedesc.errors import StatsInputError

__all__ = ["benjamini_hochberg"]


def benjamini_hochberg(p_values: np.ndarray, *, axis: int = -1) -> np.ndarray:
    """Benjamini–Hochberg adjusted p-values (q-values) along ``axis``.

    ``q_(i) = min_{j >= i} min(1, m p_(j) / j)`` for the sorted p-values
    ``p_(1) <= ... <= p_(m)``; a test is a discovery at FDR level alpha when ``q <= alpha``.

    Parameters
    ----------
    p_values : ndarray, shape (..., m, ...)
        Values in [0, 1]; no NaN.
    axis : int
        Axis holding one family of m tests.

    Returns
    -------
    ndarray, same shape as ``p_values``
    """
    p = np.asarray(p_values, dtype=float)
    if p.size == 0:
        return p.copy()
    if not np.all(np.isfinite(p)) or np.any((p < 0) | (p > 1)):
        bad = p[~(np.isfinite(p) & (p >= 0) & (p <= 1))]
        raise StatsInputError(
            f"p-values must lie in [0, 1] without NaN; found {bad[:5].tolist()}"
        )
    return np.moveaxis(_bh(np.moveaxis(p, axis, -1)), -1, axis)


def _bh(p: np.ndarray) -> np.ndarray:
    m = p.shape[-1]
    order = np.argsort(p, axis=-1, kind="stable")
    ps = np.take_along_axis(p, order, axis=-1)
    scaled = ps * m / np.arange(1, m + 1)
    q_sorted = np.minimum.accumulate(scaled[..., ::-1], axis=-1)[..., ::-1]
    q_sorted = np.minimum(q_sorted, 1.0)
    q = np.empty_like(q_sorted)
    np.put_along_axis(q, order, q_sorted, axis=-1)
    return q
