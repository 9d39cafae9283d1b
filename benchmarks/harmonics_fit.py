"""Benchmark: spherical-harmonic least-squares fits and Gauss-Legendre transforms.

Side by side in the same run with a naive baseline: a complex design matrix built
column by column with ``scipy.special.sph_harm_y`` and solved with
``numpy.linalg.lstsq`` (transforms: the same design matrix on the grid; synthesis is
the matrix-vector product).

``fit`` (method "auto": the CG path where its condition bound holds) is also timed
against the exact direct/moments Cholesky path, with the largest coefficient difference.

Targets (issue 2): the fit of 3 coordinate functions >= 20x faster than the baseline at
(20,000 points, lmax 15) and (150,000 points, lmax 40); peak memory of the 150k fit
< 1 GB (whole-process resident high-water mark of a fresh subprocess doing that fit).

BLAS, OpenMP and ducc0 run single-threaded on both sides (the machine is shared; the
ratio is what counts).  The 150k baseline needs ~4 GB for its design matrix plus the
lstsq workspace and takes minutes; ``--no-large-baseline`` skips it, ``--quick`` runs
small sizes only (smoke test).

Run:  python benchmarks/harmonics_fit.py [--quick] [--no-large-baseline]
Writes benchmarks/results/harmonics_fit.json.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
from scipy.special import sph_harm_y  # noqa: E402

import shapedesc  # noqa: E402
from shapedesc.harmonics import (cartesian_to_spherical, complex_to_real, degrees_orders,  # noqa: E402
                                 evaluate, fit, gl_analysis, gl_grid, gl_synthesis)

RESULTS = Path(__file__).resolve().parent / "results" / "harmonics_fit.json"


def sample(n: int, seed: int):
    """Uniform random unit vectors and the x, y, z of a smooth bumpy closed surface (mm)."""
    rng = np.random.default_rng(seed)
    p = rng.normal(size=(n, 3))
    p /= np.linalg.norm(p, axis=1)[:, None]
    r = 20.0 * (1.0 + 0.15 * np.sin(3 * p[:, 0]) * np.cos(2 * p[:, 1]) + 0.1 * p[:, 2] ** 3)
    xyz = (r[:, None] * p) * np.array([1.0, 0.7, 1.4])
    return p, xyz


def baseline_fit(p, y, lmax):
    theta, phi = cartesian_to_spherical(p)
    l, m = degrees_orders(lmax)
    t0 = time.perf_counter()
    A = np.empty((p.shape[0], l.size), dtype=np.complex128)
    for j in range(l.size):
        A[:, j] = sph_harm_y(l[j], m[j], theta, phi)
    t1 = time.perf_counter()
    c = np.linalg.lstsq(A, y.astype(np.complex128), rcond=None)[0]
    t2 = time.perf_counter()
    del A
    return complex_to_real(c, lmax, real_valued=False).real, t1 - t0, t2 - t1


def best_of(fn, repeat):
    best, out = np.inf, None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def peak_memory_of_fit(n, lmax, seed):
    """Peak memory (MB) of a fresh process that samples the data and runs one fit.

    ``VmHWM`` (resident high-water mark of the process since exec, /proc/self/status) is
    read before and after the fit; ``ru_maxrss`` is not used because Linux carries the
    parent's high-water mark into a forked child.  ``tracemalloc_peak_mb`` is the peak of
    Python/numpy allocations during the fit alone.
    """
    code = (
        "import os\n"
        "for v in ('OMP_NUM_THREADS','OPENBLAS_NUM_THREADS','MKL_NUM_THREADS'): os.environ[v]='1'\n"
        "import sys, json, tracemalloc\n"
        f"sys.path.insert(0, {str(Path(__file__).resolve().parent)!r})\n"
        "from harmonics_fit import sample\n"
        "from shapedesc.harmonics import fit\n"
        "def hwm():\n"
        "    for line in open('/proc/self/status'):\n"
        "        if line.startswith('VmHWM:'): return int(line.split()[1]) / 1024\n"
        f"p, y = sample({n}, {seed})\n"
        "before = hwm()\n"
        f"fit(p, y, {lmax})\n"
        "after = hwm()\n"
        "tracemalloc.start()\n"
        f"fit(p, y, {lmax})\n"
        "peak = tracemalloc.get_traced_memory()[1] / 1024**2\n"
        "print(json.dumps({'before_mb': before, 'peak_mb': after, 'tracemalloc_peak_mb': peak}))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def run_fits(cases, large_baseline):
    rows = []
    for n, lmax, repeat in cases:
        p, y = sample(n, seed=n + lmax)
        t_ours, res = best_of(lambda: fit(p, y, lmax), repeat)
        exact = "moments" if lmax >= 20 else "direct"
        t_exact, res_exact = best_of(lambda: fit(p, y, lmax, method=exact), repeat)
        row = {"n_points": n, "lmax": lmax, "channels": 3, "ours_s": t_ours, "ours_method": res.method,
               "ours_iterations": res.iterations,
               "ours_condition": res.condition, "ours_residual_rms_mm": res.residual_rms.tolist(),
               "exact_method": exact, "exact_s": t_exact,
               "max_coefficient_difference_vs_exact_mm": float(np.abs(
                   res_exact.coefficients.values - res.coefficients.values).max())}
        big = n * (lmax + 1) ** 2 * 16 > 2 * 1024**3
        if big and not large_baseline:
            row.update(baseline_s=None, ratio=None, note="baseline skipped (--no-large-baseline)")
        else:
            cb, t_design, t_solve = baseline_fit(p, y, lmax)
            row.update(baseline_s=t_design + t_solve, baseline_design_s=t_design,
                       baseline_lstsq_s=t_solve, ratio=(t_design + t_solve) / t_ours,
                       max_coefficient_difference_mm=float(np.abs(cb - res.coefficients.values).max()))
        if n >= 100_000 or n == cases[-1][0]:
            row["peak_memory"] = peak_memory_of_fit(n, lmax, seed=n + lmax)
        rows.append(row)
    return rows


def run_transforms(levels, baseline_max):
    rows = []
    for lmax in levels:
        rng = np.random.default_rng(lmax)
        c = rng.normal(size=((lmax + 1) ** 2, 1))
        g = gl_grid(lmax)
        vals = evaluate(c, lmax, g.points)
        rep = 5 if lmax <= 64 else 3
        t_an, an = best_of(lambda: gl_analysis(vals, lmax), rep)
        t_syn, syn = best_of(lambda: gl_synthesis(an), rep)
        row = {"lmax": lmax, "grid": list(g.shape), "ours_analysis_s": t_an, "ours_synthesis_s": t_syn,
               "ours_analysis_error": float(np.abs(an.values - c).max()),
               "ours_synthesis_error": float(np.abs(syn - vals).max())}
        if lmax <= baseline_max:
            theta, phi = cartesian_to_spherical(g.points)
            l, m = degrees_orders(lmax)
            t0 = time.perf_counter()
            A = np.empty((g.n_points, l.size), dtype=np.complex128)
            for j in range(l.size):
                A[:, j] = sph_harm_y(l[j], m[j], theta, phi)
            t1 = time.perf_counter()
            a = np.linalg.lstsq(A, vals.astype(np.complex128), rcond=None)[0]
            t2 = time.perf_counter()
            back = (A @ a).real
            t3 = time.perf_counter()
            del A
            row.update(baseline_analysis_s=t2 - t0, baseline_synthesis_s=(t1 - t0) + (t3 - t2),
                       analysis_ratio=(t2 - t0) / t_an, synthesis_ratio=((t1 - t0) + (t3 - t2)) / t_syn,
                       baseline_analysis_error=float(np.abs(complex_to_real(a, lmax, real_valued=False).real - c).max()))
        else:
            gb = g.n_points * (lmax + 1) ** 2 * 16 / 1024**3
            row.update(baseline_analysis_s=None, note=f"baseline skipped: its design matrix alone is {gb:.1f} GB")
        rows.append(row)
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes only (smoke test)")
    ap.add_argument("--no-large-baseline", action="store_true",
                    help="skip baselines whose design matrix exceeds 2 GB")
    args = ap.parse_args(argv)
    if args.quick:
        fit_cases = [(5_000, 10, 3), (20_000, 15, 3)]
        levels, baseline_max = [16, 32], 32
    else:
        fit_cases = [(20_000, 15, 3), (150_000, 40, 1)]
        levels, baseline_max = [16, 32, 64, 128], 64
    t_start = time.perf_counter()
    fits = run_fits(fit_cases, large_baseline=not args.no_large_baseline)
    transforms = run_transforms(levels, baseline_max)
    out = {
        "benchmark": "harmonics_fit",
        "shapedesc_version": shapedesc.__version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "threads": {v: os.environ.get(v) for v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS")},
        "ducc0_nthreads": 1,
        "machine": platform.machine(),
        "cpu_count": os.cpu_count(),
        "load_average_1min_at_end": os.getloadavg()[0],
        "fit": fits,
        "transforms": transforms,
        "targets": {"fit_ratio_min": 20.0, "peak_memory_mb_max": 1024.0},
        "total_s": time.perf_counter() - t_start,
    }
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    try:
        from shapedesc.io.atomic import write_text_atomic
        write_text_atomic(RESULTS, json.dumps(out, indent=2))
    except ImportError:  # pragma: no cover - atomic writer missing in a partial checkout
        RESULTS.write_text(json.dumps(out, indent=2))

    def f(x, fmt="{:.3f}"):
        return "-" if x is None else fmt.format(x)

    print("Least-squares fit, 3 coordinate functions (seconds, single thread)")
    print(f"{'points':>8} {'lmax':>4} {'method':>7} {'ours':>9} {'exact':>9} {'baseline':>10} {'ratio':>7} "
          f"{'peak MB':>8} {'max|Δc| mm':>11} {'vs exact':>9}")
    for r in fits:
        pk = r.get("peak_memory", {}).get("peak_mb")
        print(f"{r['n_points']:>8} {r['lmax']:>4} {r['ours_method']:>7} {f(r['ours_s']):>9} "
              f"{f(r['exact_s']):>9} {f(r['baseline_s']):>10} "
              f"{f(r['ratio'], '{:.1f}x'):>7} {f(pk, '{:.0f}'):>8} "
              f"{f(r.get('max_coefficient_difference_mm'), '{:.1e}'):>11} "
              f"{r['max_coefficient_difference_vs_exact_mm']:>9.1e}")
    print("ours = fit(method='auto'); exact = the direct/moments Cholesky path; ratio = baseline / ours")
    print("\nGauss-Legendre transforms, 1 channel (seconds)")
    print(f"{'lmax':>5} {'grid':>10} {'analysis':>9} {'baseline':>9} {'ratio':>9} {'synthesis':>10} "
          f"{'baseline':>9} {'ratio':>9} {'error':>8}")
    for r in transforms:
        print(f"{r['lmax']:>5} {'x'.join(map(str, r['grid'])):>10} {f(r['ours_analysis_s'], '{:.4f}'):>9} "
              f"{f(r.get('baseline_analysis_s')):>9} {f(r.get('analysis_ratio'), '{:.0f}x'):>9} "
              f"{f(r['ours_synthesis_s'], '{:.4f}'):>10} {f(r.get('baseline_synthesis_s')):>9} "
              f"{f(r.get('synthesis_ratio'), '{:.0f}x'):>9} {r['ours_analysis_error']:>8.1e}")
    print(f"\nwrote {RESULTS}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
