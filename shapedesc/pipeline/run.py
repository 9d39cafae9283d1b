"""Describe a whole study: every subject x structure of a manifest, resumably, in parallel.

:func:`run_study` hashes the inputs, takes what the cache already holds, runs the rest
in the calling process (``jobs=1``), in local worker processes (``jobs>1``,
:class:`concurrent.futures.ProcessPoolExecutor` with the ``spawn`` start method and one
BLAS thread per worker) or on a Dask distributed cluster (``scheduler=ADDRESS``, the
optional extra ``shapedesc[dask]``), stores each result in the cache the moment it
arrives, and finally writes the tables.  A bad subject becomes a row of ``failures.tsv``
and the others go on.  The tables do not depend on which executor ran the work, nor on
the order the items finish in; only ``timings.tsv`` (CPU and wall seconds per stage)
changes from run to run.

Throughput: worker processes are started once and reused for all items; the largest
inputs go first so no worker idles at the end while another finishes a big item; each
worker returns only the table rows, the coefficient file bytes (tens of kB) and its
timings; the parent stores them as they arrive and assembles the tables once at the end.
"""

from __future__ import annotations

import logging
import math
import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

from shapedesc import __version__
from shapedesc.defaults import DEFAULT_DEGREE, MAX_EXIT_FAILURES
from shapedesc.pipeline.cache import CACHE_DIRNAME, ResultCache, item_key, sha256_file
from shapedesc.pipeline.manifest import Manifest
from shapedesc.pipeline.outputs import (
    COEFFICIENTS, DESCRIPTION, RUN_JSON, build_tables, check_outdir, dataset_description,
    dependency_versions, write_coefficient_files, write_json, write_tsv,
)
from shapedesc.pipeline.work import compute_item, import_chain, init_worker, one_blas_thread

__all__ = ["DescribeParameters", "ProgressEvent", "StudyRun", "run_study", "exit_status"]

logger = logging.getLogger(__name__)

SCALES = ("none", "volume", "area")


@dataclass(frozen=True)
class DescribeParameters:
    """Everything that shapes a result; recorded in run.json and in every cache key.

    Attributes
    ----------
    degree : int
        Largest spherical-harmonic degree L (tables get columns l1 .. lL).
    scale : {"none", "volume", "area"}
        Scale normalisation: none, cube root of the volume, square root of the area.
    smoothing : float
        Heat-kernel smoothing bandwidth of the fit (0: none).
    volume_smoothing_iterations : int or None
        Smoothing iterations of the label-volume surface (None: that module's default).
    target_vertices : int or None
        Vertex count the label-volume surface is decimated to (None: no decimation).
    sphere_maps : bool
        Also write each item's sphere map and its per-vertex distortion as GIFTI files
        beside its coefficients (see :func:`shapedesc.pipeline.work.sphere_map_files`).
        Recorded in run.json and the cache keys only when on, so results made without it
        keep their keys.
    """

    degree: int = DEFAULT_DEGREE
    scale: str = "volume"
    smoothing: float = 0.0
    volume_smoothing_iterations: int | None = None
    target_vertices: int | None = None
    sphere_maps: bool = False

    def __post_init__(self):
        if isinstance(self.degree, bool) or not isinstance(self.degree, int) or self.degree < 1:
            raise ValueError(f"degree must be a positive integer, got {self.degree!r}")
        try:
            from shapedesc.defaults import MAX_DEGREE
        except ImportError:  # pragma: no cover - the harmonics section defines it
            MAX_DEGREE = 10**6
        if self.degree > MAX_DEGREE:
            raise ValueError(f"degree {self.degree} is above the largest supported, "
                             f"{MAX_DEGREE}")
        if self.scale not in SCALES:
            raise ValueError(f"scale must be one of {SCALES}, got {self.scale!r}")
        s = float(self.smoothing)
        if not math.isfinite(s) or s < 0:
            raise ValueError(f"smoothing must be a finite number >= 0, got {self.smoothing!r}")
        object.__setattr__(self, "smoothing", s)
        for name in ("volume_smoothing_iterations", "target_vertices"):
            v = getattr(self, name)
            if v is not None and (isinstance(v, bool) or not isinstance(v, int) or v < 0):
                raise ValueError(f"{name} must be a non-negative integer or None, got {v!r}")

        if not isinstance(self.sphere_maps, bool):
            raise ValueError(f"sphere_maps must be True or False, got {self.sphere_maps!r}")

    def as_dict(self) -> dict:
        d = asdict(self)
        if not self.sphere_maps:
            del d["sphere_maps"]
        return d


@dataclass(frozen=True)
class ProgressEvent:
    """One step of a run, for progress display: ``done`` of ``total`` items finished."""

    done: int
    total: int
    failed: int
    name: str
    status: str  # "cached" (a batch of cached items), "ok", "failed"
    count: int = 1


@dataclass(frozen=True)
class StudyRun:
    """What a run did.

    Attributes
    ----------
    outdir : Path
    n_items : int
        Subject x structure items in the manifest.
    n_cached : int
        Items taken from the cache (computed by an earlier run).
    n_computed : int
        Items computed now (successes and failures).
    n_failed : int
        Items that failed (rows of failures.tsv).
    failures : tuple of dict
        The failures.tsv rows.
    n_warned : int
        Described items whose ``qc.tsv`` row has warnings (e.g. a strongly sheared sphere
        map, an unstable pose, a repaired surface).
    """

    outdir: Path
    n_items: int
    n_cached: int
    n_computed: int
    n_failed: int
    failures: tuple[dict, ...] = field(default=())
    n_warned: int = 0

    @property
    def exit_status(self) -> int:
        return exit_status(self.n_failed)


def exit_status(n_failed: int) -> int:
    """Process exit status: the number of failed items, capped at MAX_EXIT_FAILURES."""
    return min(int(n_failed), MAX_EXIT_FAILURES)


def _hash_inputs(paths: tuple[str, ...]) -> dict[str, str | Exception]:
    out: dict[str, str | Exception] = {}
    # hashlib releases the GIL on large buffers: a few threads keep the disk busy.
    with ThreadPoolExecutor(max_workers=4) as pool:
        futures = {pool.submit(sha256_file, p): p for p in paths}
        for fut in as_completed(futures):
            try:
                out[futures[fut]] = fut.result()
            except OSError as exc:
                out[futures[fut]] = exc
    return out


def _run_json(params: dict, manifest: Manifest, hashes: dict, n_failed: int | None) -> dict:
    inputs = {}
    for it in manifest.items:
        h = hashes.get(it.input)
        inputs[it.input_display] = h if isinstance(h, str) else None
    return {
        "command": "describe",
        "complete": n_failed is not None,
        "parameters": params,
        "shapedesc_version": __version__,
        "dependencies": dependency_versions(),
        "items": len(manifest.items),
        "failed": n_failed,
        "extra_columns": list(manifest.extra_columns),
        "inputs": [{"path": k, "sha256": v} for k, v in sorted(inputs.items())],
    }


def _execute(tasks: list[dict], *, jobs: int, scheduler: str | None):
    """Yield results of ``compute_item`` over ``tasks`` as they finish."""
    if not tasks:
        return
    if scheduler is not None:
        yield from _execute_dask(tasks, scheduler)
        return
    if jobs <= 1:
        with one_blas_thread():   # once for the whole run, not per item
            import_chain()
            for task in tasks:
                yield compute_item(task)
        return
    yield from _execute_local(_largest_first(tasks), jobs)


def _largest_first(tasks: list[dict]) -> list[dict]:
    """Tasks by decreasing input size (a proxy for their cost; ties in manifest order),
    so the items that finish last are small ones and no worker waits long at the end."""
    def size(task):
        try:
            return os.stat(task["input"]).st_size
        except OSError:
            return 0
    return sorted(tasks, key=lambda t: -size(t))


def _died(task: dict, exc: BaseException) -> dict:
    return {"status": "failed", "key": task["key"], "stage": "describe",
            "error": " ".join(f"worker process died while describing this item ({exc}); "
                              f"out of memory or a crash in a compiled library?".split()),
            "cacheable": False, "traceback": ""}


def _execute_local(tasks: list[dict], jobs: int):
    """Local ``spawn`` process pool.  If a worker dies (killed for memory, a crash in
    compiled code), the unfinished items are retried in a fresh pool; if that breaks
    too, each is run alone so the item that kills its worker is the only one to fail."""
    ctx = multiprocessing.get_context("spawn")
    pending = list(tasks)
    isolate = False
    while pending:
        batch = pending[:1] if isolate else pending
        pool = ProcessPoolExecutor(max_workers=1 if isolate else min(jobs, len(batch)),
                                   mp_context=ctx, initializer=init_worker,
                                   initargs=(os.getpid(),))
        broken: list[dict] = []
        try:
            futures = {pool.submit(compute_item, t): t for t in batch}
            for fut in as_completed(futures):
                try:
                    result = fut.result()
                except BrokenProcessPool as exc:
                    broken.append((futures[fut], exc))
                    continue
                yield result
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
        if isolate:
            if broken:
                yield _died(*broken[0])
            pending = pending[1:]
        else:
            order = {t["key"]: i for i, t in enumerate(tasks)}
            pending = sorted((t for t, _ in broken), key=lambda t: order[t["key"]])
            if pending:
                logger.warning("a worker process died; retrying %d unfinished item(s) one "
                               "at a time", len(pending))
            isolate = True


def _execute_dask(tasks: list[dict], scheduler: str):
    try:
        from distributed import Client
        from distributed import as_completed as dask_as_completed
    except ImportError as exc:
        raise RuntimeError("--scheduler needs Dask distributed: pip install "
                           "'shapedesc[dask]'") from exc
    try:
        client = Client(scheduler, timeout=30, set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise RuntimeError(f"cannot reach the Dask scheduler at {scheduler} ({exc}); check "
                           f"the address and that the scheduler runs") from exc
    try:
        tasks = _largest_first(tasks)
        futures = client.map(compute_item, tasks, key=[f"shapedesc-{t['key']}" for t in tasks],
                             pure=False)
        by_key = {f.key: t for f, t in zip(futures, tasks)}
        for fut in dask_as_completed(futures, loop=client.loop):
            try:
                yield fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: the item, not the study
                yield _died(by_key[fut.key], exc)
    finally:
        client.close()


def _remove_partial_files(outdir: Path) -> None:
    """Delete temporary files an interrupted atomic write left (``.<name>.<random>.part*``,
    see :mod:`shapedesc.io.atomic`) in the folders this pipeline writes."""
    folders = [outdir, outdir / COEFFICIENTS]
    cache_root = outdir / CACHE_DIRNAME
    if cache_root.is_dir():
        folders += [cache_root] + [p for p in cache_root.iterdir() if p.is_dir()]
    for folder in folders:
        if folder.is_dir():
            for p in folder.glob(".*.part*"):
                if p.is_file():
                    p.unlink()


def _remove_stale_coefficients(outdir: Path, expected: set[str]) -> None:
    """Delete coefficient files of items that are not in this run's results (a subject
    dropped from the manifest, one that now fails, or results replaced with --force):
    ``coefficients/`` then matches the tables.  Nothing else is touched."""
    folder = outdir / COEFFICIENTS
    if not folder.is_dir():
        return
    for p in sorted(folder.iterdir()):
        if p.is_file() and not p.name.startswith(".") and p.name not in expected:
            logger.info("removing %s: not among this run's results", p)
            p.unlink()


def run_study(manifest: Manifest, outdir: str | Path, *,
              parameters: DescribeParameters | None = None, jobs: int = 1,
              scheduler: str | None = None, force: bool = False,
              progress: Callable[[ProgressEvent], None] | None = None) -> StudyRun:
    """Describe every item of ``manifest`` into ``outdir``.

    Parameters
    ----------
    manifest : Manifest
        From :func:`~shapedesc.pipeline.manifest.read_manifest`,
        :func:`~shapedesc.pipeline.manifest.manifest_from_files` or
        :func:`~shapedesc.pipeline.bids.manifest_from_bids`.
    outdir : path
        Output folder (created).  See :mod:`shapedesc.pipeline.outputs` for its layout.
    parameters : DescribeParameters, optional
    jobs : int
        Local worker processes (1: in this process).  Ignored with ``scheduler``.
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``); the workers must
        have shapedesc installed and see the input paths.
    force : bool
        Replace results made with other parameters.
    progress : callable, optional
        Called with a :class:`ProgressEvent` after each finished item.

    Returns
    -------
    StudyRun

    Raises
    ------
    OutputExistsError
        OUTDIR holds inputs, a source dataset, or results of other parameters (no force).
    """
    parameters = parameters or DescribeParameters()
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise ValueError(f"jobs must be a positive integer, got {jobs!r}")
    params = parameters.as_dict()
    outdir = Path(outdir).resolve()
    check_outdir(outdir, parameters=params, inputs=list(manifest.inputs), force=force)
    outdir.mkdir(parents=True, exist_ok=True)
    _remove_partial_files(outdir)
    write_json(outdir / DESCRIPTION, dataset_description())
    cache = ResultCache(outdir / CACHE_DIRNAME)

    hashes = _hash_inputs(manifest.inputs)
    write_json(outdir / RUN_JSON, _run_json(params, manifest, hashes, None))
    keyed: list[tuple] = []
    entries: dict[str, dict] = {}
    failures: dict[str, dict] = {}
    tasks: list[dict] = []
    names: dict[str, str] = {}
    expected_files: set[str] = set()
    for it in manifest.items:
        h = hashes[it.input]
        if not isinstance(h, str):
            key = f"unhashed:{it.name}"
            keyed.append((it, key))
            failures[key] = {"stage": "hash", "error": " ".join(
                f"{type(h).__name__}: {h}".split())}
            continue
        key = item_key(input_sha256=h, subject=it.subject, structure=it.structure,
                       kind=it.kind, label=it.label, parameters=params, version=__version__)
        keyed.append((it, key))
        names[key] = it.name
        entry = cache.get(key)
        if entry is not None:
            if entry["status"] == "ok":
                # Rewrite the coefficient file if a crash came between the cache write
                # and the file write, or coefficients/ was deleted (identical: skipped).
                expected_files.update(
                    write_coefficient_files(outdir, it.name, ResultCache.files(entry)))
                entries[key] = {"status": "ok", "rows": entry["rows"],
                                "timings": entry.get("timings", {})}
            else:
                failures[key] = entry
            continue
        tasks.append({"key": key, "subject": it.subject, "structure": it.structure,
                      "input": it.input, "display": it.input_display, "kind": it.kind,
                      "label": it.label, "parameters": params})
    total = len(keyed)
    done = total - len(tasks)
    n_cached = done - sum(1 for k in failures if k.startswith("unhashed:"))
    logger.info("%d item(s): %d from the cache, %d to compute%s", total, n_cached,
                len(tasks), f" on {scheduler}" if scheduler else
                (f" with {min(jobs, max(len(tasks), 1))} worker(s)" if tasks else ""))
    if progress is not None and done:
        progress(ProgressEvent(done, total, len(failures), "", "cached", done))

    for result in _execute(tasks, jobs=jobs, scheduler=scheduler):
        key = result["key"]
        done += 1
        timings = result.get("timings", {})
        if result["status"] == "ok":
            entry = {"status": "ok", "rows": result["rows"], "files": result["files"],
                     "timings": timings}
            cache.put(key, entry)
            expected_files.update(write_coefficient_files(outdir, names[key], result["files"]))
            entries[key] = {"status": "ok", "rows": result["rows"], "timings": timings}
        else:
            record = {"status": "failed", "stage": result["stage"], "error": result["error"],
                      "timings": timings}
            logger.warning("%s failed at %s: %s", names[key], result["stage"], result["error"])
            logger.debug("%s", result.get("traceback", ""))
            if result.get("cacheable"):
                cache.put(key, record)
            failures[key] = record
        if progress is not None:
            progress(ProgressEvent(done, total, len(failures), names[key], result["status"]))

    _remove_stale_coefficients(outdir, expected_files)
    tables = build_tables(keyed, entries, failures, manifest.extra_columns)
    for name, (columns, rows) in tables.items():
        write_tsv(outdir / f"{name}.tsv", columns, rows)
    (outdir / COEFFICIENTS).mkdir(exist_ok=True)
    write_json(outdir / RUN_JSON, _run_json(params, manifest, hashes, len(failures)))
    fail_rows = tuple(tables["failures"][1])
    logger.info("%d described, %d failed; tables in %s", len(entries), len(failures), outdir)
    n_warned = sum(1 for e in entries.values() if e["rows"]["qc"].get("warnings"))
    return StudyRun(outdir, total, n_cached, len(tasks), len(failures), fail_rows, n_warned)
