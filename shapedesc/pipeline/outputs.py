"""The OUTDIR of ``shapedesc describe``: a BIDS derivatives dataset of result tables.

Layout::

    OUTDIR/
      dataset_description.json   BIDS derivative description, GeneratedBy shapedesc
      spectra.tsv                subject, structure, carried columns, l1 .. lL (normalised)
      spectra_mm2.tsv            same layout, energies in mm^2
      shape.tsv                  subject, structure, carried columns, scalar shape indices
      qc.tsv                     subject, structure, input, QC measures (map distortion,
                                 shear and ``sheared_area_share``, flips, fit residuals,
                                 pose, repairs; ``volume_*`` from the label-volume surface
                                 report), warnings; no timings
      failures.tsv               subject, structure, input, stage, error
      timings.tsv                subject, structure, status, CPU and wall seconds per stage
                                 (read, surface, prepare, map, describe, write, total) and
                                 the stages' own wall-clock splits; NOT reproducible
      coefficients/<subject>_<structure>.npz   (+ its metadata file, if separate)
      coefficients/<subject>_<structure>_{surface,sphere}.surf.gii, _distortion.shape.gii
                                 with --sphere-maps only: the mapped surface, its sphere
                                 map and per-vertex area/angle/shear distortion (GIFTI, for
                                 figures; see pipeline.work.sphere_map_files)
      run.json                   parameters, versions, input SHA-256, counts
      .cache/                    per-item results for resuming (see pipeline.cache)

Rows are sorted by (subject, structure); floats are written with
:data:`~shapedesc.defaults.TABLE_FLOAT_DIGITS` significant digits, missing values as
``n/a``.  Except ``timings.tsv``, nothing in these files depends on the time, the
number of workers, the executor or an interruption, so a rerun, a resumed run and a run
on a cluster write the same bytes (on the same machine type and library versions; see
:mod:`shapedesc.pipeline.work` for why), wherever the study is mounted: messages, table
cells and the coefficient files' ``source`` name each input as the manifest (or the
command line) wrote it.  ``timings.tsv`` holds, for items taken from the cache, the
timings of the run that computed them.
"""

from __future__ import annotations

import json
import math
import platform
from importlib.metadata import PackageNotFoundError, version as _dist_version
from pathlib import Path

from shapedesc import __version__
from shapedesc.defaults import TABLE_FLOAT_DIGITS, TABLE_MISSING
from shapedesc.errors import OutputExistsError
from shapedesc.io.atomic import write_bytes_atomic, write_text_atomic

__all__ = ["format_value", "tsv_text", "write_tsv", "check_outdir", "dependency_versions",
           "dataset_description", "TABLES", "UNREPRODUCIBLE", "RUN_JSON"]

TABLES = ("spectra", "spectra_mm2", "shape", "qc", "failures", "timings")
#: The one table whose bytes change from run to run.
UNREPRODUCIBLE = ("timings.tsv",)
RUN_JSON = "run.json"
DESCRIPTION = "dataset_description.json"
COEFFICIENTS = "coefficients"

#: Distributions whose versions run.json records.
_DEPENDENCIES = ("numpy", "scipy", "nibabel", "trimesh", "scikit-image", "scikit-learn",
                 "pandas", "ducc0", "tqdm", "threadpoolctl", "dask", "distributed")


def format_value(value) -> str:
    """Text of one table cell: stable float format, ``n/a`` for missing, one line."""
    if value is None:
        return TABLE_MISSING
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return TABLE_MISSING
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        text = format(value, f".{TABLE_FLOAT_DIGITS}g")
        return "0" if text == "-0" else text
    text = " ".join(str(value).split())
    return text if text else TABLE_MISSING


def tsv_text(columns: list[str], rows: list[dict]) -> str:
    """TSV text (header + rows, ``\\n`` line ends) of ``rows`` under ``columns``."""
    lines = ["\t".join(columns)]
    lines += ["\t".join(format_value(row.get(c)) for c in columns) for row in rows]
    return "\n".join(lines) + "\n"


def write_tsv(path: str | Path, columns: list[str], rows: list[dict]) -> None:
    """Write a TSV table atomically (see :func:`tsv_text`)."""
    write_text_atomic(path, tsv_text(columns, rows))


def dependency_versions() -> dict[str, str | None]:
    """Installed versions of the libraries results depend on (None when absent)."""
    out: dict[str, str | None] = {"python": platform.python_version()}
    for name in _DEPENDENCIES:
        try:
            out[name] = _dist_version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


def dataset_description() -> dict:
    """The BIDS ``dataset_description.json`` of a describe OUTDIR (BIDS 1.9 derivatives)."""
    return {
        "Name": "shapedesc shape descriptors",
        "BIDSVersion": "1.9.0",
        "DatasetType": "derivative",
        "GeneratedBy": [{
            "Name": "shapedesc",
            "Version": __version__,
            "Description": ("Spherical-harmonic shape descriptors of closed surfaces "
                            "(research use only)"),
        }],
    }


def write_json(path: str | Path, obj) -> None:
    """Write JSON atomically with sorted keys and a final newline (stable bytes)."""
    write_text_atomic(path, json.dumps(obj, indent=2, sort_keys=True) + "\n")


def _ours(description: Path) -> bool:
    try:
        meta = json.loads(description.read_text(encoding="utf-8"))
        return any(g.get("Name") == "shapedesc" for g in meta.get("GeneratedBy", []))
    except (OSError, ValueError, AttributeError, TypeError):
        return False


def check_outdir(outdir: str | Path, *, parameters: dict, inputs: list[str],
                 force: bool = False) -> None:
    """Refuse an OUTDIR that would overwrite inputs or results made with other parameters.

    Rules: an OUTDIR that is absent or empty is fine; one made by ``shapedesc describe``
    with the same parameters is reused (resume, or more subjects); anything else needs
    ``force``.  Whatever ``force`` says, an OUTDIR holding any input file, or holding a
    ``dataset_description.json`` that shapedesc did not write (a source dataset), is
    refused.

    Raises
    ------
    OutputExistsError
    """
    outdir = Path(outdir).resolve()
    if outdir.exists() and not outdir.is_dir():
        raise OutputExistsError(f"{outdir}: exists and is not a folder; choose another -o")
    for inp in inputs:
        p = Path(inp).resolve()
        if p == outdir or outdir in p.parents:
            raise OutputExistsError(
                f"{outdir}: holds the input {p}; inputs are never overwritten, so write "
                f"the results elsewhere (e.g. <dataset>/derivatives/shapedesc)")
    if not outdir.exists() or not any(outdir.iterdir()):
        return
    desc = outdir / DESCRIPTION
    if desc.exists() and not _ours(desc):
        raise OutputExistsError(
            f"{outdir}: holds a dataset_description.json that shapedesc did not write "
            f"(a source dataset?); it is never overwritten, choose another -o")
    run_json = outdir / RUN_JSON
    try:
        previous = json.loads(run_json.read_text(encoding="utf-8")).get("parameters")
    except (OSError, ValueError, AttributeError):
        previous = None
    if previous == parameters or force:
        return
    if previous is None:
        raise OutputExistsError(f"{outdir}: is not empty and was not made by shapedesc "
                                f"describe; choose an empty folder or pass --force")
    diff = {k: (previous.get(k), parameters.get(k))
            for k in sorted(set(previous) | set(parameters))
            if previous.get(k) != parameters.get(k)}
    described = ", ".join(f"{k}: {a!r} there, {b!r} now" for k, (a, b) in diff.items())
    raise OutputExistsError(f"{outdir}: holds results made with other parameters "
                            f"({described}); choose another -o or pass --force to replace them")


def write_coefficient_files(outdir: Path, name: str, files: dict[str, bytes]) -> list[str]:
    """Write ``coefficients/<name><suffix>`` for each file, skipping identical ones.

    Returns the file names (``<name><suffix>``), written or already identical."""
    folder = outdir / COEFFICIENTS
    names = []
    for suffix, data in sorted(files.items()):
        names.append(f"{name}{suffix}")
        path = folder / names[-1]
        try:
            if path.read_bytes() == data:
                continue
        except OSError:
            pass
        write_bytes_atomic(path, data)
    return names


def _columns(rows: list[dict], leading: list[str]) -> list[str]:
    cols = list(leading)
    seen = set(cols)
    for row in rows:
        for k in row:
            if k not in seen:
                seen.add(k)
                cols.append(k)
    return cols


def build_tables(items, entries: dict, failures: dict, extra_columns) -> dict:
    """Rows and columns of every table.

    Parameters
    ----------
    items : sequence of WorkItem, sorted
    entries : dict key -> cache entry (successful items)
    failures : dict key -> failure record
    extra_columns : sequence of str

    Returns
    -------
    dict name -> (columns, rows)
    """
    out: dict[str, tuple[list[str], list[dict]]] = {}
    extra_columns = list(extra_columns)
    for table in ("spectra", "spectra_mm2", "shape", "qc"):
        lead = ["subject", "structure"] + (["input"] if table == "qc" else extra_columns)
        rows, data_rows = [], []
        for it, key in items:
            entry = entries.get(key)
            if entry is None:
                continue
            data = entry["rows"][table]
            base = {"subject": it.subject, "structure": it.structure}
            if table == "qc":
                base["input"] = it.input_display
            else:
                base.update(dict(it.extra))
            data_rows.append(data)
            rows.append({**data, **base})
        out[table] = (_columns(data_rows, lead), rows)
    fail_rows = []
    for it, key in items:
        rec = failures.get(key)
        if rec is not None:
            fail_rows.append({"subject": it.subject, "structure": it.structure,
                              "input": it.input_display, "stage": rec["stage"],
                              "error": rec["error"]})
    out["failures"] = (["subject", "structure", "input", "stage", "error"], fail_rows)
    time_rows = []
    for it, key in items:
        rec = entries.get(key) or failures.get(key)
        if rec is None or not rec.get("timings"):
            continue
        time_rows.append({**rec["timings"], "subject": it.subject, "structure": it.structure,
                          "status": "ok" if key in entries else "failed"})
    out["timings"] = (_columns(time_rows, ["subject", "structure", "status"]), time_rows)
    return out
