"""Least-squares fit: recovery of band-limited functions, weights, penalties, memory."""

import tracemalloc

import numpy as np
import pytest

from shapedesc import defaults
from shapedesc.errors import IllConditionedFitWarning
from shapedesc.harmonics import SHFit, basis, degrees_orders, evaluate, fit

EPS = np.finfo(float).eps


def _unit(n, rng):
    p = rng.normal(size=(n, 3))
    return p / np.linalg.norm(p, axis=1)[:, None]


def _cap_heavy(n, frac, cap_deg, rng):
    """``frac`` of the points uniform (by area) in a polar cap of ``cap_deg``, rest uniform."""
    nc = int(frac * n)
    z = 1.0 - rng.random(nc) * (1.0 - np.cos(np.radians(cap_deg)))
    ph = rng.random(nc) * 2 * np.pi
    r = np.sqrt((1 - z) * (1 + z))
    cap = np.stack([r * np.cos(ph), r * np.sin(ph), z], axis=1)
    return np.vstack([cap, _unit(n - nc, rng)])


@pytest.mark.parametrize("seed", [0, 1])
def test_recovers_band_limited_functions_at_uniform_random_points(seed):
    rng = np.random.default_rng(seed)
    lmax = 20
    c = rng.normal(size=((lmax + 1) ** 2, 3))
    p = _unit(10_000, rng)
    res = fit(p, evaluate(c, lmax, p), lmax)
    assert isinstance(res, SHFit) and res.solver == "cholesky"
    # 1e-8 is the bound; normal equations with cond ~ 20 give ~1e-14 (observed).
    np.testing.assert_allclose(res.coefficients.values, c, atol=1e-8, rtol=0)
    assert np.all(res.residual_rms < 1e-10) and res.residual_rms.shape == (3,)


@pytest.mark.parametrize("method", ["direct", "moments"])
@pytest.mark.parametrize("frac, cap_deg", [(0.8, 40.0), (0.95, 30.0)])
def test_recovers_band_limited_functions_at_uneven_points(frac, cap_deg, method):
    # Documented bound (lsq module docstring): max error <= 10 · cond · eps · max|c|, with
    # cond the reported condition estimate (normal equations lose ~cond·eps; observed
    # ratio <= 0.6 direct, <= 0.12 moments).  For these spreads cond ~ 5e2 and ~3e4, so
    # also <= 1e-8 absolute.
    rng = np.random.default_rng(42)
    lmax = 15
    c = rng.normal(size=((lmax + 1) ** 2, 3))
    p = _cap_heavy(10_000, frac, cap_deg, rng)
    res = fit(p, evaluate(c, lmax, p), lmax, method=method)
    err = np.abs(res.coefficients.values - c).max()
    assert res.solver == "cholesky" and np.isfinite(res.condition)
    assert err <= 10 * res.condition * EPS * np.abs(c).max()
    assert err <= 1e-8


def test_weighted_regularised_fit_matches_dense_lstsq():
    # Independent route: numpy.linalg.lstsq (SVD) on the explicit augmented system
    # [sqrt(w̃) B; sqrt(λΛ)] c = [sqrt(w̃) y; 0], w̃ = w · 4π / Σw.
    rng = np.random.default_rng(3)
    lmax, n = 6, 400
    p = _unit(n, rng)
    y = rng.normal(size=(n, 2))
    w = rng.random(n) + 0.1
    wt = w * 4 * np.pi / w.sum()
    B = basis(lmax, p)
    l, _ = degrees_orders(lmax)
    for penalty, lam_diag in (("laplacian", l * (l + 1.0)), ("identity", np.ones(l.size))):
        lam = 0.05
        A = np.vstack([np.sqrt(wt)[:, None] * B, np.diag(np.sqrt(lam * lam_diag))])
        rhs = np.vstack([np.sqrt(wt)[:, None] * y, np.zeros((l.size, 2))])
        ref = np.linalg.lstsq(A, rhs, rcond=None)[0]
        got = fit(p, y, lmax, weights=w, tikhonov=lam, penalty=penalty)
        # 1e-10: two float64 solvers of a well-conditioned 49-unknown problem.
        np.testing.assert_allclose(got.coefficients.values, ref, atol=1e-10, rtol=0)
        r = y - B @ got.coefficients.values
        np.testing.assert_allclose(got.residual_rms, np.sqrt(wt @ (r * r) / wt.sum()), rtol=1e-10)
        np.testing.assert_allclose(got.residual_max, np.abs(r).max(axis=0), rtol=1e-10)
    # only relative weights matter
    a = fit(p, y, lmax, weights=w, tikhonov=0.05)
    b = fit(p, y, lmax, weights=7.0 * w, tikhonov=0.05)
    np.testing.assert_allclose(a.coefficients.values, b.coefficients.values, atol=1e-13)


def test_moment_and_direct_normal_matrices_agree():
    # Two exact routes to Σ w R Rᵀ: accumulation over points vs the degree-2L moments
    # integrated on a Gauss-Legendre grid (pointsets module); also with points at the poles
    # and uneven weights, and against numpy.linalg.lstsq on the dense weighted system.
    rng = np.random.default_rng(12)
    lmax, n = 9, 3000
    p = _cap_heavy(n, 0.5, 50.0, rng)
    p[:2] = [[0, 0, 1.0], [0, 0, -1.0]]
    y = rng.normal(size=(n, 3))
    w = rng.random(n) + 0.01
    a = fit(p, y, lmax, weights=w, method="moments")
    b = fit(p, y, lmax, weights=w, method="direct")
    assert (a.method, b.method) == ("moments", "direct")
    # 1e-12: the same normal equations summed in different orders (cond ~ 10).
    np.testing.assert_allclose(a.coefficients.values, b.coefficients.values, atol=1e-12)
    wt = w * 4 * np.pi / w.sum()
    B = np.sqrt(wt)[:, None] * basis(lmax, p)
    ref = np.linalg.lstsq(B, np.sqrt(wt)[:, None] * y, rcond=None)[0]
    np.testing.assert_allclose(a.coefficients.values, ref, atol=1e-12)
    np.testing.assert_allclose(a.residual_rms, b.residual_rms, rtol=1e-10)
    # "auto": moments for many points at degree >= SH_FIT_MOMENTS_MIN_DEGREE, else direct
    q = _unit(2 * 41 * 82 + 10, rng)
    # auto tries "cg" first; for independent random points the degree-2L moment density
    # is not positive everywhere (no condition bound), so the exact method runs instead
    assert fit(q, q, 20).method == "moments"
    assert fit(q[:3000], q[:3000], 20).method == "direct"   # few points against the grid
    assert fit(p, y, lmax).method == "direct"               # low degree
    with pytest.raises(ValueError, match="method"):
        fit(p, y, lmax, method="qr")


def test_heat_kernel_weights_applied_to_the_fit():
    # Chung et al. 2007 (doi:10.1109/TMI.2007.892519): weighted Fourier series coefficients
    # are the least-squares coefficients times exp(-l(l+1)σ).
    rng = np.random.default_rng(4)
    lmax = 8
    p = _unit(2000, rng)
    y = rng.normal(size=2000)
    plain = fit(p, y, lmax).coefficients.values
    sigma = 0.005
    smooth = fit(p, y, lmax, heat_bandwidth=sigma)
    l, _ = degrees_orders(lmax)
    np.testing.assert_allclose(smooth.coefficients.values,
                               plain * np.exp(-l * (l + 1) * sigma)[:, None], atol=1e-13)
    assert smooth.heat_bandwidth == sigma
    np.testing.assert_allclose(smooth.coefficients.values,
                               fit(p, y, lmax).coefficients.smoothed(sigma).values, atol=1e-13)


def test_chunked_accumulation_does_not_change_the_result(monkeypatch):
    rng = np.random.default_rng(5)
    lmax = 7
    p = _unit(5000, rng)
    y = rng.normal(size=(5000, 3))
    w = rng.random(5000)
    w[::17] = 0.0  # zero-weight points still get a residual
    ref = fit(p, y, lmax, weights=w, method="direct")
    monkeypatch.setattr(defaults, "SH_CHUNK_BYTES", 8 * 64 * 300)   # ~300-point chunks
    monkeypatch.setattr(defaults, "SH_FIT_CACHE_BYTES", 0)          # rebuild for residuals
    got = fit(p, y, lmax, weights=w, method="direct")
    # 1e-12: same sums in a different order.
    np.testing.assert_allclose(got.coefficients.values, ref.coefficients.values, atol=1e-12)
    np.testing.assert_allclose(got.residual_rms, ref.residual_rms, rtol=1e-12)
    np.testing.assert_allclose(got.residual_max, ref.residual_max, rtol=1e-12)


def test_memory_stays_bounded_by_the_chunk_budget(monkeypatch):
    # With block caching off, peak memory is about one basis block and its Legendre work
    # array (the chunk budget, here set to 1 MiB) plus a few K x K matrices plus O(n)
    # copies of the inputs — far below a dense design matrix (traced with tracemalloc).
    monkeypatch.setattr(defaults, "SH_FIT_CACHE_BYTES", 0)
    monkeypatch.setattr(defaults, "SH_CHUNK_BYTES", 1024**2)
    rng = np.random.default_rng(6)
    lmax, n = 15, 20_000
    K = (lmax + 1) ** 2
    p = _unit(n, rng)
    y = p.copy()
    tracemalloc.start()
    try:
        fit(p, y, lmax, method="direct")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    dense = 8 * n * K  # a dense real design matrix alone (~41 MB)
    budget = 3 * defaults.SH_CHUNK_BYTES + 6 * 8 * K * K + 120 * n
    assert peak < budget < 0.25 * dense


def test_ill_conditioned_fit_warns_and_falls_back():
    # Points only in a 20° cap cannot determine degree 12 (Slepian concentration:
    # most basis functions are invisible there) — eigen fallback with a warning.
    rng = np.random.default_rng(7)
    lmax = 12
    p = _cap_heavy(3000, 1.0, 20.0, rng)
    c = rng.normal(size=(lmax + 1) ** 2)
    y = evaluate(c, lmax, p)[:, 0]
    with pytest.warns(IllConditionedFitWarning, match="ill-conditioned"):
        res = fit(p, y, lmax)
    assert res.solver == "eigen" and res.rank < (lmax + 1) ** 2
    # the minimum-norm solution still reproduces the data at the points (consistent system)
    assert res.residual_rms[0] < 1e-6 * np.abs(y).max()


def test_fit_input_validation():
    rng = np.random.default_rng(8)
    p = _unit(50, rng)
    y = rng.normal(size=50)
    with pytest.raises(ValueError, match="weights must be finite and >= 0"):
        fit(p, y, 2, weights=-np.ones(50))
    with pytest.raises(ValueError, match="weights sum to zero"):
        fit(p, y, 2, weights=np.zeros(50))
    with pytest.raises(ValueError, match=r"shape \(50,\)"):
        fit(p, y[:40], 2)
    with pytest.raises(ValueError, match="NaN"):
        fit(p, np.full(50, np.nan), 2)
    with pytest.raises(ValueError, match="real"):
        fit(p, y + 1j, 2)
    with pytest.raises(ValueError, match="tikhonov"):
        fit(p, y, 2, tikhonov=-1.0)
    with pytest.raises(ValueError, match="penalty"):
        fit(p, y, 2, penalty="ridge")
    with pytest.raises(ValueError, match="bandwidth"):
        fit(p, y, 2, heat_bandwidth=float("nan"))


# ----------------------------------------------------------------------- CG / NUFFT path


def _icosphere_quadrature(level, rng):
    """Icosphere vertices (randomly rotated) with barycentric vertex areas as weights: a
    near-uniform weighted point set like an area-corrected sphere map."""
    from scipy.spatial.transform import Rotation

    from shapedesc.mesh.measures import vertex_areas
    from shapedesc.reconstruct import correspondence_sphere

    v, f = correspondence_sphere(level)
    v = v @ Rotation.random(random_state=rng).as_matrix().T
    return v, vertex_areas(v, f)


@pytest.mark.parametrize("lmax", [15, 40, 80])
def test_nufft_point_transforms_match_exact_ring_transforms(lmax):
    # Source: ducc0's ring-based transforms with one ring per point (exact Legendre
    # recurrences, a different algorithm from the NUFFT-based *_general routines), which
    # tests/test_harmonics_transforms.py ties to scipy.special.sph_harm_y.
    from shapedesc.harmonics.pointsets import (_nufft_adjoint, _nufft_loc, _nufft_synthesis,
                                               _point_adjoint, _point_synthesis)

    rng = np.random.default_rng(lmax)
    p = _unit(2000, rng)
    p[:2] = [[0, 0, 1.0], [0, 0, -1.0]]                      # the poles
    loc = _nufft_loc(p)
    vals = rng.normal(size=(2000, 2))
    ref = _point_adjoint(loc[:, 0], loc[:, 1], vals, lmax)
    got = _nufft_adjoint(loc, vals, lmax)
    # 1e-12 relative: ducc0 is asked for SH_NUFFT_EPSILON = 2.5e-13 (measured 6e-14..8e-14).
    assert np.abs(got - ref).max() <= 1e-12 * np.abs(ref).max()
    c = rng.normal(size=((lmax + 1) ** 2, 2))
    ref = _point_synthesis(loc[:, 0], loc[:, 1], c, lmax)
    got = _nufft_synthesis(loc, c, lmax)
    assert np.abs(got - ref).max() <= 1e-12 * np.abs(ref).max()


@pytest.mark.parametrize("tikhonov, sigma", [(0.0, 0.0), (0.02, 0.001)])
def test_cg_fit_matches_dense_least_squares(tikhonov, sigma):
    # Source: numpy.linalg.lstsq (LAPACK) on the dense weighted, penalised system, and
    # the exact direct path.  Near-uniform weighted points, as an area-corrected map gives.
    rng = np.random.default_rng(21)
    lmax = 12
    p, w = _icosphere_quadrature(4, rng)                    # 2,562 points > 2·25·50
    c = rng.normal(size=((lmax + 1) ** 2, 3)) / (1.0 + degrees_orders(lmax)[0][:, None])
    y = evaluate(c, lmax, p) + 0.01 * rng.normal(size=(len(p), 3))
    got = fit(p, y, lmax, weights=w, tikhonov=tikhonov, heat_bandwidth=sigma)
    assert (got.method, got.solver) == ("cg", "cg") and 0 < got.iterations < 60
    direct = fit(p, y, lmax, weights=w, tikhonov=tikhonov, heat_bandwidth=sigma, method="direct")
    wt = w * 4 * np.pi / w.sum()
    B = basis(lmax, p)
    l, _ = degrees_orders(lmax)
    A = np.vstack([np.sqrt(wt)[:, None] * B, np.diag(np.sqrt(tikhonov * l * (l + 1.0)))])
    rhs = np.vstack([np.sqrt(wt)[:, None] * y, np.zeros((B.shape[1], 3))])
    ref = np.linalg.lstsq(A, rhs, rcond=None)[0] * np.exp(-l * (l + 1) * sigma)[:, None]
    # 1e-12 relative: CG stops at residual 1e-13 with cond <= 1.3 here; the NUFFT
    # right-hand side errs by ~1e-13 relative.
    scale = np.abs(ref).max()
    np.testing.assert_allclose(got.coefficients.values, ref, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(got.coefficients.values, direct.coefficients.values, rtol=0,
                               atol=1e-12 * scale)
    # 1e-10 relative: residuals of nearly equal coefficients, fitted values via NUFFT
    np.testing.assert_allclose(got.residual_rms, direct.residual_rms, rtol=1e-10)
    np.testing.assert_allclose(got.fitted, direct.fitted, rtol=0, atol=1e-10 * np.abs(y).max())


def test_cg_condition_bound_holds():
    # The reported condition on the CG path is the rigorous bound rho_max/rho_min
    # (pointsets module docstring): check it against the exact eigenvalues of the dense
    # normal matrix (numpy.linalg.eigvalsh), here on a deliberately uneven weighting.
    rng = np.random.default_rng(22)
    lmax = 10
    p, w = _icosphere_quadrature(4, rng)
    w = w * (1.0 + 0.5 * p[:, 2] ** 2)                       # density varies by 1.5x
    res = fit(p, p, lmax, weights=w)
    assert res.solver == "cg"
    wt = w * 4 * np.pi / w.sum()
    B = basis(lmax, p)
    ev = np.linalg.eigvalsh(B.T @ (wt[:, None] * B))
    assert ev[-1] / ev[0] <= res.condition * (1 + 1e-9)     # a bound: never below the truth
    assert res.condition < 2.0                               # and not a loose one here


def test_cg_falls_back_when_no_bound():
    # Independent uniform random points: the degree-2L moment density is not positive
    # everywhere at this density, so there is no condition bound and the exact path runs
    # (same answer as asking for it directly).
    rng = np.random.default_rng(23)
    lmax = 20
    p = _unit(8000, rng)
    y = rng.normal(size=(8000, 3))
    res = fit(p, y, lmax, method="cg")
    assert res.method == "moments" and res.solver == "cholesky" and res.iterations == 0
    ref = fit(p, y, lmax, method="moments")
    np.testing.assert_array_equal(res.coefficients.values, ref.coefficients.values)
