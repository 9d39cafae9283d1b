"""Study manifests: parsing, name rules, and validation that reports every problem at once."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from shapedesc.errors import ManifestError
from shapedesc.pipeline.manifest import (
    input_kind, manifest_from_files, names_from_filename, read_manifest,
)


def _touch(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(b"x")
    return path


def _write(path: Path, rows: list[list[str]], sep: str = "\t") -> Path:
    path.write_text("\n".join(sep.join(r) for r in rows) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("name, expected", [
    # BIDS file names are key-value entities joined by "_" ending in a suffix
    # (BIDS specification 1.9, "File name structure"); our rule maps them as documented.
    ("sub-01_hippocampus.surf.gii", ("sub-01", "hippocampus")),
    ("sub-01_ses-2_hemi-L_label-caudate_desc-smooth_surf.gii", ("sub-01_ses-2", "L_caudate")),
    ("sub-07_hemi-R_pial.surf.gii", ("sub-07", "R_pial")),
    ("P017_left_putamen.ply", ("P017", "left_putamen")),
    ("thalamus.stl", ("thalamus", "surface")),
    ("sub-3_space-MNI_desc-x_dseg.nii.gz", ("sub-3", "dseg")),
])
def test_names_from_filename_follow_the_documented_rule(name, expected):
    assert names_from_filename(name) == expected


def test_input_kind_by_ending():
    assert input_kind("a/b/sub-01_dseg.nii.gz") == "volume"
    assert input_kind("x.NII") == "volume"
    assert input_kind("x.surf.gii") == "surface"
    assert input_kind("x.ply") == "surface"


def test_valid_manifest_resolves_relative_paths_and_carries_columns(tmp_path, monkeypatch):
    study = tmp_path / "study"
    _touch(study / "surf" / "s1_arc.gii")
    _touch(study / "surf" / "s2_arc.gii")
    _touch(study / "vol" / "s3.nii.gz")
    _write(study / "manifest.tsv", [
        ["subject", "input", "labels", "structures", "group", "age"],
        ["s1", "surf/s1_arc.gii", "", "", "A", "61"],
        ["s2", "surf/s2_arc.gii", "", "arc", "B", "70"],
        ["s3", "vol/s3.nii.gz", "17,53", "left_h,right_h", "B", "66"],
    ])
    monkeypatch.chdir(tmp_path)  # not the manifest's folder: paths must still resolve
    m = read_manifest(study / "manifest.tsv")
    got = [(it.subject, it.structure, it.kind, it.label, it.input_display) for it in m.items]
    assert got == [
        ("s1", "arc", "surface", None, "surf/s1_arc.gii"),
        ("s2", "arc", "surface", None, "surf/s2_arc.gii"),
        ("s3", "left_h", "volume", 17, "vol/s3.nii.gz"),
        ("s3", "right_h", "volume", 53, "vol/s3.nii.gz"),
    ]
    assert all(Path(it.input).is_absolute() and Path(it.input).is_file() for it in m.items)
    assert m.extra_columns == ("group", "age")
    assert dict(m.items[2].extra) == {"group": "B", "age": "66"}
    # --label selects among a row's labels, keeping its names
    m17 = read_manifest(study / "manifest.tsv", labels=[53])
    assert [(it.subject, it.structure) for it in m17.items if it.kind == "volume"] == [
        ("s3", "right_h")]


def test_csv_manifest(tmp_path):
    _touch(tmp_path / "a.ply")
    _write(tmp_path / "m.csv", [["subject", "input", "site"], ["x1", "a.ply", "S1"]], sep=",")
    m = read_manifest(tmp_path / "m.csv")
    assert [(it.subject, it.structure, dict(it.extra)) for it in m.items] == [
        ("x1", "surface", {"site": "S1"})]


def test_every_problem_is_reported_at_once(tmp_path):
    _touch(tmp_path / "ok.gii")
    _touch(tmp_path / "vol.nii.gz")
    _write(tmp_path / "m.tsv", [
        ["subject", "input", "labels", "structures", "group"],
        ["s1", "missing_one.gii", "", "arc", "A"],          # missing file
        ["s2", "ok.gii", "", "arc", "A"],
        ["s2", "ok.gii", "", "arc", "A"],                   # duplicate subject x structure
        ["s3", "ok.gii", "4", "arc", "A"],                  # labels on a surface
        ["s4", "vol.nii.gz", "x7", "", "B"],                # label not an integer
        ["s5", "vol.nii.gz", "", "", "B"],                  # volume without labels
        ["bad id", "ok.gii", "", "arc", "B"],               # unsafe subject id
        ["s6", "vol.nii.gz", "1,2", "only_one", "B"],        # names/labels mismatch
        ["s7", "ok.gii", "", "arc", "A"],
        ["s7", "ok.gii", "", "bean", "B"],                  # carried columns disagree
    ])
    with pytest.raises(ManifestError) as err:
        read_manifest(tmp_path / "m.tsv")
    msg = str(err.value)
    expected = ["missing_one.gii: no such file", "duplicate subject x structure s2 / arc",
                "label values given for ok.gii", "'x7' is not an integer",
                "no label values are given", "'bad id'", "1 structure name(s)",
                "subject s7: carried columns differ"]
    for fragment in expected:
        assert fragment in msg, fragment
    assert f"{len(expected)} problem(s)" in msg
    assert msg.count("\n  - ") == len(expected)


def test_unknown_columns_given_as_options_are_reported(tmp_path):
    _touch(tmp_path / "a.gii")
    _write(tmp_path / "m.tsv", [["id", "file"], ["s1", "a.gii"]])
    with pytest.raises(ManifestError) as err:
        read_manifest(tmp_path / "m.tsv", subject_column="participant",
                      labels_column="label_values")
    msg = str(err.value)
    assert "'participant' is not in the header" in msg
    assert "'input' is not in the header" in msg
    assert "'label_values' given as an option is not in the header" in msg
    assert "3 problem(s)" in msg
    # the same file with the right names is fine
    m = read_manifest(tmp_path / "m.tsv", subject_column="id", input_column="file")
    assert [it.subject for it in m.items] == ["s1"]


def test_carried_column_may_not_shadow_an_output_column(tmp_path):
    _touch(tmp_path / "a.gii")
    _write(tmp_path / "m.tsv", [["subject", "input", "l3", "structure"], ["s1", "a.gii", "1", "x"]])
    with pytest.raises(ManifestError) as err:
        read_manifest(tmp_path / "m.tsv")
    assert "'l3' clashes" in str(err.value) and "'structure' clashes" in str(err.value)


def test_empty_and_unreadable_manifests(tmp_path):
    (tmp_path / "empty.tsv").write_text("", encoding="utf-8")
    with pytest.raises(ManifestError, match="empty"):
        read_manifest(tmp_path / "empty.tsv")
    with pytest.raises(ManifestError, match="cannot read"):
        read_manifest(tmp_path / "nope.tsv")
    _write(tmp_path / "header.tsv", [["subject", "input"]])
    with pytest.raises(ManifestError, match="no rows"):
        read_manifest(tmp_path / "header.tsv")


@pytest.mark.parametrize("name, expected", [
    # with the subject given, a plain name is all structure (the putamen_left.ply of a
    # single subject must not become structure "left"), less a first part equal to it
    ("putamen_left.surf.gii", ("s9", "putamen_left")),
    ("s9_left_putamen.ply", ("s9", "left_putamen")),
    ("thalamus.stl", ("s9", "thalamus")),
    # BIDS-style names keep their structure rule; the given subject wins
    ("sub-01_hemi-L_label-caudate_surf.gii", ("s9", "L_caudate")),
])
def test_names_from_filename_with_the_subject_given(name, expected):
    assert names_from_filename(name, "s9") == expected


def test_files_on_the_command_line_become_an_implicit_manifest(tmp_path):
    a = _touch(tmp_path / "sub-01_arc.surf.gii")
    b = _touch(tmp_path / "sub-02_arc.surf.gii")
    m = manifest_from_files([str(b), str(a)])
    assert [(it.subject, it.structure) for it in m.items] == [("sub-01", "arc"), ("sub-02", "arc")]
    m = manifest_from_files([str(a), str(b)], structures=["x", "y"], subject="s9")
    assert [(it.subject, it.structure) for it in m.items] == [("s9", "x"), ("s9", "y")]
    c, d = _touch(tmp_path / "putamen_left.ply"), _touch(tmp_path / "caudate_left.ply")
    m = manifest_from_files([str(c), str(d)], subject="s9")  # no "left" / "left" clash
    assert [(it.subject, it.structure) for it in m.items] == [("s9", "caudate_left"),
                                                              ("s9", "putamen_left")]
    with pytest.raises(ManifestError) as err:
        manifest_from_files([str(a), str(tmp_path / "gone.ply"), str(a)])
    msg = str(err.value)
    assert "gone.ply: no such file" in msg and "duplicate subject x structure sub-01 / arc" in msg
    rel = os.path.relpath(a)
    assert manifest_from_files([rel]).items[0].input == str(a.resolve())
