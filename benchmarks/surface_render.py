"""Benchmark: the four-view surface figure, our painter's renderer vs mplot3d.

Both draw the same icosphere-sampled surface (levels 4 and 5: 5,120 and 20,480 faces)
coloured by a scalar field from four views into a 300-dpi PNG.  The baseline is
matplotlib's own 3-D toolkit (``mpl_toolkits.mplot3d`` ``plot_trisurf`` with per-face
colours, orthographic projection), which sorts faces the same way but goes through its
3-D projection machinery.  Reported: seconds per figure (best of ``--repeat``) and the
ratio baseline / ours.

Run:  python benchmarks/surface_render.py [--quick]
Writes benchmarks/results/surface_render.json.
"""

from __future__ import annotations

import argparse
import io
import json
import time
from pathlib import Path

import numpy as np
import trimesh


def _surface(level: int):
    m = trimesh.creation.icosphere(subdivisions=level)
    u = np.asarray(m.vertices)
    v = u * [8.0, 20.0, 10.0]
    return v, np.asarray(m.faces), np.sin(3 * u[:, 1]) * 1.5


def ours(v, f, s) -> bytes:
    from shapedesc.figures.style import figure_png_bytes
    from shapedesc.figures.surfaces import plot_surface_views

    fig = plot_surface_views(v, f, scalars=s, title="ours")
    return figure_png_bytes(fig, dpi=300)


def baseline(v, f, s) -> bytes:
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    from shapedesc.figures.style import DIVERGING_CMAP

    fig = Figure(figsize=(7.3, 1.85))
    m = float(np.max(np.abs(s)))
    colours = DIVERGING_CMAP(Normalize(-m, m)(s[f].mean(axis=1)))
    for k, (elev, azim) in enumerate([(0, 180), (0, 0), (90, -90), (0, 90)]):
        ax = fig.add_subplot(1, 4, k + 1, projection="3d", proj_type="ortho")
        tri = ax.plot_trisurf(v[:, 0], v[:, 1], v[:, 2], triangles=f, linewidth=0,
                              antialiased=False, shade=True)
        tri.set_facecolors(colours)
        ax.view_init(elev=elev, azim=azim)
        ax.set_axis_off()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=300)
    return buf.getvalue()


def _best(fn, args, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        fn(*args)
        best = min(best, time.perf_counter() - t)
    return best


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="level 4 only, one repeat")
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args(argv)
    levels = (4,) if a.quick else (4, 5)
    repeat = 1 if a.quick else a.repeat
    rows = []
    for level in levels:
        v, f, s = _surface(level)
        ours(v, f, s)  # warm-up (imports, font cache)
        t_ours = _best(ours, (v, f, s), repeat)
        t_base = _best(baseline, (v, f, s), repeat)
        rows.append({"level": level, "faces": int(len(f)), "ours_s": t_ours,
                     "mplot3d_s": t_base, "ratio_mplot3d_over_ours": t_base / t_ours})
    print(f"{'level':>5} {'faces':>7} {'ours s':>8} {'mplot3d s':>10} {'ratio':>6}")
    for r in rows:
        print(f"{r['level']:>5} {r['faces']:>7} {r['ours_s']:>8.2f} {r['mplot3d_s']:>10.2f} "
              f"{r['ratio_mplot3d_over_ours']:>6.2f}")
    out = Path(__file__).parent / "results" / "surface_render.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({"rows": rows, "repeat": repeat}, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
