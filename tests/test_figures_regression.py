"""Image regression of the surface renderer on a fixed synthetic case.

The reference ``tests/data/surface_render_reference.png`` is a 120 x 120 px render
(2 x 2 in at 60 dpi, no text so fonts cannot differ) of a fixed waisted ellipsoid
coloured by a fixed field with a fixed significant region, from the lateral view.

To regenerate it after an intended change of the renderer, run

    SHAPEDESC_REGENERATE_REFERENCE=1 pytest tests/test_figures_regression.py

look at the new PNG (it must show the shaded, outlined surface), and commit it.  The
run that regenerates fails on purpose, so a regeneration is never mistaken for a pass.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import numpy as np
import pytest
import trimesh
from matplotlib.colors import Normalize
from PIL import Image

from shapedesc.figures import style
from shapedesc.figures.surfaces import draw_surface, view_by_name

REFERENCE = Path(__file__).parent / "data" / "surface_render_reference.png"

#: RMS difference (RGB in [0, 1]) allowed against the reference.  Agg rasterises
#: non-antialiased polygons exactly the same way for the same input; the budget covers
#: rounding differences of other numpy/matplotlib builds (a few pixels at face edges,
#: measured 0 on the machine that made the reference).  A wrong view, colour map or
#: shading gives 0.1 or more (checked below), so 0.02 separates the two.
RMS_TOLERANCE = 0.02


def _render(view_name: str = "lateral", cmap=None) -> np.ndarray:
    m = trimesh.creation.icosphere(subdivisions=3)
    u = np.asarray(m.vertices)
    r = 1.0 - 0.35 * np.exp(-(u[:, 1] / 0.3) ** 2)
    v = u * np.stack([r, np.ones_like(r), r], axis=1) * [9.0, 20.0, 9.0]
    s = 2.0 * np.sin(2.0 * u[:, 1]) + 0.5 * u[:, 2]
    sig = s > 1.0
    with style.figure_style():
        fig = style.new_figure(2.0, 2.0)
        ax = fig.add_axes((0, 0, 1, 1))
        draw_surface(ax, v, np.asarray(m.faces), view=view_by_name(view_name), scalars=s,
                     norm=Normalize(-2.5, 2.5), significant=sig, cmap=cmap)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=60)  # outside figure_style: no tight bbox, fixed size
    with Image.open(io.BytesIO(buf.getvalue())) as im:
        return np.asarray(im.convert("RGB"), dtype=float) / 255.0


def _rms(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.sqrt(np.mean((a - b) ** 2)))


def test_surface_render_matches_reference():
    img = _render()
    if os.environ.get("SHAPEDESC_REGENERATE_REFERENCE") == "1":
        REFERENCE.parent.mkdir(exist_ok=True)
        Image.fromarray(np.round(img * 255).astype(np.uint8)).save(REFERENCE)
        pytest.fail(f"reference regenerated at {REFERENCE}; inspect it and commit it")
    with Image.open(REFERENCE) as im:
        ref = np.asarray(im.convert("RGB"), dtype=float) / 255.0
    assert img.shape == ref.shape == (120, 120, 3)
    assert _rms(img, ref) <= RMS_TOLERANCE


def test_regression_tolerance_catches_real_changes():
    # The tolerance is meaningful only if plausible mistakes exceed it by a margin.
    with Image.open(REFERENCE) as im:
        ref = np.asarray(im.convert("RGB"), dtype=float) / 255.0
    assert _rms(_render("medial"), ref) > 5 * RMS_TOLERANCE  # mirrored view
    assert _rms(_render(cmap="viridis"), ref) > 5 * RMS_TOLERANCE  # other colour map
