"""Study manifests: which structure of which subject comes from which file.

A manifest is a TSV or CSV table with one row per input file:

========================  ==================================================================
column                    meaning
========================  ==================================================================
``subject``               subject id (``sub-01``, ``P017`` ...); letters, digits, ``._+-``
``input``                 a surface file or a label volume; relative paths are taken
                          against the manifest's folder
``labels`` (optional)     label values to take from a label volume, comma separated
                          (``17,53``); empty for surfaces
``structures`` (optional) structure names, comma separated, one per label
                          (``left_hippocampus,right_hippocampus``); for a surface, its one
                          name.  Missing: from the file name (surfaces, see
                          :func:`names_from_filename`) or ``label-<N>`` (volumes)
anything else             carried unchanged into the output tables (group, age, sex,
                          site, head size ...)
========================  ==================================================================

A subject may have several rows (one surface file per structure, say); the carried
columns must then agree between its rows.  Every problem in a manifest is collected and
reported at once in one :class:`~shapedesc.errors.ManifestError`.

The same :class:`Manifest` is built from plain files named on the command line
(:func:`manifest_from_files`) and from a BIDS folder (:mod:`shapedesc.pipeline.bids`), so
one pipeline runs all three.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass, field
from pathlib import Path

from shapedesc.defaults import SAFE_NAME_PATTERN
from shapedesc.errors import ManifestError

__all__ = [
    "WorkItem", "Manifest", "read_manifest", "manifest_from_files", "names_from_filename",
    "input_kind", "MANIFEST_COLUMNS",
]

#: Default names of the columns the pipeline interprets (all others are carried along).
MANIFEST_COLUMNS = {"subject": "subject", "input": "input", "labels": "labels",
                    "structures": "structures"}

#: Column names the output tables use themselves; a manifest may not carry them.
_RESERVED = {"subject", "structure", "input", "label", "labels", "structures", "stage", "error"}
_DEGREE_COLUMN = re.compile(r"^l\d+$")
_SAFE = re.compile(SAFE_NAME_PATTERN)

#: File-name endings read as label volumes; every other file is read as a surface.
VOLUME_SUFFIXES = (".nii.gz", ".nii", ".mgz", ".mgh")
#: Endings stripped from a surface file name before it is parsed (longest first).
SURFACE_SUFFIXES = (".surf.gii", ".gii.gz", ".gii", ".ply", ".stl", ".obj", ".off",
                    ".vtk", ".mz3")


@dataclass(frozen=True)
class WorkItem:
    """One subject x structure to describe.

    Attributes
    ----------
    subject, structure : str
        Names used in every output row and in ``coefficients/<subject>_<structure>.npz``.
    input : str
        Absolute path of the file the structure comes from.
    input_display : str
        The path as the user wrote it (relative to the manifest folder); what the tables
        and ``run.json`` show, so outputs do not depend on where the study is mounted.
    kind : {"surface", "volume"}
    label : int or None
        Label value in a label volume; None for surfaces.
    extra : tuple of (str, str)
        Carried manifest columns, in manifest order.
    """

    subject: str
    structure: str
    input: str
    input_display: str
    kind: str
    label: int | None = None
    extra: tuple[tuple[str, str], ...] = ()

    @property
    def name(self) -> str:
        """``<subject>_<structure>``: the stem of this item's coefficient file."""
        return f"{self.subject}_{self.structure}"


@dataclass(frozen=True)
class Manifest:
    """A validated study: the work items and the names of the carried columns.

    Attributes
    ----------
    items : tuple of WorkItem
        Sorted by (subject, structure).
    extra_columns : tuple of str
        Carried columns, in the order they appear in the tables.
    source : str
        Where the manifest came from (a path, a BIDS folder, ``<command line>``).
    """

    items: tuple[WorkItem, ...]
    extra_columns: tuple[str, ...] = ()
    source: str = "<command line>"
    inputs: tuple[str, ...] = field(default=())

    def __post_init__(self):
        items = tuple(sorted(self.items, key=lambda it: (it.subject, it.structure)))
        object.__setattr__(self, "items", items)
        object.__setattr__(self, "inputs", tuple(sorted({it.input for it in items})))


def input_kind(path: str | Path) -> str:
    """``"volume"`` for NIfTI/MGH label volumes (by file name ending), else ``"surface"``."""
    name = Path(path).name.lower()
    return "volume" if name.endswith(VOLUME_SUFFIXES) else "surface"


def _stem(path: str | Path) -> str:
    name = Path(path).name
    low = name.lower()
    for suffix in VOLUME_SUFFIXES + SURFACE_SUFFIXES:
        if low.endswith(suffix):
            return name[: -len(suffix)]
    return name.rsplit(".", 1)[0] if "." in name[1:] else name


def names_from_filename(path: str | Path, subject: str | None = None) -> tuple[str, str]:
    """Subject and structure from a surface file name.

    The rule, applied to the name without its format ending (``.surf.gii``, ``.gii``,
    ``.ply``, ``.nii.gz`` ...), split at ``_``:

    1. BIDS style (a part starts with ``sub-``): the subject is that part, joined with a
       following ``ses-`` part when there is one (``sub-01_ses-2``).  The structure is the
       ``hemi-`` value (if any) joined by ``_`` to the ``label-`` value, or, without a
       ``label-`` entity, to the last part (the BIDS suffix).  Other ``key-value`` parts
       (``desc-``, ``space-``, ``run-``...) are ignored.
       ``sub-01_hippocampus.surf.gii`` -> (``sub-01``, ``hippocampus``);
       ``sub-01_ses-2_hemi-L_label-caudate_desc-smooth_surf.gii`` ->
       (``sub-01_ses-2``, ``L_caudate``).
    2. Otherwise the first part is the subject and the remaining parts, joined by ``_``,
       the structure: ``P017_left_putamen.ply`` -> (``P017``, ``left_putamen``).
    3. A name with no ``_`` is the subject; the structure is ``surface``.

    With ``subject`` given (``describe --subject``) the name need not carry the subject:
    rules 2 and 3 then take the whole name as the structure, less a first part equal to
    ``subject``: ``putamen_left.ply`` -> (``subject``, ``putamen_left``),
    ``P017_left_putamen.ply`` with ``subject="P017"`` -> (``P017``, ``left_putamen``).
    BIDS-style names keep rule 1's structure.

    Parameters
    ----------
    path : str or Path
    subject : str, optional
        The subject id, when the caller knows it.

    Returns
    -------
    subject, structure : str
    """
    parts = [p for p in _stem(path).split("_") if p]
    if subject and not any(p.startswith("sub-") for p in parts):
        rest = parts[1:] if parts and parts[0] == subject else parts
        return subject, "_".join(rest) or "surface"
    if not parts:
        return "", "surface"
    sub_idx = next((i for i, p in enumerate(parts) if p.startswith("sub-")), None)
    if sub_idx is not None:
        subj = parts[sub_idx]
        rest = parts[:sub_idx] + parts[sub_idx + 1:]
        ses = next((p for p in rest if p.startswith("ses-")), None)
        if ses is not None:
            subj = f"{subj}_{ses}"
            rest.remove(ses)
        subj = subject or subj
        entities = {p.split("-", 1)[0]: p.split("-", 1)[1] for p in rest if "-" in p}
        plain = [p for p in rest if "-" not in p]
        core = entities.get("label") or (plain[-1] if plain else None)
        if core is None:
            return subj, "surface"
        hemi = entities.get("hemi")
        return subj, f"{hemi}_{core}" if hemi else core
    if len(parts) == 1:
        return parts[0], "surface"
    return parts[0], "_".join(parts[1:])


# --------------------------------------------------------------------------- validation
def _parse_labels(text: str) -> tuple[list[int], str | None]:
    values = []
    for piece in text.replace(";", ",").split(","):
        piece = piece.strip()
        if not piece:
            continue
        try:
            value = int(piece)
        except ValueError:
            return [], f"label value {piece!r} is not an integer"
        if value <= 0:
            return [], f"label value {value} must be a positive integer (0 is background)"
        values.append(value)
    return values, None


def _split_names(text: str) -> list[str]:
    return [s.strip() for s in text.replace(";", ",").split(",") if s.strip()]


def check_items(items: list[WorkItem], *, where: str, problems: list[str] | None = None,
                check_files: bool = True) -> list[str]:
    """Collect problems of a list of work items (names, duplicates, files, covariates).

    Returns the list of problems (empty when all is well); does not raise.
    """
    problems = [] if problems is None else problems
    seen: dict[tuple[str, str], str] = {}
    extras: dict[str, tuple[tuple[str, str], ...]] = {}
    missing_reported: set[str] = set()
    for it in items:
        label = f"{it.subject or '<empty>'} / {it.structure or '<empty>'}"
        if not it.subject:
            problems.append(f"{it.input_display}: empty subject id; give one")
        elif not _SAFE.match(it.subject):
            problems.append(f"subject id {it.subject!r} ({it.input_display}) must match "
                            f"{SAFE_NAME_PATTERN} (it becomes part of a file name)")
        if not it.structure:
            problems.append(f"{it.input_display}: empty structure name; give one")
        elif not _SAFE.match(it.structure):
            problems.append(f"structure name {it.structure!r} ({it.input_display}) must match "
                            f"{SAFE_NAME_PATTERN} (it becomes part of a file name)")
        key = (it.subject, it.structure)
        if key in seen:
            problems.append(f"duplicate subject x structure {label}: from {seen[key]} and "
                            f"{it.input_display}; give each structure its own name")
        else:
            seen[key] = it.input_display
        if check_files and it.input not in missing_reported and not Path(it.input).is_file():
            missing_reported.add(it.input)
            problems.append(f"{it.input_display}: no such file (looked for {it.input})")
        if it.subject in extras and extras[it.subject] != it.extra:
            problems.append(f"subject {it.subject}: carried columns differ between its rows "
                            f"({dict(extras[it.subject])} vs {dict(it.extra)}); make them agree")
        extras.setdefault(it.subject, it.extra)
    return problems


def _raise(problems: list[str], where: str) -> None:
    if problems:
        lines = "\n".join(f"  - {p}" for p in problems)
        raise ManifestError(f"{where}: {len(problems)} problem(s) found; fix them all and "
                            f"run again:\n{lines}")


def _volume_items(subject, path, display, labels, names, override, extra, where, problems):
    """Items of one label volume row; appends problems instead of raising."""
    if names and labels and len(names) != len(labels):
        problems.append(f"{where}: {len(labels)} label value(s) but {len(names)} structure "
                        f"name(s); give one name per label")
        return []
    named = dict(zip(labels, names)) if names else {}
    if labels and override:
        chosen = [v for v in labels if v in set(override)]
        if not chosen:
            problems.append(f"{where}: none of --label {sorted(override)} is among the row's "
                            f"labels {labels}")
            return []
    elif labels:
        chosen = labels
    elif override:
        chosen = list(override)
        if names and len(names) == len(chosen):
            named = dict(zip(chosen, names))
        elif names:
            problems.append(f"{where}: {len(names)} structure name(s) for {len(chosen)} "
                            f"--label value(s); give one name per label")
            return []
    else:
        problems.append(f"{where}: {display} is a label volume but no label values are "
                        f"given; fill the labels column or pass --label")
        return []
    return [WorkItem(subject, named.get(v, f"label-{v}"), path, display, "volume", v, extra)
            for v in chosen]


def read_manifest(path: str | Path, *, labels: list[int] | None = None,
                  subject_column: str = "subject", input_column: str = "input",
                  labels_column: str = "labels", structures_column: str = "structures"
                  ) -> Manifest:
    """Read and validate a TSV/CSV study manifest.

    Parameters
    ----------
    path : str or Path
        ``.tsv`` (tab separated) or ``.csv`` (comma separated), UTF-8, header row first.
    labels : list of int, optional
        ``--label`` values: for label-volume rows, the labels to take (a subset of the
        row's ``labels`` when it has them, else these).
    subject_column, input_column, labels_column, structures_column : str
        Names of the interpreted columns (the first two must exist).

    Returns
    -------
    Manifest

    Raises
    ------
    ManifestError
        Listing every problem found: unreadable file, missing or unknown columns,
        missing input files, duplicate subject x structure, bad label values, names that
        cannot be file names, carried columns that disagree between a subject's rows.
    """
    path = Path(path)
    where = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise ManifestError(f"{where}: cannot read the manifest ({exc}); check the path "
                            f"and that it is UTF-8 text") from exc
    delimiter = "," if path.suffix.lower() == ".csv" else "\t"
    rows = list(csv.reader(text.splitlines(), delimiter=delimiter))
    rows = [r for r in rows if any(c.strip() for c in r)]
    if not rows:
        raise ManifestError(f"{where}: the manifest is empty; it needs a header row with "
                            f"'{subject_column}' and '{input_column}' and one row per input")
    header = [h.strip() for h in rows[0]]
    problems: list[str] = []
    for role, col in (("subject id", subject_column), ("input path", input_column)):
        if col not in header:
            problems.append(f"{role} column {col!r} is not in the header {header}"
                            + (" (is this a CSV read as TSV?)" if len(header) == 1 else ""))
    for role, col, default in (("labels", labels_column, "labels"),
                               ("structures", structures_column, "structures")):
        if col != default and col not in header:
            problems.append(f"{role} column {col!r} given as an option is not in the "
                            f"header {header}")
    dupes = sorted({h for h in header if header.count(h) > 1})
    if dupes:
        problems.append(f"column name(s) {dupes} appear more than once in the header")
    if "" in header:
        problems.append("the header has an empty column name")
    _raise(problems, where)

    interpreted = {subject_column, input_column, labels_column, structures_column}
    extra_cols = [h for h in header if h not in interpreted]
    for col in extra_cols:
        if col in _RESERVED or _DEGREE_COLUMN.match(col):
            problems.append(f"column {col!r} clashes with an output column name; rename it")
    base = path.parent
    items: list[WorkItem] = []
    for lineno, raw in enumerate(rows[1:], start=2):
        row_where = f"{where} line {lineno}"
        if len(raw) != len(header):
            problems.append(f"{row_where}: {len(raw)} cells for {len(header)} columns")
            continue
        cells = {h: c.strip() for h, c in zip(header, raw)}
        subject = cells[subject_column]
        display = cells[input_column]
        if not display:
            problems.append(f"{row_where}: empty {input_column!r} cell")
            continue
        resolved = Path(display).expanduser()
        if not resolved.is_absolute():
            resolved = base / resolved
        resolved_s = str(resolved.resolve())
        extra = tuple((c, cells[c]) for c in extra_cols)
        row_labels, err = _parse_labels(cells.get(labels_column, ""))
        if err:
            problems.append(f"{row_where}: {err}")
            continue
        names = _split_names(cells.get(structures_column, ""))
        if input_kind(display) == "volume":
            items += _volume_items(subject, resolved_s, display, row_labels, names, labels,
                                   extra, row_where, problems)
        else:
            if row_labels:
                problems.append(f"{row_where}: label values given for {display}, which is "
                                f"a surface, not a label volume; leave {labels_column!r} empty")
                continue
            if len(names) > 1:
                problems.append(f"{row_where}: a surface holds one structure but "
                                f"{len(names)} names are given")
                continue
            structure = names[0] if names else names_from_filename(display)[1]
            items.append(WorkItem(subject, structure, resolved_s, display, "surface", None,
                                  extra))
    if not items and not problems:
        problems.append("the manifest has a header but no rows")
    check_items(items, where=where, problems=problems)
    _raise(problems, where)
    return Manifest(tuple(items), tuple(extra_cols), where)


def _volume_labels(path: str) -> list[int]:
    """Positive label values present in a label volume (read through shapedesc.io)."""
    from shapedesc.io.volumes import read_label_volume

    return [int(v) for v in read_label_volume(path).labels]


def manifest_from_files(paths: list[str | Path], *, labels: list[int] | None = None,
                        subject: str | None = None, structures: list[str] | None = None
                        ) -> Manifest:
    """An implicit manifest for surface files and label volumes named on the command line.

    Parameters
    ----------
    paths : list of path
        Surface files and/or label volumes.
    labels : list of int, optional
        Labels to take from every label volume (default: every positive label found).
    subject : str, optional
        Subject id for every file (default: from each file name, see
        :func:`names_from_filename`).
    structures : list of str, optional
        Structure names: one per surface file when all inputs are surfaces, or one per
        ``labels`` value for label volumes (default: from the file name / ``label-<N>``).

    Raises
    ------
    ManifestError
        Listing every problem (missing files, duplicate subject x structure, ...).
    """
    problems: list[str] = []
    items: list[WorkItem] = []
    surfaces = [p for p in paths if input_kind(p) == "surface"]
    if structures and surfaces and len(structures) != len(surfaces):
        problems.append(f"{len(structures)} --structure name(s) for {len(surfaces)} surface "
                        f"file(s); give one per file")
    s_iter = iter(structures or [])
    for p in paths:
        display = str(p)
        resolved = str(Path(p).expanduser().resolve())
        subj, struct = names_from_filename(p, subject)
        if input_kind(p) == "surface":
            if structures and surfaces and len(structures) == len(surfaces):
                struct = next(s_iter)
            items.append(WorkItem(subj, struct, resolved, display, "surface"))
            continue
        if not Path(resolved).is_file():
            problems.append(f"{display}: no such file (looked for {resolved})")
            continue
        row_labels = list(labels) if labels else None
        if row_labels is None:
            try:
                row_labels = _volume_labels(resolved)
            except (ValueError, OSError) as exc:
                problems.append(f"{display}: cannot list its labels ({exc}); pass --label")
                continue
            if not row_labels:
                problems.append(f"{display}: holds no positive label values")
                continue
        names = list(structures) if (structures and not surfaces) else []
        items += _volume_items(subj, resolved, display, row_labels, names, None, (),
                               display, problems)
    check_items(items, where="command line", problems=problems)
    _raise(problems, "command line inputs")
    return Manifest(tuple(items), (), "<command line>")
