"""Coefficient container and real <-> complex conversion against the basis definitions."""

import json

import numpy as np
import pytest

from shapedesc.harmonics import (SHCoefficients, basis, complex_to_real, degree_energy,
                                 degrees_orders, evaluate, real_to_complex)


def _unit(n, seed):
    p = np.random.default_rng(seed).normal(size=(n, 3))
    return p / np.linalg.norm(p, axis=1)[:, None]


def test_real_and_complex_coefficients_describe_the_same_function():
    # Σ r R = Σ a Y pointwise, with both bases checked against scipy.special elsewhere.
    rng = np.random.default_rng(0)
    lmax = 12
    r = rng.normal(size=((lmax + 1) ** 2, 2))
    a = real_to_complex(r, lmax)
    p = _unit(200, 1)
    f_real = basis(lmax, p) @ r
    f_cplx = basis(lmax, p, kind="complex") @ a
    # 1e-12: sums of ~170 O(1) terms in float64.
    np.testing.assert_allclose(f_cplx.real, f_real, atol=1e-12)
    np.testing.assert_allclose(f_cplx.imag, 0.0, atol=1e-12)
    # a real function's complex coefficients obey a_{l,-m} = (-1)^m conj(a_{l,m}) (DLMF 14.30.6)
    l, m = degrees_orders(lmax)
    neg = np.nonzero(m < 0)[0]
    pos = neg - 2 * m[neg]
    np.testing.assert_allclose(a[neg], ((-1.0) ** m[neg])[:, None] * np.conj(a[pos]), atol=1e-15)
    np.testing.assert_allclose(complex_to_real(a, lmax), r, atol=1e-15)
    # unitary: the per-degree energy is the same in both kinds
    np.testing.assert_allclose(degree_energy(a, lmax), degree_energy(r, lmax), rtol=1e-14)


def test_complex_to_real_refuses_complex_valued_functions():
    a = np.zeros(9, dtype=complex)
    a[sh_idx := 3] = 1.0  # Y_1^1 alone is complex-valued
    with pytest.raises(ValueError, match="real-valued"):
        complex_to_real(a, 2)
    out = complex_to_real(a, 2, real_valued=False)
    assert np.iscomplexobj(out) and abs(out[sh_idx]) > 0


def test_energy_per_degree_by_hand():
    # E_l = Σ_m Σ_channels |c_lm|² written out for lmax = 2 (definition in DESIGN.md).
    v = np.arange(18, dtype=float).reshape(9, 2)
    expected = [np.sum(v[0:1] ** 2), np.sum(v[1:4] ** 2), np.sum(v[4:9] ** 2)]
    np.testing.assert_array_equal(degree_energy(v, 2), expected)
    np.testing.assert_array_equal(SHCoefficients(v, 2).energy_per_degree(), expected)


def test_container_conventions_persistence_and_immutability():
    rng = np.random.default_rng(2)
    c = SHCoefficients(rng.normal(size=(16, 3)), 3)
    assert (c.normalization, c.csphase, c.ordering) == ("orthonormal", -1, "l*l+l+m")
    assert c.values.shape == (16, 3) and c.n_channels == 3
    with pytest.raises(ValueError):
        c.values[0, 0] = 1.0  # read-only storage
    one = SHCoefficients(np.ones(9))
    assert one.lmax == 2 and one.values.shape == (9, 1)
    for obj in (c, c.to_complex()):
        text = json.dumps(obj.to_dict())  # JSON-safe: only lists, numbers, strings
        back = SHCoefficients.from_dict(json.loads(text))
        assert back.kind == obj.kind and back.lmax == obj.lmax
        np.testing.assert_array_equal(back.values, obj.values)  # exact float round trip
    with pytest.raises(ValueError, match="csphase"):
        SHCoefficients(np.ones(4), 1, "real", csphase=1)
    with pytest.raises(ValueError, match="normalization"):
        SHCoefficients(np.ones(4), 1, "real", normalization="4pi")
    with pytest.raises(ValueError, match="rows"):
        SHCoefficients(np.ones(5))
    with pytest.raises(ValueError, match="lmax=2 needs"):
        SHCoefficients(np.ones(4), 2)
    with pytest.raises(ValueError, match="complex"):
        SHCoefficients(np.ones(4, dtype=complex), 1, "real")
    with pytest.raises(ValueError, match="NaN"):
        SHCoefficients(np.full(4, np.nan), 1)
    with pytest.raises(ValueError, match="format"):
        SHCoefficients.from_dict({"values": []})


def test_truncation_smoothing_and_evaluation():
    rng = np.random.default_rng(3)
    lmax = 10
    c = SHCoefficients(rng.normal(size=((lmax + 1) ** 2, 2)), lmax)
    t = c.truncated(4)
    np.testing.assert_array_equal(t.values, c.values[:25])
    with pytest.raises(ValueError, match="higher degree"):
        c.truncated(11)
    # Chung et al. 2007 weights exp(-l(l+1)σ), written out
    sigma = 0.01
    l, _ = degrees_orders(lmax)
    np.testing.assert_allclose(c.smoothed(sigma).values,
                               c.values * np.exp(-l * (l + 1) * sigma)[:, None], rtol=1e-15)
    assert np.array_equal(c.smoothed(0.0).values, c.values)
    with pytest.raises(ValueError, match="bandwidth"):
        c.smoothed(-1.0)
    p = _unit(1000, 4)
    # chunked evaluation equals the dense basis product (1e-12: float64 sums of ~120 terms)
    np.testing.assert_allclose(c.evaluate(p), basis(lmax, p) @ c.values, atol=1e-12)
    np.testing.assert_allclose(c.to_complex().evaluate(p).real, c.evaluate(p), atol=1e-12)


def test_evaluation_in_many_chunks(monkeypatch):
    # Force tiny chunks: results must not depend on the chunk size.
    from shapedesc import defaults

    rng = np.random.default_rng(5)
    lmax = 6
    v = rng.normal(size=((lmax + 1) ** 2, 3))
    p = _unit(3000, 6)
    ref = evaluate(v, lmax, p)
    monkeypatch.setattr(defaults, "SH_CHUNK_BYTES", 8 * 49 * 256)
    np.testing.assert_allclose(evaluate(v, lmax, p), ref, atol=1e-14)
