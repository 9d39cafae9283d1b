"""Study-level orchestration: manifests, BIDS discovery, cache, batch execution, outputs.

Public entry points::

    from shapedesc.pipeline import read_manifest, manifest_from_files, manifest_from_bids
    from shapedesc.pipeline import DescribeParameters, run_study

    manifest = read_manifest("study/manifest.tsv")            # or a BIDS folder, or files
    result = run_study(manifest, "out", parameters=DescribeParameters(degree=15), jobs=2)
    result.n_failed, result.exit_status

Modules: :mod:`~shapedesc.pipeline.manifest` (TSV/CSV manifests, file-name rule),
:mod:`~shapedesc.pipeline.bids` (BIDS -> manifest), :mod:`~shapedesc.pipeline.cache`
(per-item results keyed by content hash and parameters), :mod:`~shapedesc.pipeline.work`
(one item, in any process), :mod:`~shapedesc.pipeline.run` (local / process pool / Dask
execution), :mod:`~shapedesc.pipeline.outputs` (the OUTDIR layout),
:mod:`~shapedesc.pipeline.progress` (bar or log lines).  Submodules are imported on
first use so that ``import shapedesc.pipeline`` stays light.
"""

from __future__ import annotations

import importlib

_EXPORTS = {
    "read_manifest": "manifest", "manifest_from_files": "manifest", "Manifest": "manifest",
    "WorkItem": "manifest", "names_from_filename": "manifest",
    "manifest_from_bids": "bids",
    "DescribeParameters": "run", "run_study": "run", "StudyRun": "run", "ProgressEvent": "run",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f"shapedesc.pipeline.{_EXPORTS[name]}"), name)
    raise AttributeError(f"module 'shapedesc.pipeline' has no attribute {name!r}")
