"""`shapedesc reconstruct` end to end, in-process."""

import math
import warnings
from types import SimpleNamespace

import numpy as np
import pytest
import trimesh

from shapedesc.cli.main import main
from shapedesc.descriptors import describe_surface
from shapedesc.errors import PoseWarning
from shapedesc.mesh import measures
from shapedesc.surface import Surface


@pytest.fixture()
def coefficient_file(tmp_path):
    # An ellipsoid with its natural parameterisation as the sphere map, so this test
    # exercises reconstruction without depending on the sphere-mapping stage.
    m = trimesh.creation.icosphere(subdivisions=4)
    u = np.asarray(m.vertices)
    v = u * [6.0, 3.0, 2.0] + [10.0, -4.0, 30.0]
    sm = SimpleNamespace(sphere_vertices=u, qc=SimpleNamespace(to_row=lambda: {"n_flipped": 0}))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PoseWarning)
        d = describe_surface(Surface(v, np.asarray(m.faces), source="ellipsoid"), degree=6, sphere_map=sm)
    path = tmp_path / "sub-01_ellipsoid.npz"
    d.write_coefficients(path)
    return path


@pytest.mark.parametrize("suffix", [".gii", ".ply", ".obj", ".stl"])
def test_reconstruct_formats(coefficient_file, tmp_path, suffix):
    from shapedesc.io.surfaces import read_surface

    out = tmp_path / f"recon{suffix}"
    assert main(["-q", "reconstruct", str(coefficient_file), "-o", str(out), "--level", "4"]) == 0
    s = read_surface(out)
    # STL stores no shared vertices; others keep the icosphere's 2,562.
    if suffix != ".stl":
        assert s.n_vertices == 2562
    vol = measures.enclosed_volume(s.vertices, s.faces)
    # Closed form 4πabc/3 = 150.8 mm³; 0.5 %: level-4 polyhedral shortfall (~0.2 %) plus
    # float32 storage in some formats.
    assert abs(vol / (4 * math.pi * 6 * 3 * 2 / 3) - 1) < 5e-3


def test_native_pose_keeps_position_and_canonical_centres(coefficient_file, tmp_path):
    from shapedesc.io.surfaces import read_surface

    a, b = tmp_path / "native.ply", tmp_path / "canon.ply"
    assert main(["-q", "reconstruct", str(coefficient_file), "-o", str(a), "--pose", "native"]) == 0
    assert main(["-q", "reconstruct", str(coefficient_file), "-o", str(b)]) == 0
    na, ca = read_surface(a).vertices, read_surface(b).vertices
    np.testing.assert_allclose(na.mean(axis=0), [10.0, -4.0, 30.0], atol=0.05)
    np.testing.assert_allclose(ca.mean(axis=0), 0.0, atol=0.05)
    # Canonical pose: longest ellipsoid axis along x.
    ext = ca.max(axis=0) - ca.min(axis=0)
    np.testing.assert_allclose(ext, [12.0, 6.0, 4.0], rtol=1e-2)


def test_refuses_overwrite_and_bad_suffix(coefficient_file, tmp_path, capsys):
    out = tmp_path / "r.ply"
    out.write_text("keep me")
    assert main(["-q", "reconstruct", str(coefficient_file), "-o", str(out)]) == 1
    assert out.read_text() == "keep me"
    assert "--force" in capsys.readouterr().err
    assert main(["-q", "reconstruct", str(coefficient_file), "-o", str(tmp_path / "r.vtk")]) == 1
    bad = tmp_path / "bad.npz"
    bad.write_bytes(b"not a zip")
    assert main(["-q", "reconstruct", str(bad), "-o", str(tmp_path / "x.ply")]) == 1
    assert "not a shapedesc coefficient file" in capsys.readouterr().err


def test_reconstruct_with_figure(coefficient_file, tmp_path):
    from PIL import Image

    out, fig = tmp_path / "r.ply", tmp_path / "r.png"
    assert main(["-q", "reconstruct", str(coefficient_file), "-o", str(out), "--level", "3",
                 "--figure", str(fig)]) == 0
    with Image.open(fig) as im:
        arr = np.asarray(im.convert("L"), dtype=float)
    # The render is not blank: a shaded surface spans many grey levels.
    assert arr.std() > 5 and len(np.unique(arr)) > 20
