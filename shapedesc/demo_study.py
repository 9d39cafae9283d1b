"""The bundled demo study: an invented cohort with one known, localised group difference.

Scenario (invented; no real subject is behind any number)
---------------------------------------------------------
Two groups, ``A`` and ``B``, of ``n_per_group`` subjects each (15 by default), assigned
at random.  Each subject has two structures, in one head coordinate frame (mm):

* ``arc`` -- elongated and bent: a triaxial ellipsoid with semi-axes about
  19 x 4.5 x 3.5 mm whose long axis is bent along a circle of radius 22 mm (about a
  100 degree bend; the +y side is the outer side of the bend);
* ``bean`` -- compact: an ellipsoid with semi-axes about 8 x 6.5 x 5.5 mm.

Subject-to-subject variation, drawn from one seeded generator:

* each semi-axis scaled by ``1 + 0.04 N(0, 1)``;
* a smooth normal displacement made of six low-order polynomial patterns of the
  generating sphere direction, each with amplitude ``0.25 N(0, 1)`` mm;
* an overall linear size factor ``(head_size_mm3 / 1.45e6) ** (1/3) * (1 - 0.003 (age - 65))
  * (1.01 at site S2)``: larger heads, younger subjects and site S2 give larger
  structures (covariates that a comparison should model);
* a pose: rotation by ``N(0, 8)`` degrees about a random axis and a translation of
  ``N(0, 2)`` mm per axis, plus the fixed head positions of the two structures.

The one group difference: in group B only, the ``arc`` has an **inward dent of depth
1.5 mm** (along the inward surface normal) with profile ``cos^2(pi d / (2 r))`` for
``d < r``, ``r = 6 mm`` (compact support), where ``d`` is the distance on the template
(before the subject's variation, size and pose) from the dent centre.  The centre is the
template point at 30 % of the arc's length from its ``-x`` end, on the outer side of
the bend.  ``ground_truth.json`` records depth, radius, profile, the centre in the
template frame (bent, mm) and as a direction on the generating sphere, the nearest
template vertex, every subject's covariates and its drawn variation.  The ``bean`` has no
group difference (a null structure).

Files
-----
``surfaces/<subject>_arc.surf.gii``, ``surfaces/<subject>_bean.surf.gii`` (GIFTI,
float32 coordinates in mm, on the icosphere of ``level`` -- 2,562 vertices at level 4),
except for ``n_volumes`` subjects (half from each group), who come as one label volume
``volumes/<subject>_dseg.nii.gz`` (NIfTI, uint8, label 1 = arc, 2 = bean, isotropic
``voxel_mm`` voxels) so that both input paths are exercised; ``manifest.tsv``
(columns ``subject input labels structures group age sex head_size_mm3 site``);
``ground_truth.json``.

Run ``python -m shapedesc.demo_study OUTDIR`` to regenerate (fixed seed; same numpy
and trimesh versions give the same bytes).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import numpy as np

__all__ = ["generate_demo_study", "DEMO_SEED", "DEMO_STRUCTURES"]

#: Seed of the committed demo study.
DEMO_SEED = 20261201
#: Label value of each structure in the demo label volumes.
DEMO_STRUCTURES = {"arc": 1, "bean": 2}

_ARC_AXES = (19.0, 4.5, 3.5)      # mm, before bending
_ARC_BEND_RADIUS = 22.0           # mm
_BEAN_AXES = (8.0, 6.5, 5.5)      # mm
_DENT_DEPTH = 1.5                 # mm
_DENT_RADIUS = 6.0                # mm
_DENT_POSITION = 0.30             # fraction of the arc's length from its -x end
_HEAD_POSITIONS = {"arc": (-24.0, -18.0, -6.0), "bean": (-24.0, 8.0, -6.0)}  # mm
_AXIS_SD = 0.04
_PATTERN_SD = 0.25                # mm
_ROTATION_SD_DEG = 8.0
_TRANSLATION_SD = 2.0             # mm
_COORD_GRID = 256.0               # 1/mm: surface coordinates are multiples of 1/256 mm


def _patterns(u: np.ndarray) -> np.ndarray:
    """Six smooth low-order patterns of unit directions u (n, 3) -> (n, 6)."""
    x, y, z = u.T
    return np.stack([x * y, y * z, x * z, x * x - y * y, x * (x * x - 0.6), y * (y * y - 0.6)],
                    axis=1)


def _ellipsoid(u: np.ndarray, axes) -> tuple[np.ndarray, np.ndarray]:
    p = u * np.asarray(axes)
    n = p / np.asarray(axes) ** 2
    return p, n / np.linalg.norm(n, axis=1, keepdims=True)


def _bend(p: np.ndarray, radius: float) -> np.ndarray:
    """Bend the x axis along a circle of ``radius``: +y is the outer side."""
    theta = p[:, 0] / radius
    r = radius + p[:, 1]
    return np.stack([r * np.sin(theta), r * np.cos(theta) - radius, p[:, 2]], axis=1)


def _dent_weights(template: np.ndarray, centre: np.ndarray) -> np.ndarray:
    d = np.linalg.norm(template - centre, axis=1)
    w = np.cos(np.pi * d / (2 * _DENT_RADIUS)) ** 2
    w[d >= _DENT_RADIUS] = 0.0
    return w


def _rotation(rng: np.random.Generator) -> np.ndarray:
    axis = rng.normal(size=3)
    axis /= np.linalg.norm(axis)
    angle = math.radians(_ROTATION_SD_DEG) * rng.normal()
    k = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
    return np.eye(3) + math.sin(angle) * k + (1 - math.cos(angle)) * (k @ k)


def _dent_centre_direction() -> np.ndarray:
    """Generating-sphere direction of the dent centre (pre-bend ellipsoid, z = 0, +y)."""
    ux = -1.0 + 2.0 * _DENT_POSITION
    return np.array([ux, math.sqrt(1.0 - ux * ux), 0.0])


def _structure(name: str, u: np.ndarray, rng: np.random.Generator, *, size: float,
               dent: bool) -> tuple[np.ndarray, dict]:
    """Vertices (n, 3) in the structure frame (before pose) and the drawn variation."""
    base_axes = _ARC_AXES if name == "arc" else _BEAN_AXES
    axis_factors = 1.0 + _AXIS_SD * rng.normal(size=3)
    amps = _PATTERN_SD * rng.normal(size=6)
    p, n = _ellipsoid(u, np.asarray(base_axes) * axis_factors)
    p = p + (_patterns(u) @ amps)[:, None] * n
    if name == "arc":
        if dent:
            template, tn = _ellipsoid(u, base_axes)
            c, _ = _ellipsoid(_dent_centre_direction()[None], base_axes)
            w = _dent_weights(_bend(template, _ARC_BEND_RADIUS), _bend(c, _ARC_BEND_RADIUS)[0])
            p = p - (_DENT_DEPTH / size) * w[:, None] * n
        p = _bend(p, _ARC_BEND_RADIUS)
    info = {"axis_factors": [round(float(a), 6) for a in axis_factors],
            "pattern_amplitudes_mm": [round(float(a), 6) for a in amps]}
    return p * size, info


def _winding_inside(points: np.ndarray, v: np.ndarray, f: np.ndarray,
                    chunk: int = 256) -> np.ndarray:
    """Points inside a closed oriented mesh: generalised winding number > 1/2.

    Solid angle of each triangle seen from a point by the formula of Van Oosterom &
    Strackee, IEEE Trans. Biomed. Eng. 30(2):125-126, 1983, doi:10.1109/TBME.1983.325207.
    """
    a0, b0, c0 = v[f[:, 0]], v[f[:, 1]], v[f[:, 2]]
    out = np.empty(len(points), dtype=bool)
    for s in range(0, len(points), chunk):
        q = points[s:s + chunk, None, :]
        a, b, c = a0 - q, b0 - q, c0 - q
        la, lb, lc = (np.linalg.norm(x, axis=2) for x in (a, b, c))
        det = np.einsum("pij,pij->pi", a, np.cross(b, c))
        den = (la * lb * lc + np.einsum("pij,pij->pi", a, b) * lc
               + np.einsum("pij,pij->pi", b, c) * la + np.einsum("pij,pij->pi", c, a) * lb)
        omega = 2.0 * np.arctan2(det, den).sum(axis=1)
        out[s:s + chunk] = omega / (4 * np.pi) > 0.5
    return out


def _inside(points_ijk: np.ndarray, lo: np.ndarray, voxel_mm: float, verts: np.ndarray,
            faces: np.ndarray, box_shape: tuple[int, int, int]) -> np.ndarray:
    """Inside test of a box of voxel centres: winding number near the surface, and one
    winding test per connected component of the voxels away from it."""
    from scipy import ndimage
    from scipy.spatial import cKDTree

    points = points_ijk * voxel_mm + lo
    # A point of the surface lies within its triangle's circumradius (<= 0.6 x the
    # longest edge for the near-equilateral triangles here) of a vertex, so two
    # neighbouring voxel centres both farther than that plus half a voxel from every
    # vertex are joined by a segment that does not cross the surface.
    edges = np.linalg.norm(verts[faces] - verts[np.roll(faces, 1, axis=1)], axis=2)
    band = 0.6 * float(edges.max()) + voxel_mm
    dist, _ = cKDTree(verts).query(points, distance_upper_bound=band)
    near = np.isfinite(dist)
    inside = np.zeros(len(points), dtype=bool)
    inside[near] = _winding_inside(points[near], verts, faces)
    far = (~near).reshape(box_shape)
    comp, n = ndimage.label(far)
    comp = comp.ravel()
    for k in range(1, n + 1):
        first = int(np.argmax(comp == k))
        if _winding_inside(points[first:first + 1], verts, faces)[0]:
            inside[comp == k] = True
    return inside


def _label_volume(meshes: dict[str, np.ndarray], faces: np.ndarray, voxel_mm: float):
    lo = np.floor(np.min([m.min(axis=0) for m in meshes.values()], axis=0) - 2 * voxel_mm)
    hi = np.ceil(np.max([m.max(axis=0) for m in meshes.values()], axis=0) + 2 * voxel_mm)
    shape = tuple(int(n) for n in np.ceil((hi - lo) / voxel_mm) + 1)
    data = np.zeros(shape, dtype=np.uint8)
    affine = np.diag([voxel_mm, voxel_mm, voxel_mm, 1.0])
    affine[:3, 3] = lo
    for name, verts in meshes.items():
        i0 = np.floor((verts.min(axis=0) - lo) / voxel_mm).astype(int) - 1
        i1 = np.ceil((verts.max(axis=0) - lo) / voxel_mm).astype(int) + 2
        axes = [np.arange(a, b) for a, b in zip(i0, i1)]
        grid = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
        inside = _inside(grid, lo, voxel_mm, verts, faces, tuple(len(a) for a in axes))
        idx = grid[inside]
        data[idx[:, 0], idx[:, 1], idx[:, 2]] = DEMO_STRUCTURES[name]
    return data, affine


def _write_gifti(path: Path, vertices: np.ndarray, faces: np.ndarray) -> None:
    import nibabel as nib
    from nibabel.gifti import GiftiDataArray, GiftiImage

    # Coordinates on a 1/256 mm grid (0.004 mm, far below any shape effect): float32
    # values with zero low mantissa bits, which compress to two thirds of the size.
    vertices = np.round(vertices * _COORD_GRID) / _COORD_GRID
    img = GiftiImage(darrays=[
        GiftiDataArray(vertices.astype(np.float32), intent="NIFTI_INTENT_POINTSET",
                       datatype="NIFTI_TYPE_FLOAT32"),
        GiftiDataArray(faces.astype(np.int32), intent="NIFTI_INTENT_TRIANGLE",
                       datatype="NIFTI_TYPE_INT32")])
    path.parent.mkdir(parents=True, exist_ok=True)
    nib.save(img, str(path))


def _write_nifti(path: Path, data: np.ndarray, affine: np.ndarray) -> None:
    import gzip

    import nibabel as nib

    img = nib.Nifti1Image(data, affine)
    img.header.set_xyzt_units("mm")
    img.set_qform(affine, code=1)
    img.set_sform(affine, code=1)
    path.parent.mkdir(parents=True, exist_ok=True)
    raw = img.to_bytes()
    # mtime=0: no time stamp in the gzip header, so the same study gives the same bytes.
    path.write_bytes(gzip.compress(raw, compresslevel=9, mtime=0))


def _icosphere(level: int) -> tuple[np.ndarray, np.ndarray]:
    import trimesh

    mesh = trimesh.creation.icosphere(subdivisions=level, radius=1.0)
    v = np.asarray(mesh.vertices, dtype=np.float64)
    return v / np.linalg.norm(v, axis=1, keepdims=True), np.asarray(mesh.faces, dtype=np.int64)


def generate_demo_study(outdir: str | Path, *, n_per_group: int = 15, level: int = 4,
                        n_volumes: int = 4, voxel_mm: float = 0.8,
                        rng: np.random.Generator | int | None = DEMO_SEED,
                        overwrite: bool = False) -> Path:
    """Write the invented demo study (see the module docstring) to ``outdir``.

    Parameters
    ----------
    outdir : path
        Folder to create; must be absent or empty unless ``overwrite``.
    n_per_group : int
        Subjects per group (>= 1).
    level : int
        Icosphere subdivision level of the surfaces (4: 2,562 vertices).
    n_volumes : int
        Subjects given as label volumes instead of surfaces (even split between groups).
    voxel_mm : float
        Voxel edge of the label volumes (mm).
    rng : Generator, int or None
        Randomness; the committed study uses ``DEMO_SEED``.
    overwrite : bool

    Returns
    -------
    Path
        ``outdir/manifest.tsv``.
    """
    from shapedesc.errors import OutputExistsError
    from shapedesc.io.atomic import write_text_atomic

    if n_per_group < 1 or n_volumes < 0 or n_volumes > 2 * n_per_group or voxel_mm <= 0:
        raise ValueError(f"need n_per_group >= 1, 0 <= n_volumes <= 2 n_per_group and "
                         f"voxel_mm > 0; got {n_per_group}, {n_volumes}, {voxel_mm}")
    outdir = Path(outdir)
    if outdir.exists() and any(outdir.iterdir()) and not overwrite:
        raise OutputExistsError(f"{outdir}: not empty; choose an empty folder or pass "
                                f"overwrite=True (--force)")
    seed = rng if isinstance(rng, int) else None
    rng = np.random.default_rng(rng)
    u, faces = _icosphere(level)
    n = 2 * n_per_group
    ids = [f"sub-{k:02d}" for k in range(1, n + 1)]
    groups = np.array(["A"] * n_per_group + ["B"] * n_per_group)
    rng.shuffle(groups)
    volume_ids = set()
    for g in ("A", "B"):
        members = [i for i, gg in zip(ids, groups) if gg == g]
        take = n_volumes // 2 + (n_volumes % 2 if g == "A" else 0)
        volume_ids.update(members[len(members) - take:] if take else [])
    rows = [["subject", "input", "labels", "structures", "group", "age", "sex",
             "head_size_mm3", "site"]]
    subjects = []
    for sid, group in zip(ids, groups):
        age = int(rng.integers(55, 81))
        sex = "F" if rng.random() < 0.5 else "M"
        head = float(rng.normal(1.40e6 if sex == "F" else 1.55e6, 0.08e6))
        head = round(head, -3)
        site = "S1" if rng.random() < 0.5 else "S2"
        size = (head / 1.45e6) ** (1 / 3) * (1 - 0.003 * (age - 65)) * (1.01 if site == "S2" else 1.0)
        meshes, info = {}, {}
        for name in ("arc", "bean"):
            verts, drawn = _structure(name, u, rng, size=size, dent=(group == "B" and name == "arc"))
            rot = _rotation(rng)
            shift = np.asarray(_HEAD_POSITIONS[name]) + _TRANSLATION_SD * rng.normal(size=3)
            meshes[name] = verts @ rot.T + shift
            drawn["rotation"] = [[round(float(x), 8) for x in r] for r in rot]
            drawn["translation_mm"] = [round(float(x), 6) for x in shift]
            info[name] = drawn
        cov = [group, str(age), sex, f"{head:.0f}", site]
        if sid in volume_ids:
            data, affine = _label_volume(meshes, faces, voxel_mm)
            rel = f"volumes/{sid}_dseg.nii.gz"
            _write_nifti(outdir / rel, data, affine)
            rows.append([sid, rel, "1,2", "arc,bean"] + cov)
        else:
            for name in ("arc", "bean"):
                rel = f"surfaces/{sid}_{name}.surf.gii"
                _write_gifti(outdir / rel, meshes[name], faces)
                rows.append([sid, rel, "", name] + cov)
        subjects.append({"subject": sid, "group": group, "age": age, "sex": sex,
                         "head_size_mm3": head, "site": site, "size_factor": round(size, 8),
                         "input": "volume" if sid in volume_ids else "surfaces",
                         "structures": info})
    template, _ = _ellipsoid(u, _ARC_AXES)
    template = _bend(template, _ARC_BEND_RADIUS)
    c_dir = _dent_centre_direction()
    centre = _bend(_ellipsoid(c_dir[None], _ARC_AXES)[0], _ARC_BEND_RADIUS)[0]
    truth = {
        "description": "Invented demo study of shapedesc; see shapedesc/demo_study.py.",
        "seed": seed,
        "n_per_group": n_per_group, "icosphere_level": level,
        "n_vertices": int(len(u)), "voxel_mm": voxel_mm,
        "labels": DEMO_STRUCTURES,
        "effect": {
            "structure": "arc", "group": "B", "reference_group": "A",
            "kind": "inward dent along the surface normal",
            "depth_mm": _DENT_DEPTH, "radius_mm": _DENT_RADIUS,
            "profile": "depth * cos^2(pi d / (2 radius)) for d < radius, else 0; d = "
                       "distance on the template (mm)",
            "position": f"{_DENT_POSITION:.0%} of the arc length from its -x end, on the "
                        "outer side of the bend",
            "centre_template_mm": [round(float(x), 6) for x in centre],
            "centre_sphere_direction": [round(float(x), 8) for x in c_dir],
            "nearest_template_vertex": int(np.argmin(np.linalg.norm(template - centre, axis=1))),
            "n_template_vertices_affected": int((_dent_weights(template, centre) > 0).sum()),
        },
        "null_structures": ["bean"],
        "template": {"arc_semi_axes_mm": _ARC_AXES, "arc_bend_radius_mm": _ARC_BEND_RADIUS,
                     "bean_semi_axes_mm": _BEAN_AXES},
        "covariate_effects": {
            "size_factor": "(head_size_mm3 / 1.45e6)^(1/3) * (1 - 0.003 (age - 65)) * "
                           "(1.01 at site S2); multiplies every length",
        },
        "variation": {"semi_axis_sd": _AXIS_SD, "pattern_amplitude_sd_mm": _PATTERN_SD,
                      "rotation_sd_deg": _ROTATION_SD_DEG, "translation_sd_mm": _TRANSLATION_SD},
        "groups": {g: [s["subject"] for s in subjects if s["group"] == g] for g in ("A", "B")},
        "volume_subjects": sorted(volume_ids),
        "subjects": subjects,
    }
    write_text_atomic(outdir / "ground_truth.json", json.dumps(truth, indent=2) + "\n")
    manifest = outdir / "manifest.tsv"
    write_text_atomic(manifest, "\n".join("\t".join(r) for r in rows) + "\n")
    return manifest


def main(argv: list[str] | None = None) -> int:
    """``python -m shapedesc.demo_study OUTDIR [--n-per-group N] [--level K] [--force]``."""
    p = argparse.ArgumentParser(prog="python -m shapedesc.demo_study",
                                description="Write the invented shapedesc demo study.")
    p.add_argument("outdir")
    p.add_argument("--n-per-group", type=int, default=15)
    p.add_argument("--level", type=int, default=4)
    p.add_argument("--volumes", type=int, default=4)
    p.add_argument("--force", action="store_true")
    args = p.parse_args(argv)
    manifest = generate_demo_study(args.outdir, n_per_group=args.n_per_group, level=args.level,
                                   n_volumes=args.volumes, overwrite=args.force)
    print(manifest)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
