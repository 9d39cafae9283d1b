"""Study throughput: N surfaces of ~10,000 vertices with 1 and 2 workers, and a resume.

Targets (issue "Study pipeline"): 200 surfaces of ~10,000 vertices; scaling >= 1.8x
from 1 to 2 workers; all 200 in <= 2 min on 2 cores; a run killed (SIGKILL) at 50 %
and resumed computes only the missing items and writes byte-identical tables.

Runs, side by side in one process and on one frozen copy of the package source (so an
edit made in the checkout while the benchmark runs cannot change its results):

* ``1 worker``: ``run_study(jobs=1)``, in this process (the baseline);
* ``2 workers``: ``run_study(jobs=2)``, the ``spawn`` process pool of ``--jobs 2``;
* ``killed``: ``shapedesc describe --jobs 2`` in a subprocess, SIGKILLed (its whole
  process group) once half the items are in the cache;
* ``resumed``: ``run_study(jobs=2)`` on that OUTDIR.

For each run: wall time, CPU time of this process and of its finished children
(``resource.getrusage``), the load average before and after (other users of the machine
show there), and the mean CPU seconds per item by stage from ``timings.tsv`` (read,
prepare, map, describe, write), plus the *pipeline overhead*: all CPU the run used minus
what the items used (process start and imports, pickling, hashing, cache, tables).
Identity: every reproducible output file (all but ``timings.tsv`` and the cache) of the
2-worker and the resumed run is compared byte for byte with the 1-worker run; the items
the resumed run computed are compared with those missing from the cache after the kill.

    python benchmarks/pipeline_throughput.py [--n 200] [--frequency 32] [--degree 15]
        [--no-resume] [--profile] [--no-snapshot]

``--n 20`` gives a quick reading on a busy machine.  ``--profile`` adds a cProfile of
one item inside a spawned worker (top functions by cumulative time).  Prints a table;
writes benchmarks/results/pipeline_throughput.json.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RESULTS = Path(__file__).resolve().parent / "results" / "pipeline_throughput.json"
_SNAPSHOT_ENV = "SHAPEDESC_BENCH_SNAPSHOT"
STAGES = ("read", "surface", "prepare", "map", "describe", "write")


# ----------------------------------------------------------------------- snapshot
def _snapshot(dest: Path) -> dict:
    """Copy the imported package's source (and its ``cli``) to ``dest/shapedesc``."""
    import importlib.util

    spec = importlib.util.find_spec("shapedesc")
    src = Path(spec.origin).parent
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc")
    shutil.copytree(src, dest / "shapedesc", ignore=ignore)
    cli = importlib.util.find_spec("shapedesc.cli")
    cli_dir = Path(cli.origin).parent
    if not (dest / "shapedesc" / "cli").exists():
        shutil.copytree(cli_dir, dest / "shapedesc" / "cli", ignore=ignore)
    info = {"source": str(src)}
    try:
        repo = src.parent
        info["git_head"] = subprocess.run(["git", "-C", str(repo), "rev-parse", "HEAD"],
                                          capture_output=True, text=True).stdout.strip()
        info["git_modified"] = subprocess.run(
            ["git", "-C", str(repo), "status", "--porcelain", "--", "shapedesc", "cli"],
            capture_output=True, text=True).stdout.split("\n")
        info["git_modified"] = [ln.strip() for ln in info["git_modified"] if ln.strip()]
    except OSError:
        pass
    return info


# ----------------------------------------------------------------------- study
def _make_study(root: Path, n: int, frequency: int, seed: int = 7) -> tuple[Path, int]:
    """n smooth, varied closed surfaces (GIFTI) on a geodesic sphere of given frequency."""
    import numpy as np
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


def _outputs(outdir: Path) -> dict[str, bytes]:
    from shapedesc.pipeline.outputs import UNREPRODUCIBLE

    return {str(p.relative_to(outdir)): p.read_bytes() for p in sorted(outdir.rglob("*"))
            if p.is_file() and ".cache" not in p.parts and p.name not in UNREPRODUCIBLE}


def _differing(a: dict, b: dict) -> list[str]:
    return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))


def _read_tsv(path: Path) -> list[dict]:
    lines = path.read_text().splitlines()
    head = lines[0].split("\t")
    return [dict(zip(head, ln.split("\t"))) for ln in lines[1:]]


# ----------------------------------------------------------------------- runs
def _cpu() -> tuple[float, float]:
    s, c = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return s.ru_utime + s.ru_stime, c.ru_utime + c.ru_stime


def _machine() -> dict | None:
    """CPU time of the whole machine from /proc/stat (Linux): busy, idle and steal (time
    the hypervisor gave this virtual machine's CPUs to others), in seconds; None elsewhere."""
    try:
        fields = [int(x) for x in Path("/proc/stat").read_text().split("\n")[0].split()[1:]]
    except (OSError, ValueError):
        return None
    tick = os.sysconf("SC_CLK_TCK")
    user, nice, system, idle, iowait, irq, softirq, steal = (fields + [0] * 8)[:8]
    return {"busy_s": (user + nice + system + irq + softirq) / tick,
            "idle_s": (idle + iowait) / tick, "steal_s": steal / tick}


def _stage_split(outdir: Path, names: set[str] | None = None) -> dict:
    """Mean CPU and wall seconds per item by stage, from timings.tsv (ok items; only
    ``names`` when given)."""
    rows = [r for r in _read_tsv(outdir / "timings.tsv") if r["status"] == "ok"
            and (names is None or f"{r['subject']}_{r['structure']}" in names)]
    out = {"items": len(rows)}
    for s in STAGES + ("total",):
        for kind in ("cpu", "wall"):
            vals = [float(r[f"{s}_{kind}_s"]) for r in rows if r.get(f"{s}_{kind}_s") not in
                    (None, "n/a")]
            out[f"{s}_{kind}_s"] = statistics.fmean(vals) if vals else 0.0
    tot = [float(r["total_cpu_s"]) for r in rows]
    out["item_cpu_s_sum"] = sum(tot)
    out["item_cpu_s_median"] = statistics.median(tot) if tot else 0.0
    return out


def _timed_run(manifest, outdir: Path, jobs: int, degree: int) -> dict:
    from shapedesc.pipeline.run import DescribeParameters, run_study

    computed: list[str] = []

    def progress(ev):
        if ev.status in ("ok", "failed"):
            computed.append(ev.name)

    load0 = os.getloadavg()
    m0 = _machine()
    self0, child0 = _cpu()
    t0 = time.perf_counter()
    res = run_study(manifest, outdir, parameters=DescribeParameters(degree=degree), jobs=jobs,
                    progress=progress)
    wall = time.perf_counter() - t0
    self1, child1 = _cpu()
    m1 = _machine()
    split = _stage_split(outdir, set(computed))
    cpu_total = (self1 - self0) + (child1 - child0)
    n = max(res.n_computed, 1)
    return {"jobs": jobs, "wall_s": wall, "cpu_parent_s": self1 - self0,
            "cpu_workers_s": child1 - child0, "cpu_total_s": cpu_total,
            "computed": res.n_computed, "cached": res.n_cached, "failed": res.n_failed,
            "computed_names": sorted(computed), "stages": split,
            "overhead_cpu_s_per_item": (cpu_total - split["item_cpu_s_sum"]) / n,
            "items_per_s": res.n_computed / wall if wall else 0.0,
            "load_before": load0, "load_after": os.getloadavg(),
            # CPU seconds the whole machine spent during the run, ours included
            "machine": {k: m1[k] - m0[k] for k in m0} if m0 and m1 else None}


def _kill_at_half(manifest_path: Path, outdir: Path, n: int, jobs: int, degree: int) -> dict:
    """Start describe in a subprocess, SIGKILL its process group at >= 50 % cached."""
    proc = subprocess.Popen([sys.executable, "-m", "shapedesc.cli.main", "-q", "describe",
                             str(manifest_path), "-o", str(outdir), "--jobs", str(jobs),
                             "--degree", str(degree)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            cwd=str(outdir.parent),  # not the source tree (see tests)
                            start_new_session=True)
    t0 = time.perf_counter()
    cache = outdir / ".cache"
    while proc.poll() is None:
        if cache.is_dir() and _entries(cache) >= n // 2:
            break
        time.sleep(0.05)
    ended_early = proc.poll() is not None
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    err = proc.stderr.read().decode(errors="replace")[-2000:]
    proc.stderr.close()
    if ended_early:
        raise RuntimeError(f"describe ended (status {proc.returncode}) before the kill: {err}")
    return {"cached_at_kill": _entries(cache), "seconds_to_kill": time.perf_counter() - t0}


def _missing_after_kill(manifest, outdir: Path, degree: int) -> list[str]:
    """Names of the items whose result is not in the cache (what a resume must compute)."""
    from shapedesc import __version__
    from shapedesc.pipeline.cache import CACHE_DIRNAME, ResultCache, item_key, sha256_file
    from shapedesc.pipeline.run import DescribeParameters

    params = DescribeParameters(degree=degree).as_dict()
    cache = ResultCache(outdir / CACHE_DIRNAME)
    missing = []
    for it in manifest.items:
        key = item_key(input_sha256=sha256_file(it.input), subject=it.subject,
                       structure=it.structure, kind=it.kind, label=it.label,
                       parameters=params, version=__version__)
        if key not in cache:
            missing.append(it.name)
    return sorted(missing)


# ----------------------------------------------------------------------- profile
def _profile_item(task: dict, top: int) -> str:
    """Run in a spawned worker: cProfile of one compute_item call (after a warm-up item
    so imports are not counted)."""
    import cProfile
    import io
    import pstats

    from shapedesc.pipeline.work import compute_item

    compute_item(dict(task, key="warm-up"))
    prof = cProfile.Profile()
    prof.enable()
    compute_item(task)
    prof.disable()
    buf = io.StringIO()
    pstats.Stats(prof, stream=buf).sort_stats("cumulative").print_stats(top)
    return buf.getvalue()


def _profile(manifest, degree: int, top: int = 30) -> str:
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    from shapedesc.pipeline.run import DescribeParameters
    from shapedesc.pipeline.work import init_worker

    it = manifest.items[0]
    task = {"key": "profile", "subject": it.subject, "structure": it.structure,
            "input": it.input, "kind": it.kind, "label": it.label,
            "parameters": DescribeParameters(degree=degree).as_dict()}
    with ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("spawn"),
                             initializer=init_worker) as pool:
        return pool.submit(_profile_item, task, top).result()


# ----------------------------------------------------------------------- main
def _print_runs(runs: dict) -> None:
    head = (f"{'run':<12}{'jobs':>5}{'items':>6}{'wall s':>8}{'items/s':>8}{'CPU s':>8}"
            + "".join(f"{s:>9}" for s in ("read", "prepare", "map", "describe", "write",
                                           "item", "overhd"))
            + f"{'load before/after':>20}")
    print(head)
    print(f"{'':<12}{'':>5}{'':>6}{'':>8}{'':>8}{'':>8}"
          + f"{'(mean CPU s per computed item)':^63}")
    for name, r in runs.items():
        st = r["stages"]
        cells = [st["read_cpu_s"] + st["surface_cpu_s"], st["prepare_cpu_s"], st["map_cpu_s"],
                 st["describe_cpu_s"], st["write_cpu_s"], st["total_cpu_s"],
                 r["overhead_cpu_s_per_item"]]
        print(f"{name:<12}{r['jobs']:>5}{r['computed']:>6}{r['wall_s']:>8.1f}"
              f"{r['items_per_s']:>8.2f}{r['cpu_total_s']:>8.1f}"
              + "".join(f"{c:>9.3f}" for c in cells)
              + f"{r['load_before'][0]:>10.2f}/{r['load_after'][0]:.2f}")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--n", type=int, default=200, help="surfaces (default 200)")
    p.add_argument("--frequency", type=int, default=32,
                   help="geodesic frequency (32: 10,242 vertices)")
    p.add_argument("--degree", type=int, default=15, help="SH degree (default 15)")
    p.add_argument("--no-resume", action="store_true", help="skip the kill/resume runs")
    p.add_argument("--profile", action="store_true",
                   help="also cProfile one item inside a spawned worker")
    p.add_argument("--no-snapshot", action="store_true",
                   help="use the installed package as it is (default: a frozen copy)")
    args = p.parse_args(argv)

    if not args.no_snapshot and not os.environ.get(_SNAPSHOT_ENV):
        with tempfile.TemporaryDirectory(prefix="shapedesc-bench-src-") as snap:
            info = _snapshot(Path(snap))
            env = dict(os.environ, PYTHONPATH=os.pathsep.join(
                [snap] + [x for x in os.environ.get("PYTHONPATH", "").split(os.pathsep) if x]),
                **{_SNAPSHOT_ENV: json.dumps(info)})
            return subprocess.run([sys.executable, str(Path(__file__).resolve()),
                                   *(argv if argv is not None else sys.argv[1:])],
                                  env=env).returncode

    from shapedesc import __version__
    import shapedesc
    from shapedesc.pipeline.manifest import read_manifest

    snapshot = json.loads(os.environ.get(_SNAPSHOT_ENV, "null"))
    out: dict = {"n_surfaces": args.n, "degree": args.degree, "cpus": os.cpu_count(),
                 "python": platform.python_version(), "shapedesc_version": __version__,
                 "package_path": str(Path(shapedesc.__file__).parent), "snapshot": snapshot,
                 "blas_env": {k: os.environ.get(k) for k in ("OMP_NUM_THREADS",
                                                             "OPENBLAS_NUM_THREADS")}}
    with tempfile.TemporaryDirectory(prefix="shapedesc-bench-") as tmp:
        tmp = Path(tmp)
        (tmp / "study").mkdir()
        t0 = time.perf_counter()
        manifest_path, n_vertices = _make_study(tmp / "study", args.n, args.frequency)
        out["n_vertices"] = n_vertices
        out["seconds_make_study"] = time.perf_counter() - t0
        manifest = read_manifest(manifest_path)
        # Imports of one process, measured apart (a worker pays them once when it starts;
        # in the runs below this process has them already).
        from shapedesc.pipeline.work import import_chain, one_blas_thread

        c0, w0 = time.process_time(), time.perf_counter()
        with one_blas_thread():
            import_chain()
        out["imports_cpu_s"] = time.process_time() - c0
        out["imports_wall_s"] = time.perf_counter() - w0
        print(f"pipeline throughput: {args.n} surfaces of {n_vertices} vertices, degree "
              f"{args.degree}, {os.cpu_count()} CPUs, package {out['package_path']}"
              + (f" (frozen copy of {snapshot.get('source')} at "
                 f"{str(snapshot.get('git_head'))[:10]}, "
                 f"{len(snapshot.get('git_modified', []))} modified files)" if snapshot else ""))
        if args.profile:
            text = _profile(manifest, args.degree)
            out["profile"] = text
            print(text)
        runs: dict[str, dict] = {}
        runs["1 worker"] = _timed_run(manifest, tmp / "one", 1, args.degree)
        runs["2 workers"] = _timed_run(manifest, tmp / "two", 2, args.degree)
        ref = _outputs(tmp / "one")
        out["differing_1_vs_2"] = _differing(ref, _outputs(tmp / "two"))
        if not args.no_resume:
            kill = _kill_at_half(manifest_path, tmp / "resume", args.n, 2, args.degree)
            missing = _missing_after_kill(manifest, tmp / "resume", args.degree)
            runs["resumed"] = _timed_run(read_manifest(manifest_path), tmp / "resume", 2,
                                         args.degree)
            out["kill"] = kill
            out["missing_after_kill"] = len(missing)
            out["resume_computed_exactly_the_missing"] = (
                runs["resumed"]["computed_names"] == missing)
            out["differing_resumed_vs_1"] = _differing(ref, _outputs(tmp / "resume"))
    for r in runs.values():
        r.pop("computed_names")
    out["runs"] = runs
    one, two = runs["1 worker"], runs["2 workers"]
    out["scaling_wall"] = one["wall_s"] / two["wall_s"]
    # What the scaling would be if both workers had a core each: CPU per item as
    # measured in each run (contention for caches/memory shows as a higher CPU per item).
    out["cpu_per_item_ratio_2_vs_1"] = two["stages"]["total_cpu_s"] / one["stages"]["total_cpu_s"]
    # A projection, not a measurement: the wall time each run would take if its workers
    # had a core each and nothing else ran (its total CPU over its worker count).
    for r in runs.values():
        r["projected_wall_s_own_cores"] = r["cpu_total_s"] / r["jobs"]
    out["projected_scaling_own_cores"] = (one["projected_wall_s_own_cores"]
                                          / two["projected_wall_s_own_cores"])

    _print_runs(runs)
    print(f"scaling 1 -> 2 workers (wall): {out['scaling_wall']:.2f}x (target >= 1.8x); "
          f"2 workers: {args.n} in {two['wall_s']:.1f} s (target <= 120 s for 200); CPU per "
          f"item with 2 workers / with 1: {out['cpu_per_item_ratio_2_vs_1']:.2f}")
    print(f"projection if each worker had a core to itself (total CPU / workers): 1 worker "
          f"{one['projected_wall_s_own_cores']:.1f} s, 2 workers "
          f"{two['projected_wall_s_own_cores']:.1f} s, scaling "
          f"{out['projected_scaling_own_cores']:.2f}x")
    for name, r in runs.items():
        m = r.get("machine")
        if m:
            print(f"machine during {name}: {m['busy_s']:.1f} s CPU busy (this run "
                  f"{r['cpu_total_s']:.1f} s, so others {max(m['busy_s'] - r['cpu_total_s'], 0):.1f}"
                  f" s), {m['idle_s']:.1f} s idle, {m['steal_s']:.1f} s stolen by the hypervisor")
    print(f"imports of one process: {out['imports_cpu_s']:.2f} s CPU (paid once per worker; "
          f"in the 2-worker overhead, not in the 1-worker one)")
    print(f"reproducible outputs differing, 2 workers vs 1: {out['differing_1_vs_2'] or 'none'}")
    if "kill" in out:
        print(f"killed after {out['kill']['seconds_to_kill']:.1f} s with "
              f"{out['kill']['cached_at_kill']} cached; resume computed "
              f"{runs['resumed']['computed']} (missing after the kill: "
              f"{out['missing_after_kill']}; exactly those: "
              f"{out['resume_computed_exactly_the_missing']}); reproducible outputs "
              f"differing, resumed vs 1 worker: {out['differing_resumed_vs_1'] or 'none'}")
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps(out, indent=2) + "\n")
    print(f"wrote {RESULTS}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
