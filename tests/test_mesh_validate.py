"""Mesh validation and repair: measures against trimesh and closed forms, every bad mesh.

Outside sources: trimesh (area, volume, Euler number, body count, watertightness and
winding consistency of the same arrays); closed forms (sphere area 4πr², volume 4πr³/3;
χ = 2 − 2g for closed orientable surfaces, Euler–Poincaré).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import trimesh

from shapedesc.errors import MeshGeometryError, MeshTopologyError, RepairWarning
from shapedesc.mesh.repair import prepare_surface, repair_mesh
from shapedesc.mesh.validate import MeshReport, inspect_mesh
from shapedesc.surface import Surface


def _surf(m, source="mem.ply"):
    return Surface(np.asarray(m.vertices), np.asarray(m.faces), source=source)


@pytest.fixture(scope="module")
def ico():
    return trimesh.creation.icosphere(subdivisions=4, radius=10.0)


# --------------------------------------------------------------------------- measures


def test_sphere_usable_and_measures_match_trimesh_and_closed_forms(ico):
    r = inspect_mesh(_surf(ico))
    assert isinstance(r, MeshReport)
    assert r.verdict == "usable" and r.reasons == () and r.repairs_needed == ()
    assert (r.n_components, r.n_boundary_edges, r.n_nonmanifold_edges, r.n_nonmanifold_vertices) == (1, 0, 0, 0)
    assert r.orientation == "consistent outward"
    # trimesh on the same arrays (outside source); float round-off only
    assert r.area_mm2 == pytest.approx(ico.area, rel=1e-12)
    assert r.volume_mm3 == pytest.approx(ico.volume, rel=1e-12)
    assert r.euler_characteristic == ico.euler_number == 2
    assert r.genus == 0
    assert r.n_components == ico.body_count
    # closed forms: the inscribed polyhedron falls short of the sphere by O((edge/r)^2),
    # 0.12 % (area) and 0.22 % (volume) at 4 subdivisions; 0.5 % bounds both from above
    sphere_area, sphere_vol = 4 * math.pi * 10.0**2, 4 / 3 * math.pi * 10.0**3
    assert -5e-3 < r.area_mm2 / sphere_area - 1 < 0
    assert -5e-3 < r.volume_mm3 / sphere_vol - 1 < 0


def test_closed_form_convergence_is_second_order():
    # each subdivision halves the edge: the volume deficit must shrink ~4x (O(h^2))
    deficits = []
    for n in (2, 3, 4):
        r = inspect_mesh(_surf(trimesh.creation.icosphere(subdivisions=n, radius=7.0)))
        deficits.append(1 - r.volume_mm3 / (4 / 3 * math.pi * 7.0**3))
    ratios = np.array(deficits[:-1]) / np.array(deficits[1:])
    assert np.all((ratios > 3.5) & (ratios < 4.5))  # 4 +- 0.5: pre-asymptotic slack


def test_torus_genus_one_refused(ico):
    torus = trimesh.creation.torus(major_radius=10.0, minor_radius=3.0)
    s = _surf(torus, "torus.gii")
    r = inspect_mesh(s)
    assert r.euler_characteristic == torus.euler_number == 0  # trimesh; χ = 2 - 2g, g = 1
    assert r.genus == 1 and r.verdict == "unusable"
    assert r.volume_mm3 == pytest.approx(torus.volume, rel=1e-12)
    assert "genus 1" in r.reasons[0]
    with pytest.raises(MeshTopologyError, match=r"torus.gii: .*genus 1 .*a mesh topology fix is out of "
                       r"scope for surface inputs; re-extract the surface from a label volume"):
        prepare_surface(s)


def test_genus_two_surface_refused_with_its_genus():
    # marching cubes (scikit-image) of the implicit double torus
    # ((x(x-1)^2(x-2) + y^2)^2 + z^2 = 0.03): a closed genus-2 surface
    from skimage.measure import marching_cubes

    gx, gy, gz = np.linspace(-0.6, 2.6, 90), np.linspace(-1.2, 1.2, 70), np.linspace(-0.5, 0.5, 40)
    x, y, z = np.meshgrid(gx, gy, gz, indexing="ij")
    field = (x * (x - 1) ** 2 * (x - 2) + y**2) ** 2 + z**2 - 0.03
    v, f, _, _ = marching_cubes(field, 0.0, spacing=(gx[1] - gx[0], gy[1] - gy[0], gz[1] - gz[0]))
    s = Surface(v, f, source="pretzel.gii")
    r = inspect_mesh(s)
    assert r.euler_characteristic == trimesh.Trimesh(v, f, process=False).euler_number == -2
    assert r.genus == 2  # χ = 2 - 2g
    with pytest.raises(MeshTopologyError, match=r"pretzel.gii: .*genus 2 .*out of scope for surface inputs"):
        prepare_surface(s)


def test_euler_characteristic_additive_over_components():
    # two disjoint tori: χ = 0 + 0 (additive), genus undefined for 2 components
    a = trimesh.creation.torus(10.0, 3.0)
    b = trimesh.creation.torus(10.0, 3.0).apply_translation([40, 0, 0])
    r = inspect_mesh(_surf(trimesh.util.concatenate([a, b])))
    assert r.n_components == 2 and r.euler_characteristic == 0 and r.genus is None
    assert r.verdict == "unusable"


# --------------------------------------------------------------------------- bad meshes


def test_open_mesh(ico):
    s = Surface(ico.vertices, ico.faces[1:], source="open.ply")
    r = inspect_mesh(s)
    ref = trimesh.Trimesh(ico.vertices, ico.faces[1:], process=False)
    assert r.n_boundary_edges == 3 and not ref.is_watertight  # trimesh agrees it is open
    assert r.verdict == "unusable" and "--fill-holes" in r.reasons[0]
    with pytest.raises(MeshTopologyError, match=r"open.ply: .*open surface: 3 boundary edges"):
        prepare_surface(s)
    # asked to, the hole is filled and said
    with pytest.warns(RepairWarning, match="filled 1 holes"):
        fixed = prepare_surface(s, fill_holes=True)
    assert trimesh.Trimesh(fixed.vertices, fixed.faces, process=False).is_watertight
    assert any("filled 1 holes" in h for h in fixed.history)


def test_larger_hole_filled_with_fan(ico):
    # remove the faces around one vertex: a 5-edge hole (icosphere vertex 0 has valence 5)
    v0 = 0
    keep = ~np.any(ico.faces == v0, axis=1)
    s = Surface(ico.vertices, ico.faces[keep], source="hole.ply")
    with pytest.warns(RepairWarning):
        fixed = prepare_surface(s, fill_holes=True)
    t = trimesh.Trimesh(fixed.vertices, fixed.faces, process=False)
    assert t.is_watertight and t.is_winding_consistent and t.euler_number == 2
    assert inspect_mesh(fixed).verdict == "usable"
    with pytest.raises(MeshTopologyError, match="open surface"):
        prepare_surface(s, fill_holes=True, max_hole_edges=3)


def test_nonmanifold_edge(ico):
    a, b = ico.faces[0, 0], ico.faces[0, 1]
    v = np.vstack([ico.vertices, ico.vertices[[a, b]].mean(axis=0) * 1.5])
    f = np.vstack([ico.faces, [[a, b, len(v) - 1]]])  # a fin on edge ab: 3 faces on it
    s = Surface(v, f, source="fin.obj")
    r = inspect_mesh(s)
    assert r.n_nonmanifold_edges == 1
    assert r.verdict == "unusable"
    with pytest.raises(MeshTopologyError, match=r"fin.obj: .*1 non-manifold edges"):
        prepare_surface(s)


def test_nonmanifold_vertex_two_cones_touching():
    t1 = trimesh.creation.icosphere(subdivisions=1)
    t2 = trimesh.creation.icosphere(subdivisions=1)
    i1 = int(np.argmax(t1.vertices[:, 0]))
    i2 = int(np.argmin(t2.vertices[:, 0]))
    v = np.vstack([t1.vertices, t2.vertices - t2.vertices[i2] + t1.vertices[i1]])
    f2 = t2.faces + len(t1.vertices)
    f2[f2 == i2 + len(t1.vertices)] = i1  # share exactly one vertex
    s = Surface(v, np.vstack([t1.faces, f2]), source="pinch.ply")
    r = inspect_mesh(s)
    assert r.n_nonmanifold_vertices == 1 and r.n_nonmanifold_edges == 0 and r.n_boundary_edges == 0
    assert r.n_components == 1 and r.genus is None
    with pytest.raises(MeshTopologyError, match=r"pinch.ply: .*1 non-manifold vertices"):
        prepare_surface(s)


def test_two_components(ico):
    small = trimesh.creation.icosphere(subdivisions=2, radius=2.0).apply_translation([30, 0, 0])
    both = trimesh.util.concatenate([ico, small])
    s = _surf(both, "two.gii")
    r = inspect_mesh(s)
    assert r.n_components == both.body_count == 2  # trimesh body_count
    assert r.verdict == "unusable" and "--repair-largest-component" in r.reasons[0]
    with pytest.raises(MeshTopologyError, match=r"two.gii: .*2 separate components"):
        prepare_surface(s)
    r2 = inspect_mesh(s, keep_largest_component=True)
    assert r2.verdict == "usable after repair"
    with pytest.warns(RepairWarning, match="kept the largest of 2 components"):
        kept = prepare_surface(s, keep_largest_component=True)
    assert kept.n_vertices == len(ico.vertices)
    assert inspect_mesh(kept).area_mm2 == pytest.approx(ico.area, rel=1e-12)


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_nonfinite_coordinates(ico, bad):
    v = np.array(ico.vertices)
    v[5, 1] = bad
    s = Surface(v, ico.faces, source="nan.gii")
    r = inspect_mesh(s)
    assert r.n_nonfinite_coordinates == 1 and r.verdict == "unusable"
    assert r.orientation == "n/a" and math.isnan(r.area_mm2)
    assert json.loads(json.dumps(r.to_row()))["area_mm2"] is None
    with pytest.raises(MeshGeometryError, match=r"nan.gii: 1 vertices have NaN or infinite coordinates"):
        prepare_surface(s)
    with pytest.raises(MeshGeometryError, match=r"nan.gii"):
        repair_mesh(s)


def test_faces_index_missing_vertices(ico):
    f = np.array(ico.faces)
    f[3, 2] = len(ico.vertices) + 10
    f[4, 0] = -1
    s = Surface(ico.vertices, f, source="badidx.ply")
    r = inspect_mesh(s)
    assert r.n_bad_face_indices == 2 and r.verdict == "unusable"
    with pytest.raises(MeshGeometryError, match=r"badidx.ply: 2 faces index vertices that do not exist"):
        prepare_surface(s)


def test_three_vertices():
    s = Surface(np.eye(3), [[0, 1, 2]], source="tri.obj")
    r = inspect_mesh(s)
    assert r.verdict == "unusable" and "only 3 vertices" in " ".join(r.reasons)
    with pytest.raises(MeshGeometryError, match=r"tri.obj: 3 vertices and 1 faces; a closed surface needs at least 4"):
        prepare_surface(s)


def test_tetrahedron_is_the_smallest_usable():
    v = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], float)
    f = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]])
    r = inspect_mesh(Surface(v, f))
    assert r.verdict == "usable"
    assert r.volume_mm3 == pytest.approx(1 / 6)  # closed form: unit corner tetrahedron


# --------------------------------------------------------------------------- repairs


def test_inward_orientation_flipped(ico):
    s = Surface(ico.vertices, ico.faces[:, ::-1], source="inward.ply")
    r = inspect_mesh(s)
    assert r.orientation == "consistent inward" and r.volume_mm3 < 0
    assert r.verdict == "usable after repair" and "outward" in r.repairs_needed[0]
    with pytest.warns(RepairWarning, match="outward"):
        out = prepare_surface(s)
    np.testing.assert_array_equal(out.faces, ico.faces[:, ::-1][:, ::-1])
    assert inspect_mesh(out).volume_mm3 == pytest.approx(ico.volume, rel=1e-12)


def test_inconsistent_orientation_made_consistent(ico):
    f = np.array(ico.faces)
    idx = np.random.default_rng(11).choice(len(f), size=200, replace=False)
    f[idx] = f[idx][:, ::-1]
    s = Surface(ico.vertices, f, source="mixed.ply")
    assert not trimesh.Trimesh(ico.vertices, f, process=False).is_winding_consistent
    r = inspect_mesh(s)
    assert r.orientation == "inconsistent" and r.verdict == "usable after repair"
    fixed = repair_mesh(s)
    t = trimesh.Trimesh(fixed.vertices, fixed.faces, process=False)
    assert t.is_winding_consistent and t.volume > 0  # trimesh agrees: consistent, outward
    assert "flipped 200 faces" in fixed.history[0]


def test_duplicates_degenerate_and_unreferenced_removed(ico):
    # STL-like soup: every face with its own vertices, plus an unused vertex
    v = np.vstack([ico.vertices[ico.faces].reshape(-1, 3), [[100.0, 0, 0]]])
    f = np.arange(3 * len(ico.faces)).reshape(-1, 3)
    f = np.vstack([f, [[0, 0, 1]]])  # a face with a repeated vertex
    s = Surface(v, f, source="soup.stl")
    r = inspect_mesh(s)
    assert r.n_duplicate_vertices == len(v) - 1 - len(ico.vertices)
    assert r.n_degenerate_faces == 1 and r.n_unreferenced_vertices == 1
    assert r.verdict == "usable after repair"
    fixed = repair_mesh(s)
    assert fixed.n_vertices == len(ico.vertices) and fixed.n_faces == len(ico.faces)
    assert [h.split()[0] for h in fixed.history] == ["merged", "removed", "removed"]
    assert inspect_mesh(fixed).area_mm2 == pytest.approx(ico.area, rel=1e-12)  # trimesh area


def test_zero_area_cap_flipped(ico):
    # split edge ab at its midpoint m on one side only and keep the cap (a, b, m):
    # closed and manifold, but with one zero-area face
    faces = [list(t) for t in ico.faces]
    a, b, c = faces[0]
    v = np.vstack([ico.vertices, (ico.vertices[a] + ico.vertices[b]) / 2])
    m = len(v) - 1
    faces[0] = [a, m, c]
    faces.append([m, b, c])
    faces.append([a, b, m])
    s = Surface(v, np.array(faces), source="cap.ply")
    r = inspect_mesh(s)
    assert r.n_degenerate_faces == 1 and r.n_boundary_edges == 0 and r.euler_characteristic == 2
    assert r.verdict == "usable after repair"
    fixed = repair_mesh(s)
    after = inspect_mesh(fixed)
    assert after.verdict == "usable" and after.n_degenerate_faces == 0
    assert after.area_mm2 == pytest.approx(r.area_mm2, rel=1e-12)  # a flip in the plane keeps area
    assert any("zero-area" in h for h in fixed.history)


def test_clean_surface_is_returned_unchanged(ico):
    s = _surf(ico)
    assert repair_mesh(s) is s
    assert prepare_surface(s) is s


def test_report_row_is_json_ready(ico):
    row = inspect_mesh(_surf(ico)).to_row()
    back = json.loads(json.dumps(row))
    assert back["verdict"] == "usable" and back["genus"] == 0
    assert set(back) >= {"n_vertices", "n_faces", "euler_characteristic", "area_mm2", "volume_mm3",
                         "repairs_needed", "reasons", "orientation"}
