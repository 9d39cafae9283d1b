"""Real <-> complex coefficient conversion and per-degree energy (flat l*l + l + m layout).

With the real basis of :mod:`shapedesc.harmonics.sh_basis`, a function
f = Σ a_lm Y_l^m = Σ r_lm R_lm has, for m > 0,

    r_{l,m}  = ((-1)^m a_{l,m} + a_{l,-m}) / √2,
    r_{l,-m} = i ((-1)^m a_{l,m} - a_{l,-m}) / √2,
    a_{l,m}  = (-1)^m (r_{l,m} - i r_{l,-m}) / √2,
    a_{l,-m} = (r_{l,m} + i r_{l,-m}) / √2,

and r_{l,0} = a_{l,0}.  The map is unitary, so the per-degree energy is the same in both
kinds.  A real-valued f has a_{l,-m} = (-1)^m conj(a_{l,m}), which makes every r real.
"""

from __future__ import annotations

import numpy as np

from shapedesc import defaults

from ._checks import check_degree, lmax_from_count

__all__ = ["real_to_complex", "complex_to_real", "degree_energy"]

_SQRT_HALF = np.sqrt(0.5)


def _as_2d(values, lmax, dtype, what):
    v = np.asarray(values)
    one_d = v.ndim == 1
    if one_d:
        v = v[:, None]
    if v.ndim != 2:
        raise ValueError(f"{what} must have shape ((lmax+1)**2,) or ((lmax+1)**2, k), got {v.shape}")
    if lmax is None:
        lmax = lmax_from_count(v.shape[0], what)
    else:
        lmax = check_degree(lmax)
        if v.shape[0] != (lmax + 1) ** 2:
            raise ValueError(
                f"{what} has {v.shape[0]} rows but lmax={lmax} needs (lmax+1)**2 = {(lmax + 1) ** 2}"
            )
    return v.astype(dtype, copy=False), lmax, one_d


def _pairs(lmax: int):
    """Flat indices of (l, m) and (l, -m) for every m > 0, and (-1)^m."""
    l = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1)
    m = np.arange((lmax + 1) ** 2) - l * l - l
    pos = np.nonzero(m > 0)[0]
    neg = pos - 2 * m[pos]
    zero = np.nonzero(m == 0)[0]
    sign = np.where(m[pos] % 2 == 0, 1.0, -1.0)[:, None]
    return pos, neg, zero, sign


def real_to_complex(values, lmax=None) -> np.ndarray:
    """Complex (Condon–Shortley) coefficients of the function with real-basis coefficients ``values``.

    Parameters
    ----------
    values : array_like, shape (K,) or (K, k), K = (lmax+1)**2
        Real-basis coefficients (real or complex numbers).
    lmax : int, optional
        Degree; inferred from K when omitted.

    Returns
    -------
    ndarray, complex128, same shape as ``values``
    """
    v, lmax, one_d = _as_2d(values, lmax, np.complex128, "real-basis coefficients")
    pos, neg, zero, sign = _pairs(lmax)
    out = np.empty_like(v)
    out[zero] = v[zero]
    rp, rn = v[pos], v[neg]
    out[pos] = sign * (rp - 1j * rn) * _SQRT_HALF
    out[neg] = (rp + 1j * rn) * _SQRT_HALF
    return out[:, 0] if one_d else out


def complex_to_real(values, lmax=None, *, real_valued: bool = True) -> np.ndarray:
    """Real-basis coefficients of the function with complex coefficients ``values``.

    Parameters
    ----------
    values : array_like, shape (K,) or (K, k), K = (lmax+1)**2
        Complex coefficients (orthonormal, Condon–Shortley phase, l*l + l + m).
    lmax : int, optional
        Degree; inferred from K when omitted.
    real_valued : bool, keyword-only
        True (default): the function must be real-valued (a_{l,-m} = (-1)^m conj a_{l,m}
        to ``defaults.SH_REAL_IMAG_TOL`` relative); the result is float64.  False: the
        result stays complex (coefficients of a complex-valued function).

    Returns
    -------
    ndarray, float64 (or complex128 when ``real_valued=False``), same shape as ``values``

    Raises
    ------
    ValueError
        ``real_valued`` is True but the coefficients describe a complex-valued function.
    """
    v, lmax, one_d = _as_2d(values, lmax, np.complex128, "complex coefficients")
    pos, neg, zero, sign = _pairs(lmax)
    out = np.empty_like(v)
    out[zero] = v[zero]
    ap, an = v[pos], v[neg]
    out[pos] = (sign * ap + an) * _SQRT_HALF
    out[neg] = 1j * (sign * ap - an) * _SQRT_HALF
    if real_valued:
        scale = float(np.abs(v).max()) if v.size else 0.0
        imag = float(np.abs(out.imag).max()) if v.size else 0.0
        if imag > defaults.SH_REAL_IMAG_TOL * max(scale, np.finfo(float).tiny):
            raise ValueError(
                "complex coefficients do not describe a real-valued function "
                f"(largest imaginary part of the real-basis coefficients {imag:.3g}, "
                f"largest coefficient {scale:.3g}); pass real_valued=False to keep them complex"
            )
        out = np.ascontiguousarray(out.real)
    return out[:, 0] if one_d else out


def degree_energy(values, lmax=None) -> np.ndarray:
    """Per-degree energy E_l = Σ_m Σ_channels |c_lm|².

    Parameters
    ----------
    values : array_like, shape (K,) or (K, k), K = (lmax+1)**2
        Coefficients of either kind (the energy is the same for both).
    lmax : int, optional
        Degree; inferred from K when omitted.

    Returns
    -------
    ndarray, float64, shape (lmax+1,)
    """
    v = np.asarray(values)
    dtype = np.complex128 if np.iscomplexobj(v) else np.float64
    v, lmax, _ = _as_2d(v, lmax, dtype, "coefficients")
    per_row = np.sum((v * np.conj(v)).real, axis=1)
    return np.add.reduceat(per_row, np.arange(lmax + 1) ** 2)
