"""map_to_sphere acceptance on synthetic shapes: bijectivity, distortion, determinism, errors.

Sizes: level-4 meshes (2,562 vertices) by default; ``--full`` adds level 5.
"""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from shapedesc.errors import ConvergenceError, MeshTopologyError
from shapedesc.shapes import bent_tube, bumpy, ellipsoid, icosphere
from shapedesc.sphere import SphereMap, map_to_sphere, pull_back
from shapedesc.sphere.area import AreaProblem, correct_area

SHAPES = {
    "sphere": lambda lv: icosphere(lv),
    "ellipsoid 3:2:1": lambda lv: ellipsoid(3, 2, 1, lv),
    "ellipsoid 6:1:1": lambda lv: ellipsoid(6, 1, 1, lv),
    "bent tube 3:1": lambda lv: bent_tube(6, 1, np.pi / 2, lv),
    "bumpy": lambda lv: bumpy(0.3, 4, lv),
}



@pytest.fixture(scope="module")
def maps():
    out = {}
    for name, make in SHAPES.items():
        v, f = make(4)
        out[name] = (v, f, map_to_sphere(v, f, source=name))
    return out


@pytest.mark.parametrize("name", list(SHAPES))
def test_bijective_at_every_stage(maps, name):
    v, f, m = maps[name]
    assert isinstance(m, SphereMap)
    assert m.qc.n_flipped == 0
    assert all(n == 0 for n in m.qc.flips_per_stage.values()), m.qc.flips_per_stage
    np.testing.assert_allclose(np.linalg.norm(m.sphere_vertices, axis=1), 1, atol=1e-14)
    # degree one: signed spherical areas sum to 4π (closed form: area of the unit sphere);
    # trimesh's own area of the chordal polyhedron is a little below 4π (inscribed)
    tm = trimesh.Trimesh(m.sphere_vertices, f, process=False)
    assert tm.is_winding_consistent and tm.volume > 0
    assert 4 * np.pi * (1 - 5e-3) < tm.area < 4 * np.pi  # O(h²) deficit at level 4


@pytest.mark.parametrize("name", list(SHAPES))
def test_area_distortion_targets(maps, name):
    v, f, m = maps[name]
    # issue 4 acceptance: SD <= 0.10 for compact, elongated, folded shapes; 1st/99th
    # percentiles of the log ratio within ±0.3
    assert m.qc.area_log_sd <= 0.10
    assert -0.3 <= m.qc.area_log_p01 and m.qc.area_log_p99 <= 0.3
    # recompute the surface-area shares with trimesh and the sphere shares with the
    # Van Oosterom–Strackee solid angle: the stored per-face log ratio must agree
    A = trimesh.Trimesh(v, f, process=False).area_faces
    a, b, c = (m.sphere_vertices[f[:, k]] for k in range(3))
    omega = 2 * np.arctan2(np.einsum("ij,ij->i", a, np.cross(b, c)),
                           1 + (a * b).sum(1) + (b * c).sum(1) + (c * a).sum(1))
    np.testing.assert_allclose(omega.sum(), 4 * np.pi, rtol=1e-10)  # exact partition
    ref = np.log((omega / omega.sum()) / (A / A.sum()))
    np.testing.assert_allclose(m.face_log_area_ratio, ref, atol=1e-9)  # round-off only
    assert m.qc.area_log_sd == pytest.approx(ref.std(), abs=1e-9)


def test_angle_distortion_elongated_and_shear_weight_balance(maps):
    v, f, m = maps["bent tube 3:1"]
    # issue 4 acceptance: mean angle distortion <= 20° on elongated shapes at the area target
    assert m.qc.angle_distortion_mean_deg <= 20.0
    # the single balance parameter trades area for shear: without the shear term areas are
    # more uniform and angles worse (common practice: Degener et al. 2003's trade-off)
    v, f = bent_tube(6, 1, np.pi / 2, 3)  # smaller copies: only the ordering is tested
    m = map_to_sphere(v, f, source="tube")
    m0 = map_to_sphere(v, f, shear_weight=0.0, source="tube, area only")
    m1 = map_to_sphere(v, f, shear_weight=1.0, source="tube, more shear weight")
    assert m0.qc.area_log_sd < m.qc.area_log_sd < m1.qc.area_log_sd
    assert m0.qc.angle_distortion_mean_deg > m.qc.angle_distortion_mean_deg > \
        m1.qc.angle_distortion_mean_deg


def test_sphere_maps_to_itself_up_to_rotation(maps, best_rotation):
    v, f, m = maps["sphere"]
    R = best_rotation(v, m.sphere_vertices)
    # the round sphere's area-preserving conformal self-maps are rotations; 1e-3 covers
    # the O(h²) gap between chordal and spherical areas at level 4
    assert np.linalg.norm(v @ R.T - m.sphere_vertices, axis=1).max() < 1e-3
    assert m.qc.angle_distortion_mean_deg < 0.1


def test_deterministic_and_rotation_invariant(best_rotation):
    v, f = bent_tube(6, 1, np.pi / 2, 3)
    a = map_to_sphere(v, f, source="tube")
    b = map_to_sphere(v.copy(), f.copy(), source="tube again")
    assert np.array_equal(a.sphere_vertices, b.sphere_vertices)  # bit-identical
    rng = np.random.default_rng(5)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    q *= np.sign(np.linalg.det(q))  # a proper rotation
    c = map_to_sphere(v @ q.T + [10.0, -3.0, 7.0], f, source="tube rotated")
    R = best_rotation(a.sphere_vertices, c.sphere_vertices)
    # the map is intrinsic: up to a rotation of the sphere the same (solver round-off
    # amplified by the line search: 1e-6 of the unit radius)
    assert np.linalg.norm(a.sphere_vertices @ R.T - c.sphere_vertices, axis=1).max() < 1e-6


def test_retriangulated_copy_gives_nearly_the_same_map(best_rotation):
    # the same smooth tube meshed at frequencies 12 and 15; vertex i of either mesh sits
    # over icosphere point i (the generator's natural parameterisation), which locates
    # each vertex of mesh B on mesh A
    from shapedesc.sphere import locate_on_sphere
    va, fa = bent_tube(6, 1, np.pi / 2, frequency=12)
    vb, fb = bent_tube(6, 1, np.pi / 2, frequency=15)
    sa, _ = icosphere(frequency=12)
    sb, _ = icosphere(frequency=15)
    ma = map_to_sphere(va, fa, source="tube f12")
    mb = map_to_sphere(vb, fb, source="tube f15")
    fi, w = locate_on_sphere(sa, fa, sb)
    xa = np.einsum("nk,nki->ni", w, ma.sphere_vertices[fa[fi]])
    xa /= np.linalg.norm(xa, axis=1, keepdims=True)
    R = best_rotation(xa, mb.sphere_vertices)
    err = np.linalg.norm(xa @ R.T - mb.sphere_vertices, axis=1)
    # "nearly the same": mean deviation below 2 % of the unit radius (about the spacing
    # of the coarser mesh, 0.1), max below 10 %
    assert err.mean() < 0.02 and err.max() < 0.10


def test_qc_record_and_per_vertex_values(maps):
    v, f, m = maps["bumpy"]
    row = m.qc.to_row()
    for key in ("n_flipped", "area_log_sd", "area_log_p01", "area_log_p99",
                "angle_distortion_mean_deg", "shear_anisotropy_p99", "sheared_area_share",
                "seconds_total", "iterations", "flips_mobius", "flips_final"):
        assert key in row
    assert row["sheared_area_share"] == 0.0 and row["shear_anisotropy_p99"] >= 1.0
    assert m.vertex_shear_log_anisotropy.shape == (len(v),)
    assert np.all(m.vertex_shear_log_anisotropy >= 0)
    assert row["seconds_total"] >= row["seconds_area"] > 0
    assert m.vertex_area_distortion.shape == (len(v),)
    assert m.vertex_angle_distortion_deg.shape == (len(v),)
    assert np.all(np.isfinite(m.vertex_area_distortion))
    assert m.parameters["shear_weight"] > 0 and m.parameters["iterations"] == m.qc.iterations
    with pytest.raises(ValueError):
        m.sphere_vertices[0, 0] = 1.0  # read-only arrays
    # round trip: the inverse map is exact at the vertices
    np.testing.assert_allclose(pull_back(m, v, m.sphere_vertices), v, rtol=0, atol=1e-12)


def test_refuses_non_genus0_and_open_surfaces():
    t = trimesh.creation.torus(major_radius=2.0, minor_radius=0.5)  # genus 1, χ = 0 (trimesh)
    with pytest.raises(MeshTopologyError, match=r"ring\.ply.*genus 1"):
        map_to_sphere(t.vertices, t.faces, source="ring.ply")
    v, f = icosphere(2)
    with pytest.raises(MeshTopologyError, match=r"cup\.gii.*open"):
        map_to_sphere(v, f[1:], source="cup.gii")


def test_non_converging_solve_names_surface_and_stage():
    v, f = ellipsoid(6, 1, 1, 2)
    from shapedesc.sphere.conformal import conformal_sphere_map
    x = conformal_sphere_map(v, f).sphere_vertices
    p = AreaProblem(v, f, shear_weight=0.1, what="long.obj")
    with pytest.raises(ConvergenceError, match=r"long\.obj: area correction did not converge"):
        correct_area(p, x, max_iter=3, rel_tol=0.0)


@pytest.mark.slow
def test_level5_targets(full):
    # reduced by default (one shape), all shapes with --full
    names = list(SHAPES) if full else ["bent tube 3:1"]
    for name in names:
        v, f = SHAPES[name](5)
        m = map_to_sphere(v, f, source=name)
        assert m.qc.n_flipped == 0 and max(m.qc.flips_per_stage.values()) == 0
        assert m.qc.area_log_sd <= 0.10  # issue 4 acceptance
        assert -0.3 <= m.qc.area_log_p01 and m.qc.area_log_p99 <= 0.3


def test_energy_gradient_matches_finite_differences(monkeypatch):
    # central differences along a random tangent direction (common practice); step 1e-6
    # gives truncation ~1e-12 and round-off ~1e-10 relative to the slope
    from shapedesc.sphere.area import _retract
    from shapedesc.sphere.conformal import conformal_sphere_map
    v, f = bumpy(0.3, 3, 2)
    x = conformal_sphere_map(v, f).sphere_vertices
    for w in (0.0, 0.7):
        p = AreaProblem(v, f, shear_weight=w, what="bumpy")
        e, g = p.energy_grad(x)
        assert e == pytest.approx(p.energy(x), rel=1e-14)
        d = np.random.default_rng(3).normal(size=x.shape)
        d -= np.einsum("ij,ij->i", d, x)[:, None] * x
        h = 1e-6
        fd = (p.energy(_retract(x, d, h)) - p.energy(_retract(x, d, -h))) / (2 * h)
        assert fd == pytest.approx(np.vdot(g, d), rel=1e-6)
    # every shear form beyond the knee (bounded, logarithmic): a 12:1 ellipsoid
    # in its natural parameterisation (the icosphere) has anisotropy up to 12 (K ≈ 6)
    from shapedesc.defaults import SPHERE_SHEAR_FORM, SPHERE_SHEAR_KNEE
    from shapedesc.shapes import icosphere as _ico
    ve, fe = ellipsoid(12, 1, 1, 2)
    xe, _ = _ico(2)
    pe = AreaProblem(ve, fe, shear_weight=0.7, what="needle")
    a_, b_, c_ = (xe[fe[:, k]] for k in range(3))
    q = (pe.cot[:, 0] * ((c_ - b_) ** 2).sum(1) + pe.cot[:, 1] * ((a_ - c_) ** 2).sum(1)
         + pe.cot[:, 2] * ((b_ - a_) ** 2).sum(1))
    assert (q / (2 * pe.dets(xe))).max() > SPHERE_SHEAR_KNEE  # both branches are exercised
    import shapedesc.sphere.area as area_mod
    d = np.random.default_rng(4).normal(size=xe.shape)
    d -= np.einsum("ij,ij->i", d, xe)[:, None] * xe
    h = 1e-6
    for form in ("mips-bounded", "mips-log", "mips", "log"):  # the default and the others
        monkeypatch.setattr(area_mod, "_FORM", [form, SPHERE_SHEAR_KNEE])
        e, g = pe.energy_grad(xe)
        fd = (pe.energy(_retract(xe, d, h)) - pe.energy(_retract(xe, d, -h))) / (2 * h)
        assert fd == pytest.approx(np.vdot(g, d), rel=1e-6), form
    monkeypatch.setattr(area_mod, "_FORM", ["mipps", SPHERE_SHEAR_KNEE])  # a typo is refused
    with pytest.raises(ValueError, match="unknown shear penalty form 'mipps'"):
        pe.energy_grad(xe)
    monkeypatch.setattr(area_mod, "_FORM", [SPHERE_SHEAR_FORM, SPHERE_SHEAR_KNEE])
    # the tail term (beyond |log ρ| = u0): the conformal start of the bumpy shape has
    # log ratios far beyond it, so ψ and its gradient are exercised on many faces
    pt = AreaProblem(v, f, shear_weight=0.12, what="bumpy", tail=True)
    assert (np.abs(pt.log_ratio(x)) > area_mod._TAIL[0]).mean() > 0.3  # 47 %, measured
    e, g = pt.energy_grad(x)
    assert e == pytest.approx(pt.energy(x), rel=1e-14)
    assert e > AreaProblem(v, f, shear_weight=0.12, what="bumpy").energy(x)
    d = np.random.default_rng(5).normal(size=x.shape)
    d -= np.einsum("ij,ij->i", d, x)[:, None] * x
    fd = (pt.energy(_retract(x, d, h)) - pt.energy(_retract(x, d, -h))) / (2 * h)
    assert fd == pytest.approx(np.vdot(g, d), rel=1e-6)
    # flips are barred: a folded face gives infinite energy
    bad = x.copy()
    bad[f[0, 0]] = -bad[f[0, 0]]
    assert p.energy(bad) == np.inf


def test_bounded_shear_form_is_c1_at_the_knee_and_bounded(monkeypatch):
    # against the closed form of the definition (shapedesc/sphere/area.py): MIPS K − 1
    # below K0, (K0 − 1) + K0·(1 − K0/K) above; value and slope continuous at K0, the
    # penalty below 2·K0 − 1, and its pull K·h'(K) = K0²/K falling beyond the knee
    import shapedesc.sphere.area as area_mod
    from shapedesc.defaults import SPHERE_SHEAR_KNEE as k0
    monkeypatch.setattr(area_mod, "_FORM", ["mips-bounded", k0])
    eps = 1e-7
    K = np.array([1.5, k0 - eps, k0 + eps, 2 * k0, 1e3, 1e9])
    h, dh = area_mod._shear(K)
    want = np.where(K <= k0, K - 1, (k0 - 1) + k0 * (1 - k0 / K))
    np.testing.assert_allclose(h, want, rtol=1e-14, atol=0)  # round-off only
    assert abs(h[2] - h[1]) < 3 * eps and abs(dh[2] - dh[1]) < 3 * eps / k0  # C¹ at K0 (O(eps))
    assert h.max() < 2 * k0 - 1
    pull = K * dh
    assert np.all(np.diff(pull[2:]) < 0)
    # the finite-difference slope matches dh beyond the knee (central differences, common
    # practice; relative step 1e-6 gives ~1e-10 error)
    Kb = np.array([5.0, 40.0, 900.0])
    fd = (area_mod._shear(Kb * (1 + 1e-6))[0] - area_mod._shear(Kb * (1 - 1e-6))[0]) / (2e-6 * Kb)
    np.testing.assert_allclose(fd, area_mod._shear(Kb)[1], rtol=1e-6)


def _spheroid_area_below(z, a):
    """Loop radius ρ, area density dA/dz and area below z (trapezoid rule) of the (a, 1, 1)
    spheroid at the increasing grid ``z`` (n,) from −a to a."""
    rho = np.sqrt(np.maximum(1 - z**2 / a**2, 0))
    d_a = 2 * np.pi * rho * np.sqrt(1 + (z / (a * a * np.maximum(rho, 1e-12))) ** 2)
    d_a[~np.isfinite(d_a)] = 0.0
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (d_a[1:] + d_a[:-1]) * np.diff(z))])
    return rho, d_a, cum


# The benchmark (benchmarks/sphere_map.py, isoperimetric_angle_estimate) computes the same
# estimate; this copy is kept on purpose as the test's own reference, written separately
# (orientations vectorised) and checked against the lead's hand values below, so that a
# slip in either shows up instead of being shared.
def _isoperimetric_angle_estimate_deg(a, n=801, n_phi=60):
    """Mean |Δangle| forced on the (a, 1, 1) ellipsoid by an exactly area-preserving map
    with uniform stretch along each cross-section loop (see benchmarks/sphere_map.py).

    Source: the isoperimetric inequality on the sphere, L² >= A(4πR² − A)/R² (Schmidt
    1943; equality for circles of latitude): a loop enclosing the area share f is at least
    2πR·2√(f(1−f)) long, so the loop of radius ρ(z) is stretched at least by
    2R√(f(1−f))/ρ, and with area kept the anisotropy is that ratio squared.
    """
    z = np.linspace(-a, a, n)
    rho, d_a, cum = _spheroid_area_below(z, a)
    frac, radius = cum / cum[-1], np.sqrt(cum[-1] / (4 * np.pi))
    lam = np.maximum(1.0, 2 * radius * np.sqrt(frac * (1 - frac)) / np.maximum(rho, 1e-300))
    phis = (np.arange(n_phi) + 0.5) * (np.pi / 3) / n_phi
    k = np.arange(3) * 2 * np.pi / 3
    ang = np.empty(n)
    for i, s in enumerate(lam):
        p = np.stack([np.cos(phis[:, None] + k) * s, np.sin(phis[:, None] + k) / s], axis=-1)
        u = np.roll(p, -1, axis=1) - p
        w = np.roll(p, -2, axis=1) - p
        corner = np.arctan2(np.abs(u[..., 0] * w[..., 1] - u[..., 1] * w[..., 0]),
                            (u * w).sum(-1))
        ang[i] = np.degrees(np.abs(corner - np.pi / 3).mean())
    return float(np.sum(d_a * ang) / np.sum(d_a))


def test_angle_distortion_of_the_6to1_ellipsoid_within_the_isoperimetric_estimate(maps):
    # the 20° target cannot be met on a 6:1 ellipsoid at area SD <= 0.10: exact area
    # preservation with uniform loop stretch forces ~39° (isoperimetric argument above;
    # the lead's hand computation gave 22°/29°/39° for 3:1/4:1/6:1, as this function does)
    est = _isoperimetric_angle_estimate_deg(6.0)
    assert est == pytest.approx(38.8, abs=0.5)  # the estimate itself (lead's value)
    assert _isoperimetric_angle_estimate_deg(3.0) == pytest.approx(22.2, abs=0.5)
    v, f, m = maps["ellipsoid 6:1:1"]
    # not worse than the estimate; the map beats it by a few degrees because the mean
    # |Δangle| saturates (non-uniform stretch along a loop pays off) and SD 0.1 of area
    # error is allowed — measured 33.2° (benchmarks/sphere_map.py --tradeoff)
    assert m.qc.angle_distortion_mean_deg <= est


def _archimedes_authalic(v, a):
    """The axially symmetric equal-area map of the prolate spheroid ``v`` (long semi-axis
    ``a`` along x, unit equator): by Archimedes' hat-box theorem the polar cap of the unit
    sphere up to angle θ has area share (1 − cos θ)/2, so the point whose surface share
    below it is s goes to cos θ = 1 − 2s, longitude kept. Returns (share below (V,),
    the map (V, 3))."""
    grid = np.linspace(-a, a, 20001)
    cum = _spheroid_area_below(grid, a)[2]
    share = np.interp(v[:, 0], grid, cum / cum[-1])
    z = 2.0 * share - 1.0
    phi = np.arctan2(v[:, 2], v[:, 1])
    r = np.sqrt(np.clip(1.0 - z * z, 0.0, None))
    return share, np.c_[z, r * np.cos(phi), r * np.sin(phi)]


def test_6to1_ellipsoid_map_follows_archimedes_equal_area_relation(maps):
    # outside truth: Archimedes' hat-box theorem (On the Sphere and Cylinder I, prop. 42-43:
    # a spherical cap's area grows linearly with its height). Our map of the 6:1 spheroid is
    # "polar" (tips to antipodes), so the cap around the first tip's image up to a vertex
    # must hold that vertex's surface-area share below it. Measured: max error 0.021 of the
    # total area (mean 0.010) at area SD 0.096 — tolerance 0.03 leaves room for solver
    # round-off; the centred conformal map (before area correction) misses by 0.17
    # (mean 0.069). The same theorem gives the unique axisymmetric authalic map, whose mean angle
    # distortion (measured 35 deg here) shows why the 20 deg is out of reach for
    # any polar map of this shape at the area target (see sphere/area.py "frontier").
    from shapedesc.sphere import qc

    v, f, m = maps["ellipsoid 6:1:1"]
    share, exact = _archimedes_authalic(v, 6.0)
    tip = m.sphere_vertices[np.argmin(v[:, 0])]
    cap = (1.0 - m.sphere_vertices @ tip) / 2.0
    assert np.abs(cap - share).max() < 0.03
    assert np.abs(cap - share).mean() < 0.015
    # the exact symmetric authalic map: area-preserving to discretisation error, and its
    # shear at least that of our map less 3 deg (ours trades SD 0.1 of area for ~2 deg)
    assert qc.face_log_area_ratio(v, exact, f).std() < 0.01
    exact_angle = qc.angle_distortion_deg(v, exact, f).mean()
    assert exact_angle > 30.0
    assert m.qc.angle_distortion_mean_deg > exact_angle - 3.0


def test_area_term_measures_spherical_triangle_areas():
    # the area term compares each face's *spherical* area share with its surface share:
    # with the shares set to the spherical areas of a coarse icosphere's own geodesic
    # triangles, the identity map must have zero area energy and zero gradient. The
    # reference areas come from L'Huilier's theorem, tan(E/4)² = tan(s/2) tan((s−a)/2)
    # tan((s−b)/2) tan((s−c)/2) for arc lengths a, b, c and s = (a+b+c)/2 (spherical
    # trigonometry, e.g. Todhunter 1886, §103; from memory), not the formula the energy uses
    x, f = icosphere(1)  # 42 vertices: edges ~0.55 rad, where det and area differ most
    arcs = [np.arccos(np.clip(np.einsum("ij,ij->i", x[f[:, i]], x[f[:, j]]), -1, 1))
            for i, j in ((1, 2), (2, 0), (0, 1))]
    s = sum(arcs) / 2
    excess = 4 * np.arctan(np.sqrt(np.tan(s / 2) * np.prod([np.tan((s - a) / 2) for a in arcs],
                                                            axis=0)))
    assert excess.sum() == pytest.approx(4 * np.pi, rel=1e-12)  # Girard: they tile the sphere
    p = AreaProblem(x, f, shear_weight=0.0, what="icosphere", area_shares=excess)
    e, g = p.energy_grad(x)
    # round-off only (the energy is a difference of O(1) sums; ~1e-15 each)
    assert abs(e) < 1e-12 and np.abs(g).max() < 1e-10, (e, np.abs(g).max())
    # the chordal measure det(a, b, c) (the cone volume the area term used before) would
    # not see this map as area-preserving: its authalic energy D·Σ a²/d − 1 is far above
    # round-off here (measured 1.1e-4 on this grid; 1e-5 leaves a factor 10)
    d = p.dets(x)
    a = excess / excess.sum()
    assert d.sum() * np.sum(a**2 / d) - 1 > 1e-5


def test_tail_term_is_zero_inside_u0_and_c1_at_it():
    # against the closed form of the definition (shapedesc/sphere/area.py): ψ(u) =
    # c·(|u| − u0)₊², zero inside, value and slope continuous at ±u0, even in u
    import shapedesc.sphere.area as area_mod
    from shapedesc.defaults import SPHERE_AREA_TAIL_LOG as u0, SPHERE_AREA_TAIL_STIFFNESS as c
    eps = 1e-7
    u = np.array([0.0, 0.1, u0 - eps, u0 + eps, 0.4, 2.0, -0.4, -u0 - eps])
    psi, dpsi = area_mod._tail(u)
    np.testing.assert_allclose(psi, c * np.maximum(np.abs(u) - u0, 0) ** 2, rtol=1e-14, atol=0)
    assert np.all(psi[:3] == 0) and np.all(dpsi[:3] == 0)
    assert psi[3] < c * 2 * eps**2 and abs(dpsi[3]) < 3 * c * eps  # C¹ at u0 (O(eps))
    assert psi[4] == psi[6] and dpsi[4] == -dpsi[6]
    # central differences (common practice; step 1e-6 gives ~1e-10 relative error)
    ub = np.array([0.3, 0.7, -0.5])
    fd = (area_mod._tail(ub + 1e-6)[0] - area_mod._tail(ub - 1e-6)[0]) / 2e-6
    np.testing.assert_allclose(fd, area_mod._tail(ub)[1], rtol=1e-6)


def test_tail_continuation_only_where_a_face_is_beyond_u0(maps, monkeypatch):
    # the bent tube's map has no face beyond u0 (1st/99th pct −0.15/0.06, measured): the
    # continuation must return the converged solve itself, so the map is bit-identical
    # with and without the tail term
    import shapedesc.sphere.area as area_mod
    v, f, m = maps["bent tube 3:1"]
    u0 = area_mod._TAIL[0]
    assert np.abs(m.face_log_area_ratio).max() < u0
    monkeypatch.setattr(area_mod, "_TAIL", [np.inf, area_mod._TAIL[1]])  # the term off
    m0 = map_to_sphere(v, f, source="bent tube")
    assert np.array_equal(m0.sphere_vertices, m.sphere_vertices)
    # the 6:1 ellipsoid's compressed tips go beyond u0 (1st pct −0.264 without the term,
    # measured): the term pulls them in, to −0.252 (measured); 0.005 is far above the
    # run-to-run spread (0: deterministic) and far below the effect
    v, f, m = maps["ellipsoid 6:1:1"]
    m0 = map_to_sphere(v, f, source="ellipsoid")
    assert m0.qc.area_log_p01 < -u0 - 0.01
    assert m.qc.area_log_p01 > m0.qc.area_log_p01 + 0.005
    assert m.qc.area_log_sd < m0.qc.area_log_sd


def test_shear_anisotropy_of_known_affine_maps():
    # truth by construction: a triangle mapped by U·diag(σ1, σ2)·Vᵀ (any rotations U, V,
    # any scale, placed in any plane of R³) has anisotropy σ1/σ2 (the singular value
    # decomposition); the identity has 1
    from scipy.spatial.transform import Rotation

    from shapedesc.sphere import qc

    rng = np.random.default_rng(7)
    n = 50
    tri = rng.normal(size=(n, 3, 2))  # random planar triangles
    s1, s2 = rng.uniform(1, 30, n), rng.uniform(0.2, 1, n)
    surf, img = np.zeros((n, 3, 3)), np.zeros((n, 3, 3))
    for i in range(n):
        ru, rv = (np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
                  for a in rng.uniform(0, 2 * np.pi, 2))
        J = ru @ np.diag([s1[i], s2[i]]) @ rv.T
        q1, q2 = Rotation.random(2, random_state=100 + i).as_matrix()
        surf[i] = np.c_[tri[i], np.zeros(3)] @ q1.T
        img[i] = np.c_[tri[i] @ J.T, np.zeros(3)] @ q2.T * rng.uniform(0.01, 100) + rng.normal(size=3)
    f = np.arange(3 * n).reshape(n, 3)
    an = qc.shear_anisotropy(surf.reshape(-1, 3), img.reshape(-1, 3), f)
    np.testing.assert_allclose(an, s1 / s2, rtol=1e-9)  # round-off of ill-shaped triangles
    np.testing.assert_allclose(qc.shear_anisotropy(surf.reshape(-1, 3), surf.reshape(-1, 3), f),
                               1.0, rtol=0, atol=1e-6)  # sqrt(k² − 1) of round-off k ≈ 1
    # share above a threshold: the faces' own areas
    area = 0.5 * np.linalg.norm(np.cross(surf[:, 1] - surf[:, 0], surf[:, 2] - surf[:, 0]), axis=1)
    assert qc.sheared_area_share(surf.reshape(-1, 3), f, an, 10.0) == pytest.approx(
        area[s1 / s2 > 10].sum() / area.sum(), rel=1e-12)


def test_shear_anisotropy_agrees_with_the_energys_mips_distortion(maps):
    # two independent formulas: the QC's singular values of the 2×2 Jacobian, and the
    # area correction's cotangent form K = Σ cot θ_k |e_k|² / (2 det) (Hormann & Greiner
    # 2000), which divides by det = 2·(chordal area)·h, h the distance of the chordal plane
    # from the origin, where the MIPS identity has 4·(chordal area): so K·h = k, with
    # σ1/σ2 = k + sqrt(k² − 1)
    from shapedesc.sphere import qc

    v, f, m = maps["ellipsoid 6:1:1"]
    x = m.sphere_vertices
    p = AreaProblem(v, f, shear_weight=0.12, what="t")
    a, b, c = (x[f[:, k]] for k in range(3))
    det = np.einsum("ij,ij->i", a, np.cross(b, c))
    q = (p.cot[:, 0] * np.sum((c - b) ** 2, 1) + p.cot[:, 1] * np.sum((a - c) ** 2, 1)
         + p.cot[:, 2] * np.sum((b - a) ** 2, 1))
    n = np.cross(b - a, c - a)
    h = np.abs(np.einsum("ij,ij->i", n / np.linalg.norm(n, axis=1, keepdims=True), a))
    k = q / (2 * det) * h
    np.testing.assert_allclose(qc.shear_anisotropy(v, x, f), k + np.sqrt(k * k - 1), rtol=1e-8)
    # the 6:1 ellipsoid stays below the QC's threshold (its maximum, measured: ~5)
    assert m.qc.sheared_area_share == 0.0 and 1.0 < m.qc.shear_anisotropy_p99 < 10.0


def test_stall_with_a_collapsed_face_raises_instead_of_returning(monkeypatch):
    # When no step decreases the energy the solve ends as stationary, unless a face is
    # collapsed below SPHERE_MIN_REL_DET: then the map is refused (measured once on a
    # 40,000-vertex MNI hemisphere's start, whose faces ~1e-13 rad wide no step opened; the
    # solve had returned it as converged at area SD 0.73). A start with a vertex moved to
    # within 1e-14 of the way to its neighbour (every face still positive: the segment lies
    # in the vertex's star) has two such faces; the solver itself can open that one, so
    # the stall is forced by a retraction that never moves.
    import shapedesc.sphere.area as area

    v, f = icosphere(2)
    x = v.copy()
    i, j = int(f[0, 0]), int(f[0, 1])
    x[i] = x[j] + 1e-14 * (x[i] - x[j])
    x[i] /= np.linalg.norm(x[i])
    det = np.einsum("ij,ij->i", x[f[:, 0]], np.cross(x[f[:, 1]], x[f[:, 2]]))
    assert det.min() > 0 and det.min() < 1e-12 * det.mean()
    p = AreaProblem(v, f, shear_weight=0.1, what="pinched.obj")
    monkeypatch.setattr(area, "_retract", lambda x, d, t: x.copy())
    with pytest.raises(ConvergenceError, match=r"pinched\.obj: area correction stalled with 2 "
                                               r"faces collapsed"):
        correct_area(p, x)
    # the same stall at an uncollapsed map is returned (stationary or stalled, not refused)
    r = correct_area(p, v)
    assert np.array_equal(r.sphere_vertices, v)
