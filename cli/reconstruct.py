"""``shapedesc reconstruct``: a smoothed surface from one coefficient file."""

from __future__ import annotations

import argparse
import logging
from pathlib import Path

from shapedesc import defaults

log = logging.getLogger("shapedesc.cli.reconstruct")

SUFFIXES = (".gii", ".ply", ".obj", ".stl")


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "reconstruct",
        help="rebuild a surface from a coefficient file (any degree, optional smoothing)",
        description="Rebuild a surface from a coefficient file written by `shapedesc describe`, "
                    "sampled on a subdivided icosahedron so that vertex k is the same point "
                    "of the canonical sphere for every subject.",
    )
    p.add_argument("coefficients", metavar="COEFFICIENT_FILE", help="a .npz file from OUTDIR/coefficients/")
    p.add_argument("-o", "--output", required=True, metavar="OUT",
                   help="output surface: .gii, .ply, .obj or .stl")
    p.add_argument("--degree", type=int, default=None, metavar="L",
                   help="truncate at degree L (default: the file's degree)")
    p.add_argument("--smoothing", type=float, default=0.0, metavar="S",
                   help="heat-kernel bandwidth on the unit sphere (default 0: none)")
    p.add_argument("--level", type=int, default=defaults.DEFAULT_ICOSPHERE_LEVEL, metavar="K",
                   help=f"icosphere subdivision level (default {defaults.DEFAULT_ICOSPHERE_LEVEL}: 2,562 vertices)")
    p.add_argument("--pose", choices=("canonical", "native"), default="canonical",
                   help="canonical pose (centred, ellipsoid axes along x, y, z) or the input's coordinates")
    p.add_argument("--figure", metavar="OUT.png", default=None,
                   help="also render the surface to a figure (.png, .svg or .pdf)")
    p.add_argument("--force", action="store_true", help="overwrite existing outputs")
    return p


def run(args: argparse.Namespace) -> int:
    from shapedesc.descriptors import read_coefficients
    from shapedesc.io.surfaces import write_surface
    from shapedesc.reconstruct import reconstruct
    from shapedesc.surface import Surface

    out = Path(args.output)
    if out.suffix.lower() not in SUFFIXES:
        raise ValueError(f"{out}: output must end in one of {', '.join(SUFFIXES)}")
    for target in [out] + ([Path(args.figure)] if args.figure else []):
        if target.exists() and not args.force:
            raise FileExistsError(f"{target}: exists already; choose another name or pass --force")
    record = read_coefficients(args.coefficients)
    vertices, faces = reconstruct(record, degree=args.degree, smoothing=args.smoothing,
                                  level=args.level, pose=args.pose)
    deg = record.lmax if args.degree is None else args.degree
    surface = Surface(vertices, faces, source=str(args.coefficients),
                      history=(f"reconstructed at degree {deg}, smoothing {args.smoothing}, "
                               f"icosphere level {args.level}, {args.pose} pose",))
    write_surface(surface, out, overwrite=args.force)
    log.info("wrote %s (%d vertices, %d faces)", out, len(vertices), len(faces))
    if args.figure:
        from shapedesc.figures import render_surface_figure

        render_surface_figure(vertices, faces, args.figure, pose=args.pose,
                              title=f"{Path(args.coefficients).stem} (degree {deg})",
                              overwrite=args.force)
        log.info("wrote %s", args.figure)
    return 0
