"""A BIDS dataset or derivatives folder turned into a study manifest.

What is found (BIDS specification 1.9, "Derivatives: imaging data types" and
"Segmentations"):

* ``sub-<label>/[ses-<label>/]anat/*_dseg.nii[.gz]``: discrete segmentations (label
  volumes).  Label index -> name comes from the ``*_dseg.tsv`` beside it (same name
  stem), or, by the BIDS inheritance principle, from a ``*_dseg.tsv`` at the top of the
  dataset whose entities all appear in the volume's name (``desc-aseg_dseg.tsv``);
  columns ``index`` and ``name``.  Without one, every positive label in the volume is
  taken and named ``label-<N>``.  Index 0 (background) is never taken.
* ``sub-<label>/[ses-<label>/]anat/*.surf.gii``: surfaces, one structure each, named by
  :func:`shapedesc.pipeline.manifest.names_from_filename`.
* ``participants.tsv`` (in the folder, or in the raw dataset two levels up when the
  folder is ``<raw>/derivatives/<name>``): every column except ``participant_id`` is
  carried into the outputs.  With sessions, the subject id of a row is
  ``sub-<label>_ses-<label>`` and a ``session`` column is added.

Raw BIDS datasets usually hold no segmentations: pass the derivatives folder instead
(the error says so when nothing is found).
"""

from __future__ import annotations

import csv
import re
from pathlib import Path

from shapedesc.errors import ManifestError
from shapedesc.pipeline.manifest import (
    Manifest, WorkItem, _raise, _volume_items, _volume_labels, check_items,
    names_from_filename,
)

__all__ = ["is_bids_folder", "manifest_from_bids", "read_dseg_tsv"]

_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]+")


def is_bids_folder(path: str | Path) -> bool:
    """True for a folder holding ``dataset_description.json`` or ``sub-*`` folders."""
    p = Path(path)
    return p.is_dir() and ((p / "dataset_description.json").is_file()
                           or any(q.is_dir() for q in p.glob("sub-*")))


def _read_tsv(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    rows = list(csv.reader(path.read_text(encoding="utf-8-sig").splitlines(), delimiter="\t"))
    rows = [r for r in rows if any(c.strip() for c in r)]
    if not rows:
        return [], []
    header = [h.strip() for h in rows[0]]
    return header, [dict(zip(header, (c.strip() for c in r))) for r in rows[1:]]


def _safe_name(name: str) -> str:
    return _UNSAFE.sub("_", name.strip()).strip("_") or "unnamed"


def read_dseg_tsv(path: str | Path) -> dict[int, str]:
    """Label index -> structure name from a BIDS ``*_dseg.tsv`` (columns index, name).

    Names are made file-name safe (runs of other characters become ``_``).

    Raises
    ------
    ManifestError
        If the columns are missing or an index is not an integer.
    """
    path = Path(path)
    header, rows = _read_tsv(path)
    if "index" not in header or "name" not in header:
        raise ManifestError(f"{path}: a dseg.tsv needs columns 'index' and 'name', found "
                            f"{header}")
    out: dict[int, str] = {}
    for k, row in enumerate(rows, start=2):
        try:
            index = int(row["index"])
        except (KeyError, ValueError):
            raise ManifestError(f"{path} line {k}: index {row.get('index')!r} is not an "
                                f"integer") from None
        if index > 0:
            out[index] = _safe_name(row.get("name", "") or f"label-{index}")
    return out


def _entities(stem: str) -> set[str]:
    return {p for p in stem.split("_") if "-" in p}


def _find_dseg_tsv(volume: Path, root: Path) -> Path | None:
    stem = volume.name.split(".nii")[0]
    beside = volume.with_name(stem + ".tsv")
    if beside.is_file():
        return beside
    mine = _entities(stem)
    candidates = []
    for d in (volume.parent, volume.parent.parent, root):
        for tsv in sorted(d.glob("*_dseg.tsv")):
            ents = _entities(tsv.name[: -len("_dseg.tsv")])
            if ents <= mine:
                candidates.append((len(ents), tsv))
        if candidates:
            return max(candidates)[1]
    return None


def _participants(root: Path) -> Path | None:
    for d in (root, root.parent.parent if root.parent.name == "derivatives" else None):
        if d is not None and (d / "participants.tsv").is_file():
            return d / "participants.tsv"
    return None


def manifest_from_bids(root: str | Path, *, labels: list[int] | None = None) -> Manifest:
    """Build a :class:`Manifest` from a BIDS dataset or derivatives folder.

    Parameters
    ----------
    root : path
        The folder holding ``sub-*`` (and usually ``dataset_description.json``).
    labels : list of int, optional
        Only these label values of every segmentation (default: all in its dseg.tsv).

    Returns
    -------
    Manifest
        Items sorted by subject and structure; carried columns are the participants.tsv
        columns (and ``session`` when there are sessions).

    Raises
    ------
    ManifestError
        Listing every problem: nothing found, unreadable dseg.tsv, requested labels
        absent, duplicate subject x structure.
    """
    root = Path(root).resolve()
    problems: list[str] = []
    where = str(root)
    if not root.is_dir():
        raise ManifestError(f"{root}: not a folder; give a BIDS dataset or derivatives folder")
    found: list[tuple[Path, str, str | None]] = []  # (file, subject, session)
    for sub_dir in sorted(p for p in root.glob("sub-*") if p.is_dir()):
        subject = sub_dir.name
        anat_dirs = [(sub_dir / "anat", None)]
        anat_dirs += [(s / "anat", s.name) for s in sorted(sub_dir.glob("ses-*")) if s.is_dir()]
        for anat, ses in anat_dirs:
            if not anat.is_dir():
                continue
            for f in sorted(anat.iterdir()):
                name = f.name
                if name.endswith(("_dseg.nii.gz", "_dseg.nii")) or name.endswith(".surf.gii"):
                    found.append((f, subject, ses))
    if not found:
        raise ManifestError(
            f"{root}: no sub-*/[ses-*/]anat/*_dseg.nii.gz or *.surf.gii found; for a raw "
            f"BIDS dataset pass its derivatives folder (e.g. {root}/derivatives/<pipeline>)")
    sessions = any(ses for _, _, ses in found)
    part_path = _participants(root)
    part_cols: list[str] = []
    part_rows: dict[str, dict[str, str]] = {}
    if part_path is not None:
        header, rows = _read_tsv(part_path)
        if "participant_id" not in header:
            problems.append(f"{part_path}: no participant_id column (found {header})")
        else:
            part_cols = [h for h in header if h != "participant_id"]
            for row in rows:
                pid = row["participant_id"]
                pid = pid if pid.startswith("sub-") else f"sub-{pid}"
                part_rows[pid] = row
    extra_cols = (["session"] if sessions else []) + [c for c in part_cols if c != "session"]
    items: list[WorkItem] = []
    for f, subject, ses in found:
        subj_id = f"{subject}_{ses}" if ses else subject
        prow = part_rows.get(subject, {})
        if part_path is not None and not prow:
            problems.append(f"{subject}: not listed in {part_path}; its carried columns "
                            f"would be empty")
        extra = tuple((c, (ses or "n/a") if c == "session" else prow.get(c, "n/a"))
                      for c in extra_cols)
        display = str(f.relative_to(root))
        if f.name.endswith(".surf.gii"):
            items.append(WorkItem(subj_id, names_from_filename(f)[1], str(f), display,
                                  "surface", None, extra))
            continue
        tsv = _find_dseg_tsv(f, root)
        try:
            index = read_dseg_tsv(tsv) if tsv is not None else None
        except ManifestError as exc:
            problems.append(str(exc))
            continue
        if index is None:
            try:
                index = {v: f"label-{v}" for v in _volume_labels(str(f))}
            except (ValueError, OSError) as exc:
                problems.append(f"{display}: cannot list its labels ({exc}) and no "
                                f"dseg.tsv names them; add a {f.name.split('.nii')[0]}.tsv")
                continue
        if labels:
            absent = sorted(set(labels) - set(index))
            if len(absent) == len(set(labels)):
                problems.append(f"{display}: none of --label {sorted(labels)} is in its "
                                f"label list {sorted(index)[:20]}")
                continue
        values = sorted(index)
        items += _volume_items(subj_id, str(f), display, values, [index[v] for v in values],
                               labels, extra, display, problems)
    check_items(items, where=where, problems=problems)
    _raise(problems, where)
    return Manifest(tuple(items), tuple(extra_cols), where)
