"""Shape-mode and QC-gallery figures."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import trimesh

from shapedesc.figures.modes import (
    ModeSurfaces,
    mode_surfaces,
    normal_displacement,
    plot_shape_modes,
    vertex_normals,
)
from shapedesc.figures.qc import QCThumbnail, plot_qc_gallery, qc_caption


def test_vertex_normals_of_a_sphere_are_radial():
    # Source: closed form — the outward normal of a sphere at p is p/|p|.
    m = trimesh.creation.icosphere(subdivisions=3, radius=5.0)
    v = np.asarray(m.vertices)
    n = vertex_normals(v, np.asarray(m.faces))
    # Area-weighted normals of an inscribed polyhedron deviate from radial where the
    # neighbouring facets are not symmetric (5- vs 6-valent vertices); measured 0.011 at
    # level 3, so 0.02 (the facet angle itself is ~0.06 rad).
    np.testing.assert_allclose(n, v / np.linalg.norm(v, axis=1, keepdims=True), atol=0.02)
    # a sphere grown by 1.5 mm is displaced by +1.5 mm along every normal
    d = normal_displacement(v * (6.5 / 5.0), v, np.asarray(m.faces))
    # error 1.5 mm x (1 - cos 0.011 rad) ~ 1e-4 mm; 1e-3 mm keeps a margin
    np.testing.assert_allclose(d, 1.5, atol=1e-3)


def _shape_space():
    import shapedesc.stats.shapespace as stats
    rng = np.random.default_rng(2)
    y1 = math.sqrt(3 / (4 * math.pi))  # real Y_1 normalisation (DLMF 14.30, orthonormal)
    values = []
    for _ in range(15):
        c = np.zeros((16, 3))
        c[3, 0] = 20 / y1 * (1 + 0.1 * rng.normal())
        c[1, 1] = 10 / y1
        c[2, 2] = 7 / y1
        c[4:] += rng.normal(0, 0.2, c[4:].shape)
        values.append(c)
    return stats.shape_pca(stats.coefficient_features(values), n_modes=2)


def test_mode_figure_labels_variance_from_the_shape_space():
    ss = _shape_space()
    modes = mode_surfaces(ss, 3, n_modes=2, level=2)
    assert modes.minus.shape == modes.plus.shape == (2, modes.mean_vertices.shape[0], 3)
    # mean ± 2 SD along a mode: the two surfaces straddle the mean symmetrically,
    # because reconstruction is linear in the coefficients (rounding-level check).
    np.testing.assert_allclose((modes.minus + modes.plus) / 2,
                               np.broadcast_to(modes.mean_vertices, modes.minus.shape), atol=1e-9)
    assert np.abs(modes.plus - modes.minus).max() > 0.5  # and they do differ (mm)
    fig = plot_shape_modes(modes)
    texts = [t.get_text() for ax in fig.axes for t in ax.texts]
    for i in range(2):
        pct = f"{100 * ss.explained_variance_ratio[i]:.1f} % of variance"
        assert any(pct in t for t in texts)
    assert fig.axes[-1].get_ylabel() == "displacement from mean along normal (mm)"
    lo, hi = fig.axes[-1].get_ylim()
    assert lo == pytest.approx(-hi)


def test_mode_figure_refuses_mismatched_arrays():
    m = trimesh.creation.icosphere(subdivisions=1)
    v = np.asarray(m.vertices)
    bad = ModeSurfaces(v, np.asarray(m.faces), np.zeros((1, 3, 3)), np.zeros((1, 3, 3)),
                       np.array([0.5]), 2.0)
    with pytest.raises(ValueError, match="mode surfaces must have shape"):
        plot_shape_modes(bad)


def test_qc_caption_prints_the_table_numbers():
    row = {"fit_rms_mm": 0.123, "fit_max_mm": 0.9, "area_log_sd": 0.25,
           "angle_distortion_mean_deg": 4.56, "n_flipped": 0, "pose_warning": ""}
    text, warn = qc_caption(row)
    assert "RMS 0.12 mm" in text and "angle 4.6°" in text and "flips 0" in text
    assert not warn
    text, warn = qc_caption({**row, "pose_warning": "axes 1 and 2 nearly equal"})
    assert warn and "pose warning" in text
    assert qc_caption({**row, "n_flipped": 3})[1]
    assert not qc_caption({**row, "pose_warning": "n/a"})[1]  # describe's "no warning"
    # a strongly sheared map (above defaults.SPHERE_SHEARED_SHARE_WARN, 3 %) is flagged
    text, warn = qc_caption({**row, "sheared_area_share": 0.081})
    assert warn and "sheared 8.1%" in text
    assert not qc_caption({**row, "sheared_area_share": 0.0})[1]


def test_gallery_orders_worst_first_and_lists_failures():
    m = trimesh.creation.icosphere(subdivisions=2)
    v, f = np.asarray(m.vertices) * [8, 20, 10], np.asarray(m.faces)
    thumbs = [QCThumbnail(f"sub-{i}", "hippocampus_L", (v * 1.01, f), (v, f),
                          f"RMS {rms:.2f} mm", False, rms)
              for i, rms in enumerate([0.1, 0.5, float("nan"), 0.3])]
    failures = pd.DataFrame([{"subject": "sub-9", "structure": "hippocampus_L",
                              "input": "s9.gii", "stage": "read", "error": "truncated"}])
    fig = plot_qc_gallery(thumbs, failures=failures, columns=2)
    captions = [t.get_text().split("\n")[0] for ax in fig.axes for t in ax.texts]
    assert captions == ["sub-1 / hippocampus_L", "sub-3 / hippocampus_L",
                        "sub-0 / hippocampus_L", "sub-2 / hippocampus_L"]
    fig_text = " ".join(t.get_text() for t in fig.texts)
    assert "Failed (1)" in fig_text and "sub-9 / hippocampus_L: failed at read" in fig_text
    with pytest.raises(ValueError, match="nothing to show"):
        plot_qc_gallery([])
