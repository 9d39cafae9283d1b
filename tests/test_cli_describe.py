"""``shapedesc describe`` end to end, in-process: single files, a manifest, a BIDS folder.

Runs the real per-structure chain on small meshes (trimesh icospheres of 162 vertices),
so each item takes a fraction of a second.
"""

from __future__ import annotations

import json
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
import trimesh

from shapedesc.cli.main import main


def _gifti(path: Path, mesh: trimesh.Trimesh) -> Path:
    from shapedesc.io.surfaces import write_surface
    from shapedesc.surface import Surface

    path.parent.mkdir(parents=True, exist_ok=True)
    write_surface(Surface(mesh.vertices, mesh.faces, source=str(path)), path, overwrite=True)
    return path


def _blob(k: int) -> trimesh.Trimesh:
    mesh = trimesh.creation.icosphere(subdivisions=2, radius=6.0)
    mesh.apply_scale([1.6 + 0.1 * k, 1.0, 0.8])
    return mesh


def _read(path: Path) -> list[dict]:
    lines = path.read_text().splitlines()
    return [dict(zip(lines[0].split("\t"), ln.split("\t"))) for ln in lines[1:]]


def test_single_files_name_subject_and_structure_from_the_file_name(tmp_path, capsys):
    a = _gifti(tmp_path / "in" / "sub-01_hippocampus.surf.gii", _blob(0))
    b = _gifti(tmp_path / "in" / "sub-02_hippocampus.surf.gii", _blob(1))
    out = tmp_path / "out"
    assert main(["-q", "describe", str(a), str(b), "-o", str(out), "--degree", "6"]) == 0
    rows = _read(out / "spectra.tsv")
    assert [(r["subject"], r["structure"]) for r in rows] == [("sub-01", "hippocampus"),
                                                              ("sub-02", "hippocampus")]
    assert list(rows[0])[-6:] == [f"l{l}" for l in range(1, 7)]
    for name in ("spectra_mm2.tsv", "shape.tsv", "qc.tsv", "failures.tsv", "run.json",
                 "dataset_description.json", "coefficients/sub-01_hippocampus.npz"):
        assert (out / name).is_file(), name
    # the coefficient file reads back with the library's reader and holds degree 6
    from shapedesc.descriptors import read_coefficients

    rec = read_coefficients(out / "coefficients" / "sub-02_hippocampus.npz")
    assert rec.lmax == 6
    # the shape table's volume agrees with trimesh's mesh volume (independent code) to
    # within 5 %: the degree-6 fit of a 162-vertex ellipsoid is a smooth approximation
    vol = float(_read(out / "shape.tsv")[0]["volume_mm3"])
    assert vol == pytest.approx(_blob(0).volume, rel=0.05)
    assert "2 of 2 item(s) described" in capsys.readouterr().out

    # no overwrite with other parameters without --force; the tables are left alone
    before = (out / "spectra.tsv").read_bytes()
    assert main(["-q", "describe", str(a), str(b), "-o", str(out), "--degree", "5"]) == 1
    assert (out / "spectra.tsv").read_bytes() == before
    assert main(["-q", "describe", str(a), "-o", str(out), "--degree", "5", "--force"]) == 0
    assert json.loads((out / "run.json").read_text())["parameters"]["degree"] == 5


def test_manifest_with_a_bad_subject_exits_with_the_failure_count(tmp_path):
    study = tmp_path / "study"
    rows = [["subject", "input", "group"]]
    for k in range(3):
        _gifti(study / f"s{k}.surf.gii", _blob(k))
        rows.append([f"s{k}", f"s{k}.surf.gii", "AB"[k % 2]])
    torus = trimesh.creation.torus(major_radius=8, minor_radius=3, major_sections=16,
                                   minor_sections=8)
    _gifti(study / "t.surf.gii", torus)
    rows.append(["t9", "t.surf.gii", "B"])
    (study / "m.tsv").write_text("\n".join("\t".join(r) for r in rows) + "\n")
    out = tmp_path / "out"
    assert main(["-q", "describe", str(study / "m.tsv"), "-o", str(out), "--degree", "4"]) == 1
    fails = _read(out / "failures.tsv")
    assert [(f["subject"], f["stage"]) for f in fails] == [("t9", "prepare")]
    assert [r["subject"] for r in _read(out / "spectra.tsv")] == ["s0", "s1", "s2"]
    assert [r["group"] for r in _read(out / "shape.tsv")] == ["A", "B", "A"]


def test_manifest_problems_refuse_the_run(tmp_path, capsys):
    (tmp_path / "m.tsv").write_text("subject\tinput\ns1\tnope.gii\ns1\tnope.gii\n")
    assert main(["-q", "describe", str(tmp_path / "m.tsv"), "-o", str(tmp_path / "o")]) == 1
    err = capsys.readouterr().err
    assert "2 problem(s)" in err and "no such file" in err and "duplicate" in err
    assert not (tmp_path / "o").exists()


def test_bids_folder(tmp_path):
    root = tmp_path / "bids"
    (root).mkdir()
    (root / "dataset_description.json").write_text(json.dumps(
        {"Name": "t", "BIDSVersion": "1.9.0", "DatasetType": "derivative"}))
    (root / "participants.tsv").write_text("participant_id\tage\nsub-01\t60\nsub-02\t70\n")
    # label volume: two ellipsoids, labels 17 and 53, names from the dseg.tsv
    z, y, x = np.mgrid[:28, :16, :16]
    data = np.zeros((28, 16, 16), np.uint8)
    data[((z - 8) / 5.5) ** 2 + ((y - 8) / 4.5) ** 2 + ((x - 8) / 4.0) ** 2 <= 1] = 17
    data[((z - 20) / 4.5) ** 2 + ((y - 8) / 4.0) ** 2 + ((x - 8) / 4.0) ** 2 <= 1] = 53
    anat = root / "sub-01" / "anat"
    anat.mkdir(parents=True)
    nib.save(nib.Nifti1Image(data, np.eye(4)), str(anat / "sub-01_desc-aseg_dseg.nii.gz"))
    (anat / "sub-01_desc-aseg_dseg.tsv").write_text("index\tname\n17\thippocampus\n53\tamygdala\n")
    _gifti(root / "sub-02" / "anat" / "sub-02_label-hippocampus_midthickness.surf.gii", _blob(2))
    out = tmp_path / "derivatives" / "shapedesc"
    assert main(["-q", "describe", str(root), "-o", str(out), "--degree", "4"]) == 0
    rows = _read(out / "spectra.tsv")
    assert [(r["subject"], r["structure"], r["age"]) for r in rows] == [
        ("sub-01", "amygdala", "60"), ("sub-01", "hippocampus", "60"),
        ("sub-02", "hippocampus", "70")]
    # --label takes one structure per volume
    out2 = tmp_path / "o2"
    assert main(["-q", "describe", str(root), "-o", str(out2), "--degree", "4", "--label", "53"]) == 0
    assert [(r["subject"], r["structure"]) for r in _read(out2 / "spectra.tsv")] == [
        ("sub-01", "amygdala"), ("sub-02", "hippocampus")]
    # writing into the source dataset is refused, even with --force
    assert main(["-q", "describe", str(root), "-o", str(root), "--force"]) == 1


def test_items_with_warnings_are_counted_in_the_summary(tmp_path, capsys):
    # a 30:1 needle must be mapped with strong shear (shapedesc.sphere.api, "Strongly
    # sheared maps"): described, with a ShearedMapWarning in qc.tsv, and the summary
    # says how many items have warnings and where to read them (the symmetric needle
    # and blob both also have PoseWarnings: sign of a near-zero third moment)
    from shapedesc.shapes import ellipsoid

    v, f = ellipsoid(30, 1, 1, 3)
    a = _gifti(tmp_path / "in" / "sub-01_needle.surf.gii", trimesh.Trimesh(v, f, process=False))
    b = _gifti(tmp_path / "in" / "sub-01_blob.surf.gii", _blob(0))
    out = tmp_path / "out"
    assert main(["-q", "describe", str(a), str(b), "-o", str(out), "--degree", "4"]) == 0
    printed = capsys.readouterr().out
    assert "2 described item(s) have warnings" in printed and str(out / "qc.tsv") in printed
    qc = {r["structure"]: r for r in _read(out / "qc.tsv")}
    assert "ShearedMapWarning" in qc["needle"]["warnings"]
    assert "ShearedMapWarning" not in qc["blob"]["warnings"]
    assert float(qc["needle"]["sheared_area_share"]) > 0.03
    assert float(qc["blob"]["sheared_area_share"]) == 0.0
