"""BIDS discovery on a small synthetic BIDS derivatives tree.

The layout follows the BIDS specification 1.9: ``participants.tsv`` with a
``participant_id`` column ("Participants file"), segmentations ``*_dseg.nii.gz`` with a
``*_dseg.tsv`` look-up table of columns ``index`` and ``name`` ("Segmentations"), the
inheritance principle for sidecar files, and ``*.surf.gii`` surfaces.
"""

from __future__ import annotations

import json
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest

from shapedesc.errors import ManifestError
from shapedesc.pipeline.bids import is_bids_folder, manifest_from_bids, read_dseg_tsv


def _volume(path: Path, labels=(17, 53)) -> None:
    data = np.zeros((8, 8, 8), dtype=np.uint8)
    for k, lab in enumerate(labels):
        data[1 + 3 * k: 3 + 3 * k, 2:5, 2:5] = lab
    path.parent.mkdir(parents=True, exist_ok=True)
    nib.save(nib.Nifti1Image(data, np.eye(4)), str(path))


def _tsv(path: Path, rows) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join("\t".join(map(str, r)) for r in rows) + "\n", encoding="utf-8")


@pytest.fixture
def bids_tree(tmp_path) -> Path:
    root = tmp_path / "derivatives" / "seg"
    root.mkdir(parents=True)
    (root / "dataset_description.json").write_text(json.dumps(
        {"Name": "seg", "BIDSVersion": "1.9.0", "DatasetType": "derivative"}))
    # participants.tsv of the raw dataset two levels up (derivatives/<name>)
    _tsv(tmp_path / "participants.tsv", [["participant_id", "age", "group"],
                                         ["sub-01", 61, "A"], ["sub-02", 70, "B"],
                                         ["sub-03", 66, "B"]])
    # sub-01: dseg with its own look-up table beside it
    _volume(root / "sub-01" / "anat" / "sub-01_desc-aseg_dseg.nii.gz")
    _tsv(root / "sub-01" / "anat" / "sub-01_desc-aseg_dseg.tsv",
         [["index", "name"], [0, "background"], [17, "Left Hippocampus"], [53, "Right-Hippocampus"]])
    # sub-02: two sessions, look-up table inherited from the dataset top level
    _tsv(root / "desc-aseg_dseg.tsv", [["index", "name", "abbreviation"],
                                       [17, "L_hip", "LH"], [53, "R_hip", "RH"]])
    for ses in ("ses-1", "ses-2"):
        _volume(root / "sub-02" / ses / "anat" / f"sub-02_{ses}_desc-aseg_dseg.nii.gz")
    # sub-03: surfaces only
    for hemi in ("L", "R"):
        p = root / "sub-03" / "anat" / f"sub-03_hemi-{hemi}_label-caudate_midthickness.surf.gii"
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(b"not read during discovery")
    (root / "sub-03" / "anat" / "sub-03_T1w.json").write_text("{}")  # ignored
    return root


def test_discovery_finds_segmentations_surfaces_and_participants(bids_tree):
    assert is_bids_folder(bids_tree)
    m = manifest_from_bids(bids_tree)
    got = [(it.subject, it.structure, it.kind, it.label) for it in m.items]
    assert got == [
        ("sub-01", "Left_Hippocampus", "volume", 17),     # name made file-name safe
        ("sub-01", "Right-Hippocampus", "volume", 53),
        ("sub-02_ses-1", "L_hip", "volume", 17),
        ("sub-02_ses-1", "R_hip", "volume", 53),
        ("sub-02_ses-2", "L_hip", "volume", 17),
        ("sub-02_ses-2", "R_hip", "volume", 53),
        ("sub-03", "L_caudate", "surface", None),
        ("sub-03", "R_caudate", "surface", None),
    ]
    assert m.extra_columns == ("session", "age", "group")
    by = {(it.subject, it.structure): dict(it.extra) for it in m.items}
    assert by[("sub-02_ses-2", "L_hip")] == {"session": "ses-2", "age": "70", "group": "B"}
    assert by[("sub-01", "Left_Hippocampus")] == {"session": "n/a", "age": "61", "group": "A"}
    assert m.items[0].input_display == "sub-01/anat/sub-01_desc-aseg_dseg.nii.gz"


def test_label_option_selects_and_missing_lookup_falls_back_to_volume_labels(bids_tree):
    m = manifest_from_bids(bids_tree, labels=[53])
    assert {it.structure for it in m.items if it.kind == "volume"} == {"Right-Hippocampus", "R_hip"}
    # without any dseg.tsv the labels present in the volume are taken, named label-<N>
    (bids_tree / "sub-01" / "anat" / "sub-01_desc-aseg_dseg.tsv").unlink()
    (bids_tree / "desc-aseg_dseg.tsv").unlink()
    m = manifest_from_bids(bids_tree)
    assert [it.structure for it in m.items if it.subject == "sub-01"] == ["label-17", "label-53"]


def test_problems_are_collected(bids_tree, tmp_path):
    with pytest.raises(ManifestError, match="derivatives folder"):
        manifest_from_bids(tmp_path / "derivatives")   # holds no sub-* itself
    _tsv(bids_tree / "sub-01" / "anat" / "sub-01_desc-aseg_dseg.tsv", [["idx", "label"], [1, "x"]])
    (tmp_path / "participants.tsv").write_text("participant_id\tage\nsub-01\t61\n")
    with pytest.raises(ManifestError) as err:
        manifest_from_bids(bids_tree)
    msg = str(err.value)
    assert "needs columns 'index' and 'name'" in msg
    assert "sub-02: not listed in" in msg and "sub-03: not listed in" in msg


def test_read_dseg_tsv(tmp_path):
    _tsv(tmp_path / "x_dseg.tsv", [["index", "name"], [0, "bg"], [4, "Lateral Ventricle"]])
    assert read_dseg_tsv(tmp_path / "x_dseg.tsv") == {4: "Lateral_Ventricle"}
    _tsv(tmp_path / "y_dseg.tsv", [["index", "name"], ["four", "x"]])
    with pytest.raises(ManifestError, match="'four' is not an integer"):
        read_dseg_tsv(tmp_path / "y_dseg.tsv")
