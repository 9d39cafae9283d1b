"""Label-volume reader: NIfTI-1/2, affines kept (left-right never flipped), bad input.

Outside sources: nibabel writes the test volumes and gives the reference
``nibabel.affines.apply_affine`` and ``nibabel.orientations.aff2axcodes``.
"""

from __future__ import annotations

import gzip

import nibabel as nib
import numpy as np
import pytest
from nibabel.affines import apply_affine
from nibabel.orientations import aff2axcodes

from shapedesc.errors import IntensityLikeVolumeWarning, InputTooLargeError, LabelError, SurfaceFormatError, VolumeFormatError
from shapedesc.io.volumes import LabelVolume, read_label_volume, voxel_to_world


def _labels(shape=(12, 10, 8)):
    data = np.zeros(shape, np.int16)
    data[2:5, 3:6, 2:5] = 17
    data[7:10, 3:6, 2:6] = 53
    return data


def _save(img, path):
    nib.save(img, str(path))
    return path


@pytest.mark.parametrize("name,cls", [("l.nii", nib.Nifti1Image), ("l.nii.gz", nib.Nifti1Image),
                                      ("l2.nii", nib.Nifti2Image)])
def test_reads_labels_and_affine(tmp_path, name, cls):
    aff = np.array([[0.9, 0.1, 0.0, -20.0], [0.0, 1.1, 0.2, 5.0], [0.0, 0.0, 2.5, 7.0], [0, 0, 0, 1]])
    data = _labels()
    p = _save(cls(data, aff), tmp_path / name)
    vol = read_label_volume(p)
    assert isinstance(vol, LabelVolume)
    np.testing.assert_array_equal(vol.data, data)
    assert np.issubdtype(vol.data.dtype, np.integer)
    # anisotropic, oblique: kept exactly as nibabel (the reference reader) reads it
    np.testing.assert_array_equal(vol.affine, nib.load(str(p)).affine)
    # NIfTI-1 stores the affine as float32: agreement with the input to float32 precision
    np.testing.assert_allclose(vol.affine, aff, rtol=0, atol=1e-6 * 20)
    assert vol.labels == (17, 53)
    np.testing.assert_allclose(vol.voxel_size_mm, np.linalg.norm(aff[:3, :3], axis=0))
    assert vol.voxel_volume_mm3 == pytest.approx(abs(np.linalg.det(aff[:3, :3])))
    assert vol.count(17) == 27


def test_voxel_to_world_matches_nibabel():
    rng = np.random.default_rng(0)
    aff = np.eye(4)
    aff[:3, :3] = rng.normal(size=(3, 3))
    aff[:3, 3] = rng.normal(size=3) * 50
    ijk = rng.uniform(0, 100, size=(20, 3))
    # nibabel.affines.apply_affine as the reference; round-off only
    np.testing.assert_allclose(voxel_to_world(ijk, aff), apply_affine(aff, ijk), rtol=1e-13, atol=1e-11)
    np.testing.assert_allclose(voxel_to_world(ijk[0], aff), apply_affine(aff, ijk[0]), rtol=1e-13, atol=1e-11)


def test_negative_determinant_affine_keeps_left_right(tmp_path):
    # radiological storage: i runs right -> left (x decreases with i), det < 0
    aff = np.array([[-2.0, 0, 0, 60.0], [0, 1.5, 0, -30.0], [0, 0, 3.0, -10.0], [0, 0, 0, 1]])
    assert np.linalg.det(aff) < 0
    assert aff2axcodes(aff)[0] == "L"  # nibabel: first axis points to the left (x decreasing)
    data = np.zeros((40, 8, 8), np.uint8)
    data[35, 4, 4] = 1   # high i: on the subject's right (x = 60 - 70 = -10 mm < 0)
    data[5, 4, 4] = 2    # low i: x = 60 - 10 = +50 mm > 0
    vol = read_label_volume(_save(nib.Nifti1Image(data, aff), tmp_path / "neg.nii.gz"))
    np.testing.assert_array_equal(vol.data, data)  # nothing reoriented
    np.testing.assert_array_equal(vol.affine, aff)
    x1 = voxel_to_world(np.argwhere(vol.require_label(1))[0], vol.affine)[0]
    x2 = voxel_to_world(np.argwhere(vol.require_label(2))[0], vol.affine)[0]
    assert x1 == pytest.approx(-10.0) and x2 == pytest.approx(50.0)  # closed form 60 - 2 i
    assert x1 < 0 < x2


def test_negative_determinant_surface_keeps_left_right(tmp_path):
    # through the volume path: a blob at high i must come out at negative x (x = 60 - 2 i)
    import shapedesc.mesh.volume as volume_mod
    aff = np.array([[-2.0, 0, 0, 60.0], [0, 1.5, 0, -30.0], [0, 0, 3.0, -10.0], [0, 0, 0, 1]])
    data = np.zeros((40, 12, 12), np.int16)
    data[30:36, 3:9, 3:9] = 5   # i = 30..35 -> x from 0 down to -10 mm (voxel centres)
    vol = read_label_volume(_save(nib.Nifti1Image(data, aff), tmp_path / "neg5.nii.gz"))
    surface, _ = volume_mod.label_to_surface(vol, 5)
    centre_x = surface.vertices[:, 0].mean()
    # voxel centres span x = 60 - 2*[30, 35] = [-10, 0]: centre -5 mm; the surface lies
    # within half a voxel (1 mm) of that span, so its mean x is within 1 mm of -5
    assert centre_x == pytest.approx(-5.0, abs=1.0)
    # the expected x from nibabel's apply_affine (outside source) of the voxel centroid
    ijk = np.argwhere(data == 5).mean(axis=0)
    assert apply_affine(aff, ijk)[0] == pytest.approx(-5.0)


def test_integer_valued_float_data_converted(tmp_path):
    data = _labels().astype(np.float32)
    vol = read_label_volume(_save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "f.nii"))
    assert np.issubdtype(vol.data.dtype, np.integer)
    assert vol.labels == (17, 53)


def test_non_integer_data_refused(tmp_path):
    data = _labels().astype(np.float32)
    data[1, 1, 1] = 0.37
    p = _save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "prob.nii")
    with pytest.raises(VolumeFormatError, match=r"prob.nii: non-integer value 0.37 at voxel \(1, 1, 1\)"):
        read_label_volume(p)


def test_template_read_and_probability_refused(template_dir, tmp_path):
    # real data: the MNI ICBM152 2009a white-matter map (stored as uint8 0..255)
    p = template_dir / "mni_icbm152_wm_tal_nlin_sym_09a_converted.nii.gz"
    # read as given, but flagged: 255 values stepping gradually between neighbours
    with pytest.warns(IntensityLikeVolumeWarning, match=r"converted.nii.gz: 255 distinct .*Threshold"):
        vol = read_label_volume(p)
    assert "quantised" in vol.history[-1]
    ref = nib.load(str(p))  # nibabel as the reference reader
    assert vol.shape == ref.shape
    np.testing.assert_array_equal(vol.affine, ref.affine)
    np.testing.assert_array_equal(vol.data[::16, ::16, ::16], np.asarray(ref.dataobj)[::16, ::16, ::16])
    # the same map as a probability in [0, 1] (float) is not a label image: refused
    sub = np.asarray(ref.dataobj)[60:100, 80:120, 60:100].astype(np.float32) / 255.0
    q = _save(nib.Nifti1Image(sub, ref.affine), tmp_path / "wm_prob.nii.gz")
    with pytest.raises(VolumeFormatError, match=r"wm_prob.nii.gz: non-integer value .*threshold"):
        read_label_volume(q)


def test_four_d_volume_refused(tmp_path):
    data = np.stack([_labels(), _labels()], axis=-1)
    p = _save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "series.nii.gz")
    with pytest.raises(VolumeFormatError, match=r"series.nii.gz: a 4-D volume of shape \(12, 10, 8, 2\)"):
        read_label_volume(p)


def test_four_d_singleton_squeezed_and_said(tmp_path):
    data = _labels()[..., None]
    vol = read_label_volume(_save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "one.nii"))
    assert vol.shape == (12, 10, 8)
    assert any("squeezed a singleton 4th axis" in h for h in vol.history)


def test_two_d_refused(tmp_path):
    p = _save(nib.Nifti1Image(np.zeros((5, 5), np.int16), np.eye(4)), tmp_path / "flat.nii")
    with pytest.raises(VolumeFormatError, match=r"flat.nii: a 2-D volume"):
        read_label_volume(p)


def test_all_zero_volume_refused_at_use(tmp_path):
    p = _save(nib.Nifti1Image(np.zeros((6, 6, 6), np.int16), np.eye(4)), tmp_path / "zeros.nii")
    vol = read_label_volume(p)
    assert vol.labels == ()
    with pytest.raises(LabelError, match=r"zeros.nii: the label volume holds no labels"):
        vol.require_label(1)


def test_absent_label_refused(tmp_path):
    vol = read_label_volume(_save(nib.Nifti1Image(_labels(), np.eye(4)), tmp_path / "l.nii"))
    with pytest.raises(LabelError, match=r"l.nii: label 99 is absent from the volume; labels present: 17, 53"):
        vol.require_label(99)


def test_spatial_units_converted_to_mm(tmp_path):
    img = nib.Nifti1Image(_labels(), np.diag([0.001, 0.001, 0.002, 1.0]))
    img.header.set_xyzt_units("meter")
    vol = read_label_volume(_save(img, tmp_path / "m.nii"))
    np.testing.assert_allclose(vol.voxel_size_mm, [1.0, 1.0, 2.0])  # 1 m = 1000 mm
    assert any("converted to mm" in h for h in vol.history)


@pytest.mark.parametrize("content,match", [
    (b"", "the file is empty"),
    (b"\x00\x01\x02garbage" * 100, "not a NIfTI-1/2 file"),
])
def test_empty_and_garbage(tmp_path, content, match):
    p = tmp_path / "bad.nii"
    p.write_bytes(content)
    with pytest.raises(SurfaceFormatError, match=rf"bad.nii: {match}"):
        read_label_volume(p)


def test_truncated_volume(tmp_path):
    p = _save(nib.Nifti1Image(_labels((30, 30, 30)), np.eye(4)), tmp_path / "t.nii")
    p.write_bytes(p.read_bytes()[:5000])
    with pytest.raises(SurfaceFormatError, match=r"t.nii: could not be read as NIfTI"):
        read_label_volume(p)
    gz = tmp_path / "t.nii.gz"
    noisy = np.random.default_rng(1).integers(0, 50, size=(20, 20, 20)).astype(np.int16)
    gz.write_bytes(gzip.compress(_save(nib.Nifti1Image(noisy, np.eye(4)), tmp_path / "u.nii").read_bytes())[:-100])
    with pytest.raises(SurfaceFormatError, match=r"t.nii.gz: the gzip stream ends early"):
        read_label_volume(gz)


def test_gzip_bomb_volume_refused(tmp_path):
    # a valid NIfTI header followed by 4 GiB of zeros, in concatenated gzip members
    hdr = nib.Nifti1Image(np.zeros((2048, 2048, 1024), np.uint8), np.eye(4))
    head = hdr.header.binaryblock + b"\0" * 4
    member = gzip.compress(b"\0" * (16 << 20), 9)
    p = tmp_path / "bomb.nii.gz"
    with open(p, "wb") as fh:
        fh.write(gzip.compress(head))
        for _ in range(256):
            fh.write(member)
    with pytest.raises(InputTooLargeError, match=r"bomb.nii.gz: the gzip stream inflates past"):
        read_label_volume(p, max_bytes=32 << 20)


def test_many_label_parcellation_not_flagged(tmp_path):
    # a parcellation of 343 blocks with shuffled codes (neighbouring parcels' codes are
    # unrelated, as in any segmentation): many labels alone must not trigger the warning.
    # Under the strict warnings filter of this suite an unexpected warning fails the test.
    rng = np.random.default_rng(3)
    codes = rng.permutation(np.arange(1, 344)).reshape(7, 7, 7)
    data = np.kron(codes, np.ones((4, 4, 4), dtype=np.int64)).astype(np.int16)
    vol = read_label_volume(_save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "parc.nii.gz"))
    assert len(vol.labels) == 343


def test_smooth_integer_map_flagged(tmp_path):
    # a smooth radial "probability" stored as uint8 0..200, steps of 0-2 between voxels
    g = np.indices((40, 40, 40)).astype(float) - 19.5
    data = np.clip(200 - 6 * np.sqrt((g ** 2).sum(axis=0)), 0, 200).round().astype(np.uint8)
    with pytest.warns(IntensityLikeVolumeWarning, match="ramp.nii: .* distinct non-zero values"):
        read_label_volume(_save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "ramp.nii"))
