"""The real chain across processes: --jobs 2 vs 1, resume after kill -9, Dask LocalCluster.

Identity is checked byte for byte on every output file (tables, coefficient files,
run.json, dataset_description.json), which is stronger than any tolerance: the
executors must not change a single result (common practice for reproducible batch
pipelines).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import trimesh

from shapedesc.pipeline.manifest import read_manifest
from shapedesc.pipeline.run import DescribeParameters, run_study


def _gifti(path: Path, mesh: trimesh.Trimesh) -> None:
    from shapedesc.io.surfaces import write_surface
    from shapedesc.surface import Surface

    path.parent.mkdir(parents=True, exist_ok=True)
    write_surface(Surface(mesh.vertices, mesh.faces, source=str(path)), path, overwrite=True)


def _study(root: Path, n: int, *, subdivisions: int = 2, bad: bool = True) -> Path:
    rng = np.random.default_rng(5)
    rows = [["subject", "input", "group"]]
    for k in range(n):
        mesh = trimesh.creation.icosphere(subdivisions=subdivisions, radius=6.0)
        mesh.apply_scale(1.0 + 0.4 * rng.random(3))
        _gifti(root / f"s{k:03d}_blob.surf.gii", mesh)
        rows.append([f"s{k:03d}", f"s{k:03d}_blob.surf.gii", "AB"[k % 2]])
    if bad:
        (root / "bad.surf.gii").write_bytes(b"\x00" * 64)
        rows.append(["zz", "bad.surf.gii", "A"])
    (root / "manifest.tsv").write_text("\n".join("\t".join(r) for r in rows) + "\n")
    return root / "manifest.tsv"


def _entries(cache: Path) -> int:
    """Finished cache entries (not the hidden temporary file of a write in progress)."""
    return sum(1 for p in cache.rglob("*.json") if not p.name.startswith("."))


def _files(outdir: Path) -> dict[str, bytes]:
    """Every output file except the cache and timings.tsv (CPU/wall seconds, the one
    table documented as changing from run to run)."""
    from shapedesc.pipeline.outputs import UNREPRODUCIBLE

    return {str(p.relative_to(outdir)): p.read_bytes() for p in sorted(outdir.rglob("*"))
            if p.is_file() and ".cache" not in p.parts and p.name not in UNREPRODUCIBLE}


PARAMS = DescribeParameters(degree=6)


def test_two_local_workers_give_the_same_bytes_as_one(tmp_path):
    manifest = read_manifest(_study(tmp_path / "study", 4))
    one = run_study(manifest, tmp_path / "one", parameters=PARAMS, jobs=1)
    two = run_study(manifest, tmp_path / "two", parameters=PARAMS, jobs=2)
    assert (one.n_failed, two.n_failed) == (1, 1)
    a, b = _files(tmp_path / "one"), _files(tmp_path / "two")
    assert len(a) == 4 + 7 and a == b   # 4 coefficient files + 5 tables + 2 JSON


def _group_alive(pgid: int) -> bool:
    try:
        os.killpg(pgid, 0)
    except ProcessLookupError:
        return False
    return True


def test_resume_after_kill_9_computes_only_the_rest(tmp_path):
    """``kill -9`` of ``describe --jobs 2`` (the parent alone, as a user would): its
    workers exit by themselves, and a rerun computes only the missing items and writes
    the same bytes as an uninterrupted run."""
    n = 8
    manifest_path = _study(tmp_path / "study", n, bad=False)
    out = tmp_path / "out"
    proc = subprocess.Popen(
        [sys.executable, "-m", "shapedesc.cli.main", "-q", "describe", str(manifest_path),
         "-o", str(out), "--degree", "6", "--jobs", "2"],
        # cwd outside the source tree: `python -m` puts the cwd first on sys.path, and the
        # source tree's shapedesc/ (without cli/, which is mapped in at install) would win
        cwd=str(tmp_path), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
        start_new_session=True)   # its own process group: the workers can be found
    try:
        cache = out / ".cache"
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if cache.is_dir() and _entries(cache) >= 2:
                break
            time.sleep(0.01)
        if proc.poll() is not None:
            pytest.fail(f"describe ended (status {proc.returncode}) before it could be "
                        f"killed: {proc.stderr.read().decode()[-2000:]}")
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        proc.stderr.close()
        # the workers notice within WORKER_PARENT_POLL_S (1 s) once their item is done;
        # 60 s leaves room for an item on a loaded machine
        deadline = time.monotonic() + 60
        while _group_alive(proc.pid) and time.monotonic() < deadline:
            time.sleep(0.1)
        assert not _group_alive(proc.pid), "worker processes outlived the killed run"
    finally:
        if _group_alive(proc.pid):
            os.killpg(proc.pid, signal.SIGKILL)
    done_before = _entries(cache)
    assert 2 <= done_before < n
    assert not (out / "spectra.tsv").exists()      # tables are written at the end only
    resumed = run_study(read_manifest(manifest_path), out, parameters=PARAMS)
    assert (resumed.n_cached, resumed.n_computed) == (done_before, n - done_before)
    fresh = run_study(read_manifest(manifest_path), tmp_path / "fresh", parameters=PARAMS)
    assert fresh.n_computed == n
    assert _files(out) == _files(tmp_path / "fresh")


@pytest.mark.slow
def test_dask_local_cluster_gives_the_same_bytes(tmp_path, full):
    distributed = pytest.importorskip("distributed")
    manifest = read_manifest(_study(tmp_path / "study", 20 if full else 2))
    run_study(manifest, tmp_path / "local", parameters=PARAMS, jobs=1)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None, silence_logs=40) as cluster:
        res = run_study(manifest, tmp_path / "dask", parameters=PARAMS,
                        scheduler=cluster.scheduler_address)
    assert res.n_failed == 1 and res.n_computed == res.n_items
    assert _files(tmp_path / "dask") == _files(tmp_path / "local")
