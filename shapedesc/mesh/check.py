"""Check input files: one row per surface file, or per label of a label volume.

The library side of ``shapedesc check``: reads each input, inspects the mesh (for label
volumes, the surface the volume path extracts for each label) and returns plain-dict
rows. Nothing here raises for a bad input: a file that cannot be read becomes a row with
verdict ``unusable`` and the reason.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import zlib
from pathlib import Path

import numpy as np

from shapedesc import defaults
from shapedesc.io.surfaces import sniff_format
from shapedesc.mesh.validate import UNUSABLE, MeshReport
from shapedesc.mesh.volume import label_to_surface

logger = logging.getLogger(__name__)

#: Fields of a row, in table order (MeshReport fields after ``input``, ``label``, ``kind``).
ROW_FIELDS: tuple[str, ...] = ("input", "label", "kind") + tuple(
    f.name for f in dataclasses.fields(MeshReport))



def looks_like_volume(path: str | Path) -> bool:
    """True when ``path`` is (by content, else by suffix) a NIfTI volume."""
    path = Path(path)
    name = path.name.lower()
    by_suffix = name.endswith(".nii") or name.endswith(".nii.gz")
    try:
        with open(path, "rb") as fh:
            head = fh.read(1 << 16)
    except OSError:
        return by_suffix
    if head.startswith(b"\x1f\x8b"):
        try:
            head = zlib.decompressobj(wbits=31).decompress(head, 1 << 16)
        except zlib.error:
            return by_suffix
    fmt = sniff_format(head)
    if fmt is None:
        return by_suffix
    return fmt == "nifti"


def _error_row(path: str, exc: BaseException, *, label: int | None = None,
               kind: str = "surface") -> dict:
    row = {k: None for k in ROW_FIELDS}
    source = str(path) if label is None else f"{path}#label={label}"
    msg = str(exc)
    if not msg.startswith(str(path)):
        msg = f"{source}: {msg}"
    row.update(input=str(path), label=label, kind=kind, source=source, verdict=UNUSABLE,
               repairs_needed=[], reasons=[f"{type(exc).__name__}: {msg}"])
    return row


def _report_row(path: str, report: MeshReport, *, label: int | None, kind: str) -> dict:
    row = {"input": str(path), "label": label, "kind": kind}
    row.update(report.to_row())
    return row


def _plain(value):
    """JSON-friendly version of a report field (arrays summarised, NaN as None)."""
    if isinstance(value, np.ndarray):
        return value.tolist() if value.size <= 16 else f"array{value.shape}"
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    return value


def check_surface_file(path: str | Path, *, keep_largest_component: bool = False,
                       fill_holes: bool = False,
                       max_hole_edges: int = defaults.MAX_HOLE_EDGES,
                       max_bytes: int = defaults.MAX_INPUT_BYTES) -> dict:
    """One row for a surface file (never raises for a bad file)."""
    from shapedesc.io.surfaces import read_surface
    from shapedesc.mesh.validate import inspect_mesh

    try:
        surface = read_surface(path, max_bytes=max_bytes)
        report = inspect_mesh(surface, keep_largest_component=keep_largest_component,
                              fill_holes=fill_holes, max_hole_edges=max_hole_edges)
    except Exception as exc:  # a bad input is a row, never a crash
        logger.debug("check %s failed", path, exc_info=True)
        return _error_row(str(path), exc)
    return _report_row(str(path), report, label=None, kind="surface")


def check_volume_file(path: str | Path, *, labels: list[int] | None = None,
                      keep_largest_component: bool = False, fill_holes: bool = False,
                      max_hole_edges: int = defaults.MAX_HOLE_EDGES,
                      max_bytes: int = defaults.MAX_INPUT_BYTES,
                      volume_options: dict | None = None) -> list[dict]:
    """Rows for a label volume: one per label present, or per label in ``labels``.

    Each label's surface comes from ``shapedesc.mesh.volume.label_to_surface``; its
    report (voxel and mesh volumes, voxels changed by the topology fix, ...) is added to
    the row as ``volume_*`` fields.
    """
    from shapedesc.errors import LabelError
    from shapedesc.io.volumes import read_label_volume
    from shapedesc.mesh.validate import inspect_mesh

    try:
        volume = read_label_volume(path, max_bytes=max_bytes)
    except Exception as exc:
        logger.debug("check %s failed", path, exc_info=True)
        return [_error_row(str(path), exc, kind="label volume")]
    if not volume.labels:
        try:
            volume.require_label(0 if not labels else labels[0])
        except LabelError as exc:
            return [_error_row(str(path), exc, label=(labels[0] if labels else None),
                               kind="label volume")]
    wanted = list(labels) if labels else list(volume.labels)
    rows = []
    for label in wanted:
        try:
            volume.require_label(label)
        except LabelError as exc:
            rows.append(_error_row(str(path), exc, label=int(label), kind="label volume"))
            continue
        try:
            surface, vreport = label_to_surface(volume, int(label), **(volume_options or {}))
            report = inspect_mesh(surface, keep_largest_component=keep_largest_component,
                                  fill_holes=fill_holes, max_hole_edges=max_hole_edges)
        except Exception as exc:
            logger.debug("check %s label %s failed", path, label, exc_info=True)
            rows.append(_error_row(str(path), exc, label=int(label), kind="label volume"))
            continue
        row = _report_row(str(path), report, label=int(label), kind="label volume")
        if dataclasses.is_dataclass(vreport):
            for f in dataclasses.fields(vreport):
                row[f"volume_{f.name}"] = _plain(getattr(vreport, f.name))
        if volume.history[1:]:
            row["volume_read_notes"] = list(volume.history[1:])
        rows.append(row)
    return rows


def check_inputs(paths: list[str | Path], *, labels: list[int] | None = None,
                 keep_largest_component: bool = False, fill_holes: bool = False,
                 max_hole_edges: int = defaults.MAX_HOLE_EDGES,
                 max_bytes: int = defaults.MAX_INPUT_BYTES) -> list[dict]:
    """Rows for every input: surfaces one each, label volumes one per label.

    Parameters
    ----------
    paths : list of path-like
    labels : list of int, optional
        Labels to check in label volumes (default: every non-zero label present).
    keep_largest_component, fill_holes, max_hole_edges : keyword-only
        Repairs allowed when judging "usable after repair".
    max_bytes : int
        Input size limit (bytes).

    Returns
    -------
    list of dict
        Rows with the keys of :data:`ROW_FIELDS` (plus ``volume_*`` for label volumes).
    """
    opts = dict(keep_largest_component=keep_largest_component, fill_holes=fill_holes,
                max_hole_edges=max_hole_edges, max_bytes=max_bytes)
    rows: list[dict] = []
    for p in paths:
        if looks_like_volume(p):
            rows.extend(check_volume_file(p, labels=labels, **opts))
        else:
            rows.append(check_surface_file(p, **opts))
    return rows
