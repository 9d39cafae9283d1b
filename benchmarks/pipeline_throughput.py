"""Study throughput: 200 surfaces of ~10,000 vertices with 1 and 2 workers, and a resume.

Targets (issue "Study pipeline"): scaling >= 1.8x from 1 to 2 workers; all 200 in
<= 2 min on 2 cores; a run killed (SIGKILL) at 50 % and resumed computes only the rest
and writes byte-identical tables.

The baseline in the same run is the 1-worker run (in-process, one BLAS thread); the
2-worker run uses the ``spawn`` process pool of ``shapedesc describe --jobs 2``.

    python benchmarks/pipeline_throughput.py [--n 200] [--frequency 32]

Prints a table; writes benchmarks/results/pipeline_throughput.json.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).resolve().parent / "results" / "pipeline_throughput.json"


def _make_study(root: Path, n: int, frequency: int, seed: int = 7) -> Path:
    """n smooth, varied closed surfaces (GIFTI) on a geodesic sphere of given frequency."""
    from nibabel import save
    from nibabel.gifti import GiftiDataArray, GiftiImage

    from shapedesc.shapes import icosphere

    u, f = icosphere(frequency=frequency)
    rng = np.random.default_rng(seed)
    rows = ["subject\tinput\tgroup"]
    for k in range(n):
        axes = np.array([14.0, 7.0, 5.0]) * (1 + 0.1 * rng.normal(size=3))
        x, y, z = u.T
        bump = 0.6 * rng.normal(size=4)
        r = 1 + 0.05 * (bump[0] * x * y + bump[1] * y * z + bump[2] * (x * x - y * y)
                        + bump[3] * x * z)
        v = u * axes * r[:, None]
        path = root / f"sub-{k:03d}_blob.surf.gii"
        save(GiftiImage(darrays=[
            GiftiDataArray(v.astype(np.float32), intent="NIFTI_INTENT_POINTSET",
                           datatype="NIFTI_TYPE_FLOAT32"),
            GiftiDataArray(np.asarray(f, np.int32), intent="NIFTI_INTENT_TRIANGLE",
                           datatype="NIFTI_TYPE_INT32")]), str(path))
        rows.append(f"sub-{k:03d}\t{path.name}\t{'AB'[k % 2]}")
    (root / "manifest.tsv").write_text("\n".join(rows) + "\n")
    return root / "manifest.tsv", len(u)


def _entries(cache: Path) -> int:
    """Finished cache entries (not the hidden temporary file of a write in progress)."""
    return sum(1 for p in cache.rglob("*.json") if not p.name.startswith("."))


def _tables(outdir: Path) -> dict[str, bytes]:
    return {str(p.relative_to(outdir)): p.read_bytes() for p in sorted(outdir.rglob("*"))
            if p.is_file() and ".cache" not in p.parts}


def _timed_run(manifest, outdir, jobs):
    from shapedesc.pipeline.run import DescribeParameters, run_study

    t0 = time.perf_counter()
    res = run_study(manifest, outdir, parameters=DescribeParameters(), jobs=jobs)
    return time.perf_counter() - t0, res


def _kill_at_half(manifest_path: Path, outdir: Path, n: int, jobs: int) -> tuple[int, float]:
    """Start describe in a subprocess, SIGKILL its process group at >= 50 % cached."""
    proc = subprocess.Popen([sys.executable, "-m", "shapedesc.cli.main", "-q", "describe",
                             str(manifest_path), "-o", str(outdir), "--jobs", str(jobs)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            cwd=str(outdir.parent),  # not the source tree (see tests)
                            start_new_session=True)
    t0 = time.perf_counter()
    cache = outdir / ".cache"
    while proc.poll() is None:
        if cache.is_dir() and _entries(cache) >= n // 2:
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    return _entries(cache), time.perf_counter() - t0


def main(argv=None) -> int:
    p = argparse.ArgumentParser()
    p.add_argument("--n", type=int, default=200)
    p.add_argument("--frequency", type=int, default=32, help="geodesic frequency (32: 10,242 vertices)")
    args = p.parse_args(argv)
    from shapedesc import __version__
    from shapedesc.pipeline.manifest import read_manifest

    with tempfile.TemporaryDirectory(prefix="shapedesc-bench-") as tmp:
        tmp = Path(tmp)
        (tmp / "study").mkdir()
        t0 = time.perf_counter()
        manifest_path, n_vertices = _make_study(tmp / "study", args.n, args.frequency)
        t_make = time.perf_counter() - t0
        manifest = read_manifest(manifest_path)
        t1, r1 = _timed_run(manifest, tmp / "one", 1)
        t2, r2 = _timed_run(manifest, tmp / "two", 2)
        identical_12 = _tables(tmp / "one") == _tables(tmp / "two")
        cached, t_kill = _kill_at_half(manifest_path, tmp / "resume", args.n, 2)
        t3, r3 = _timed_run(read_manifest(manifest_path), tmp / "resume", 2)
        t_res, t_two = _tables(tmp / "resume"), _tables(tmp / "two")
        identical_resume = t_res == t_two
        differing = sorted(k for k in set(t_res) | set(t_two) if t_res.get(k) != t_two.get(k))
        tables_resume = all(t_res.get(k) == t_two.get(k) for k in t_two if k.endswith(".tsv"))
    rows = [
        ("1 worker", args.n, t1, args.n / t1, r1.n_computed, r1.n_failed),
        ("2 workers", args.n, t2, args.n / t2, r2.n_computed, r2.n_failed),
        (f"resume after kill at {cached}", args.n, t3, (args.n - cached) / t3 if t3 else 0.0,
         r3.n_computed, r3.n_failed),
    ]
    print(f"pipeline throughput: {args.n} surfaces of {n_vertices} vertices, degree 15, "
          f"{os.cpu_count()} CPUs (study written in {t_make:.1f} s)")
    print(f"{'run':<28}{'items':>7}{'time s':>10}{'items/s':>10}{'computed':>10}{'failed':>8}")
    for name, n, t, rate, comp, fail in rows:
        print(f"{name:<28}{n:>7}{t:>10.1f}{rate:>10.2f}{comp:>10}{fail:>8}")
    scaling = t1 / t2
    print(f"scaling 1 -> 2 workers: {scaling:.2f}x (target >= 1.8x); 2 workers all {args.n} in "
          f"{t2:.1f} s (target <= 120 s); killed after {t_kill:.1f} s with {cached} cached, "
          f"resume computed {r3.n_computed} (expected {args.n - cached}); tables identical "
          f"1 vs 2 workers: {identical_12}, resumed vs uninterrupted: {identical_resume} "
          f"(.tsv tables alone: {tables_resume}; differing files: {differing[:5]})")
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps({
        "n_surfaces": args.n, "n_vertices": n_vertices, "degree": 15,
        "cpus": os.cpu_count(), "python": platform.python_version(),
        "shapedesc_version": __version__,
        "seconds_1_worker": t1, "seconds_2_workers": t2, "scaling": scaling,
        "items_per_s_1": args.n / t1, "items_per_s_2": args.n / t2,
        "killed_with_cached": cached, "resume_seconds": t3,
        "resume_computed": r3.n_computed, "resume_expected": args.n - cached,
        "identical_1_vs_2": identical_12, "identical_resume": identical_resume,
        "tables_identical_resume": tables_resume, "differing_files_resume": differing,
        "failed": [r1.n_failed, r2.n_failed, r3.n_failed],
    }, indent=2) + "\n")
    print(f"wrote {RESULTS}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
