"""Benchmark: the whole sphere map (conformal + centring + area correction + QC), one core.

Prints a table and writes benchmarks/results/sphere_map.json. Side by side in the same
run:

* ``map_to_sphere`` (multiresolution, preconditioned L-BFGS) against a baseline — plain
  gradient descent on the *same* energy with the same flip-rejecting line search, from
  the same centred conformal start, given the same CPU budget as the full map took
  (reported: its final distortion, and the ratio of budgets);
* one real factorisation solving both plane coordinates vs one complex factorisation
  of the same matrix solving ``x + iy`` (the conformal step's reduced Laplacian);
* SuperLU column orderings COLAMD vs MMD_AT_PLUS_A, the latter with and without
  SymmetricMode, on icosphere-numbered, shuffled and marching-cubes (MNI) meshes.

* the area-SD vs angle trade-off over the shear weight w for 3:1, 4:1, 6:1 ellipsoids
  and the bent tube, beside the isoperimetric estimate of the angle distortion that exact
  area preservation forces (``--tradeoff`` prints only that table).

* with ``--baseline DIR`` (a frozen copy of another checkout, e.g. ``git worktree add
  /tmp/base main``): every map case is run in a fresh process with ``PYTHONPATH=DIR``
  and in one with this checkout, alternating (``--repeat`` times; the smallest CPU time
  of each is reported), so old and new code are timed side by side under the same load;
  the rows also say whether the two maps are bit-identical.

Targets (issue 4): 20,000 vertices <= 3 s and 160,000 vertices <= 30 s. Times are CPU
seconds of this process (``time.process_time``) beside wall seconds: the machine is
shared, so wall time includes waiting for the core.

Usage: ``python benchmarks/sphere_map.py [--quick] [--no-large] [--no-anatomy] [--tradeoff]
[--baseline DIR [--repeat N] [--only NAME ...]]``
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core, before numpy is imported

import argparse  # noqa: E402
import hashlib  # noqa: E402
import json  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import scipy.sparse.linalg as spla  # noqa: E402

from shapedesc.defaults import SPHERE_SHEAR_WEIGHT  # noqa: E402
from shapedesc.mesh.measures import vertex_areas  # noqa: E402
from shapedesc.shapes import bent_tube, bumpy, ellipsoid, icosphere  # noqa: E402
from shapedesc.sphere import map_to_sphere  # noqa: E402
from shapedesc.sphere.area import AreaProblem, correct_area  # noqa: E402
from shapedesc.sphere.conformal import conformal_sphere_map  # noqa: E402
from shapedesc.sphere.laplacian import clamped_cotangent_laplacian  # noqa: E402
from shapedesc.sphere.mobius import mobius_centre  # noqa: E402
from shapedesc.sphere.qc import angle_distortion_deg, face_log_area_ratio  # noqa: E402

OUT = Path(__file__).parent / "results" / "sphere_map.json"


def _shapes(freq):
    return {
        "sphere": lambda: icosphere(frequency=freq),
        "ellipsoid 6:1:1": lambda: ellipsoid(6, 1, 1, frequency=freq),
        "bent tube 3:1": lambda: bent_tube(6, 1, np.pi / 2, frequency=freq),
        "bumpy": lambda: bumpy(0.3, 4, mesh_frequency=freq),
    }


def _study_item():
    """The first surface of benchmarks/pipeline_throughput.py's study (seed 7, 10,242
    vertices, float32 coordinates as read back from its GIFTI file): the map whose CPU
    time is the study throughput's margin."""
    u, f = icosphere(frequency=32)
    rng = np.random.default_rng(7)
    axes = np.array([14.0, 7.0, 5.0]) * (1 + 0.1 * rng.normal(size=3))
    x, y, z = u.T
    bump = 0.6 * rng.normal(size=4)
    r = 1 + 0.05 * (bump[0] * x * y + bump[1] * y * z + bump[2] * (x * x - y * y)
                    + bump[3] * x * z)
    return (u * axes * r[:, None]).astype(np.float32).astype(np.float64), f


def _row(name, v, f, m, cpu, wall):
    q = m.qc
    return {"shape": name, "n_vertices": len(v), "flips_all_stages": int(max(q.flips_per_stage.values())),
            "area_log_sd": q.area_log_sd, "area_log_p01": q.area_log_p01,
            "area_log_p99": q.area_log_p99, "angle_mean_deg": q.angle_distortion_mean_deg,
            "iterations": q.iterations, "levels": m.parameters["levels"],
            "initial_map": m.qc.initial_map,
            "cpu_s": cpu, "wall_s": wall, "conformal_s": q.seconds_conformal,
            "centring_s": q.seconds_centring, "area_s": q.seconds_area}


def run_map(name, v, f):
    t0, w0 = time.process_time(), time.perf_counter()
    m = map_to_sphere(v, f, source=name)
    return m, _row(name, v, f, m, time.process_time() - t0, time.perf_counter() - w0)


def _run_one(path):
    """Child process of ``--baseline``: map the surface in ``path`` (npz: v, f, name) with
    whichever ``shapedesc`` is first on sys.path; print the row as JSON."""
    import shapedesc

    d = np.load(path)
    name = str(d["name"])
    m, row = run_map(name, d["v"], d["f"])
    row["code"] = str(Path(shapedesc.__file__).parent.parent)
    row["sha1"] = hashlib.sha1(np.ascontiguousarray(m.sphere_vertices).tobytes()).hexdigest()
    print(json.dumps(row))


def run_pair(name, v, f, baseline_dir, repeat):
    """Rows of ``name`` mapped by the baseline tree and by this checkout, each in a fresh
    process, alternating ``repeat`` times; the smallest CPU time of each."""
    here = str(Path(__file__).resolve().parent.parent)
    rows = {"baseline": [], "ours": []}
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "surface.npz")
        np.savez(path, v=v, f=f, name=name)
        for _ in range(repeat):
            for key, src in (("baseline", baseline_dir), ("ours", here)):
                env = dict(os.environ, PYTHONPATH=src)
                out = subprocess.run([sys.executable, __file__, "--run-one", path], env=env,
                                     capture_output=True, text=True, check=True, cwd=tmp)
                rows[key].append(json.loads(out.stdout.strip().splitlines()[-1]))
    best = {k: min(r, key=lambda row: row["cpu_s"]) for k, r in rows.items()}
    for k, r in rows.items():
        best[k]["cpu_s_all"] = [row["cpu_s"] for row in r]
        best[k]["repeat_identical"] = len({row["sha1"] for row in r}) == 1
    return best["baseline"], best["ours"]


def baseline(name, v, f, budget_cpu):
    """Plain gradient descent (same energy, same line search) for the same CPU budget."""
    t0 = time.process_time()
    vn = (v - v.mean(0)) / np.sqrt(np.mean(np.sum((v - v.mean(0)) ** 2, axis=1)))
    conf = conformal_sphere_map(vn, f, source=name)
    x, _ = mobius_centre(conf.sphere_vertices, vertex_areas(vn, f), what=name)
    p = AreaProblem(vn, f, shear_weight=SPHERE_SHEAR_WEIGHT, what=name)
    iters = 0
    while time.process_time() - t0 < budget_cpu:
        r = correct_area(p, x, max_iter=20, precondition=False, lbfgs=False,
                         raise_on_budget=False)
        iters += r.iterations
        if r.sphere_vertices is x or r.iterations == 0:
            break
        x = r.sphere_vertices
    lr = face_log_area_ratio(vn, x, f)
    return {"shape": name, "n_vertices": len(v), "method": "gradient descent, same budget",
            "iterations": iters, "cpu_s": time.process_time() - t0,
            "area_log_sd": float(np.std(lr)), "area_log_p01": float(np.percentile(lr, 1)),
            "area_log_p99": float(np.percentile(lr, 99)),
            "angle_mean_deg": float(angle_distortion_deg(vn, x, f).mean())}


def _reduced_laplacian(v, f):
    L = clamped_cotangent_laplacian(v, f).tocsr()
    free = np.arange(3, len(v))
    return L[free][:, free].tocsc(), L[free][:, :3]


def factorisation_bench(v, f):
    A, B = _reduced_laplacian(v, f)
    rhs = -(B @ np.array([[0.0, 0.0], [1.0, 0.0], [0.5, 0.8]]))
    out = {"n": A.shape[0]}
    T = time.process_time
    t = T()
    lu = spla.splu(A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                   options={"SymmetricMode": True})
    xr = lu.solve(np.ascontiguousarray(rhs))
    out["real_2rhs_s"] = T() - t
    t = T()
    luc = spla.splu(A.astype(np.complex128), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                    options={"SymmetricMode": True})
    xc = luc.solve(rhs[:, 0] + 1j * rhs[:, 1])
    out["complex_1rhs_s"] = T() - t
    out["complex_over_real"] = out["complex_1rhs_s"] / out["real_2rhs_s"]
    out["max_difference"] = float(np.abs(xr[:, 0] + 1j * xr[:, 1] - xc).max())
    for spec, sym in (("COLAMD", False), ("MMD_AT_PLUS_A", False), ("MMD_AT_PLUS_A", True)):
        t = T()
        lu = spla.splu(A, permc_spec=spec, diag_pivot_thresh=0.0,
                       options={"SymmetricMode": sym})
        lu.solve(np.ascontiguousarray(rhs))
        key = f"{spec}{'_sym' if sym else ''}"
        out[f"{key}_s"] = T() - t
        out[f"{key}_fill"] = int(lu.L.nnz + lu.U.nnz)
    return out


def _equilateral_angle_change_deg(r, n_phi=60):
    """Mean |Δangle| (degrees) of an equilateral triangle under diag(√r, 1/√r), averaged
    over its orientation."""
    out = []
    for phi in (np.arange(n_phi) + 0.5) * (np.pi / 3) / n_phi:
        p = np.array([[np.cos(phi + k * 2 * np.pi / 3), np.sin(phi + k * 2 * np.pi / 3)]
                      for k in range(3)]) * [np.sqrt(r), 1 / np.sqrt(r)]
        ang = []
        for k in range(3):
            u, w = p[(k + 1) % 3] - p[k], p[(k + 2) % 3] - p[k]
            ang.append(np.arctan2(abs(u[0] * w[1] - u[1] * w[0]), u @ w))
        out.append(np.mean(np.abs(np.array(ang) - np.pi / 3)))
    return float(np.degrees(np.mean(out)))


def isoperimetric_angle_estimate(a, n=801):
    """Mean angle distortion (degrees) forced on a prolate ellipsoid (a, 1, 1) by an
    exactly area-preserving map whose stretch is uniform along each cross-section loop.

    The loop at height z (radius ρ(z)) bounds a share f of the area; on the sphere of the
    same area (radius R) a loop enclosing share f is at least 2πR·2√(f(1−f)) long (the
    isoperimetric inequality on the sphere; circles of latitude are optimal), so the
    tangential stretch is at least λ = 2R√(f(1−f))/ρ and, with area kept, the anisotropy
    λ². Averaged (area-weighted) over z for equilateral triangles at random orientation.
    Not a strict bound for the mean |Δangle|: it saturates, so non-uniform stretch or a
    little area error can beat it.
    """
    z = np.linspace(-a, a, n)
    rho = np.sqrt(np.maximum(1 - z**2 / a**2, 0))
    d_a = 2 * np.pi * rho * np.sqrt(1 + (z / (a * a * np.maximum(rho, 1e-12))) ** 2)
    d_a[~np.isfinite(d_a)] = 0.0
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (d_a[1:] + d_a[:-1]) * np.diff(z))])
    frac, radius = cum / cum[-1], np.sqrt(cum[-1] / (4 * np.pi))
    lam = np.maximum(1.0, 2 * radius * np.sqrt(frac * (1 - frac)) / np.maximum(rho, 1e-300))
    ang = np.array([_equilateral_angle_change_deg(x * x) for x in lam])
    return float(np.sum(d_a * ang) / np.sum(d_a))


def shear_tradeoff(weights=(0.03, 0.06, 0.12, 0.25, 0.5, 1.0), level=4):
    """Area SD vs mean angle distortion over the balance parameter w (level-4 meshes)."""
    shapes = {"ellipsoid 3:1:1": (lambda: ellipsoid(3, 1, 1, level), 3),
              "ellipsoid 4:1:1": (lambda: ellipsoid(4, 1, 1, level), 4),
              "ellipsoid 6:1:1": (lambda: ellipsoid(6, 1, 1, level), 6),
              "bent tube 3:1": (lambda: bent_tube(6, 1, np.pi / 2, level), None)}
    rows = []
    for name, (make, a) in shapes.items():
        v, f = make()
        est = isoperimetric_angle_estimate(a) if a else None
        for w in weights:
            m = map_to_sphere(v, f, shear_weight=w, source=name)
            rows.append({"shape": name, "shear_weight": w, "area_log_sd": m.qc.area_log_sd,
                         "area_log_p01": m.qc.area_log_p01,
                         "angle_mean_deg": m.qc.angle_distortion_mean_deg,
                         "isoperimetric_estimate_deg": est})
    return rows


def anatomy_surfaces(names):
    try:
        from shapedesc.mesh.template_anatomy import template_structure
        from shapedesc.mesh.volume import mask_to_surface
    except ImportError:
        return {}
    out = {}
    for name, target in names:
        st = template_structure(name)
        surf, _ = mask_to_surface(st.mask, st.affine, source=name, evidence=st.evidence,
                                  target_vertices=target)
        out[f"MNI {name}"] = (surf.vertices, surf.faces)
    return out


def _write(results):
    OUT.parent.mkdir(parents=True, exist_ok=True)
    tmp = OUT.with_suffix(".json.part")
    tmp.write_text(json.dumps(results, indent=2))
    tmp.replace(OUT)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="20k only, tube only")
    ap.add_argument("--no-large", action="store_true", help="skip the 160k-vertex case")
    ap.add_argument("--no-anatomy", action="store_true", help="skip the MNI template surfaces")
    ap.add_argument("--tradeoff", action="store_true",
                    help="only the area-SD vs angle table over the shear weight")
    ap.add_argument("--baseline", metavar="DIR",
                    help="also map every case with the package source in DIR (side by side)")
    ap.add_argument("--repeat", type=int, default=1,
                    help="with --baseline: runs of each code per case (smallest CPU kept)")
    ap.add_argument("--only", nargs="+", metavar="NAME",
                    help="with --baseline: only the cases whose name contains one of these")
    ap.add_argument("--run-one", metavar="NPZ", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.run_one:
        _run_one(args.run_one)
        return 0
    if args.baseline:
        return compare_with_baseline(args)
    results = {"maps": [], "baseline": [], "factorisation": {}, "tradeoff": [],
               "targets_s": {"20k": 3.0, "160k": 30.0}}
    print("area SD vs mean angle distortion over the shear weight w (level 4, 2,562 vertices);"
          "\n'estimate' = isoperimetric estimate for exact area preservation")
    print(f"{'shape':18s} {'w':>5s} {'SD':>7s} {'p1':>7s} {'angle°':>7s} {'estimate°':>9s}")
    for row in shear_tradeoff():
        results["tradeoff"].append(row)
        est = row["isoperimetric_estimate_deg"]
        print(f"{row['shape']:18s} {row['shear_weight']:5.2f} {row['area_log_sd']:7.4f} "
              f"{row['area_log_p01']:7.3f} {row['angle_mean_deg']:7.2f} "
              f"{'' if est is None else f'{est:9.1f}'}")
    _write(results)
    if args.tradeoff:
        return 0
    print()
    cases = _map_cases(args)
    print(f"{'shape':18s} {'V':>7s} {'flips':>5s} {'SD':>7s} {'p1':>7s} {'p99':>7s} "
          f"{'angle°':>7s} {'iter':>5s} {'cpu s':>7s} {'wall s':>7s}  start   (load {os.getloadavg()[0]:.1f})")
    for name, v, f in cases:
        try:
            m, row = run_map(name, v, f)
        except Exception as exc:  # report, keep benchmarking the others
            row = {"shape": name, "n_vertices": len(v), "error": f"{type(exc).__name__}: {exc}"}
            print(f"{name:18s} {len(v):7d} FAILED {row['error']}")
            results["maps"].append(row)
            continue
        results["maps"].append(row)
        _write(results)  # incremental: a long case does not lose the earlier rows
        print(f"{name:18s} {len(v):7d} {row['flips_all_stages']:5d} {row['area_log_sd']:7.4f} "
              f"{row['area_log_p01']:7.3f} {row['area_log_p99']:7.3f} {row['angle_mean_deg']:7.2f} "
              f"{row['iterations']:5d} {row['cpu_s']:7.2f} {row['wall_s']:7.2f}  {row['initial_map']}")
        if name == "bent tube 3:1" or name == "ellipsoid 6:1:1":
            if len(v) < 50000:
                b = baseline(name, v, f, row["cpu_s"])
                b["ours_cpu_s"] = row["cpu_s"]
                b["ours_area_log_sd"] = row["area_log_sd"]
                results["baseline"].append(b)
                print(f"{'  baseline GD':18s} {len(v):7d} {'':5s} {b['area_log_sd']:7.4f} "
                      f"{b['area_log_p01']:7.3f} {b['area_log_p99']:7.3f} "
                      f"{b['angle_mean_deg']:7.2f} {b['iterations']:5d} {b['cpu_s']:7.2f}   "
                      f"(same CPU budget; SD ratio baseline/ours "
                      f"{b['area_log_sd'] / row['area_log_sd']:.1f}x)")
    print("\nfactorisation of the conformal step's reduced Laplacian (CPU s)")
    mats = []
    for fr in ([45] if (args.quick or args.no_large) else [45, 127]):
        v, f = bent_tube(6, 1, np.pi / 2, frequency=fr)
        mats.append((f"tube V={len(v)}", v, f))
        if fr == 45 and not args.quick:  # the same mesh with its vertices renumbered at random
            perm = np.random.default_rng(0).permutation(len(v))
            inv = np.argsort(perm)
            mats.append((f"tube V={len(v)}, shuffled", v[perm], inv[f]))
    for name, (v, f) in anatomy_surfaces([] if args.quick or args.no_anatomy else
                                         [("putamen_left", None)]).items():
        mats.append((f"{name} V={len(v)}", v, f))
    for label, v, f in mats:
        fb = factorisation_bench(v, f)
        results["factorisation"][label] = fb
        print(f"  {label}: real LU + 2 RHS {fb['real_2rhs_s']:.3f}, complex LU + 1 RHS "
              f"{fb['complex_1rhs_s']:.3f} (complex/real {fb['complex_over_real']:.2f}x, max diff "
              f"{fb['max_difference']:.1e})")
        for key in ("COLAMD", "MMD_AT_PLUS_A", "MMD_AT_PLUS_A_sym"):
            print(f"    {key:18s}: {fb[f'{key}_s']:.3f} s, fill {fb[f'{key}_fill']:,}  "
                  f"({fb[f'{key}_s'] / fb['MMD_AT_PLUS_A_sym_s']:.1f}x the symmetric-mode time)")
    _write(results)
    print(f"\nwrote {OUT}")
    return 0


def _map_cases(args):
    """(name, vertices, faces) of the map table: the 20k synthetic shapes, the 160k tube
    (unless --no-large) and the MNI structures (unless --no-anatomy); --quick: one."""
    cases = [(n, *_shapes(45)[n]()) for n in (["bent tube 3:1"] if args.quick else _shapes(45))]
    if not (args.quick or args.no_large):
        cases.append(("bent tube 3:1", *_shapes(127)["bent tube 3:1"]()))
    if not (args.quick or args.no_anatomy):
        for n, (v, f) in anatomy_surfaces([("caudate_left", None), ("putamen_left", None),
                                          ("thalamus_left", None), ("wm_left", 40000)]).items():
            cases.append((n, v, f))
    return cases


def compare_with_baseline(args):
    """``--baseline``: the map cases only, each by both codes, side by side."""
    cases = [("blob 10k (study)", *_study_item())] + _map_cases(args)
    if args.only:
        cases = [c for c in cases if any(k in c[0] for k in args.only)]
    results = {"baseline_dir": args.baseline, "repeat": args.repeat, "pairs": []}
    out = OUT.with_name("sphere_map_vs_baseline.json")
    print(f"baseline: {args.baseline}; CPU s = smallest of {args.repeat} run(s) per code, "
          f"alternating; load average at start {os.getloadavg()}")
    print(f"{'shape':18s} {'V':>7s} {'code':8s} {'flips':>5s} {'SD':>7s} {'p1':>7s} {'p99':>7s} "
          f"{'angle°':>7s} {'iter':>5s} {'cpu s':>7s}  start   (load)")
    for name, v, f in cases:
        base, ours = run_pair(name, v, f, args.baseline, args.repeat)
        for label, row in (("baseline", base), ("ours", ours)):
            print(f"{name:18s} {len(v):7d} {label:8s} {row['flips_all_stages']:5d} "
                  f"{row['area_log_sd']:7.4f} {row['area_log_p01']:7.3f} {row['area_log_p99']:7.3f} "
                  f"{row['angle_mean_deg']:7.2f} {row['iterations']:5d} {row['cpu_s']:7.2f}  "
                  f"{row['initial_map']}  ({os.getloadavg()[0]:.1f})")
        same = base["sha1"] == ours["sha1"]
        print(f"{'':18s} {'':7s} ratio ours/baseline CPU {ours['cpu_s'] / base['cpu_s']:.2f}; "
              f"maps {'bit-identical' if same else 'differ'}; repeats identical: "
              f"{base['repeat_identical']} / {ours['repeat_identical']}")
        results["pairs"].append({"shape": name, "n_vertices": len(v), "baseline": base,
                                 "ours": ours, "bit_identical": same,
                                 "load_after": os.getloadavg()})
        OUT.parent.mkdir(parents=True, exist_ok=True)
        out.write_text(json.dumps(results, indent=2))
    print(f"\nwrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
