"""Sphere maps of real anatomy: MNI ICBM152 2009a template structures (open data).

Surfaces come from ``shapedesc.mesh.template_anatomy`` + ``shapedesc.mesh.volume``
(thresholded probability maps, topology-corrected to genus 0). By default one deep
grey-matter nucleus (left caudate, ~3,200 vertices).

With the default energy (area term on spherical-triangle areas with its tail term beyond
|log ratio| 0.25, MIPS shear with a bounded branch beyond its knee,
``shapedesc.sphere.area``) and the coarse-to-fine start whose coarse levels use the pure
area energy (``shapedesc.sphere.hierarchy``), every structure here meets the targets
(measured; SD, 1st/99th percentiles): caudate 0.051, −0.20/0.10 (right 0.050,
−0.20/0.10); thalamus 0.065, −0.24/0.17 (right 0.065, −0.24/0.16); putamen 0.086,
−0.25/0.26 (right 0.083, −0.25/0.25); 40,000-vertex white-matter hemispheres 0.082,
−0.25/0.26 (right 0.082, −0.25/0.26; ~130–140 s CPU each). Without the tail term the
right hemisphere missed them (0.127, −0.34/0.41) and the left putamen's 99th percentile
was 0.29; with shear on the coarse levels the left putamen (0.101, −0.31/0.27) and the
left hemisphere (0.111, −0.29/0.35) missed them. The caudates, putamens and the
hemispheres take the coarse-to-fine start (their conformal maps crowd or flip), the
thalami the conformal one. ``--full`` checks all of them; by default the left caudate
and the left putamen.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import shapedesc.mesh.template_anatomy as template_anatomy
import shapedesc.mesh.volume as volume
from shapedesc.errors import ShearedMapWarning
from shapedesc.sphere import map_to_sphere, pull_back

# issue 4 acceptance: SD <= 0.10 for compact shapes (deep grey matter), <= 0.15 for a
# real hemisphere; 1st/99th percentiles of the log area ratio within ±0.3
_SD_TARGET = {"caudate_left": 0.10, "thalamus_left": 0.10, "putamen_left": 0.10, "wm_left": 0.15,
              "caudate_right": 0.10, "thalamus_right": 0.10, "putamen_right": 0.10,
              "wm_right": 0.15}
_TARGET_VERTICES = {"wm_left": 40000, "wm_right": 40000}
_FULL = ["caudate_left", "thalamus_left", "putamen_left", "caudate_right", "thalamus_right",
         "putamen_right"]


# Structures whose maps shear more than SPHERE_SHEARED_SHARE_WARN of their area beyond
# SPHERE_SHEARED_ANISOTROPY (measured share: putamen L / R 7.7 / 8.8 %, caudates and
# thalami 0.8–1.2 %, 40,000-vertex WM hemispheres L / R 4.4 / 4.9 %, putamen bodies 0 %):
# the putamens and the hemispheres must warn, the compact nuclei must not.
_SHEARED = {"putamen_left": True, "putamen_right": True, "caudate_left": False,
            "caudate_right": False, "thalamus_left": False, "thalamus_right": False,
            "wm_left": True, "wm_right": True, "putamen_body_left": False,
            "putamen_body_right": False}


def _map(surf, name):
    """map_to_sphere with the ShearedMapWarning expected, forbidden or allowed per _SHEARED."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ShearedMapWarning)
        m = map_to_sphere(surf.vertices, surf.faces, source=surf.source)
    warned = [w for w in caught if issubclass(w.category, ShearedMapWarning)]
    for w in caught:
        if not issubclass(w.category, ShearedMapWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    key = name.split(" ")[0]
    if key in _SHEARED:
        assert bool(warned) == _SHEARED[key], (name, m.qc.sheared_area_share)
        assert (m.qc.sheared_area_share > 0.03) == _SHEARED[key], m.qc.sheared_area_share
    return m


def _surface(name, template_dir):
    st = template_anatomy.template_structure(name, data_dir=template_dir)
    surf, rep = volume.mask_to_surface(st.mask, st.affine, source=name, evidence=st.evidence,
                                       target_vertices=_TARGET_VERTICES.get(name))
    return surf, rep


@pytest.mark.slow
def test_template_structures_map_bijectively_with_low_distortion(template_dir, full):
    names = _FULL if full else ["caudate_left"]
    for name in names:
        surf, rep = _surface(name, template_dir)
        # χ = V − E + F = 2 (Euler's formula for the sphere), counted independently here
        f = surf.faces
        e = np.unique(np.sort(np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]]), axis=1),
                      axis=0)
        assert surf.n_vertices - len(e) + len(f) == 2
        m = _map(surf, name)
        assert max(m.qc.flips_per_stage.values()) == 0, (name, m.qc.flips_per_stage)
        # a flip after the stereographic projection, even one the pole correction repairs,
        # sends the surface to the coarse-to-fine start (the rule in shapedesc.sphere.api;
        # the caudate's conformal attempt has 2 such flips, measured)
        if m.parameters["conformal_attempt"]["flips_projected"]:
            assert m.qc.initial_map == "coarse-to-fine", (name, m.parameters["conformal_attempt"])
        assert m.qc.area_log_sd <= _SD_TARGET[name], (name, m.qc.area_log_sd)
        assert -0.3 <= m.qc.area_log_p01 and m.qc.area_log_p99 <= 0.3, (name, m.qc.to_row())
        # round trip exact at the vertices (mm; 1e-9 mm is far below any voxel)
        np.testing.assert_allclose(pull_back(m, surf.vertices, m.sphere_vertices),
                                   surf.vertices, rtol=0, atol=1e-9)


@pytest.mark.slow
def test_hemisphere_maps_bijectively_from_the_coarse_to_fine_start(template_dir, full):
    # reduced by default: the left putamen, whose conformal map is also crowded (a thin
    # tail; the right one is in _FULL); --full: the 40,000-vertex white-matter hemispheres
    # (~130-140 s CPU each)
    for name in (["wm_left", "wm_right"] if full else ["putamen_left"]):
        _check_coarse_to_fine(name, template_dir)
    if full:
        # a re-meshed copy (midpoint-subdivided, decimated back to 40,000 vertices) of the
        # right hemisphere: its coarse-to-fine start is poor (first fine solve stalled at
        # area SD 0.64) and the tail continuation needed 3,919 iterations, beyond the
        # former budget of 3,000 (ConvergenceError); measured SD 0.087, −0.26/0.26, ~450 s
        copy = _remeshed(_surface("wm_right", template_dir)[0])
        _check_coarse_to_fine(copy.source, template_dir, copy)


def _check_coarse_to_fine(name, template_dir, surf=None):
    attempt = "collapsed_faces"  # why the original surfaces need it (measured)
    if surf is None:
        surf, _ = _surface(name, template_dir)
    else:
        attempt = None  # a copy: any sign of crowding (flips or collapsed faces)
    m = _map(surf, name)
    assert m.qc.initial_map == "coarse-to-fine"
    found = m.parameters["conformal_attempt"]
    assert (found[attempt] > 0) if attempt else any(found.values()), found
    assert max(m.qc.flips_per_stage.values()) == 0, m.qc.flips_per_stage
    # degree one: signed solid angles (Van Oosterom & Strackee 1983) sum to 4π
    x, f = m.sphere_vertices, surf.faces
    a, b, c = (x[f[:, k]] for k in range(3))
    omega = 2 * np.arctan2(np.einsum("ij,ij->i", a, np.cross(b, c)),
                           1 + (a * b).sum(1) + (b * c).sum(1) + (c * a).sum(1))
    np.testing.assert_allclose(omega.sum(), 4 * np.pi, rtol=1e-10)  # round-off only
    assert m.qc.area_log_sd <= _SD_TARGET[name.split(" ")[0]], (name, m.qc.area_log_sd)
    assert -0.3 <= m.qc.area_log_p01 and m.qc.area_log_p99 <= 0.3, (name, m.qc.to_row())
    # round trip exact at the vertices (mm; 1e-9 mm is far below any voxel)
    np.testing.assert_allclose(pull_back(m, surf.vertices, m.sphere_vertices),
                               surf.vertices, rtol=0, atol=1e-9)


@pytest.mark.slow
def test_decimated_copy_maps_bijectively(template_dir):
    # a re-triangulated copy (decimated to 60 %) of the left putamen: the pole correction
    # of its coarse Tutte maps is often discarded (it is a Beltrami solve only for
    # cotangent weights); the discarded trial's flips (326 and 548 on two coarse levels)
    # were once counted as the stage's, and every coarse level was refused
    # (ConvergenceError). Its distortion is not asserted: measured SD 0.107, 1st/99th
    # percentiles −0.31/0.29 — the coarser mesh of a thin structure misses the targets
    st = template_anatomy.template_structure("putamen_left", data_dir=template_dir)
    full, _ = _surface("putamen_left", template_dir)
    surf, _ = volume.mask_to_surface(st.mask, st.affine, source="putamen_left (decimated)",
                                     evidence=st.evidence,
                                     target_vertices=int(0.6 * full.n_vertices))
    m = _map(surf, "putamen_left (decimated)")
    assert m.qc.initial_map == "coarse-to-fine"
    assert max(m.qc.flips_per_stage.values()) == 0, m.qc.flips_per_stage
    np.testing.assert_allclose(pull_back(m, surf.vertices, m.sphere_vertices),
                               surf.vertices, rtol=0, atol=1e-9)  # mm; far below a voxel


@pytest.mark.slow
def test_remeshed_copies_meet_the_targets_and_keep_the_shear_flag(template_dir, full):
    # Whether a map is strongly sheared (QC sheared_area_share, warning above 3 %) is a
    # property of the anatomy, not of its triangulation: copies of each nucleus decimated
    # (mesh.decimate, edge collapse to midpoints) to other vertex counts keep the flag
    # and meet the area targets. Measured (decimated to 50 / 70 / 85 %, and subdivided):
    # caudates and thalami 0.6–1.5 % sheared, putamens 7.0–9.4 %; SD <= 0.100, every
    # percentile within ±0.3. Default: two copies; --full: six nuclei x (0.5, 0.85).
    # (These decimate the finished surface; the 60 % copy of the test above is extracted
    # from the mask at that size, decimated before smoothing: another surface, which
    # misses the targets.)
    from shapedesc.mesh.decimate import decimate
    from shapedesc.surface import Surface

    cases = ([(n, r) for n in _FULL for r in (0.5, 0.85)] if full
             else [("caudate_left", 0.7), ("putamen_left", 0.7)])
    for name, ratio in cases:
        s, _ = _surface(name, template_dir)
        v, f = decimate(s.vertices, s.faces, int(ratio * s.n_vertices))
        surf = Surface(v, f, source=f"{name} (decimated to {ratio:g})")
        m = _map(surf, surf.source)  # asserts the flag as for the original
        assert max(m.qc.flips_per_stage.values()) == 0, (surf.source, m.qc.flips_per_stage)
        assert m.qc.area_log_sd <= _SD_TARGET[name], (surf.source, m.qc.area_log_sd)
        assert -0.3 <= m.qc.area_log_p01 and m.qc.area_log_p99 <= 0.3, (surf.source,
                                                                        m.qc.to_row())


def _remeshed(surf):
    """The surface midpoint-subdivided (trimesh) and decimated back to its vertex count
    (mesh.decimate): an independent triangulation of nearly the same surface."""
    import trimesh

    from shapedesc.mesh.decimate import decimate
    from shapedesc.surface import Surface

    v, f = decimate(*trimesh.remesh.subdivide(surf.vertices, surf.faces), surf.n_vertices)
    return Surface(v, f, source=f"{surf.source} (re-meshed)")


def _map_angles_deg(a, ma, b, mb, best_rotation):
    """Angles (°) between map ``ma`` of surface ``a`` at its vertices and map ``mb`` of
    the copy ``b`` read at their closest points on ``b`` (trimesh's closest-point
    kernel, an outside source, over the faces of the 16 nearest centroids; barycentric
    interpolation), after the best rotation (the ``best_rotation`` fixture)."""
    import trimesh
    from scipy.spatial import cKDTree

    tris = b.vertices[b.faces]
    _, cand = cKDTree(tris.mean(axis=1)).query(a.vertices, k=16)
    best, tri = np.full(a.n_vertices, np.inf), np.zeros(a.n_vertices, dtype=np.int64)
    near = np.zeros_like(a.vertices)
    for j in range(cand.shape[1]):
        q = trimesh.triangles.closest_point(tris[cand[:, j]], a.vertices)
        dist = np.sum((q - a.vertices) ** 2, axis=1)
        better = dist < best
        best[better], tri[better], near[better] = dist[better], cand[better, j], q[better]
    w = trimesh.triangles.points_to_barycentric(tris[tri], near)
    y = np.einsum("nk,nki->ni", w, mb.sphere_vertices[b.faces[tri]])
    y /= np.linalg.norm(y, axis=1, keepdims=True)
    x = ma.sphere_vertices
    r = best_rotation(x, y)
    return np.degrees(np.arccos(np.clip(np.einsum("ij,ij->i", x @ r.T, y), -1.0, 1.0)))


@pytest.mark.slow
def test_remeshed_compact_nuclei_give_nearly_the_same_map(template_dir, best_rotation):
    # issue 4: "a re-triangulated copy gives nearly the same map", on real anatomy. The
    # left caudate, and the left putamen's body (template_anatomy: the blob opened by a
    # 2-voxel ball, which removes the claustral/insular grey-matter sheets the
    # box-clipped blob carries; those sheets are why the blob's map is strongly sheared:
    # its re-meshed copy is 6.5-9° away, see sphere/api.py). Measured mean / 99th pct:
    # caudate 1.01° / 7.2°, putamen body 0.34° / 1.21° (0 % sheared). The bounds, 2° mean
    # and 10° at the 99th percentile, leave 1.4-2x room over the caudate and lie far below
    # the sheared blob (6.5° / 36.7°).
    for name in ("caudate_left", "putamen_body_left"):
        surf, _ = _surface(name, template_dir)
        copy = _remeshed(surf)
        ma, mb = _map(surf, surf.source), _map(copy, copy.source)  # neither may warn
        d = _map_angles_deg(surf, ma, copy, mb, best_rotation)
        assert d.mean() < 2.0 and np.percentile(d, 99) < 10.0, (surf.source, d.mean(),
                                                                 np.percentile(d, 99))
