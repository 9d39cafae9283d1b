"""Surface readers and writers: round trips, formats by content, and every bad input.

Reference readers/writers used as the outside source: nibabel (GIFTI, the
triangle-geometry binary format via ``nibabel.freesurfer``) and trimesh (PLY/STL/OBJ/OFF).
"""

from __future__ import annotations

import gzip
import time

import nibabel as nib
import numpy as np
import pytest
import trimesh
from nibabel.gifti import GiftiDataArray, GiftiImage

from shapedesc.errors import InputTooLargeError, SurfaceFormatError
from shapedesc.io.surfaces import (
    read_surface,
    read_vertex_data,
    sniff_format,
    surface_gifti_bytes,
    vertex_data_gifti_bytes,
    write_surface,
    write_vertex_data,
)
from shapedesc.surface import Surface


@pytest.fixture(scope="module")
def sphere() -> Surface:
    m = trimesh.creation.icosphere(subdivisions=2, radius=12.5)
    return Surface(m.vertices + [3.0, -40.0, 17.0], m.faces, source="icosphere")


def _nib_gifti(vertices, faces, path):
    img = GiftiImage(darrays=[
        GiftiDataArray(np.asarray(vertices, np.float32), intent="NIFTI_INTENT_POINTSET",
                       datatype="NIFTI_TYPE_FLOAT32"),
        GiftiDataArray(np.asarray(faces, np.int32), intent="NIFTI_INTENT_TRIANGLE",
                       datatype="NIFTI_TYPE_INT32"),
    ])
    nib.save(img, str(path))
    return path


# --------------------------------------------------------------------------- round trips

# float32 storage: relative rounding 2**-24 ~ 6e-8 of coordinates up to ~60 mm -> < 5e-6 mm
F32_TOL_MM = 5e-6


@pytest.mark.parametrize("name", ["s.gii", "s.surf.gii"])
def test_gifti_round_trip_float32(tmp_path, sphere, name):
    p = write_surface(sphere, tmp_path / name)
    back = read_surface(p)
    np.testing.assert_array_equal(back.faces, sphere.faces)
    np.testing.assert_allclose(back.vertices, sphere.vertices, atol=F32_TOL_MM, rtol=0)
    # the file is also what nibabel (outside source) reads
    img = nib.load(str(p))
    np.testing.assert_array_equal(img.agg_data("NIFTI_INTENT_TRIANGLE"), sphere.faces)


def test_gifti_bytes_are_the_file_write_surface_writes(tmp_path, sphere, caplog):
    # describe --sphere-maps: workers return these bytes; the main process writes them
    with caplog.at_level("INFO", logger="shapedesc.io.surfaces"):
        data = surface_gifti_bytes(sphere)
    assert not caplog.records  # no "wrote ..." line naming a scratch path
    assert data == write_surface(sphere, tmp_path / "s.surf.gii").read_bytes()
    img = GiftiImage.from_bytes(data)  # nibabel (outside source) parses them
    np.testing.assert_array_equal(img.agg_data("NIFTI_INTENT_TRIANGLE"), sphere.faces)
    maps = {"area_log_ratio": np.linspace(-1, 1, sphere.n_vertices)}
    assert (vertex_data_gifti_bytes(maps)
            == write_vertex_data(tmp_path / "d.shape.gii", maps).read_bytes())


def test_ply_round_trip_exact_and_trimesh_reads_it(tmp_path, sphere):
    p = write_surface(sphere, tmp_path / "s.ply")
    back = read_surface(p)
    np.testing.assert_array_equal(back.vertices, sphere.vertices)
    np.testing.assert_array_equal(back.faces, sphere.faces)
    ref = trimesh.load(str(p), process=False)  # trimesh as the outside reader
    np.testing.assert_array_equal(ref.vertices, sphere.vertices)
    np.testing.assert_array_equal(ref.faces, sphere.faces)


def test_obj_round_trip(tmp_path, sphere):
    back = read_surface(write_surface(sphere, tmp_path / "s.obj"))
    np.testing.assert_array_equal(back.faces, sphere.faces)
    # 10 decimals written: error <= 5e-11 mm plus float64 parsing
    np.testing.assert_allclose(back.vertices, sphere.vertices, atol=1e-10, rtol=0)


def test_stl_round_trip_has_duplicates_until_merged(tmp_path, sphere):
    from shapedesc.mesh.repair import repair_mesh

    back = read_surface(write_surface(sphere, tmp_path / "s.stl"))
    assert back.n_faces == sphere.n_faces
    assert back.n_vertices == 3 * sphere.n_faces  # STL keeps no shared vertices
    merged = repair_mesh(back)
    assert merged.n_vertices == sphere.n_vertices
    assert any("merged" in h for h in merged.history)
    # every merged vertex is a float32 copy of an original vertex
    d = np.abs(np.sort(merged.vertices, axis=0) - np.sort(sphere.vertices, axis=0)).max()
    assert d < F32_TOL_MM


def test_writers_refuse_to_overwrite(tmp_path, sphere):
    p = write_surface(sphere, tmp_path / "s.ply")
    with pytest.raises(FileExistsError, match="s.ply"):
        write_surface(sphere, p)
    write_surface(sphere, p, overwrite=True)
    with pytest.raises(ValueError, match="suffix"):
        write_surface(sphere, tmp_path / "s.xyz")


def test_reads_files_written_by_the_reference_libraries(tmp_path, sphere):
    v, f = sphere.vertices, sphere.faces
    m = trimesh.Trimesh(v, f, process=False)
    for ext in ("ply", "off", "obj"):  # trimesh writers
        p = tmp_path / f"t.{ext}"
        m.export(str(p))
        back = read_surface(p)
        np.testing.assert_array_equal(back.faces, f)
        # trimesh writes PLY float32 and text formats with 8+ decimals: < 1e-5 mm here
        np.testing.assert_allclose(back.vertices, v, atol=1e-5, rtol=0)
    back = read_surface(_nib_gifti(v, f, tmp_path / "n.gii"))
    np.testing.assert_allclose(back.vertices, v, atol=F32_TOL_MM, rtol=0)


def test_geometry_format_without_suffix_detected_by_content(tmp_path, sphere):
    p = tmp_path / "lh.white"  # no recognisable suffix
    nib.freesurfer.write_geometry(str(p), sphere.vertices, sphere.faces)
    assert sniff_format(p.read_bytes()) == "geometry"
    back = read_surface(p)
    np.testing.assert_array_equal(back.faces, sphere.faces)
    ref_v, _ = nib.freesurfer.read_geometry(str(p))  # nibabel as the reference reader
    np.testing.assert_array_equal(back.vertices, ref_v)


def test_gzipped_inputs(tmp_path, sphere):
    raw = write_surface(sphere, tmp_path / "s.gii").read_bytes()
    gz = tmp_path / "s.gii.gz"
    gz.write_bytes(gzip.compress(raw))
    back = read_surface(gz)
    assert "gzip" in back.history[0]
    np.testing.assert_array_equal(back.faces, sphere.faces)
    ply = write_surface(sphere, tmp_path / "s.ply").read_bytes()
    (tmp_path / "s.ply.gz").write_bytes(gzip.compress(ply))
    np.testing.assert_array_equal(read_surface(tmp_path / "s.ply.gz").vertices, sphere.vertices)


def test_vertex_data_round_trip_read_by_nibabel(tmp_path):
    rng = np.random.default_rng(3)
    maps = {"thickness_mm": rng.normal(size=50), "cluster": np.arange(50)}
    p = write_vertex_data(tmp_path / "m.shape.gii", maps)
    img = nib.load(str(p))  # nibabel as the outside reader
    names = [da.meta["Name"] for da in img.darrays]
    assert names == ["thickness_mm", "cluster"]
    np.testing.assert_allclose(img.darrays[0].data, maps["thickness_mm"].astype(np.float32))
    np.testing.assert_array_equal(img.darrays[1].data, maps["cluster"])
    back = read_vertex_data(p)
    np.testing.assert_array_equal(back["cluster"], maps["cluster"])
    with pytest.raises(ValueError, match="different lengths"):
        write_vertex_data(tmp_path / "x.gii", {"a": np.zeros(3), "b": np.zeros(4)})
    with pytest.raises(FileExistsError):
        write_vertex_data(p, maps)


# --------------------------------------------------------------------------- bad input


def test_missing_file(tmp_path):
    with pytest.raises(FileNotFoundError, match="nope.gii"):
        read_surface(tmp_path / "nope.gii")


@pytest.mark.parametrize("name", ["empty.gii", "empty.ply", "empty"])
def test_empty_file(tmp_path, name):
    p = tmp_path / name
    p.write_bytes(b"")
    with pytest.raises(SurfaceFormatError, match=rf"{name}: the file is empty"):
        read_surface(p)


def test_truncated_files(tmp_path, sphere):
    for name in ("s.ply", "s.gii"):
        full = write_surface(sphere, tmp_path / name).read_bytes()
        cut = tmp_path / f"cut_{name}"
        cut.write_bytes(full[: len(full) // 2])
        with pytest.raises(SurfaceFormatError, match=rf"cut_{name}.*(truncated|corrupt)"):
            read_surface(cut)
    gz = tmp_path / "cut.gii.gz"
    gz.write_bytes(gzip.compress((tmp_path / "s.gii").read_bytes())[:-200])
    with pytest.raises(SurfaceFormatError, match=r"cut.gii.gz: the gzip stream ends early"):
        read_surface(gz)
    geo = tmp_path / "rh.pial"
    nib.freesurfer.write_geometry(str(geo), sphere.vertices, sphere.faces)
    geo.write_bytes(geo.read_bytes()[:-700])
    with pytest.raises(SurfaceFormatError, match=r"rh.pial: could not be read as nibabel triangle-geometry"):
        read_surface(geo)


def test_geometry_header_with_absurd_counts(tmp_path, sphere):
    # vertex/face counts of 2**30 in the header of a tiny file: refused, nothing allocated
    import struct

    p = tmp_path / "lh.corrupt"
    nib.freesurfer.write_geometry(str(p), sphere.vertices, sphere.faces)
    raw = bytearray(p.read_bytes())
    i = raw.index(b"\n\n") + 2  # counts follow the two-line text header
    assert struct.unpack(">ii", raw[i:i + 8]) == (sphere.n_vertices, sphere.n_faces)
    raw[i:i + 8] = struct.pack(">ii", 2**30, 2**30)
    p.write_bytes(bytes(raw))
    with pytest.raises(SurfaceFormatError, match=r"lh.corrupt: could not be read"):
        read_surface(p)


def test_wrong_format_for_suffix(tmp_path, sphere):
    ply = write_surface(sphere, tmp_path / "s.ply").read_bytes()
    p = tmp_path / "really_ply.gii"
    p.write_bytes(ply)
    with pytest.raises(SurfaceFormatError, match=r"really_ply.gii: the suffix says GIFTI but the content is PLY"):
        read_surface(p)


@pytest.mark.parametrize("name", ["garbage.gii", "garbage.ply", "garbage.stl", "garbage.obj",
                                  "garbage.off", "garbage.bin"])
def test_binary_garbage(tmp_path, name):
    p = tmp_path / name
    p.write_bytes(np.random.default_rng(7).bytes(5000))
    with pytest.raises(SurfaceFormatError, match=rf"{name}:"):
        read_surface(p)


def test_xml_that_is_not_gifti(tmp_path):
    p = tmp_path / "other.gii"
    p.write_text('<?xml version="1.0"?><svg></svg>')
    with pytest.raises(SurfaceFormatError, match=r"other.gii: XML content without a <GIFTI> element"):
        read_surface(p)


def test_gifti_without_triangles(tmp_path):
    p = write_vertex_data(tmp_path / "thick.shape.gii", {"t": np.zeros(10)})
    with pytest.raises(SurfaceFormatError, match=r"thick.shape.gii: GIFTI with no triangle array"):
        read_surface(p)


def test_nifti_given_as_surface(tmp_path):
    p = tmp_path / "labels.nii"
    nib.save(nib.Nifti1Image(np.zeros((4, 4, 4), np.int16), np.eye(4)), str(p))
    with pytest.raises(SurfaceFormatError, match=r"labels.nii: this is a NIfTI volume"):
        read_surface(p)


def _bomb(path, inflated_gib: int, member_mib: int = 16):
    """Concatenated gzip members of zeros: a few MB on disk, ``inflated_gib`` GiB inflated."""
    member = gzip.compress(b"\0" * (member_mib << 20), compresslevel=9)
    n = (inflated_gib << 10) // member_mib
    with open(path, "wb") as fh:
        for _ in range(n):
            fh.write(member)
    return path


def test_gzip_bomb_refused_without_inflating(tmp_path):
    p = _bomb(tmp_path / "bomb.gii.gz", inflated_gib=8)  # inflates to 8 GiB
    assert p.stat().st_size < 20 << 20
    t0 = time.perf_counter()
    with pytest.raises(InputTooLargeError, match=r"bomb.gii.gz: the gzip stream inflates past"):
        read_surface(p, max_bytes=32 << 20)
    # stopping at the 32 MiB limit takes well under the time of inflating 8 GiB;
    # 20 s is a loose bound for a loaded 2-core machine (about 1 s when idle)
    assert time.perf_counter() - t0 < 20


def test_file_past_size_limit(tmp_path, sphere):
    p = write_surface(sphere, tmp_path / "s.ply")
    with pytest.raises(InputTooLargeError, match=r"s.ply: the file is"):
        read_surface(p, max_bytes=1000)


def test_gifti_array_bomb_refused(tmp_path):
    # a GIFTI whose zlib-compressed data array inflates far past its declared size
    import base64
    import zlib

    payload = base64.b64encode(zlib.compress(b"\0" * (16 << 20), 9)).decode()
    xml = (
        '<?xml version="1.0" encoding="UTF-8"?>\n<GIFTI Version="1.0" NumberOfDataArrays="1">'
        '<DataArray Intent="NIFTI_INTENT_POINTSET" DataType="NIFTI_TYPE_FLOAT32" '
        'ArrayIndexingOrder="RowMajorOrder" Dimensionality="2" Dim0="4" Dim1="3" '
        'Encoding="GZipBase64Binary" Endian="LittleEndian" ExternalFileName="" ExternalFileOffset="">'
        f"<Data>{payload}</Data></DataArray></GIFTI>"
    )
    p = tmp_path / "arraybomb.surf.gii"
    p.write_text(xml)
    with pytest.raises(InputTooLargeError, match=r"arraybomb.surf.gii: the GIFTI data array"):
        read_surface(p)


def test_entity_expansion_gifti_refused_not_expanded(tmp_path):
    lols = "".join(f'<!ENTITY lol{i} "{"&lol%d;" % (i - 1) * 10}">' for i in range(1, 10))
    xml = (
        '<?xml version="1.0"?>\n<!DOCTYPE GIFTI [<!ENTITY lol0 "lol">' + lols + "]>\n"
        '<GIFTI Version="1.0" NumberOfDataArrays="0"><MetaData><MD><Name>x</Name>'
        "<Value>&lol9;</Value></MD></MetaData></GIFTI>"
    )
    p = tmp_path / "laughs.gii"
    p.write_text(xml)
    t0 = time.perf_counter()
    with pytest.raises(SurfaceFormatError, match=r"laughs.gii: the XML declares entities"):
        read_surface(p)
    assert time.perf_counter() - t0 < 1.0  # refused before parsing: nothing was expanded
    # an internal DOCTYPE subset without entities is refused too
    p2 = tmp_path / "subset.gii"
    p2.write_text('<?xml version="1.0"?><!DOCTYPE GIFTI [<!ELEMENT GIFTI ANY>]><GIFTI/>')
    with pytest.raises(SurfaceFormatError, match=r"subset.gii: the XML has a DOCTYPE with an internal subset"):
        read_surface(p2)


@pytest.mark.parametrize("ext", ["gii", "ply"])
def test_bad_geometry_in_files_named_at_use(tmp_path, sphere, ext):
    # reading keeps what the file holds; the gate (prepare_surface) refuses it naming the file
    from shapedesc.errors import MeshGeometryError
    from shapedesc.mesh.repair import prepare_surface

    v = np.array(sphere.vertices)
    v[7] = [np.nan, 0.0, np.inf]
    p = write_surface(Surface(v, sphere.faces), tmp_path / f"nan.{ext}")
    with pytest.raises(MeshGeometryError, match=rf"nan.{ext}: 1 vertices have NaN or infinite"):
        prepare_surface(read_surface(p))
    f = np.array(sphere.faces)
    f[0, 1] = sphere.n_vertices + 3
    p = write_surface(Surface(sphere.vertices, f), tmp_path / f"idx.{ext}")
    with pytest.raises(MeshGeometryError, match=rf"idx.{ext}: 1 faces index vertices that do not exist"):
        prepare_surface(read_surface(p))
