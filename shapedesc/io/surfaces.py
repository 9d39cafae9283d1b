"""Reading and writing triangle surfaces and per-vertex data.

Formats
-------
* GIFTI (``.gii``, ``.surf.gii``, gzip-compressed too) through nibabel.
* The triangle-geometry binary format nibabel reads with
  ``nibabel.freesurfer.read_geometry`` (these files usually carry no suffix, so they are
  recognised by their magic bytes).
* PLY, STL, OBJ and OFF through trimesh, loaded with ``process=False`` so that nothing is
  merged, reordered or dropped silently; repairs are a separate, recorded step
  (:mod:`shapedesc.mesh.repair`).

The format is detected from the content; the suffix is used when the content is not
recognised. A file whose content is a different recognised format than its suffix says
is refused (the suffix is then wrong, which usually means a mix-up upstream).

Safety: files larger than ``max_bytes`` and gzip streams (also the zlib-compressed data
arrays inside GIFTI files) that inflate past it are refused while being inflated; XML
with entity declarations or a DOCTYPE internal subset is refused before parsing.
Reading never repairs or refuses a mesh for its geometry: non-finite coordinates, bad
face indices and topology problems are reported by :func:`shapedesc.mesh.validate.inspect_mesh`.
"""

from __future__ import annotations

import binascii
import io
import logging
import os
import re
import tempfile
import warnings
from pathlib import Path

import numpy as np

from shapedesc import defaults
from shapedesc.errors import InputTooLargeError, SurfaceFormatError
from shapedesc.io._limits import (
    check_zlib_payload,
    read_bytes_limited,
    refuse_xml_declarations,
)
from shapedesc.io.atomic import atomic_path
from shapedesc.surface import Surface

logger = logging.getLogger(__name__)

#: Human-readable names of the formats, as they appear in messages and tables.
FORMAT_NAMES = {
    "gifti": "GIFTI",
    "geometry": "nibabel triangle-geometry binary",
    "ply": "PLY",
    "stl": "STL",
    "obj": "OBJ",
    "off": "OFF",
    "nifti": "NIfTI volume",
}

_SUFFIX_FORMATS = {".gii": "gifti", ".ply": "ply", ".stl": "stl", ".obj": "obj", ".off": "off"}
_WRITABLE = {".gii": "gifti", ".ply": "ply", ".obj": "obj", ".stl": "stl"}

_GEOMETRY_MAGICS = (b"\xff\xff\xfe", b"\xff\xff\xff", b"\xff\xff\xfd")


def _suffix_format(path: Path) -> str | None:
    """Format named by the suffix (a trailing ``.gz`` is looked through)."""
    suffixes = [s.lower() for s in path.suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes = suffixes[:-1]
    return _SUFFIX_FORMATS.get(suffixes[-1]) if suffixes else None


def sniff_format(data: bytes) -> str | None:
    """Recognise a surface (or NIfTI volume) format from the first bytes of its content.

    Parameters
    ----------
    data : bytes
        File content (already inflated if it was gzip-compressed).

    Returns
    -------
    str or None
        One of the keys of :data:`FORMAT_NAMES`, or None when nothing is recognised.
    """
    head = data[:4096]
    if head[:3] in _GEOMETRY_MAGICS:
        return "geometry"
    if len(data) >= 348:
        for order in ("<", ">"):
            if int(np.frombuffer(head[:4], dtype=order + "i4")[0]) in (348, 540):
                return "nifti"
    stripped = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if stripped.startswith(b"<"):
        return "gifti" if b"<GIFTI" in data[:65536] else "xml"
    if re.match(rb"ply\r?\n", stripped):
        return "ply"
    if len(data) >= 84:
        n = int(np.frombuffer(data[80:84], dtype="<u4")[0])
        if len(data) == 84 + 50 * n and n > 0:
            return "stl"
    if re.match(rb"solid\b", stripped) and b"facet" in head:
        return "stl"
    if re.match(rb"(#[^\n]*\n\s*)*[A-Z]{0,4}OFF\b", stripped):
        return "off"
    if b"\x00" not in head and re.search(rb"(?m)^\s*v\s+[-+0-9.]", head):
        return "obj"
    return None


def read_surface(path: str | os.PathLike, *, max_bytes: int = defaults.MAX_INPUT_BYTES) -> Surface:
    """Read a triangle surface from a file.

    Parameters
    ----------
    path : path-like
        A GIFTI surface, a file in the triangle-geometry binary format nibabel reads,
        or a PLY/STL/OBJ/OFF mesh; any of them may be gzip-compressed.
    max_bytes : int, keyword-only
        Largest accepted size in bytes, on disk and after inflating.

    Returns
    -------
    Surface
        ``vertices`` (V, 3) float64 in the file's coordinates (taken as mm), ``faces``
        (F, 3) int64 exactly as stored, ``source`` the path, ``history`` one entry saying
        what was read.

    Raises
    ------
    FileNotFoundError
        The path does not exist.
    InputTooLargeError
        The file, or what it inflates to, is past ``max_bytes``.
    SurfaceFormatError
        Empty, truncated, corrupt or unrecognised content, a format other than the
        suffix says, a GIFTI without a triangle array, XML with entity declarations.
    """
    path = Path(path)
    if int(max_bytes) <= 0:
        raise ValueError(f"max_bytes must be positive, got {max_bytes!r}")
    data, was_gzip = read_bytes_limited(path, max_bytes=int(max_bytes), kind="surface")
    sniffed = sniff_format(data)
    by_suffix = _suffix_format(path)
    if sniffed == "nifti":
        raise SurfaceFormatError(
            f"{path}: this is a NIfTI volume, not a surface; read it with "
            "shapedesc.io.volumes.read_label_volume (or `shapedesc check` it as a label volume)."
        )
    if sniffed == "xml":
        raise SurfaceFormatError(
            f"{path}: XML content without a <GIFTI> element; tried GIFTI. Give a GIFTI "
            "surface file (*.surf.gii)."
        )
    if by_suffix is not None and sniffed is not None and sniffed != by_suffix:
        raise SurfaceFormatError(
            f"{path}: the suffix says {FORMAT_NAMES[by_suffix]} but the content is "
            f"{FORMAT_NAMES[sniffed]}; rename the file to match its content (or re-export "
            f"it as {FORMAT_NAMES[by_suffix]})."
        )
    fmt = sniffed or by_suffix
    if fmt is None:
        raise SurfaceFormatError(
            f"{path}: content not recognised as any surface format (tried GIFTI, the "
            "nibabel triangle-geometry binary format, PLY, STL, OBJ, OFF by their magic "
            "bytes; the suffix names none of them). Check that this is a surface file."
        )
    try:
        if fmt == "gifti":
            vertices, faces, notes = _read_gifti(data, path=path, max_bytes=int(max_bytes))
        elif fmt == "geometry":
            vertices, faces, notes = _read_geometry(data, path=path, was_gzip=was_gzip)
        else:
            vertices, faces, notes = _read_trimesh(data, fmt=fmt, path=path)
    except (SurfaceFormatError, InputTooLargeError):
        raise
    except Exception as exc:  # every parser failure becomes one clear error
        raise SurfaceFormatError(
            f"{path}: could not be read as {FORMAT_NAMES[fmt]} "
            f"({type(exc).__name__}: {exc}); the file may be truncated or corrupt. "
            "Re-export it, or check that the copy finished."
        ) from exc
    if len(faces) == 0 or len(vertices) == 0:
        raise SurfaceFormatError(
            f"{path}: read as {FORMAT_NAMES[fmt]} but it holds {len(vertices)} vertices and "
            f"{len(faces)} triangles; the file is truncated, empty, or not a surface mesh. "
            "Re-export it with its triangles."
        )
    step = (f"read {FORMAT_NAMES[fmt]}{' (gzip)' if was_gzip else ''}: "
            f"{len(vertices)} vertices, {len(faces)} faces")
    return Surface(vertices=vertices, faces=faces, source=str(path),
                   history=(step,) + tuple(notes))


# --------------------------------------------------------------------------- GIFTI

_ITEMSIZE = {
    "NIFTI_TYPE_UINT8": 1, "NIFTI_TYPE_INT8": 1, "NIFTI_TYPE_INT16": 2,
    "NIFTI_TYPE_UINT16": 2, "NIFTI_TYPE_INT32": 4, "NIFTI_TYPE_UINT32": 4,
    "NIFTI_TYPE_FLOAT32": 4, "NIFTI_TYPE_INT64": 8, "NIFTI_TYPE_UINT64": 8,
    "NIFTI_TYPE_FLOAT64": 8,
}
_ATTR = re.compile(rb'(\w+)\s*=\s*"([^"]*)"')


def _iter_data_arrays(data: bytes):
    """Yield (attributes dict, payload bytes) for each <DataArray> (plain byte search, fast)."""
    pos = data.find(b"<DataArray")
    while pos >= 0:
        tag_end = data.find(b">", pos)
        if tag_end < 0:
            return
        attrs = {k.decode(): v.decode() for k, v in _ATTR.findall(data[pos:tag_end])}
        close = data.find(b"</DataArray>", tag_end)
        if close < 0:
            close = len(data)
        start = data.find(b"<Data>", tag_end, close)
        payload = b""
        if start >= 0:
            stop = data.find(b"</Data>", start, close)
            payload = data[start + 6: stop if stop >= 0 else close].strip()
            if payload.startswith(b"<![CDATA[") and payload.endswith(b"]]>"):
                payload = payload[9:-3]
        yield attrs, payload
        pos = data.find(b"<DataArray", close)


def _check_gifti_payloads(data: bytes, *, path: Path, max_bytes: int) -> None:
    """Refuse zlib-compressed GIFTI arrays that inflate past their declared size or the limit."""
    total_declared = 0
    for attrs, payload in _iter_data_arrays(data):
        ndim = int(attrs.get("Dimensionality", "0") or 0)
        dims = [int(attrs.get(f"Dim{k}", "0") or 0) for k in range(ndim)]
        declared = int(np.prod(dims, dtype=np.int64)) * _ITEMSIZE.get(attrs.get("DataType", ""), 8)
        total_declared += declared
        if total_declared > max_bytes:
            raise InputTooLargeError(
                f"{path}: the GIFTI arrays declare {total_declared} bytes, past the limit of "
                f"{max_bytes}; raise max_bytes if the file is genuine."
            )
        if attrs.get("Encoding") != "GZipBase64Binary" or not payload:
            continue
        try:
            # non-alphabet bytes (line breaks, spaces) are skipped by the decoder
            raw = binascii.a2b_base64(payload)
        except binascii.Error as exc:
            raise SurfaceFormatError(
                f"{path}: a GIFTI data array is not valid base64 ({exc}); the file is corrupt."
            ) from None
        check_zlib_payload(raw, limit=min(declared, max_bytes), path=path,
                           what=f"the GIFTI data array '{attrs.get('Intent', '?')}'")


def _read_gifti(data: bytes, *, path: Path, max_bytes: int):
    from nibabel.gifti import GiftiImage

    refuse_xml_declarations(data, path=path)
    if b"GZipBase64Binary" in data:
        _check_gifti_payloads(data, path=path, max_bytes=max_bytes)
    img = GiftiImage.from_bytes(data)
    intents = [da.intent for da in img.darrays]
    from nibabel.nifti1 import intent_codes

    pointset = intent_codes.code["NIFTI_INTENT_POINTSET"]
    triangle = intent_codes.code["NIFTI_INTENT_TRIANGLE"]
    names = ", ".join(intent_codes.label[i] for i in intents) or "none"
    points = [da for da in img.darrays if da.intent == pointset]
    tris = [da for da in img.darrays if da.intent == triangle]
    if not tris:
        raise SurfaceFormatError(
            f"{path}: GIFTI with no triangle array (NIFTI_INTENT_TRIANGLE); its arrays are: "
            f"{names}. This looks like a per-vertex data file; give the surface geometry "
            "file (usually *.surf.gii)."
        )
    if not points:
        raise SurfaceFormatError(
            f"{path}: GIFTI with no vertex array (NIFTI_INTENT_POINTSET); its arrays are: "
            f"{names}. Give a complete surface geometry file."
        )
    notes = []
    if len(points) > 1 or len(tris) > 1:
        notes.append(f"GIFTI holds {len(points)} vertex and {len(tris)} triangle arrays; "
                     "used the first of each")
    vertices = np.asarray(points[0].data, dtype=np.float64)
    faces_raw = np.asarray(tris[0].data)
    if vertices.ndim != 2 or vertices.shape[1] != 3:
        raise SurfaceFormatError(
            f"{path}: the GIFTI vertex array has shape {vertices.shape}, expected (V, 3); "
            "the file is corrupt or not a surface."
        )
    if faces_raw.ndim != 2 or faces_raw.shape[1] != 3:
        raise SurfaceFormatError(
            f"{path}: the GIFTI triangle array has shape {faces_raw.shape}, expected (F, 3); "
            "only triangle meshes are supported."
        )
    faces = _integer_faces(faces_raw, path=path)
    cs = points[0].coordsys
    if cs is not None and cs.dataspace != cs.xformspace and not np.allclose(cs.xform, np.eye(4)):
        notes.append("coordinates kept as stored (GIFTI data space); the file's transform to "
                     "another space was not applied")
    return vertices, faces, notes


def _integer_faces(faces_raw: np.ndarray, *, path: Path) -> np.ndarray:
    if np.issubdtype(faces_raw.dtype, np.integer):
        return faces_raw.astype(np.int64)
    f = np.asarray(faces_raw, dtype=np.float64)
    if not np.all(np.isfinite(f)) or np.any(f != np.round(f)):
        raise SurfaceFormatError(
            f"{path}: the triangle array holds non-integer vertex indices; the file is corrupt."
        )
    return f.astype(np.int64)


# --------------------------------------------------------------------------- nibabel geometry


def _read_geometry(data: bytes, *, path: Path, was_gzip: bool):
    import nibabel.freesurfer

    # a corrupt header (absurd vertex counts) shows up as a numeric RuntimeWarning inside
    # nibabel; treat it as the error it is
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        if was_gzip:
            with tempfile.TemporaryDirectory() as tmp:
                inner = Path(tmp) / "surface"
                inner.write_bytes(data)
                vertices, faces = nibabel.freesurfer.read_geometry(str(inner))
        else:
            vertices, faces = nibabel.freesurfer.read_geometry(str(path))
    vertices = np.asarray(vertices, dtype=np.float64)
    faces = _integer_faces(np.asarray(faces), path=path)
    return vertices, faces, ["coordinates kept as stored in the triangle-geometry file"]


# --------------------------------------------------------------------------- trimesh formats


def _read_trimesh(data: bytes, *, fmt: str, path: Path):
    import trimesh

    kwargs = {"skip_materials": True, "maintain_order": True} if fmt == "obj" else {}
    mesh = trimesh.load(io.BytesIO(data), file_type=fmt, process=False, force="mesh", **kwargs)
    vertices = np.asarray(mesh.vertices, dtype=np.float64).reshape(-1, 3)
    faces = np.asarray(mesh.faces).reshape(-1, 3)
    faces = _integer_faces(faces, path=path)
    notes = []
    if fmt == "stl":
        notes.append("STL stores every triangle with its own 3 vertices; shared corners "
                     "appear as duplicate vertices until merged")
    return vertices, faces, notes


# --------------------------------------------------------------------------- writers


def _write_format(path: Path) -> str:
    suffixes = [s.lower() for s in path.suffixes]
    fmt = _WRITABLE.get(suffixes[-1]) if suffixes else None
    if fmt is None:
        raise ValueError(
            f"{path}: cannot choose a format from the suffix {''.join(path.suffixes) or '(none)'}; "
            "use .gii (or .surf.gii), .ply, .obj or .stl."
        )
    return fmt


def write_surface(surface: Surface, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a surface, choosing the format by suffix; the write is atomic.

    Parameters
    ----------
    surface : Surface
        Vertices (V, 3) mm and faces (F, 3).
    path : path-like
        Destination ending in ``.gii`` (``.surf.gii``), ``.ply``, ``.obj`` or ``.stl``.
    overwrite : bool, keyword-only
        Replace an existing file; otherwise ``FileExistsError``.

    Returns
    -------
    Path
        The path written.

    Notes
    -----
    GIFTI coordinates are float32, the only floating type the GIFTI standard allows:
    about 7 significant digits, i.e. ~1e-5 mm at 100 mm from the origin. PLY is written binary with float64 coordinates (exact, by this module; trimesh's
    own PLY writer stores float32); OBJ as text with 10 decimals;
    STL in binary float32 with one vertex triple per face (shared vertices are not
    stored, so reading it back gives duplicate vertices to merge).
    """
    path = Path(path)
    fmt = _write_format(path)
    with atomic_path(path, overwrite=overwrite) as tmp:
        if fmt == "gifti":
            _gifti_surface_image(surface).to_filename(str(tmp))
        elif fmt == "ply":
            tmp.write_bytes(_ply_bytes(surface))
        else:
            import trimesh

            mesh = trimesh.Trimesh(vertices=np.array(surface.vertices), faces=np.array(surface.faces),
                                   process=False, validate=False)
            opts = {"include_normals": False, "include_color": False, "include_texture": False,
                    "digits": 10} if fmt == "obj" else {}
            mesh.export(file_obj=str(tmp), file_type=fmt, **opts)
    logger.info("wrote %s (%d vertices, %d faces)", path, surface.n_vertices, surface.n_faces)
    return path


def _ply_bytes(surface: Surface) -> bytes:
    """Binary little-endian PLY with float64 coordinates (trimesh's writer stores float32)."""
    header = (
        "ply\nformat binary_little_endian 1.0\n"
        f"comment source {surface.source.replace(chr(10), ' ')}\n"
        f"element vertex {surface.n_vertices}\n"
        "property double x\nproperty double y\nproperty double z\n"
        f"element face {surface.n_faces}\n"
        "property list uchar int vertex_indices\nend_header\n"
    ).encode("ascii", "replace")
    rec = np.empty(surface.n_faces, dtype=[("n", "u1"), ("idx", "<i4", (3,))])
    rec["n"] = 3
    rec["idx"] = surface.faces
    return header + np.asarray(surface.vertices, dtype="<f8").tobytes() + rec.tobytes()


def _gifti_surface_image(surface: Surface):
    from nibabel.gifti import GiftiDataArray, GiftiImage, GiftiMetaData

    points = GiftiDataArray(np.asarray(surface.vertices, dtype=np.float32),
                            intent="NIFTI_INTENT_POINTSET", datatype="NIFTI_TYPE_FLOAT32")
    tris = GiftiDataArray(np.asarray(surface.faces, dtype=np.int32),
                          intent="NIFTI_INTENT_TRIANGLE", datatype="NIFTI_TYPE_INT32")
    meta = GiftiMetaData({"Source": surface.source,
                          "History": " | ".join(surface.history) or "none"})
    return GiftiImage(darrays=[points, tris], meta=meta)


def surface_gifti_bytes(surface: Surface) -> bytes:
    """The GIFTI file :func:`write_surface` writes for ``surface``, as bytes (no file, no
    log line): for workers that return their files to the process that writes them."""
    return _gifti_surface_image(surface).to_bytes()


def write_vertex_data(path: str | os.PathLike, arrays: dict[str, np.ndarray], *,
                      overwrite: bool = False) -> Path:
    """Write named per-vertex scalar maps as the data arrays of one GIFTI file (atomic).

    Parameters
    ----------
    path : path-like
        Destination ending in ``.gii`` (conventionally ``.shape.gii`` or ``.func.gii``).
    arrays : dict of str to ndarray, each shape (V,)
        Map name -> values; all of the same length V. Floating maps are stored float32,
        integer maps int32. Each array's GIFTI ``Name`` metadata is its key.
    overwrite : bool, keyword-only
        Replace an existing file; otherwise ``FileExistsError``.

    Returns
    -------
    Path
    """
    path = Path(path)
    if not path.name.lower().endswith(".gii"):
        raise ValueError(f"{path}: per-vertex data is written as GIFTI; use a name ending in .gii")
    image = _vertex_data_image(arrays, str(path))
    with atomic_path(path, overwrite=overwrite) as tmp:
        image.to_filename(str(tmp))
    return path


def vertex_data_gifti_bytes(arrays: dict[str, np.ndarray]) -> bytes:
    """The GIFTI file :func:`write_vertex_data` writes for ``arrays``, as bytes (no file):
    for workers that return their files to the process that writes them."""
    return _vertex_data_image(arrays, "per-vertex data").to_bytes()


def _vertex_data_image(arrays: dict[str, np.ndarray], what: str):
    """GIFTI image of named (V,) maps (see :func:`write_vertex_data`); errors name ``what``."""
    from nibabel.gifti import GiftiDataArray, GiftiImage, GiftiMetaData

    if not arrays:
        raise ValueError(f"{what}: no arrays given; pass a dict name -> (V,) array")
    lengths = set()
    darrays = []
    for name, values in arrays.items():
        a = np.asarray(values)
        if a.ndim != 1:
            raise ValueError(f"{what}: array {name!r} has shape {a.shape}; per-vertex maps must be (V,)")
        lengths.add(a.shape[0])
        if np.issubdtype(a.dtype, np.integer) or a.dtype == bool:
            a, ntype = a.astype(np.int32), "NIFTI_TYPE_INT32"
        else:
            a, ntype = a.astype(np.float32), "NIFTI_TYPE_FLOAT32"
        darrays.append(GiftiDataArray(a, intent="NIFTI_INTENT_NONE", datatype=ntype,
                                      meta=GiftiMetaData({"Name": str(name)})))
    if len(lengths) != 1:
        raise ValueError(f"{what}: arrays have different lengths {sorted(lengths)}; all must be (V,)")
    return GiftiImage(darrays=darrays)


def read_vertex_data(path: str | os.PathLike, *,
                     max_bytes: int = defaults.MAX_INPUT_BYTES) -> dict[str, np.ndarray]:
    """Read the named per-vertex arrays of a GIFTI file written by :func:`write_vertex_data`.

    Returns
    -------
    dict of str to ndarray, each shape (V,)
        Arrays without a ``Name`` are called ``array0``, ``array1``, ...
    """
    from nibabel.gifti import GiftiImage

    path = Path(path)
    data, _ = read_bytes_limited(path, max_bytes=int(max_bytes), kind="GIFTI data file")
    if sniff_format(data) != "gifti":
        raise SurfaceFormatError(f"{path}: not a GIFTI file; tried GIFTI. Give a .gii data file.")
    refuse_xml_declarations(data, path=path)
    if b"GZipBase64Binary" in data:
        _check_gifti_payloads(data, path=path, max_bytes=int(max_bytes))
    try:
        img = GiftiImage.from_bytes(data)
    except Exception as exc:
        raise SurfaceFormatError(
            f"{path}: could not be read as GIFTI ({type(exc).__name__}: {exc}); re-export it."
        ) from exc
    out = {}
    for k, da in enumerate(img.darrays):
        name = da.meta.get("Name", f"array{k}") if da.meta is not None else f"array{k}"
        out[name] = np.asarray(da.data).reshape(-1)
    return out
