"""One unit of study work: read one input, make its surface, describe it.

:func:`compute_item` is what every executor runs (in the calling process, in a local
worker process, or on a Dask worker).  It takes and returns plain dicts of built-in
types and bytes, so it pickles under the ``spawn`` start method and over the network,
and never raises for a bad input: a failure comes back as a record naming the stage.

Stages: ``read`` (file to surface or label volume), ``surface`` (label volume to
surface), ``prepare`` (validation and repair), ``describe`` (sphere map, expansion,
descriptors), ``write`` (coefficient file).
"""

from __future__ import annotations

import math
import os
import tempfile
import traceback
import warnings
from pathlib import Path

__all__ = ["compute_item", "init_worker", "STAGES"]

STAGES = ("hash", "read", "surface", "prepare", "describe", "write")

#: Environment variables that cap the thread pools of the BLAS/OpenMP libraries numpy
#: and scipy may load; a worker is one process per core, so each gets one thread.
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


def init_worker() -> None:
    """Initialiser of a local worker process: one BLAS/OpenMP thread."""
    for var in _THREAD_VARS:
        os.environ[var] = "1"
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1)


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
    """Timing columns (``seconds_total`` ...) change from run to run, so they stay out of
    the tables, which must be byte-identical across reruns and executors."""
    return "seconds" in column.lower()


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _describe(task: dict) -> tuple[dict, dict[str, bytes], list[str]]:
    """The computation proper; raises ``_StageError`` naming the stage that failed."""
    params = task["parameters"]
    stage = "read"
    try:
        extra_qc: dict = {}
        if task["kind"] == "surface":
            from shapedesc.io.surfaces import read_surface

            surface = read_surface(task["input"])
        else:
            from shapedesc.io.volumes import read_label_volume

            volume = read_label_volume(task["input"])
            stage = "surface"
            from shapedesc.mesh.volume import label_to_surface

            kwargs = {}
            if params.get("volume_smoothing_iterations") is not None:
                kwargs["smoothing_iterations"] = params["volume_smoothing_iterations"]
            if params.get("target_vertices") is not None:
                kwargs["target_vertices"] = params["target_vertices"]
            surface, report = label_to_surface(volume, int(task["label"]), **kwargs)
            extra_qc = {f"volume_{k}" if not str(k).startswith("volume_") else k: v
                        for k, v in report.to_row().items()}
        stage = "prepare"
        from shapedesc.mesh.repair import prepare_surface

        surface = prepare_surface(surface)
        stage = "describe"
        from shapedesc.descriptors import describe_surface

        desc = describe_surface(surface, degree=int(params["degree"]),
                                scale=params["scale"], smoothing=float(params["smoothing"]))
        qc = {k: v for k, v in _plain_row(desc.qc_row()).items() if not _is_timing(k)}
        rows = {"spectra": _plain_row(desc.spectrum_row()),
                "spectra_mm2": _plain_row(desc.spectrum_mm2_row()),
                "shape": _plain_row(desc.shape_row()),
                "qc": {**qc, **{k: v for k, v in _plain_row(extra_qc).items()
                                if not _is_timing(k)}}}
        stage = "write"
        files: dict[str, bytes] = {}
        with tempfile.TemporaryDirectory(prefix="shapedesc-") as tmp:
            desc.write_coefficients(Path(tmp) / "coefficients.npz")
            _snap_coefficient_file(Path(tmp) / "coefficients.npz")
            for p in sorted(Path(tmp).iterdir()):
                if p.is_file() and not p.name.startswith("."):
                    files[p.name[len("coefficients"):]] = p.read_bytes()
        if not files:
            raise RuntimeError("write_coefficients wrote no file")
        return rows, files, []
    except Exception as exc:  # noqa: BLE001 - one bad subject must not stop the study
        raise _StageError(stage, exc) from exc


def _snap(values):
    """Round an array to a power-of-two grid 2**-40 of its largest magnitude (~1e-12).

    Floating-point results of the same computation can differ in the last bits between
    processes (summation order in vectorised and BLAS kernels depends on memory
    alignment, which depends on what ran before).  On this grid such noise no longer
    changes a byte, except in the rare case of a value within noise of a grid
    boundary, so coefficient files from any executor are identical.  1e-12 relative is
    nine orders of magnitude below the fit residuals (common practice for reproducible
    numeric outputs; the same idea as the tables' 12 significant digits).
    """
    import numpy as np

    values = np.asarray(values, dtype=np.float64)
    top = float(np.max(np.abs(values))) if values.size else 0.0
    if not np.isfinite(top) or top == 0.0:
        return values
    q = 2.0 ** (np.floor(np.log2(top)) - 40)
    return np.round(values / q) * q


def _snap_coefficient_file(path: Path) -> None:
    """Rewrite a coefficient file with snapped arrays (the package's own reader and
    writer, same metadata)."""
    try:
        from shapedesc.descriptors import read_coefficients, write_coefficient_file
    except ImportError:  # pragma: no cover - both are part of descriptors
        return
    rec = read_coefficients(path)
    write_coefficient_file(path, native_values=_snap(rec.native_values),
                           canonical_values=_snap(rec.values), metadata=rec.metadata,
                           overwrite=True)


class _StageError(Exception):
    def __init__(self, stage: str, exc: BaseException):
        super().__init__(stage)
        self.stage = stage
        self.exc = exc


def compute_item(task: dict) -> dict:
    """Describe one subject x structure; never raises for a bad input.

    Parameters
    ----------
    task : dict
        ``key``, ``subject``, ``structure``, ``input`` (absolute path), ``kind``
        (``surface``/``volume``), ``label`` (int or None), ``parameters`` (dict with
        ``degree``, ``scale``, ``smoothing`` and optional ``volume_smoothing_iterations``,
        ``target_vertices``).

    Returns
    -------
    dict
        ``status`` (``ok``/``failed``), ``key``, and for ``ok``: ``rows`` (``spectra``,
        ``spectra_mm2``, ``shape``, ``qc`` dicts of built-in scalars) and ``files``
        (coefficient file suffix -> bytes); for ``failed``: ``stage``, ``error``
        (one line), ``cacheable`` (False for failures that may not recur, such as
        running out of memory) and ``traceback``.  ``warnings``: messages of the
        warnings raised while computing (also put in the QC row).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1), warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            rows, files, _ = _describe(task)
        except _StageError as err:
            exc = err.exc
            return {"status": "failed", "key": task["key"], "stage": err.stage,
                    "error": _one_line(f"{type(exc).__name__}: {exc}"),
                    "cacheable": isinstance(exc, (ValueError, RuntimeError, ArithmeticError,
                                                  LookupError))
                    and not isinstance(exc, MemoryError),
                    "traceback": "".join(traceback.format_exception(exc)),
                    "warnings": [_one_line(f"{w.category.__name__}: {w.message}")
                                 for w in caught]}
    messages = []
    for w in caught:
        line = _one_line(f"{w.category.__name__}: {w.message}")
        if line not in messages:
            messages.append(line)
    rows["qc"]["warnings"] = " | ".join(messages) if messages else ""
    for table in rows.values():
        for k, v in table.items():
            if isinstance(v, float) and math.isnan(v):
                table[k] = None
    return {"status": "ok", "key": task["key"], "rows": rows, "files": files,
            "warnings": messages}
