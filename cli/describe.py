"""``shapedesc describe``: shape descriptors of surfaces, label volumes or a whole study.

INPUT is one of

* surface files and/or label volumes (NIfTI ``.nii``, ``.nii.gz``); subject and
  structure come from each file name (``sub-01_hippocampus.surf.gii`` -> ``sub-01`` /
  ``hippocampus``; the full rule is in
  :func:`shapedesc.pipeline.manifest.names_from_filename`) unless ``--subject`` /
  ``--structure`` give them; a label volume gives one structure per ``--label`` value
  (default: every label in it), named ``label-<N>`` unless ``--structure`` names them;
* one manifest ``.tsv``/``.csv`` (columns ``subject``, ``input``, optional ``labels``,
  ``structures``, and any carried columns; see :mod:`shapedesc.pipeline.manifest`);
* one BIDS dataset or derivatives folder (see :mod:`shapedesc.pipeline.bids`).

All three run through the same pipeline into OUTDIR (a BIDS derivatives dataset; see
:mod:`shapedesc.pipeline.outputs`).  Rerunning with the same parameters computes only
what is missing.  Exit status: 0 when every item succeeded, else the number of failed
items (capped at 100); 1 also for a refused command (bad manifest, OUTDIR in use).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from shapedesc.defaults import DEFAULT_DEGREE, MAX_EXIT_FAILURES

HELP = "describe the shape of surfaces, label volumes, a manifest or a BIDS folder"


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "describe", help=HELP, description=HELP + ". " + __doc__.split("\n\n", 1)[1],
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("inputs", nargs="+", metavar="INPUT",
                   help="surface files / label volumes, or one manifest .tsv/.csv, or one "
                        "BIDS folder")
    p.add_argument("-o", "--outdir", required=True, metavar="OUTDIR",
                   help="output folder (a BIDS derivatives dataset)")
    p.add_argument("--degree", type=int, default=DEFAULT_DEGREE, metavar="L",
                   help=f"largest spherical-harmonic degree (default {DEFAULT_DEGREE})")
    p.add_argument("--label", type=int, nargs="+", metavar="N", dest="labels",
                   help="label values to take from label volumes (default: all, or the "
                        "manifest's labels column)")
    p.add_argument("--scale", choices=("none", "volume", "area"), default="volume",
                   help="scale normalisation: none, cube root of volume, square root of "
                        "area (default volume)")
    p.add_argument("--smoothing", type=float, default=0.0, metavar="S",
                   help="heat-kernel smoothing bandwidth of the fit (default 0: none)")
    p.add_argument("--sphere-maps", action="store_true",
                   help="also write each item's sphere map and per-vertex area/angle "
                        "distortion (GIFTI: _surface.surf.gii, _sphere.surf.gii, "
                        "_distortion.shape.gii) into OUTDIR/coefficients/, for figures")
    p.add_argument("--jobs", type=int, default=1, metavar="N",
                   help="local worker processes (default 1)")
    p.add_argument("--scheduler", metavar="ADDR",
                   help="run on a Dask distributed cluster (tcp://host:port); needs "
                        "shapedesc[dask]")
    p.add_argument("--force", action="store_true",
                   help="replace results in OUTDIR made with other parameters")
    p.add_argument("--subject", metavar="ID",
                   help="subject id for files named on the command line; the structure "
                        "is then the whole file name (less a first part equal to ID)")
    p.add_argument("--structure", nargs="+", metavar="NAME", dest="structures",
                   help="structure names: one per surface file, or one per --label value")
    p.add_argument("--subject-column", default="subject", metavar="NAME",
                   help="manifest column with the subject id (default subject)")
    p.add_argument("--input-column", default="input", metavar="NAME",
                   help="manifest column with the input path (default input)")
    return p


def load_manifest(inputs: list[str], *, labels=None, subject=None, structures=None,
                  subject_column="subject", input_column="input"):
    """The :class:`~shapedesc.pipeline.manifest.Manifest` for describe's INPUT arguments."""
    from shapedesc.errors import ManifestError
    from shapedesc.pipeline.bids import is_bids_folder, manifest_from_bids
    from shapedesc.pipeline.manifest import manifest_from_files, read_manifest

    paths = [Path(p) for p in inputs]
    tables = [p for p in paths if p.suffix.lower() in (".tsv", ".csv")]
    folders = [p for p in paths if p.is_dir()]
    if (tables or folders) and len(paths) > 1:
        raise ManifestError(f"give one manifest or one BIDS folder alone, or only "
                            f"surface/volume files; got {len(paths)} inputs including "
                            f"{[str(p) for p in tables + folders]}")
    manifest_only = (subject, structures)
    if (tables or folders) and any(v for v in manifest_only):
        raise ManifestError("--subject/--structure apply to files named on the command "
                            "line; a manifest or BIDS folder names its own")
    if tables:
        return read_manifest(tables[0], labels=labels, subject_column=subject_column,
                             input_column=input_column)
    if folders:
        if not is_bids_folder(folders[0]):
            raise ManifestError(f"{folders[0]}: a folder input must be a BIDS dataset "
                                f"(dataset_description.json or sub-* folders)")
        return manifest_from_bids(folders[0], labels=labels)
    return manifest_from_files(list(inputs), labels=labels, subject=subject,
                               structures=structures)


def run(args: argparse.Namespace) -> int:
    from shapedesc.pipeline.progress import ProgressReporter
    from shapedesc.pipeline.run import DescribeParameters, run_study

    manifest = load_manifest(args.inputs, labels=args.labels, subject=args.subject,
                             structures=args.structures, subject_column=args.subject_column,
                             input_column=args.input_column)
    params = DescribeParameters(degree=args.degree, scale=args.scale,
                                smoothing=args.smoothing, sphere_maps=args.sphere_maps)
    reporter = ProgressReporter(stream=sys.stderr)
    try:
        result = run_study(manifest, args.outdir, parameters=params, jobs=args.jobs,
                           scheduler=args.scheduler, force=args.force, progress=reporter)
    finally:
        reporter.close()
    print(f"{result.n_items - result.n_failed} of {result.n_items} item(s) described "
          f"({result.n_cached} from the cache), {result.n_failed} failed; results in "
          f"{result.outdir}" + (f"; see {result.outdir / 'failures.tsv'}"
                                if result.n_failed else ""))
    if result.n_warned:
        print(f"{result.n_warned} described item(s) have warnings: see the 'warnings' column "
              f"of {result.outdir / 'qc.tsv'}")
    if result.n_failed > MAX_EXIT_FAILURES:
        print(f"exit status capped at {MAX_EXIT_FAILURES}", file=sys.stderr)
    return result.exit_status
