"""Associated Legendre functions: unnormalised P_l^m and the orthonormal recurrence.

Two entry points:

* :func:`legendre` — the unnormalised Ferrers function P_l^m(x) of integer degree and
  order, with the Condon–Shortley phase (the convention of DLMF §14.7 and of
  ``scipy.special.lpmv`` / ``scipy.special.assoc_legendre_p``).
* :func:`legendre_all` — every orthonormalised P̄_l^m(x), 0 <= m <= l <= lmax, from the
  standard three-term recurrences in normalised form (no factorials, no overflow), such
  that Y_l^m(θ, φ) = P̄_l^m(cos θ) e^{imφ} is orthonormal on the unit sphere.

References
----------
.. [1] NIST Digital Library of Mathematical Functions, §14.7 (Ferrers functions of
   integer order), §14.9.3 (negative order), §14.10 (recurrences). https://dlmf.nist.gov/14
.. [2] S. A. Holmes and W. E. Featherstone, "A unified approach to the Clenshaw summation
   and the recursive computation of very high degree and order normalised associated
   Legendre functions", J. Geodesy 76 (2002) 279–299, doi:10.1007/s00190-002-0216-2.
"""

from __future__ import annotations

import numpy as np

from ._checks import check_degree, check_order

__all__ = ["legendre", "legendre_all", "legendre_index"]

_INV_SQRT_4PI = 1.0 / np.sqrt(4.0 * np.pi)


def legendre_index(l: int, m: int) -> int:
    """Column of (l, m), m >= 0, in the triangular layout of :func:`legendre_all`: l(l+1)/2 + m."""
    return l * (l + 1) // 2 + m


def legendre(l, m, x) -> np.ndarray:
    """Unnormalised associated Legendre function P_l^m(x) with the Condon–Shortley phase.

    Parameters
    ----------
    l : int
        Degree, l >= 0.
    m : int
        Order, any integer.  For ``-l <= m < 0`` the standard relation
        P_l^{-m} = (-1)^m (l-m)!/(l+m)! P_l^m (DLMF 14.9.3) is used; for |m| > l the
        result is exactly 0.
    x : array_like, float
        Arguments in [-1, 1] (Ferrers functions; values outside are refused).

    Returns
    -------
    ndarray, float64, shape of ``x``
        P_l^m(x).  Large degree and order overflow like the function itself does
        (use :func:`legendre_all` for normalised values).

    Raises
    ------
    ValueError
        Non-integer or negative degree, non-integer order, or |x| > 1.
    """
    l = check_degree(l, "degree l")
    m = check_order(m, "order m")
    x = np.asarray(x, dtype=np.float64)
    if not np.all(np.isfinite(x)) or np.any(np.abs(x) > 1.0):
        raise ValueError(
            "legendre: x must be finite and in [-1, 1] (Ferrers functions); "
            f"got values in [{np.nanmin(x):.6g}, {np.nanmax(x):.6g}]"
        )
    return _legendre(l, m, x)


def _legendre(l: int, m: int, x: np.ndarray) -> np.ndarray:
    am = abs(m)
    if am > l:
        return np.zeros_like(x)
    s = np.sqrt((1.0 - x) * (1.0 + x))
    # sectoral start P_m^m = (-1)^m (2m-1)!! s^m, accumulated factor by factor
    p_prev = np.ones_like(x)
    for k in range(1, am + 1):
        p_prev = -(2 * k - 1) * s * p_prev
    if l > am:
        p = x * (2 * am + 1) * p_prev  # P_{m+1}^m
        p_prevprev, p_prev = p_prev, p
        for n in range(am + 2, l + 1):
            p = (x * (2 * n - 1) * p_prev - (n + am - 1) * p_prevprev) / (n - am)
            p_prevprev, p_prev = p_prev, p
    out = p_prev
    if m < 0:
        # DLMF 14.9.3: P_l^{-m} = (-1)^m (l-m)!/(l+m)! P_l^m, ratio as a product
        ratio = 1.0
        for j in range(l - am + 1, l + am + 1):
            ratio /= j
        out = (-1.0) ** am * ratio * out
    return out


def legendre_all(lmax, x, *, csphase: int = -1) -> np.ndarray:
    """Orthonormalised associated Legendre functions P̄_l^m(x) for all 0 <= m <= l <= lmax.

    P̄_l^m(x) = sqrt((2l+1)/(4π) · (l-m)!/(l+m)!) · P_l^m(x), with P_l^m as in
    :func:`legendre` (Condon–Shortley phase included when ``csphase=-1``), so that
    Y_l^m(θ, φ) = P̄_l^m(cos θ) e^{imφ} has ∫|Y_l^m|² dΩ = 1.

    Parameters
    ----------
    lmax : int
        Largest degree (>= 0).  Accurate to far beyond lmax = 200 (checked against
        scipy.special.sph_harm_y to 1e-12 absolute).
    x : array_like, shape (n,)
        cos θ, in [-1, 1].
    csphase : {-1, 1}, keyword-only
        -1 (default) includes the Condon–Shortley phase (-1)^m; 1 leaves it out.

    Returns
    -------
    ndarray, float64, shape (n, (lmax+1)(lmax+2)/2)
        Column ``l(l+1)/2 + m`` (see :func:`legendre_index`) holds P̄_l^m(x).

    Notes
    -----
    Standard normalised recurrences (e.g. Holmes & Featherstone 2002, eqs. 11–13):
    P̄_0^0 = 1/sqrt(4π); P̄_m^m = -sqrt((2m+1)/(2m)) sinθ P̄_{m-1}^{m-1};
    P̄_{m+1}^m = sqrt(2m+3) x P̄_m^m;
    P̄_l^m = a_lm (x P̄_{l-1}^m - b_lm P̄_{l-2}^m) with a_lm = sqrt((4l²-1)/(l²-m²)),
    b_lm = sqrt(((l-1)²-m²)/(4(l-1)²-1)).  sin θ is taken as sqrt((1-x)(1+x)), exact at
    the poles.
    """
    lmax = check_degree(lmax)
    if csphase not in (-1, 1):
        raise ValueError(f"csphase must be -1 (Condon-Shortley phase) or 1, got {csphase!r}")
    x = np.asarray(x, dtype=np.float64)
    if x.ndim != 1:
        raise ValueError(f"x must be one-dimensional (n,), got shape {x.shape}")
    if not np.all(np.isfinite(x)) or np.any(np.abs(x) > 1.0):
        raise ValueError("legendre_all: x = cos(theta) must be finite and in [-1, 1]")
    s = np.sqrt((1.0 - x) * (1.0 + x))
    return _legendre_rows(lmax, x, s, csphase).T


def _recurrence_coefficients(lmax: int):
    """a_lm, b_lm of the normalised three-term recurrence, as lists of arrays over m < l-1."""
    a, b = [None, None], [None, None]
    for l in range(2, lmax + 1):
        m = np.arange(l - 1, dtype=np.float64)
        a.append(np.sqrt((4.0 * l * l - 1.0) / ((l * l) - m * m)))
        b.append(np.sqrt(((l - 1.0) ** 2 - m * m) / (4.0 * (l - 1.0) ** 2 - 1.0)))
    return a, b


_COEFF_CACHE: dict[int, tuple] = {}


def _coefficients(lmax: int):
    # the recurrence coefficients depend on lmax only; keep the latest few
    got = _COEFF_CACHE.get(lmax)
    if got is None:
        if len(_COEFF_CACHE) > 8:
            _COEFF_CACHE.clear()
        got = _COEFF_CACHE[lmax] = _recurrence_coefficients(lmax)
    return got


def _legendre_rows(lmax: int, x: np.ndarray, s: np.ndarray, csphase: int = -1,
                   out: np.ndarray | None = None, scale: np.ndarray | None = None) -> np.ndarray:
    """Rows P̄_l^m (layout l(l+1)/2 + m) for arguments ``x`` = cos θ, ``s`` = sin θ.

    Returns a C-ordered array of shape ((lmax+1)(lmax+2)/2, n).  ``scale`` (n,), if
    given, multiplies every row (the recurrences are linear in the start value, so this
    costs nothing); ``out`` is an optional buffer of at least that shape.
    """
    n = x.shape[0]
    nlm = (lmax + 1) * (lmax + 2) // 2
    P = np.empty((nlm, n)) if out is None else out[:nlm, :n]
    a, b = _coefficients(lmax)
    sign = -1.0 if csphase == -1 else 1.0
    if scale is None:
        P[0] = _INV_SQRT_4PI
    else:
        np.multiply(scale, _INV_SQRT_4PI, out=P[0])
    for l in range(1, lmax + 1):
        r0 = l * (l + 1) // 2          # row of (l, 0)
        r1 = (l - 1) * l // 2          # row of (l-1, 0)
        if l >= 2:
            r2 = (l - 2) * (l - 1) // 2  # row of (l-2, 0)
            # all m <= l-2 at once
            blk = P[r0:r0 + l - 1]
            np.multiply(P[r1:r1 + l - 1], x, out=blk)
            blk -= b[l][:, None] * P[r2:r2 + l - 1]
            blk *= a[l][:, None]
        # m = l-1 from the sectoral value of degree l-1
        np.multiply(P[r1 + l - 1], np.sqrt(2.0 * l + 1.0) * x, out=P[r0 + l - 1])
        # m = l, sectoral
        np.multiply(P[r1 + l - 1], sign * np.sqrt((2.0 * l + 1.0) / (2.0 * l)) * s, out=P[r0 + l])
    return P
