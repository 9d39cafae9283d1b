"""Study runs: failures recorded while the rest goes on, outputs, resume, refusals.

In this process (``jobs=1``) on the real per-structure chain (reader, repair,
label volume -> surface, sphere map and expansion) with small meshes and degree 4, so
each item takes a fraction of a second.  Across processes and on Dask:
``test_pipeline_parallel.py``.
"""

from __future__ import annotations

import hashlib
import io
import json
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
import trimesh

from shapedesc.errors import OutputExistsError
from shapedesc.pipeline.manifest import read_manifest
from shapedesc.pipeline.run import DescribeParameters, exit_status, run_study


# --------------------------------------------------------------------------- study
def _gifti(path: Path, mesh: trimesh.Trimesh) -> None:
    from shapedesc.io.surfaces import write_surface
    from shapedesc.surface import Surface

    path.parent.mkdir(parents=True, exist_ok=True)
    write_surface(Surface(mesh.vertices, mesh.faces, source=str(path)), path, overwrite=True)


def _label_volume(path: Path, labels=(1, 2)) -> None:
    data = np.zeros((16, 12, 12), dtype=np.uint8)
    z, y, x = np.mgrid[:16, :12, :12]
    if 1 in labels:
        data[((z - 5) / 3.5) ** 2 + ((y - 6) / 3.0) ** 2 + ((x - 6) / 2.5) ** 2 <= 1] = 1
    if 2 in labels:
        data[((z - 11.5) / 2.5) ** 2 + ((y - 6) / 2.5) ** 2 + ((x - 6) / 2.5) ** 2 <= 1] = 2
    path.parent.mkdir(parents=True, exist_ok=True)
    nib.save(nib.Nifti1Image(data, np.diag([1.0, 1.0, 1.0, 1.0])), str(path))


def make_study(root: Path, *, n: int = 4, bad: bool = True) -> Path:
    """A small study: n subjects with one sphere-like surface each, one label volume
    with two labels, and (``bad``) a corrupt file, a torus and a missing label."""
    rows = [["subject", "input", "labels", "structures", "group", "age"]]
    for k in range(n):
        mesh = trimesh.creation.icosphere(subdivisions=2, radius=8.0 + k)
        mesh.apply_scale([1.0 + 0.1 * k, 1.0, 0.9])
        _gifti(root / "surf" / f"s{k:02d}_blob.surf.gii", mesh)
        rows.append([f"s{k:02d}", f"surf/s{k:02d}_blob.surf.gii", "", "", "AB"[k % 2], str(60 + k)])
    _label_volume(root / "vol" / "v01.nii.gz")
    rows.append(["v01", "vol/v01.nii.gz", "1,2", "arc,bean", "A", "70"])
    if bad:
        (root / "surf" / "x_corrupt.surf.gii").write_bytes(b"<?xml version='1.0'?><GIFTI trunc")
        rows.append(["x1", "surf/x_corrupt.surf.gii", "", "blob", "B", "71"])
        _gifti(root / "surf" / "x_torus.surf.gii",
               trimesh.creation.torus(major_radius=10, minor_radius=3, major_sections=16,
                                      minor_sections=8))
        rows.append(["x2", "surf/x_torus.surf.gii", "", "blob", "B", "72"])
        _label_volume(root / "vol" / "x3.nii.gz", labels=(1,))
        rows.append(["x3", "vol/x3.nii.gz", "1,2", "arc,bean", "A", "73"])
    path = root / "manifest.tsv"
    path.write_text("\n".join("\t".join(r) for r in rows) + "\n", encoding="utf-8")
    return path


def _tables(outdir: Path) -> dict[str, bytes]:
    """Every output file's bytes except the cache and timings.tsv (CPU/wall seconds)."""
    from shapedesc.pipeline.outputs import UNREPRODUCIBLE

    out = {}
    for p in sorted(outdir.rglob("*")):
        if p.is_file() and ".cache" not in p.parts and p.name not in UNREPRODUCIBLE:
            out[str(p.relative_to(outdir))] = p.read_bytes()
    return out


def _read_tsv(path: Path) -> list[dict]:
    lines = path.read_text().splitlines()
    header = lines[0].split("\t")
    return [dict(zip(header, line.split("\t"))) for line in lines[1:]]


PARAMS = DescribeParameters(degree=4)


def test_bad_subjects_are_recorded_and_the_rest_goes_on(tmp_path):
    manifest = read_manifest(make_study(tmp_path / "study"))
    out = tmp_path / "out"
    result = run_study(manifest, out, parameters=PARAMS)
    assert (result.n_items, result.n_failed) == (4 + 2 + 1 + 1 + 2, 3)
    assert result.exit_status == 3
    failures = _read_tsv(out / "failures.tsv")
    assert [(f["subject"], f["structure"], f["stage"]) for f in failures] == [
        ("x1", "blob", "read"), ("x2", "blob", "prepare"), ("x3", "bean", "surface")]
    assert "SurfaceFormatError" in failures[0]["error"]
    assert "Euler characteristic 0" in failures[1]["error"]   # a torus: chi = 0 (genus 1)
    assert "label 2 is absent" in failures[2]["error"]
    assert failures[0]["input"] == "surf/x_corrupt.surf.gii"

    spectra = _read_tsv(out / "spectra.tsv")
    assert [(r["subject"], r["structure"]) for r in spectra] == sorted(
        [(f"s{k:02d}", "blob") for k in range(4)] + [("v01", "arc"), ("v01", "bean"),
                                                     ("x3", "arc")])
    header = (out / "spectra.tsv").read_text().splitlines()[0].split("\t")
    assert header == ["subject", "structure", "group", "age", "l1", "l2", "l3", "l4"]
    assert spectra[0]["group"] == "A" and spectra[1]["age"] == "61"
    qc = _read_tsv(out / "qc.tsv")
    # the label_to_surface report is carried into qc.tsv (voxel count checked with nibabel)
    n_bean = int((np.asarray(nib.load(tmp_path / "study" / "vol" / "v01.nii.gz").dataobj) == 2).sum())
    assert (qc[-2]["structure"], qc[-2]["volume_voxels_in_label"]) == ("bean", str(n_bean))
    assert qc[0]["volume_voxels_in_label"] == "n/a"
    assert (out / "qc.tsv").read_text().splitlines()[0].startswith("subject\tstructure\tinput\t")
    for name in ("spectra_mm2.tsv", "shape.tsv"):
        assert len(_read_tsv(out / name)) == 7
    # a coefficient file per success, holding what describe wrote
    coeff = sorted(p.name for p in (out / "coefficients").iterdir())
    assert coeff == sorted(f"{r['subject']}_{r['structure']}.npz" for r in spectra)
    from shapedesc.descriptors import read_coefficients

    assert read_coefficients(out / "coefficients" / "v01_bean.npz").lmax == 4
    # BIDS derivative description and provenance
    desc = json.loads((out / "dataset_description.json").read_text())
    assert desc["DatasetType"] == "derivative" and desc["GeneratedBy"][0]["Name"] == "shapedesc"
    run = json.loads((out / "run.json").read_text())
    assert run["parameters"]["degree"] == 4 and run["complete"] and run["failed"] == 3
    sha = {i["path"]: i["sha256"] for i in run["inputs"]}
    # SHA-256 checked against hashlib (Python standard library)
    assert sha["vol/v01.nii.gz"] == hashlib.sha256(
        (tmp_path / "study" / "vol" / "v01.nii.gz").read_bytes()).hexdigest()
    assert run["dependencies"]["numpy"] == np.__version__


def test_rerun_computes_nothing_and_writes_identical_bytes(tmp_path):
    manifest = read_manifest(make_study(tmp_path / "study", n=2))
    out = tmp_path / "out"
    run_study(manifest, out, parameters=PARAMS)
    first = _tables(out)
    again = run_study(manifest, out, parameters=PARAMS)
    assert (again.n_computed, again.n_cached) == (0, again.n_items)
    assert _tables(out) == first
    # a subject dropped from the manifest leaves the tables and coefficients/ with it
    path = tmp_path / "study" / "manifest.tsv"
    path.write_text("".join(ln for ln in path.read_text().splitlines(keepends=True)
                            if not ln.startswith("s01\t")))
    fewer = run_study(read_manifest(path), out, parameters=PARAMS)
    assert (fewer.n_computed, fewer.n_items) == (0, again.n_items - 1)
    assert not (out / "coefficients" / "s01_blob.npz").exists()
    assert (out / "coefficients" / "s00_blob.npz").read_bytes() == first["coefficients/s00_blob.npz"]
    assert "s01" not in (out / "spectra.tsv").read_text()


def test_sphere_maps_are_written_for_figures_and_reproducible(tmp_path):
    manifest = read_manifest(make_study(tmp_path / "study", n=2, bad=False))
    out = tmp_path / "out"
    run_study(manifest, out, parameters=DescribeParameters(degree=4, sphere_maps=True))
    folder = out / "coefficients"
    surf = nib.load(folder / "s00_blob_surface.surf.gii")   # read back with nibabel
    sph = nib.load(folder / "s00_blob_sphere.surf.gii")
    dist = nib.load(folder / "s00_blob_distortion.shape.gii")
    v, f = (surf.agg_data("NIFTI_INTENT_POINTSET"), surf.agg_data("NIFTI_INTENT_TRIANGLE"))
    x, g = (sph.agg_data("NIFTI_INTENT_POINTSET"), sph.agg_data("NIFTI_INTENT_TRIANGLE"))
    assert np.array_equal(f, g) and x.shape == v.shape
    np.testing.assert_allclose(np.linalg.norm(x, axis=1), 1.0, atol=1e-6)  # float32 unit vectors
    names = [da.meta["Name"] for da in dist.darrays]
    assert names == ["area_log_ratio", "angle_distortion_deg", "shear_log_anisotropy"]
    lr, ang, shear = (da.data for da in dist.darrays)
    assert lr.shape == ang.shape == shear.shape == (len(v),) and np.all(ang >= 0)
    assert np.all(shear >= 0) and np.all(np.isfinite(shear))  # log σ1/σ2 >= 0
    # the area map recomputed from the two saved meshes, a third of each face's area to
    # its vertices: trimesh's face areas on the surface, solid angles (Van Oosterom &
    # Strackee 1983) on the sphere; 1e-4: float32 storage of both meshes
    a, b, c = (x[f[:, k]].astype(np.float64) for k in range(3))
    a, b, c = (u / np.linalg.norm(u, axis=1, keepdims=True) for u in (a, b, c))
    omega = 2 * np.arctan2(np.einsum("ij,ij->i", a, np.cross(b, c)),
                           1 + (a * b).sum(1) + (b * c).sum(1) + (c * a).sum(1))
    areas = [trimesh.Trimesh(v, f, process=False).area_faces, omega]
    va = [np.bincount(f.ravel(), np.repeat(ar / 3, 3), len(v)) for ar in areas]
    np.testing.assert_allclose(lr, np.log((va[1] / va[1].sum()) / (va[0] / va[0].sum())),
                               atol=1e-4)
    # from the cache: the same bytes; without the option none of these files, and
    # run.json (hence the cache keys) as before the option existed
    first = _tables(out)
    again = run_study(manifest, out, parameters=DescribeParameters(degree=4, sphere_maps=True))
    assert again.n_computed == 0 and _tables(out) == first
    plain = tmp_path / "plain"
    run_study(manifest, plain, parameters=PARAMS)
    assert not list((plain / "coefficients").glob("*.gii"))
    assert "sphere_maps" not in json.loads((plain / "run.json").read_text())["parameters"]


def test_resume_computes_only_missing_items(tmp_path):
    manifest = read_manifest(make_study(tmp_path / "study", n=2, bad=False))
    full = tmp_path / "full"
    run_study(manifest, full, parameters=PARAMS)
    # An interrupted run: the cache holds only some items, coefficient files and the
    # tables are partly missing (what a kill between two items leaves behind).
    part = tmp_path / "part"
    run_study(manifest, part, parameters=PARAMS)
    entries = sorted((part / ".cache").rglob("*.json"))
    for p in entries[::2]:
        p.unlink()
    for p in (part / "coefficients").iterdir():
        p.unlink()
    (part / "spectra.tsv").unlink()
    resumed = run_study(manifest, part, parameters=PARAMS)
    assert resumed.n_computed == len(entries[::2])
    assert resumed.n_cached == len(entries) - len(entries[::2])
    assert _tables(part) == _tables(full)
    for name in ("spectra.tsv", "spectra_mm2.tsv", "shape.tsv", "qc.tsv"):
        assert name in _tables(part)


def test_timings_table_splits_each_item_by_stage(tmp_path):
    manifest = read_manifest(make_study(tmp_path / "study", n=2))
    out = tmp_path / "out"
    run_study(manifest, out, parameters=PARAMS)
    rows = _read_tsv(out / "timings.tsv")
    ok = {(r["subject"], r["structure"]) for r in _read_tsv(out / "spectra.tsv")}
    assert {(r["subject"], r["structure"]) for r in rows if r["status"] == "ok"} == ok
    # computed failures have a row too (their timings up to the failing stage)
    assert {r["subject"] for r in rows if r["status"] == "failed"} == {"x1", "x2", "x3"}
    stages = ("read", "surface", "prepare", "map", "describe", "write")
    for r in rows:
        cpu = [float(r[f"{s}_cpu_s"]) for s in stages]
        # the stages are consecutive slices of the item's time, so they add up to at
        # most its total (process_time resolution is far below 1 ms on Linux; the
        # 1e-3 s allowance is for that rounding, common practice)
        assert min(cpu) >= 0 and sum(cpu) <= float(r["total_cpu_s"]) + 1e-3
        assert float(r["total_wall_s"]) > 0
    # wall-clock columns live here and nowhere in qc.tsv (which must be reproducible)
    header = (out / "timings.tsv").read_text().splitlines()[0].split("\t")
    assert any(c.startswith("map_seconds_") for c in header)
    qc_header = (out / "qc.tsv").read_text().splitlines()[0].split("\t")
    assert not [c for c in qc_header if "seconds" in c or c.endswith(("_cpu_s", "_wall_s"))]
    surf = next(r for r in rows if r["subject"] == "s00")
    assert float(surf["surface_cpu_s"]) == 0 and float(surf["map_cpu_s"]) > 0
    vol = next(r for r in rows if r["subject"] == "v01")
    assert float(vol["surface_wall_s"]) > 0
    # a rerun takes every item from the cache, timings included: the same table
    before = (out / "timings.tsv").read_bytes()
    run_study(manifest, out, parameters=PARAMS)
    assert (out / "timings.tsv").read_bytes() == before


def test_outputs_do_not_depend_on_where_the_study_lives(tmp_path):
    import shutil

    make_study(tmp_path / "a" / "study", n=2)
    shutil.copytree(tmp_path / "a" / "study", tmp_path / "b" / "deeper" / "study")
    for where in ("a", "b/deeper"):
        run_study(read_manifest(tmp_path / where / "study" / "manifest.tsv"),
                  tmp_path / where / "out", parameters=PARAMS)
    a, b = _tables(tmp_path / "a" / "out"), _tables(tmp_path / "b" / "deeper" / "out")
    assert a == b
    # messages name the input as the manifest wrote it (the error message would
    # otherwise hold the absolute path), also inside the coefficient files
    error = _read_tsv(tmp_path / "a" / "out" / "failures.tsv")[0]["error"]
    assert "surf/x_corrupt.surf.gii" in error and str(tmp_path) not in error
    from shapedesc.descriptors import read_coefficients

    rec = read_coefficients(tmp_path / "a" / "out" / "coefficients" / "v01_bean.npz")
    assert rec.metadata["source"] == "vol/v01.nii.gz#label=2"


def test_refusals(tmp_path):
    manifest = read_manifest(make_study(tmp_path / "study", n=2, bad=False))
    out = tmp_path / "out"
    run_study(manifest, out, parameters=PARAMS)
    before = _tables(out)
    with pytest.raises(OutputExistsError, match="degree: 4 there, 5 now"):
        run_study(manifest, out, parameters=DescribeParameters(degree=5))
    assert _tables(out) == before
    forced = run_study(manifest, out, parameters=DescribeParameters(degree=5), force=True)
    assert forced.n_computed == forced.n_items
    assert "l5" in (out / "spectra.tsv").read_text().splitlines()[0].split("\t")
    # a non-empty folder that is not ours
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("keep me")
    with pytest.raises(OutputExistsError, match="not made by shapedesc"):
        run_study(manifest, other, parameters=PARAMS)
    # inputs are never overwritten, whatever --force says
    with pytest.raises(OutputExistsError, match="holds the input"):
        run_study(manifest, tmp_path / "study", parameters=PARAMS, force=True)


def test_parameters_and_exit_status_are_validated():
    with pytest.raises(ValueError, match="scale must be one of"):
        DescribeParameters(scale="mass")
    with pytest.raises(ValueError, match="degree must be a positive integer"):
        DescribeParameters(degree=0)
    with pytest.raises(ValueError, match="smoothing must be"):
        DescribeParameters(smoothing=float("nan"))
    assert [exit_status(n) for n in (0, 3, 100, 5000)] == [0, 3, 100, 100]


def test_progress_shows_a_bar_on_a_terminal_and_log_lines_otherwise(tmp_path, caplog):
    import logging

    from shapedesc.pipeline.progress import ProgressReporter

    manifest = read_manifest(make_study(tmp_path / "study", n=1, bad=False))
    plain = io.StringIO()             # not a terminal: INFO log lines, nothing on the stream
    with caplog.at_level(logging.INFO, logger="shapedesc.pipeline.progress"):
        run_study(manifest, tmp_path / "a", parameters=PARAMS,
                  progress=ProgressReporter(stream=plain, interval=0.0))
    lines = [r.getMessage() for r in caplog.records if r.name == "shapedesc.pipeline.progress"]
    assert len(lines) == 3 and lines[-1].startswith("3/3 done (0 failed")
    assert "item/s" in lines[-1] and plain.getvalue() == ""

    class _Terminal(io.StringIO):
        def isatty(self):
            return True

    term = _Terminal()
    run_study(manifest, tmp_path / "b", parameters=PARAMS, progress=ProgressReporter(stream=term))
    text = term.getvalue()
    # tqdm's bar: counts "5/5", a rate "item/s" and the elapsed<remaining times
    assert "3/3" in text and "item/s" in text and "<" in text


_CAP_SCRIPT = r"""
import json, sys
from threadpoolctl import threadpool_info
from shapedesc.pipeline.work import _cap_generation, one_blas_thread
assert "numpy" not in sys.modules     # nothing numeric loaded yet: the first-item case
out = {}
with one_blas_thread():
    out["inside"] = sorted((i["internal_api"], i["num_threads"]) for i in threadpool_info())
    g0 = _cap_generation()
    import sklearn  # noqa: F401  (loads an OpenMP runtime after the cap was set)
    out["widened"] = _cap_generation() - g0
    out["late"] = sorted((i["internal_api"], i["num_threads"]) for i in threadpool_info())
out["after"] = sorted((i["internal_api"], i["num_threads"]) for i in threadpool_info())
print(json.dumps(out))
"""


def test_one_blas_thread_reaches_libraries_loaded_before_and_during_the_cap(tmp_path):
    """The cause of run-to-run last-bit differences: a BLAS matrix product split over
    several threads sums in another order, so a process's first item, computed while
    numpy's and scipy's OpenBLAS were loaded under their default thread count, differed
    from the rest.  Checked with threadpoolctl's own report of every loaded pool, in a
    fresh process whose default is 3 threads (so the check fails on any machine)."""
    import json
    import os
    import subprocess
    import sys

    env = {k: v for k, v in os.environ.items() if not k.endswith("_NUM_THREADS")}
    env.update(OMP_NUM_THREADS="3", OPENBLAS_NUM_THREADS="3")
    proc = subprocess.run([sys.executable, "-c", _CAP_SCRIPT], cwd=tmp_path, env=env,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    # numpy's and scipy's own OpenBLAS, both at one thread inside the cap
    assert [api for api, _ in out["inside"]].count("openblas") >= 1
    assert {n for _, n in out["inside"]} == {1}
    # the OpenMP runtime scikit-learn loads later is detected and capped too
    assert out["widened"] == 1 and len(out["late"]) > len(out["inside"])
    assert {n for _, n in out["late"]} == {1}
    # leaving the cap restores every pool's default: 3 from the environment for OpenMP;
    # OpenBLAS also caps it at the CPU count (OpenBLAS's documented behaviour, from memory)
    assert sorted(map(tuple, out["after"])) == sorted(
        (api, 3 if api == "openmp" else min(3, os.cpu_count())) for api, _ in out["late"])


def test_first_item_of_a_fresh_process_equals_a_later_one(tmp_path):
    """Same task twice in one fresh process (BLAS default 3 threads): the first result,
    computed while the numeric libraries load, is byte-identical to the second.  The
    mesh is large enough for OpenBLAS to split products over threads (10,242 vertices,
    degree 12; with 2,562 vertices the first item agreed even without the cap, so the
    check could not fail).  Bit for bit: determinism has no tolerance (common practice)."""
    import json
    import os
    import subprocess
    import sys

    mesh = trimesh.creation.icosphere(subdivisions=5, radius=9.0)
    mesh.apply_scale([1.3, 1.0, 0.8])
    _gifti(tmp_path / "blob.surf.gii", mesh)
    script = r"""
import json, sys
from shapedesc.pipeline.run import DescribeParameters
from shapedesc.pipeline.work import compute_item
task = {"key": "k", "subject": "s", "structure": "blob", "input": sys.argv[1],
        "kind": "surface", "label": None,
        "parameters": DescribeParameters(degree=12).as_dict()}
a, b = compute_item(task), compute_item(task)
assert a["status"] == "ok", a
print(json.dumps({"rows": a["rows"] == b["rows"], "files": a["files"] == b["files"]}))
"""
    env = {k: v for k, v in os.environ.items() if not k.endswith("_NUM_THREADS")}
    env.update(OMP_NUM_THREADS="3", OPENBLAS_NUM_THREADS="3")
    proc = subprocess.run([sys.executable, "-c", script, str(tmp_path / "blob.surf.gii")],
                          cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert json.loads(proc.stdout.strip().splitlines()[-1]) == {"rows": True, "files": True}
