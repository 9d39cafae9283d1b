"""One unit of study work: read one input, make its surface, describe it.

:func:`compute_item` is what every executor runs (in the calling process, in a local
worker process, or on a Dask worker).  It takes and returns plain dicts of built-in
types and bytes, so it pickles under the ``spawn`` start method and over the network,
and never raises for a bad input: a failure comes back as a record naming the stage.

Stages: ``read`` (file to surface or label volume), ``surface`` (label volume to
surface), ``prepare`` (validation and repair), ``map`` (sphere map), ``describe``
(expansion, pose, descriptors: everything after the map), ``write`` (coefficient
file bytes).  Each stage's CPU and wall-clock time come back in ``timings``
(``timings.tsv``); they are the only part of a result that changes from run to run.

Determinism: the same input gives the same bytes in any process because every BLAS and
OpenMP pool runs one thread.  Thread count matters: a BLAS matrix product split over
two threads adds its partial sums in another order, and on a 10k-vertex surface the fit
residuals then differ by ~3e-13 relative (often the 12th significant digit the tables
keep; measured), the spectra by ~1e-16.  The pools are capped *after* numpy and scipy are
loaded (a library loaded later would escape the cap; :func:`compute_item` detects
that and recomputes the item), and worker processes also get the thread variables in
their environment before anything is imported.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
import os
import sys
import tempfile
import threading
import time
import traceback
import warnings
from pathlib import Path

__all__ = ["compute_item", "init_worker", "import_chain", "one_blas_thread", "STAGES",
           "TIMED_STAGES"]

#: Failure stages, in order (``hash`` happens in the parent before any work).
STAGES = ("hash", "read", "surface", "prepare", "map", "describe", "write")
#: Stages whose CPU and wall time ``timings`` reports.
TIMED_STAGES = STAGES[1:]

#: Environment variables that cap the thread pools of the BLAS/OpenMP libraries numpy
#: and scipy may load; a worker is one process per core, so each gets one thread.
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")

#: True in a process whose pools :func:`init_worker` capped for good (a local worker).
_CAPPED_FOR_GOOD = False


def _load_numeric_libraries() -> None:
    """Import what loads a BLAS/LAPACK library (numpy's and scipy's own OpenBLAS), so a
    thread cap set afterwards reaches them."""
    import numpy  # noqa: F401
    import scipy.linalg  # noqa: F401
    import scipy.sparse.linalg  # noqa: F401


def _pool_libraries() -> frozenset[str]:
    from threadpoolctl import threadpool_info

    return frozenset(str(i.get("filepath")) for i in threadpool_info())


_CAP_LOCK = threading.Lock()
_CAP = {"users": 0, "limiters": [], "modules": -1, "pools": frozenset(), "generation": 0}


@contextlib.contextmanager
def one_blas_thread():
    """Cap every BLAS/OpenMP pool of this process at one thread while inside.

    Re-entrant and thread-safe (a count of users: the first caps, the last restores), so
    concurrent items on a multi-threaded Dask worker never lift each other's cap.
    numpy's and scipy's libraries are loaded first so that the cap reaches them.
    """
    from threadpoolctl import threadpool_limits

    with _CAP_LOCK:
        if _CAP["users"] == 0:
            _load_numeric_libraries()
            _CAP["limiters"].append(threadpool_limits(limits=1))
            _CAP["modules"], _CAP["pools"] = len(sys.modules), _pool_libraries()
        _CAP["users"] += 1
    try:
        yield
    finally:
        with _CAP_LOCK:
            _CAP["users"] -= 1
            if _CAP["users"] == 0:
                while _CAP["limiters"]:
                    _CAP["limiters"].pop().restore_original_limits()


def _cap_generation() -> int:
    """Inside :func:`one_blas_thread`: how many times the cap was widened to a newly
    loaded BLAS/OpenMP library (checked only when a module was imported meanwhile)."""
    from threadpoolctl import threadpool_limits

    with _CAP_LOCK:
        if len(sys.modules) != _CAP["modules"]:
            pools = _pool_libraries()
            _CAP["modules"] = len(sys.modules)
            if not pools <= _CAP["pools"]:
                _CAP["limiters"].append(threadpool_limits(limits=1))
                _CAP["pools"] |= pools
                _CAP["generation"] += 1
        return _CAP["generation"]


def import_chain() -> None:
    """Import every module an item uses, so that a process pays for its imports once,
    before its first item (and ``timings`` hold only the work).  An ImportError is
    swallowed: the items then report it, each as a failure of its stage."""
    try:
        import shapedesc.descriptors  # noqa: F401
        import shapedesc.harmonics  # noqa: F401
        import shapedesc.io.surfaces  # noqa: F401
        import shapedesc.io.volumes  # noqa: F401
        import shapedesc.mesh.repair  # noqa: F401
        import shapedesc.mesh.volume  # noqa: F401
        import shapedesc.reconstruct  # noqa: F401
        import shapedesc.sphere  # noqa: F401
    except ImportError:  # pragma: no cover - the items report it as failures
        pass


def _exit_with(parent_pid: int, interval: float) -> None:
    """Body of a worker's watchdog thread: end the process once its parent is gone."""
    while True:
        time.sleep(interval)
        if os.getppid() != parent_pid:
            os._exit(1)


def init_worker(parent_pid: int | None = None) -> None:
    """Initialiser of a local worker process: one BLAS/OpenMP thread for its lifetime,
    the item's modules imported, and (``parent_pid``) a watchdog thread that ends the
    worker when that process dies (a ``kill -9`` of the run would otherwise leave its
    workers waiting for work forever)."""
    global _CAPPED_FOR_GOOD
    if parent_pid is not None:
        from shapedesc.defaults import WORKER_PARENT_POLL_S

        threading.Thread(target=_exit_with, args=(int(parent_pid), WORKER_PARENT_POLL_S),
                         name="shapedesc-parent-watchdog", daemon=True).start()
    for var in _THREAD_VARS:
        os.environ[var] = "1"
    _load_numeric_libraries()
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1)
    _CAPPED_FOR_GOOD = True
    import_chain()


def _plain(value):
    """JSON-able built-in version of a table cell (numpy scalars -> Python scalars)."""
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        try:
            value = value.item()
        except (ValueError, AttributeError):
            pass
    if isinstance(value, (bool, int, str)) or value is None:
        return value
    if isinstance(value, float):
        return value
    if isinstance(value, (list, tuple)):
        return "; ".join(str(_plain(v)) for v in value)
    return str(value)


def _plain_row(row) -> dict:
    return {str(k): _plain(v) for k, v in dict(row).items()}


def _is_timing(column: str) -> bool:
    """Timing columns (``seconds_total`` ...) change from run to run: they go to
    ``timings`` and stay out of the tables, which must be byte-identical across reruns
    and executors."""
    return "seconds" in column.lower()


def _split_timings(row: dict, prefix: str) -> tuple[dict, dict]:
    """(the row without its timing columns, those columns named ``<prefix>_<column>``)."""
    kept, timing = {}, {}
    for k, v in _plain_row(row).items():
        if _is_timing(k):
            timing[f"{prefix}_{k}"] = v
        else:
            kept[k] = v
    return kept, timing


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


class _Clock:
    """CPU (``time.process_time``) and wall (``time.perf_counter``) seconds per stage."""

    def __init__(self):
        self.seconds: dict[str, float] = {}
        self._cpu0 = time.process_time()
        self._wall0 = time.perf_counter()
        self._stage = None

    def start(self, stage: str) -> None:
        now_cpu, now_wall = time.process_time(), time.perf_counter()
        if self._stage is not None:
            self._add(self._stage, now_cpu, now_wall)
        self._stage, self._cpu, self._wall = stage, now_cpu, now_wall

    @property
    def stage(self) -> str | None:
        """The stage running now (None before the first start and after stop)."""
        return self._stage

    def _add(self, stage, now_cpu, now_wall):
        self.seconds[f"{stage}_cpu_s"] = self.seconds.get(f"{stage}_cpu_s", 0.0) + now_cpu - self._cpu
        self.seconds[f"{stage}_wall_s"] = self.seconds.get(f"{stage}_wall_s", 0.0) + now_wall - self._wall

    def stop(self) -> dict:
        now_cpu, now_wall = time.process_time(), time.perf_counter()
        if self._stage is not None:
            self._add(self._stage, now_cpu, now_wall)
            self._stage = None
        out = {f"{s}_{kind}_s": self.seconds.get(f"{s}_{kind}_s", 0.0)
               for s in TIMED_STAGES for kind in ("cpu", "wall")}
        out["total_cpu_s"] = now_cpu - self._cpu0
        out["total_wall_s"] = now_wall - self._wall0
        return out


class _StageError(Exception):
    def __init__(self, stage: str, exc: BaseException):
        super().__init__(stage)
        self.stage = stage
        self.exc = exc


def _coefficient_files(desc) -> dict[str, bytes]:
    """The coefficient file(s) describe writes, as bytes (suffix -> bytes)."""
    files: dict[str, bytes] = {}
    with tempfile.TemporaryDirectory(prefix="shapedesc-") as tmp:
        desc.write_coefficients(Path(tmp) / "coefficients.npz")
        for p in sorted(Path(tmp).iterdir()):
            if p.is_file() and not p.name.startswith("."):
                files[p.name[len("coefficients"):]] = p.read_bytes()
    if not files:
        raise RuntimeError("write_coefficients wrote no file")
    return files


#: Per-item files of ``describe --sphere-maps`` (suffix after ``<subject>_<structure>``).
SPHERE_MAP_SUFFIXES = ("_surface.surf.gii", "_sphere.surf.gii", "_distortion.shape.gii")


def sphere_map_files(surface, sphere_map) -> dict[str, bytes]:
    """An item's sphere map as GIFTI files, for figures (suffix -> bytes).

    * ``_surface.surf.gii``: the surface that was mapped (after ``prepare_surface``, which
      may have merged or reordered vertices of the input), in mm;
    * ``_sphere.surf.gii``: the same vertices and triangles on the unit sphere;
    * ``_distortion.shape.gii``: per-vertex maps ``area_log_ratio`` (log of the sphere
      area share over the surface area share, barycentric vertex areas) and
      ``angle_distortion_deg`` (mean absolute corner-angle change at the vertex) and
      ``shear_log_anisotropy`` (mean over the vertex's faces of log σ₁/σ₂, how much more
      the map stretches one direction than the other; 0 = shape kept).

    GIFTI stores float32 (the standard's only floating type): about 6e-8 on the unit
    sphere, enough to draw the map, not to recompute it (the map itself is float64).

    Examples
    --------
    A figure of where the map compresses (< 0) or expands (> 0) the surface::

        from shapedesc.io.surfaces import read_surface, read_vertex_data
        from shapedesc.figures.surfaces import render_surface_figure
        s = read_surface("OUT/coefficients/sub-01_arc_surface.surf.gii")
        d = read_vertex_data("OUT/coefficients/sub-01_arc_distortion.shape.gii")
        render_surface_figure(s.vertices, s.faces, "arc_area.png",
                              scalars=d["area_log_ratio"], scalar_label="log area ratio",
                              units="sphere/surface")
    """
    from shapedesc.io.surfaces import surface_gifti_bytes, vertex_data_gifti_bytes
    from shapedesc.surface import Surface

    sphere = Surface(vertices=sphere_map.sphere_vertices, faces=surface.faces,
                     source=f"{surface.source} (sphere map)", history=surface.history)
    s_surface, s_sphere, s_distortion = SPHERE_MAP_SUFFIXES
    # bytes only: the calling process writes them (atomically) under their final names
    return {s_surface: surface_gifti_bytes(surface), s_sphere: surface_gifti_bytes(sphere),
            s_distortion: vertex_data_gifti_bytes({
                "area_log_ratio": sphere_map.vertex_area_distortion,
                "angle_distortion_deg": sphere_map.vertex_angle_distortion_deg,
                "shear_log_anisotropy": sphere_map.vertex_shear_log_anisotropy})}


def _describe(task: dict, clock: _Clock) -> tuple[dict, dict[str, bytes], dict]:
    """The computation proper; raises ``_StageError`` naming the stage that failed (the
    one ``clock`` was timing)."""
    params = task["parameters"]
    timing: dict = {}
    try:
        clock.start("read")
        extra_qc: dict = {}
        if task["kind"] == "surface":
            from shapedesc.io.surfaces import read_surface

            surface = read_surface(task["input"])
        else:
            from shapedesc.io.volumes import read_label_volume

            volume = read_label_volume(task["input"])
            clock.start("surface")
            from shapedesc.mesh.volume import label_to_surface

            kwargs = {}
            if params.get("volume_smoothing_iterations") is not None:
                kwargs["smoothing_iterations"] = params["volume_smoothing_iterations"]
            if params.get("target_vertices") is not None:
                kwargs["target_vertices"] = params["target_vertices"]
            surface, report = label_to_surface(volume, int(task["label"]), **kwargs)
            extra_qc, t = _split_timings(
                {f"volume_{k}" if not str(k).startswith("volume_") else k: v
                 for k, v in report.to_row().items()}, "surface")
            timing.update(t)
        clock.start("prepare")
        from shapedesc.mesh.repair import prepare_surface

        surface = prepare_surface(surface)
        display = task.get("display")
        if display and task["input"] in surface.source:
            # the coefficient file records the source: name the input as the user did
            surface = dataclasses.replace(
                surface, source=surface.source.replace(task["input"], display))
        clock.start("map")
        from shapedesc.sphere import map_to_sphere

        sphere_map = map_to_sphere(surface.vertices, surface.faces, source=surface.source)
        clock.start("describe")
        from shapedesc.descriptors import describe_surface

        desc = describe_surface(surface, degree=int(params["degree"]),
                                scale=params["scale"], smoothing=float(params["smoothing"]),
                                sphere_map=sphere_map)
        qc, t = _split_timings(desc.qc_row(), "map")
        timing.update(t)
        timing.update({f"describe_seconds_{k}": float(v) for k, v in desc.seconds.items()
                       if k != "map"})
        rows = {"spectra": _plain_row(desc.spectrum_row()),
                "spectra_mm2": _plain_row(desc.spectrum_mm2_row()),
                "shape": _plain_row(desc.shape_row()),
                "qc": {**qc, **extra_qc}}
        clock.start("write")
        files = _coefficient_files(desc)
        if params.get("sphere_maps"):
            files.update(sphere_map_files(surface, sphere_map))
        return rows, files, timing
    except Exception as exc:  # noqa: BLE001 - one bad subject must not stop the study
        raise _StageError(clock.stage, exc) from exc


def _relocated(task: dict):
    """A function that writes the input's absolute path as the user gave it (``display``),
    so that messages in the tables do not depend on where the study is mounted."""
    display = task.get("display")
    if not display or display == task["input"]:
        return _one_line
    return lambda text: _one_line(str(text).replace(task["input"], display))


def _compute(task: dict) -> dict:
    clock = _Clock()
    line_of = _relocated(task)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            rows, files, detail = _describe(task, clock)
        except _StageError as err:
            exc = err.exc
            timings = clock.stop()
            return {"status": "failed", "key": task["key"], "stage": err.stage,
                    "error": line_of(f"{type(exc).__name__}: {exc}"),
                    "cacheable": isinstance(exc, (ValueError, RuntimeError, ArithmeticError,
                                                  LookupError))
                    and not isinstance(exc, MemoryError),
                    "traceback": "".join(traceback.format_exception(exc)),
                    "warnings": [line_of(f"{w.category.__name__}: {w.message}")
                                 for w in caught],
                    "timings": timings}
    timings = {**clock.stop(), **detail}
    messages = []
    for w in caught:
        line = line_of(f"{w.category.__name__}: {w.message}")
        if line not in messages:
            messages.append(line)
    rows["qc"]["warnings"] = " | ".join(messages) if messages else ""
    for table in rows.values():
        for k, v in table.items():
            if isinstance(v, float) and math.isnan(v):
                table[k] = None
            elif isinstance(v, str) and task["input"] in v:
                table[k] = line_of(v)
    return {"status": "ok", "key": task["key"], "rows": rows, "files": files,
            "warnings": messages, "timings": timings}


def compute_item(task: dict) -> dict:
    """Describe one subject x structure with one BLAS/OpenMP thread; never raises for a
    bad input.

    Parameters
    ----------
    task : dict
        ``key``, ``subject``, ``structure``, ``input`` (absolute path), optional
        ``display`` (the path as the user wrote it, used in place of ``input`` in
        messages, table cells and the coefficient file's source), ``kind``
        (``surface``/``volume``), ``label`` (int or None), ``parameters`` (dict with
        ``degree``, ``scale``, ``smoothing`` and optional ``volume_smoothing_iterations``,
        ``target_vertices``).

    Returns
    -------
    dict
        ``status`` (``ok``/``failed``), ``key``, ``timings`` (``<stage>_cpu_s``,
        ``<stage>_wall_s`` for each of :data:`TIMED_STAGES`, ``total_cpu_s``,
        ``total_wall_s``; for ``ok`` also the stages' own wall-clock timings
        ``map_seconds_*``, ``describe_seconds_*``, ``surface_seconds_*``; seconds), and
        for ``ok``: ``rows`` (``spectra``, ``spectra_mm2``, ``shape``, ``qc`` dicts of
        built-in scalars) and ``files`` (coefficient file suffix -> bytes); for
        ``failed``: ``stage``, ``error`` (one line), ``cacheable`` (False for failures
        that may not recur, such as running out of memory) and ``traceback``.
        ``warnings``: messages of the warnings raised while computing (also put in the
        QC row).
    """
    if _CAPPED_FOR_GOOD:
        return _compute(task)
    with one_blas_thread():
        for _ in range(3):
            generation = _cap_generation()
            result = _compute(task)
            if _cap_generation() == generation:
                break
            # A BLAS/OpenMP library was first loaded while this item ran (here or in a
            # concurrent one) and ran with its default thread count: compute again now
            # that the cap reaches it.
    return result
