"""``shapedesc check``: is each input a usable closed genus-0 surface?

One row per surface file, and per label of a label volume (every label present, or the
ones given with ``--label``). Exit status 0 when every row is usable as is or after the
safe repairs it lists, 1 otherwise. A file that cannot be read is a row with the reason.
"""

from __future__ import annotations

import argparse
import json
import sys

from shapedesc import defaults

_COLUMNS = (
    # (header, row key, formatter)
    ("input", "source", None),
    ("V", "n_vertices", None),
    ("F", "n_faces", None),
    ("comp", "n_components", None),
    ("bnd_e", "n_boundary_edges", None),
    ("nm_e", "n_nonmanifold_edges", None),
    ("nm_v", "n_nonmanifold_vertices", None),
    ("chi", "euler_characteristic", None),
    ("genus", "genus", None),
    ("degen", "n_degenerate_faces", None),
    ("dup_v", "n_duplicate_vertices", None),
    ("unref", "n_unreferenced_vertices", None),
    ("orient", "orientation", "orient"),
    ("nonfin", "n_nonfinite_coordinates", None),
    ("bad_idx", "n_bad_face_indices", None),
    ("area_mm2", "area_mm2", "float"),
    ("volume_mm3", "volume_mm3", "float"),
    ("verdict", "verdict", None),
)

_ORIENT = {"consistent outward": "outward", "consistent inward": "inward"}


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "check",
        help="check surfaces and label volumes: closed, manifold, genus 0, oriented",
        description=(
            "Check each input: surface files (GIFTI, PLY, STL, OBJ, OFF, and the geometry "
            "formats nibabel reads) one row each; NIfTI label volumes one row per label, "
            "through the label-volume-to-surface path. Verdicts: usable, usable after "
            "repair (the safe repairs are listed), unusable (why, and what to do). Exit "
            "status 0 when every row is usable (as is or after its listed repairs), 1 otherwise."
        ),
    )
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="surface files or label volumes")
    p.add_argument("--label", type=int, action="append", metavar="N", dest="labels",
                   help="label of a label volume to check (repeat for several; default: all present)")
    p.add_argument("--json", action="store_true", help="print the rows as JSON (for machines)")
    p.add_argument("--repair-largest-component", action="store_true",
                   help="allow keeping only the largest component as a repair")
    p.add_argument("--fill-holes", action="store_true",
                   help="allow filling small holes as a repair")
    p.add_argument("--max-hole-edges", type=int, default=defaults.MAX_HOLE_EDGES, metavar="N",
                   help=f"largest hole filled by --fill-holes, in edges (default {defaults.MAX_HOLE_EDGES})")
    return p


#: Row keys not repeated on the "volume path" line (already in the table, or not informative).
_VOLUME_SKIP = {"volume_mm3", "volume_label", "volume_n_vertices", "volume_n_faces",
                "volume_euler_characteristic"}


def _short(value) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    if isinstance(value, list):
        return "; ".join(_short(v) for v in value)
    return str(value)


def _cell(value, fmt) -> str:
    if value is None:
        return "-"
    if fmt == "orient":
        return _ORIENT.get(value, value)
    if fmt == "float":
        return f"{value:.1f}"
    return str(value)


def format_table(rows: list[dict]) -> str:
    """Aligned text table: one line per row, then its repairs and reasons indented."""
    headers = [c[0] for c in _COLUMNS]
    cells = [[_cell(r.get(key), fmt) for _, key, fmt in _COLUMNS] for r in rows]
    widths = [max([len(h)] + [len(c[i]) for c in cells]) for i, h in enumerate(headers)]
    numeric = {i for i, (_, key, fmt) in enumerate(_COLUMNS)
               if key.startswith("n_") or key in ("euler_characteristic", "genus") or fmt == "float"}

    def line(values):
        return "  ".join(v.rjust(w) if i in numeric else v.ljust(w)
                         for i, (v, w) in enumerate(zip(values, widths))).rstrip()

    out = [line(headers), line(["-" * w for w in widths])]
    for r, c in zip(rows, cells):
        out.append(line(c))
        for rep in r.get("repairs_needed") or []:
            out.append(f"    repair: {rep}")
        for reason in r.get("reasons") or []:
            out.append(f"    why: {reason}")
        extra = {k[len("volume_"):]: v for k, v in r.items()
                 if k.startswith("volume_") and k not in _VOLUME_SKIP}
        if extra:
            out.append("    volume path: " + ", ".join(f"{k}={_short(v)}" for k, v in extra.items()))
    n_bad = sum(1 for r in rows if r.get("verdict") == "unusable")
    out.append(f"{len(rows)} row(s): {len(rows) - n_bad} usable, {n_bad} unusable")
    return "\n".join(out)


def run(args: argparse.Namespace) -> int:
    from shapedesc.mesh.check import check_inputs

    rows = check_inputs(args.inputs, labels=args.labels,
                        keep_largest_component=args.repair_largest_component,
                        fill_holes=args.fill_holes, max_hole_edges=args.max_hole_edges)
    if args.json:
        json.dump(rows, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print(format_table(rows))
    return 0 if all(r.get("verdict") != "unusable" for r in rows) else 1
