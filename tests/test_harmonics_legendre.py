"""Associated Legendre functions against handbook forms, DLMF and scipy.special."""

from math import factorial

import numpy as np
import pytest
from scipy import special

from shapedesc.harmonics import legendre, legendre_all, legendre_index

X = 0.5
S = np.sqrt(1.0 - X * X)

# Ferrers functions with the Condon-Shortley phase, P_l^m(x) = (-1)^m (1-x²)^{m/2} d^m P_l/dx^m
# (DLMF 14.7.10 applied to the Legendre polynomials of DLMF Table 18.3.1; the explicit
# small-degree forms are the standard table, e.g. Arfken & Weber ch. 12, from memory).
CLOSED = {
    (0, 0): 1.0,
    (1, 0): X,
    (1, 1): -S,
    (2, 0): 0.5 * (3 * X**2 - 1),
    (2, 1): -3 * X * S,
    (2, 2): 3 * S**2,
    (3, 0): 0.5 * (5 * X**3 - 3 * X),
    (3, 1): -1.5 * (5 * X**2 - 1) * S,
    (3, 2): 15 * X * S**2,
    (3, 3): -15 * S**3,
}


@pytest.mark.parametrize("lm", sorted(CLOSED))
def test_closed_forms_positive_order_at_half(lm):
    l, m = lm
    # 1e-14: a few float64 operations on O(10) numbers.
    assert legendre(l, m, X) == pytest.approx(CLOSED[lm], abs=1e-14)


@pytest.mark.parametrize("lm", [k for k in sorted(CLOSED) if k[1] > 0])
def test_negative_order_by_dlmf_14_9_3(lm):
    # DLMF 14.9.3: P_l^{-m}(x) = (-1)^m (l-m)!/(l+m)! P_l^m(x), with exact factorials.
    l, m = lm
    expected = (-1) ** m * factorial(l - m) / factorial(l + m) * CLOSED[lm]
    # 1e-15: values are O(1e-2..1); exact ratio of small integers.
    assert legendre(l, -m, X) == pytest.approx(expected, abs=1e-15)


def test_against_scipy_lpmv_and_assoc_legendre_p():
    # Source: scipy.special.lpmv and scipy.special.assoc_legendre_p (Ferrers, CS phase).
    x = np.linspace(-1.0, 1.0, 41)
    for l in range(0, 13):
        for m in range(-l, l + 1):
            ours = legendre(l, m, x)
            ref = special.assoc_legendre_p(l, m, x)[0]  # scipy 1.17 adds a derivative axis
            scale = max(1.0, np.abs(ref).max())
            # 1e-13 relative: upward recurrence of <= 13 steps, values up to ~1e7.
            np.testing.assert_allclose(ours, ref, atol=1e-13 * scale, rtol=0)
            np.testing.assert_allclose(ours, special.lpmv(m, l, x), atol=1e-13 * scale, rtol=0)


def test_zero_outside_order_range_and_bad_degree():
    x = np.array([-0.3, 0.0, 0.7])
    # |m| > l is exactly zero by definition (DLMF 14.7: the m-th derivative of a degree-l
    # polynomial vanishes for m > l).
    assert np.all(legendre(2, 3, x) == 0.0)
    assert np.all(legendre(2, -3, x) == 0.0)
    for bad in (2.5, -1, 2.0, "2", True):
        with pytest.raises(ValueError, match="degree"):
            legendre(bad, 0, x)
    with pytest.raises(ValueError, match="order"):
        legendre(3, 1.5, x)
    with pytest.raises(ValueError, match=r"\[-1, 1\]"):
        legendre(3, 1, 1.5)


def test_normalised_recurrence_matches_definition():
    # Normalisation sqrt((2l+1)/(4π) (l-m)!/(l+m)!) with exact factorials (common practice)
    # applied to the unnormalised functions checked above against scipy.
    x = np.linspace(-1, 1, 25)
    lmax = 15
    P = legendre_all(lmax, x)
    for l in range(lmax + 1):
        for m in range(l + 1):
            N = np.sqrt((2 * l + 1) / (4 * np.pi) * factorial(l - m) / factorial(l + m))
            # 1e-13: both sides are products/recurrences of <= 15 float64 steps, values O(1).
            np.testing.assert_allclose(P[:, legendre_index(l, m)], N * legendre(l, m, x),
                                       atol=1e-13, rtol=0)
    # without the Condon-Shortley phase the odd orders flip sign
    Pn = legendre_all(lmax, x, csphase=1)
    m = np.concatenate([np.arange(l + 1) for l in range(lmax + 1)])
    np.testing.assert_array_equal(Pn, P * (-1.0) ** m)


@pytest.mark.slow
def test_normalised_values_high_degree_against_scipy(full):
    # Source: scipy.special.assoc_legendre_p(norm=True) is normalised to ∫_{-1}^{1} P̄² dx = 1,
    # i.e. ours times sqrt(2π).  Degree 200 (full) / 120 (default); no overflow near the poles.
    # x = ±1 is left out: scipy 1.17 returns the *unnormalised* value there when norm=True
    # (seen while writing this test); the poles are checked against sph_harm_y instead.
    lmax = 200 if full else 120
    # Very close to a pole scipy itself errs by ~5e-12 at degree 120 (checked against mpmath
    # below), so this comparison stays at |x| <= 0.9999.
    x = np.array([-0.9999, -0.7, 0.0, 0.3, 0.9999])
    P = legendre_all(lmax, x)
    assert np.all(np.isfinite(P))
    ls = np.concatenate([np.full(l + 1, l) for l in range(lmax + 1)])
    ms = np.concatenate([np.arange(l + 1) for l in range(lmax + 1)])
    ref = special.assoc_legendre_p(ls[None, :], ms[None, :], x[:, None], norm=True)[0]
    # 1e-12 absolute (the accuracy the issue demands) plus 1e-12 relative for scipy's own
    # error at degree 200: at (l, m, x) = (149, 2, -0.9999) mpmath gives -4.617181455225846,
    # ours -4.617181455225777, scipy -4.617181455224764 (checked while writing this test).
    np.testing.assert_allclose(P * np.sqrt(2 * np.pi), ref, atol=1e-12, rtol=1e-12)


def test_near_pole_high_degree_against_mpmath():
    # Source: mpmath.legenp (arbitrary precision Ferrers function, type=2) at 40 digits.
    mp = pytest.importorskip("mpmath")
    x = -0.999999
    P = legendre_all(120, np.array([x]))[0]
    for l, m in [(120, 0), (110, 3), (120, 3)]:
        with mp.workdps(40):
            ref = mp.legenp(l, m, mp.mpf(x), type=2) * mp.sqrt(
                (2 * l + 1) * mp.factorial(l - m) / (4 * mp.pi * mp.factorial(l + m)))
        # 1e-13 absolute on O(1) values: ~120 recurrence steps of float64.
        assert P[legendre_index(l, m)] == pytest.approx(float(ref), abs=1e-13, rel=1e-12)
