"""``shapedesc check`` in-process: one row per input (per label for volumes), exit status,
JSON output, and never a crash on bad input. Outside source for the expected counts:
trimesh on the same meshes.
"""

from __future__ import annotations

import json

import nibabel as nib
import numpy as np
import pytest
import trimesh

from shapedesc.cli.main import COMMANDS, main
from shapedesc.io.surfaces import write_surface
from shapedesc.surface import Surface


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("check")
    ico = trimesh.creation.icosphere(subdivisions=3, radius=8.0)
    sphere = Surface(ico.vertices, ico.faces, source="ico")
    out = {
        "good": write_surface(sphere, d / "good.surf.gii"),
        "stl": write_surface(sphere, d / "soup.stl"),
        "torus": write_surface(Surface(*_arrays(trimesh.creation.torus(10.0, 3.0))), d / "torus.ply"),
        "open": write_surface(Surface(ico.vertices, ico.faces[1:]), d / "open.ply"),
    }
    two = trimesh.util.concatenate([ico, trimesh.creation.icosphere(2, radius=2.0).apply_translation([30, 0, 0])])
    out["two"] = write_surface(Surface(*_arrays(two)), d / "two.obj")
    (d / "garbage.gii").write_bytes(np.random.default_rng(0).bytes(3000))
    out["garbage"] = d / "garbage.gii"
    (d / "empty.ply").write_bytes(b"")
    out["empty"] = d / "empty.ply"
    labels = np.zeros((10, 10, 10), np.int16)
    labels[2:5, 2:5, 2:5] = 4
    nib.save(nib.Nifti1Image(labels, np.eye(4)), str(d / "labels.nii.gz"))
    out["labels"] = d / "labels.nii.gz"
    nib.save(nib.Nifti1Image(np.zeros((6, 6, 6), np.int16), np.eye(4)), str(d / "zeros.nii"))
    out["zeros"] = d / "zeros.nii"
    nib.save(nib.Nifti1Image(np.zeros((6, 6, 6, 3), np.int16), np.eye(4)), str(d / "series.nii.gz"))
    out["series"] = d / "series.nii.gz"
    return out


def _arrays(m):
    return np.asarray(m.vertices), np.asarray(m.faces)


def _json(capsys, argv):
    code = main(["-q", "check", "--json", *map(str, argv)])
    return code, json.loads(capsys.readouterr().out)


def test_registered():
    assert "check" in COMMANDS


def test_good_surface_exit_zero_and_table(files, capsys):
    assert main(["-q", "check", str(files["good"])]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    assert lines[0].split()[:4] == ["input", "V", "F", "comp"]
    row = next(line for line in lines if "good.surf.gii" in line)
    assert " 642 " in row and "usable" in row and "outward" in row  # icosphere(3): 642 vertices
    # aligned columns: the verdict column starts at the same offset in header and row
    assert row.index("usable") == lines[0].index("verdict")


def test_json_rows_and_counts_match_trimesh(files, capsys):
    code, rows = _json(capsys, [files["good"], files["torus"]])
    assert code == 1  # the torus is unusable
    good, torus = rows
    assert good["verdict"] == "usable" and good["n_vertices"] == 642
    t = trimesh.load(str(files["torus"]), process=False)
    assert torus["euler_characteristic"] == t.euler_number == 0  # trimesh
    assert torus["genus"] == 1 and torus["verdict"] == "unusable"
    assert "out of scope for surface inputs" in torus["reasons"][0]


def test_stl_usable_after_repair_exit_zero(files, capsys):
    code, rows = _json(capsys, [files["stl"]])
    assert code == 0
    assert rows[0]["verdict"] == "usable after repair"
    assert rows[0]["repairs_needed"][0].startswith("merged")


def test_bad_inputs_are_rows_not_crashes(files, capsys):
    paths = [files[k] for k in ("garbage", "empty", "open", "two", "good")]
    code, rows = _json(capsys, paths)
    assert code == 1 and len(rows) == 5
    by = {r["input"]: r for r in rows}
    g = by[str(files["garbage"])]
    assert g["verdict"] == "unusable" and g["reasons"][0].startswith("SurfaceFormatError: ")
    assert "garbage.gii" in g["reasons"][0]
    assert "the file is empty" in by[str(files["empty"])]["reasons"][0]
    assert "open surface" in by[str(files["open"])]["reasons"][0]
    assert by[str(files["two"])]["n_components"] == 2
    assert by[str(files["good"])]["verdict"] == "usable"


def test_missing_file_is_a_row(tmp_path, capsys):
    code, rows = _json(capsys, [tmp_path / "absent.gii"])
    assert code == 1 and rows[0]["reasons"][0].startswith("FileNotFoundError: ")


def test_repair_options(files, capsys):
    code, rows = _json(capsys, ["--repair-largest-component", files["two"]])
    assert code == 0 and rows[0]["verdict"] == "usable after repair"
    assert "kept the largest of 2 components" in rows[0]["repairs_needed"][0]
    code, rows = _json(capsys, ["--fill-holes", files["open"]])
    assert code == 0 and "filled 1 holes" in " ".join(rows[0]["repairs_needed"])


def test_label_volume_all_zero_and_absent_label(files, capsys):
    code, rows = _json(capsys, [files["zeros"]])
    assert code == 1 and rows[0]["verdict"] == "unusable"
    assert rows[0]["reasons"][0].startswith("LabelError: ") and "zeros.nii" in rows[0]["reasons"][0]
    assert "holds no labels" in rows[0]["reasons"][0]
    code, rows = _json(capsys, ["--label", "9", files["labels"]])
    assert code == 1 and rows[0]["label"] == 9
    assert "label 9 is absent from the volume; labels present: 4" in rows[0]["reasons"][0]


def test_four_d_volume_unusable(files, capsys):
    code, rows = _json(capsys, [files["series"]])
    assert code == 1 and rows[0]["reasons"][0].startswith("VolumeFormatError: ")
    assert "series.nii.gz" in rows[0]["reasons"][0] and "4-D" in rows[0]["reasons"][0]


def test_label_volume_row_per_label(files, capsys):
    code, rows = _json(capsys, [files["labels"]])
    assert len(rows) == 1 and rows[0]["label"] == 4 and rows[0]["kind"] == "label volume"
    assert code == 0 and rows[0]["verdict"] == "usable"
    assert rows[0]["euler_characteristic"] == 2
    assert rows[0]["volume_voxels_in_label"] == 27  # the 3x3x3 block written above


def test_ring_label_goes_through_the_topology_fix(tmp_path, capsys):
    # a voxel ring (a solid torus, genus 1) and a block, with a negative-determinant affine
    x, y, z = np.mgrid[:30, :30, :16]
    data = np.zeros((30, 30, 16), np.int16)
    r = np.hypot(x - 15, y - 15)
    data[(np.abs(r - 8) < 2.5) & (np.abs(z - 8) < 3)] = 7
    data[2:6, 2:6, 2:6] = 3
    aff = np.diag([-1.0, 1.2, 1.5, 1.0])
    p = tmp_path / "ring.nii.gz"
    nib.save(nib.Nifti1Image(data, aff), str(p))
    code, rows = _json(capsys, [p])
    assert code == 0 and [r["label"] for r in rows] == [3, 7]
    ring = rows[1]
    # closed form: a solid torus's boundary has χ = 0; the fix must give a sphere (χ = 2)
    assert ring["volume_euler_characteristic_before"] == 0
    assert ring["euler_characteristic"] == 2 and ring["genus"] == 0 and ring["verdict"] == "usable"
    changed = ring["volume_voxels_added_by_topology_fix"] + ring["volume_voxels_removed_by_topology_fix"]
    assert changed > 0
    assert main(["-q", "check", "--label", "7", str(p)]) == 0
    assert "topology_fix" in capsys.readouterr().out
