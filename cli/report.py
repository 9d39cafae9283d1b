"""``shapedesc report``: one self-contained HTML report of a study's results."""

from __future__ import annotations

import argparse
import logging
from pathlib import Path

from shapedesc import defaults

log = logging.getLogger("shapedesc.cli.report")


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "report",
        help="write one self-contained HTML report of describe (and compare) results",
        description="Write one HTML file with the study summary, the quality-control table "
                    "and galleries, the shape spectra, the group tests with their "
                    "corrections, surface maps, shape modes, and the parameters and "
                    "versions. Images are embedded; the page fetches nothing from the "
                    "network and needs no other file.",
    )
    p.add_argument("outdir", metavar="OUTDIR", help="output folder of `shapedesc describe`")
    p.add_argument("statsdir", metavar="STATSDIR", nargs="?", default=None,
                   help="output folder of `shapedesc compare` (optional)")
    p.add_argument("--stats", dest="stats_option", metavar="STATSDIR", default=None,
                   help="the same as the STATSDIR argument")
    p.add_argument("-o", "--output", required=True, metavar="REPORT.html",
                   help="the HTML file to write")
    p.add_argument("--inputs", metavar="DIR", default=None,
                   help="folder the input paths in qc.tsv are relative to (the manifest's "
                        "folder), for the input-vs-reconstruction thumbnails")
    p.add_argument("--thumbnails", type=int, default=None, metavar="N",
                   help="most QC thumbnails per structure, worst fit first (default: "
                        "shapedesc.report.MAX_THUMBNAILS)")
    p.add_argument("--figures", metavar="DIR", default=None,
                   help=f"also write every figure into DIR for papers: PNG at "
                        f"{defaults.FIGURE_DPI} dpi, SVG and PDF")
    p.add_argument("--dpi", type=int, default=defaults.REPORT_DPI,
                   help=f"resolution of the embedded images (default {defaults.REPORT_DPI})")
    p.add_argument("--force", action="store_true", help="overwrite an existing report")
    return p


def run(args: argparse.Namespace) -> int:
    from shapedesc.report import MAX_THUMBNAILS, write_report

    if args.statsdir and args.stats_option and Path(args.statsdir) != Path(args.stats_option):
        raise ValueError(f"two STATSDIRs given ({args.statsdir} and --stats "
                         f"{args.stats_option}); give one")
    statsdir = args.statsdir or args.stats_option
    out = Path(args.output)
    if out.suffix.lower() not in (".html", ".htm"):
        raise ValueError(f"{out}: the report is HTML; give a name ending in .html")
    if not 20 <= args.dpi <= 600:
        raise ValueError(f"--dpi {args.dpi}: give a resolution between 20 and 600")
    thumbs = MAX_THUMBNAILS if args.thumbnails is None else args.thumbnails
    if thumbs < 0:
        raise ValueError(f"--thumbnails {thumbs}: give 0 or more")
    path = write_report(args.outdir, statsdir, out, force=args.force, input_root=args.inputs,
                        dpi=args.dpi, max_thumbnails=thumbs, figures_dir=args.figures)
    log.info("wrote %s (%.1f MB)", path, path.stat().st_size / 1e6)
    return 0
