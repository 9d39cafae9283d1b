"""Benchmark: whole `describe` of one structure vs a naive scipy-only pipeline.

Targets (issue 5): describe of a 20,000-vertex structure at L = 15 <= 0.5 s and of a
160,000-vertex hemisphere-sized surface at L = 40 <= 5 s *beyond the map itself*, one
core, peak memory <= 1.5 GB.

The naive pipeline, side by side in the same run, is built only from scipy: a one-solve
conformal map (cotangent Laplacian with the three vertices of one face pinned to a
triangle in the plane, inverse stereographic projection, no Möbius centring, no area
correction) and a complex design matrix from ``scipy.special.sph_harm_y`` solved with
``numpy.linalg.lstsq``. On an elongated shape its points crowd into a tiny part of
the sphere and its coefficients blow up; ours stay bounded.

Run:  python benchmarks/describe.py [--quick]
Writes benchmarks/results/describe.json.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
import scipy.sparse as sp  # noqa: E402
import scipy.sparse.linalg as spla  # noqa: E402
from scipy.special import sph_harm_y  # noqa: E402


def naive_conformal_map(v, f):
    """One-solve planar conformal map + inverse stereographic projection (no corrections)."""
    n = len(v)
    i, j, k = f[:, 0], f[:, 1], f[:, 2]
    rows, cols, vals = [], [], []
    for a, b, c in ((i, j, k), (j, k, i), (k, i, j)):
        e1 = v[a] - v[c]
        e2 = v[b] - v[c]
        cot = np.einsum("ij,ij->i", e1, e2) / np.linalg.norm(np.cross(e1, e2), axis=1)
        rows += [a, b]
        cols += [b, a]
        vals += [0.5 * cot, 0.5 * cot]
    w = sp.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)).tocsr()
    lap = sp.diags(np.asarray(w.sum(axis=1)).ravel()) - w
    fixed = f[0]
    pos = np.array([[0.0, 0.0], [1.0, 0.0], [0.5, np.sqrt(3) / 2]]) * 50.0
    free = np.setdiff1d(np.arange(n), fixed)
    lap = lap.tocsr()
    a_ff = lap[free][:, free].tocsc()
    rhs = -lap[free][:, fixed] @ pos
    xy = np.zeros((n, 2))
    xy[fixed] = pos
    lu = spla.splu(a_ff)
    xy[free] = lu.solve(np.asarray(rhs))
    xy -= xy[fixed].mean(axis=0)
    xy /= np.sqrt(np.mean(np.sum(xy**2, axis=1)))
    r2 = np.sum(xy**2, axis=1)
    return np.column_stack([2 * xy[:, 0], 2 * xy[:, 1], r2 - 1]) / (1 + r2)[:, None]


def naive_fit(u, values, lmax):
    theta = np.arccos(np.clip(u[:, 2], -1, 1))
    phi = np.mod(np.arctan2(u[:, 1], u[:, 0]), 2 * np.pi)
    cols = [sph_harm_y(l, m, theta, phi) for l in range(lmax + 1) for m in range(-l, l + 1)]
    b = np.column_stack(cols)
    coef, *_ = np.linalg.lstsq(b, values.astype(complex), rcond=None)
    resid = np.abs(b @ coef - values)
    return coef, float(np.sqrt(np.mean(np.sum(resid**2, axis=1)))), float(np.sum(resid**2, axis=1).max() ** 0.5)


def _case(name, v, f, lmax, run_naive):
    from shapedesc.descriptors import describe_surface
    from shapedesc.sphere import map_to_sphere
    from shapedesc.surface import Surface
    import warnings

    surf = Surface(v, f, source=name)
    t0 = time.perf_counter()
    sm = map_to_sphere(v, f, source=name)
    t_map = time.perf_counter() - t0
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        d = describe_surface(surf, degree=lmax, sphere_map=sm)
    t_desc = time.perf_counter() - t0
    row = {"case": name, "vertices": len(v), "lmax": lmax, "map_s": t_map,
           "describe_beyond_map_s": t_desc, "ours_fit_rms_mm": d.residual.rms_mm,
           "ours_fit_max_mm": d.residual.max_mm, "ours_max_abs_coef_mm": float(np.abs(d.native_values).max()),
           "area_log_sd": sm.qc.area_log_sd}
    if run_naive:
        t0 = time.perf_counter()
        u0 = naive_conformal_map(v, f)
        coef, rms, mx = naive_fit(u0, v, lmax)
        row.update({"naive_s": time.perf_counter() - t0, "naive_fit_rms_mm": rms, "naive_fit_max_mm": mx,
                    "naive_max_abs_coef_mm": float(np.abs(coef).max())})
        row["speed_ratio_naive_over_ours"] = row["naive_s"] / (t_map + t_desc)
    return row


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes only (smoke run)")
    args = ap.parse_args(argv)
    from shapedesc import shapes

    rows = []
    lvl_small = 3 if args.quick else None
    # ~20,000 vertices: an elongated, bent structure (hippocampus-like), L = 15.
    v, f = shapes.bent_tube(length=6.0, radius=1.0, level=lvl_small) if lvl_small else \
        shapes.bent_tube(length=6.0, radius=1.0, frequency=45)
    rows.append(_case("elongated_bent", np.asarray(v) * 6.0, np.asarray(f), 15, True))
    if not args.quick:
        # ~160,000 vertices: a folded (bumpy) hemisphere-sized surface, L = 40.
        v, f = shapes.bumpy(amplitude=0.15, frequency=6, mesh_frequency=126)
        rows.append(_case("folded_160k", np.asarray(v) * 60.0, np.asarray(f), 40, False))
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{'case':<16}{'V':>8}{'L':>4}{'map s':>8}{'desc s':>8}{'rms mm':>10}{'naive s':>9}{'naive rms':>11}{'naive |c|max':>14}")
    for r in rows:
        print(f"{r['case']:<16}{r['vertices']:>8}{r['lmax']:>4}{r['map_s']:>8.2f}{r['describe_beyond_map_s']:>8.2f}"
              f"{r['ours_fit_rms_mm']:>10.3g}{r.get('naive_s', float('nan')):>9.2f}"
              f"{r.get('naive_fit_rms_mm', float('nan')):>11.3g}{r.get('naive_max_abs_coef_mm', float('nan')):>14.3g}")
    print(f"peak RSS {peak_mb:.0f} MB")
    out = Path(__file__).parent / "results" / "describe.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({"rows": rows, "peak_rss_mb": peak_mb}, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
