"""Benchmark: is the sphere map the same map every time? (issue 4: canonical, consistent)

Three measurements, printed as tables and written to benchmarks/results/sphere_consistency.json:

* ``starts``: demo-study arcs (the bundled invented study) mapped from the conformal start
  and, forced, from the coarse-to-fine start (``sphere.hierarchy``; forced by making every
  face count as collapsed). Reported per subject: mean angle between the two maps after
  the best rotation (orthogonal Procrustes), area SD of both; and per degree the mean
  |Δ log spectrum| between the starts over the between-subject SD of the log spectrum.
  The energy has a second, "winding" minimum on elongated shapes; a start that lands
  there gives maps 27–35° away (measured before the coarse levels went area-only).
* ``retriangulated``: MNI ICBM152 structures (open data, ``mesh.template_anatomy``) and
  their midpoint-subdivided copies (``trimesh.remesh.subdivide``: the same point set,
  4x the faces): mean / 99th-percentile angle between the maps at the original
  vertices after the best rotation, and the largest per-degree difference of the
  spectrum amplitude sqrt(energy) (mm); and re-meshed copies (the subdivided copy
  decimated back to the original vertex count by ``mesh.decimate``: an independent
  triangulation of nearly the same surface), compared at the original vertices' closest
  points on the copy; with the QC's ``sheared_area_share`` of each map.
* ``stop``: the same structures with the fine solve's stall test at the default
  ``SPHERE_AREA_REL_TOL`` and at 1e-7 (budget 20,000 iterations): largest per-degree
  difference of the spectrum amplitude (mm), iterations and CPU seconds.

One BLAS thread; CPU seconds (``time.process_time``). Slow (minutes: the subdivided
putamen has ~20,000 vertices and takes the coarse-to-fine start).

Usage: ``python benchmarks/sphere_consistency.py [--subjects N] [--structures NAME ...]
[--skip starts|retriangulated|stop ...]``
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core, before numpy is imported

import argparse  # noqa: E402
import json  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from importlib.resources import files  # noqa: E402
from pathlib import Path  # noqa: E402
from unittest import mock  # noqa: E402

import numpy as np  # noqa: E402

OUT = Path(__file__).parent / "results" / "sphere_consistency.json"


def _aligned_angles_deg(x, y):
    """Angles (degrees) between unit vectors x and y (n, 3) after the proper rotation
    that best maps x onto y (orthogonal Procrustes, Schönemann 1966)."""
    u, _, vt = np.linalg.svd(y.T @ x)
    r = u @ np.diag([1.0, 1.0, np.sign(np.linalg.det(u @ vt))]) @ vt
    return np.degrees(np.arccos(np.clip(np.einsum("ij,ij->i", x @ r.T, y), -1.0, 1.0)))


def _describe(surface, sphere_map, degree=15):
    from shapedesc.descriptors import describe_surface

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pose-sign warnings of near-symmetric shapes
        return describe_surface(surface, degree=degree, sphere_map=sphere_map)


def run_starts(n_subjects: int) -> dict:
    import shapedesc.sphere.api as api
    from shapedesc.io.surfaces import read_surface
    from shapedesc.sphere import map_to_sphere

    root = files("shapedesc.example_study") / "surfaces"
    rows, logs = [], {"conformal": [], "coarse-to-fine": []}
    for i in range(1, n_subjects + 1):
        s = read_surface(str(root / f"sub-{i:02d}_arc.surf.gii"))
        maps = {"conformal": map_to_sphere(s.vertices, s.faces, source=s.source)}
        with mock.patch.object(api, "SPHERE_MIN_REL_DET", 2.0):  # every face "collapsed"
            maps["coarse-to-fine"] = map_to_sphere(s.vertices, s.faces, source=s.source)
        for key, m in maps.items():
            assert m.qc.initial_map == key, (key, m.qc.initial_map)
            logs[key].append(np.log(_describe(s, m).spectrum))
        d = _aligned_angles_deg(maps["conformal"].sphere_vertices,
                                maps["coarse-to-fine"].sphere_vertices)
        rows.append({"subject": f"sub-{i:02d}", "mean_deg": float(d.mean()),
                     "max_deg": float(d.max()),
                     "sd_conformal": maps["conformal"].qc.area_log_sd,
                     "sd_coarse_to_fine": maps["coarse-to-fine"].qc.area_log_sd})
    a, b = np.array(logs["conformal"]), np.array(logs["coarse-to-fine"])
    ratio = np.abs(b - a).mean(axis=0) / a.std(axis=0, ddof=1)
    return {"subjects": rows, "log_spectrum_start_effect_over_between_sd": ratio.tolist()}


def _template(name):
    import shapedesc.mesh.template_anatomy as ta
    import shapedesc.mesh.volume as volume

    st = ta.template_structure(name)
    return volume.mask_to_surface(st.mask, st.affine, source=name, evidence=st.evidence)[0]


def _transfer(points, vertices, faces, sphere_vertices, k=16):
    """Sphere positions (n, 3) at ``points`` (n, 3) on the surface (vertices, faces): the
    closest surface point (among the faces of the k nearest centroids), its barycentric
    coordinates, the map interpolated there and normalised; and the distances (mm)."""
    import trimesh
    from scipy.spatial import cKDTree

    from shapedesc.mesh.distance import closest_point_on_triangles

    _, cand = cKDTree(vertices[faces].mean(axis=1)).query(points, k=k)
    best = np.full(len(points), np.inf)
    face = np.zeros(len(points), dtype=np.int64)
    near = np.zeros_like(points)
    for j in range(k):
        fi = cand[:, j]
        a, b, c = (vertices[faces[fi, m]] for m in range(3))
        q = closest_point_on_triangles(points, a, b, c)
        d = np.sum((q - points) ** 2, axis=1)
        better = d < best
        best[better], face[better], near[better] = d[better], fi[better], q[better]
    bary = trimesh.triangles.points_to_barycentric(vertices[faces[face]], near)
    y = np.einsum("nk,nki->ni", bary, sphere_vertices[faces[face]])
    return y / np.linalg.norm(y, axis=1, keepdims=True), np.sqrt(best)


def run_retriangulated(names) -> list:
    import trimesh

    from shapedesc.mesh.decimate import decimate
    from shapedesc.sphere import map_to_sphere
    from shapedesc.surface import Surface

    rows = []
    for name in names:
        s = _template(name)
        v2, f2 = trimesh.remesh.subdivide(s.vertices, s.faces)
        s2 = Surface(v2, f2, source=f"{name} (subdivided)")
        v3, f3 = decimate(v2, f2, s.n_vertices)
        s3 = Surface(v3, f3, source=f"{name} (re-meshed)")
        out = []
        for surf in (s, s2, s3):
            t = time.process_time()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # ShearedMapWarning: the share is reported
                m = map_to_sphere(surf.vertices, surf.faces, source=surf.source)
            cpu = time.process_time() - t
            out.append((m, np.sqrt(_describe(surf, m).spectrum_mm2), cpu))
        d = _aligned_angles_deg(out[0][0].sphere_vertices,
                                out[1][0].sphere_vertices[:s.n_vertices])
        y, dist = _transfer(s.vertices, v3, f3, out[2][0].sphere_vertices)
        d3 = _aligned_angles_deg(out[0][0].sphere_vertices, y)
        rows.append({"structure": name, "vertices": [s.n_vertices, s2.n_vertices, s3.n_vertices],
                     "starts": [o[0].qc.initial_map for o in out],
                     "sheared_area_share": [o[0].qc.sheared_area_share for o in out],
                     "mean_deg": float(d.mean()), "p99_deg": float(np.percentile(d, 99)),
                     "max_amplitude_difference_mm": float(np.abs(out[0][1] - out[1][1]).max()),
                     "remeshed_mean_deg": float(d3.mean()),
                     "remeshed_p99_deg": float(np.percentile(d3, 99)),
                     "remeshed_max_amplitude_difference_mm":
                         float(np.abs(out[0][1] - out[2][1]).max()),
                     "remeshed_max_distance_mm": float(dist.max()),
                     "cpu_s": [o[2] for o in out]})
    return rows


def run_stop(names) -> list:
    import shapedesc.sphere.area as area
    from shapedesc.defaults import SPHERE_AREA_REL_TOL
    from shapedesc.sphere import map_to_sphere

    rows = []
    kw = area.correct_area.__kwdefaults__
    saved = dict(kw)
    try:
        for name in names:
            s = _template(name)
            res = {}
            for tol in (SPHERE_AREA_REL_TOL, 1e-7):
                kw.update(rel_tol=tol, max_iter=20000)
                t = time.process_time()
                m = map_to_sphere(s.vertices, s.faces, source=name)
                res[tol] = (np.sqrt(_describe(s, m).spectrum_mm2), m.qc.iterations,
                            time.process_time() - t)
            a, b = res[SPHERE_AREA_REL_TOL], res[1e-7]
            diff = np.abs(a[0] - b[0])
            rows.append({"structure": name, "default_rel_tol": SPHERE_AREA_REL_TOL,
                         "max_amplitude_difference_mm": float(diff.max()),
                         "at_degree": int(diff.argmax()) + 1,
                         "amplitude_there_mm": float(b[0][diff.argmax()]),
                         "iterations": [a[1], b[1]], "cpu_s": [a[2], b[2]]})
    finally:
        kw.clear()
        kw.update(saved)
    return rows


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--subjects", type=int, default=10, help="demo arcs (default 10)")
    p.add_argument("--structures", nargs="+",
                   default=["caudate_left", "thalamus_left", "putamen_left",
                            "putamen_body_left"])
    p.add_argument("--skip", nargs="*", default=[], choices=["starts", "retriangulated", "stop"])
    args = p.parse_args(argv)
    out = {}
    if "starts" not in args.skip:
        out["starts"] = r = run_starts(args.subjects)
        print("conformal vs coarse-to-fine start (demo arcs): mean / max angle after the best "
              "rotation, area SD of both")
        for row in r["subjects"]:
            print(f"  {row['subject']}  {row['mean_deg']:6.2f} / {row['max_deg']:6.2f} deg   "
                  f"SD {row['sd_conformal']:.3f} / {row['sd_coarse_to_fine']:.3f}")
        print("  start effect on log spectra / between-subject SD, degrees 1..: "
              + " ".join(f"{x:.2f}" for x in r["log_spectrum_start_effect_over_between_sd"]))
    if "retriangulated" not in args.skip:
        out["retriangulated"] = rows = run_retriangulated(args.structures)
        print("MNI structure vs its midpoint-subdivided copy, and vs a re-meshed copy (subdivided, "
              "then decimated to the same vertex count; compared at closest points)")
        for row in rows:
            print(f"  {row['structure']:14s} V {row['vertices'][0]:6d}/{row['vertices'][1]:6d} "
                  f"sheared share {row['sheared_area_share'][0]:.4f}; subdivided: mean "
                  f"{row['mean_deg']:6.2f} deg, p99 {row['p99_deg']:6.2f} deg, amplitudes "
                  f"{row['max_amplitude_difference_mm']:.3f} mm; re-meshed: mean "
                  f"{row['remeshed_mean_deg']:6.2f} deg, p99 {row['remeshed_p99_deg']:6.2f} deg, "
                  f"amplitudes {row['remeshed_max_amplitude_difference_mm']:.3f} mm "
                  f"(surfaces up to {row['remeshed_max_distance_mm']:.2f} mm apart); CPU "
                  + " / ".join(f"{c:.1f}" for c in row["cpu_s"]) + " s")
    if "stop" not in args.skip:
        out["stop"] = rows = run_stop(args.structures)
        print("fine solve stopped by the default stall test vs at rel_tol 1e-7")
        for row in rows:
            print(f"  {row['structure']:14s} max amplitude difference "
                  f"{row['max_amplitude_difference_mm']:.3f} mm (degree {row['at_degree']}, "
                  f"amplitude {row['amplitude_there_mm']:.2f} mm); iterations "
                  f"{row['iterations'][0]} / {row['iterations'][1]}; CPU "
                  f"{row['cpu_s'][0]:.1f} / {row['cpu_s'][1]:.1f} s")
    OUT.parent.mkdir(exist_ok=True)
    OUT.write_text(json.dumps(out, indent=2))
    print(f"wrote {OUT}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
