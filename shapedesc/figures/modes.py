"""Shape-space modes: the mean surface and mean ± k SD along the first principal modes.

The surfaces come from the shape-space result (mean feature vector, unit modes, variance
along each mode; ``shapedesc.stats.shapespace``): the coefficients at
``mean ± k·√variance·mode`` are rebuilt on the correspondence icosphere, and every
vertex is coloured by its displacement from the mean surface along the mean surface's
outward normal (mm), so inward and outward change read at a glance.

References
----------
Cootes, T. F., Taylor, C. J., Cooper, D. H. & Graham, J. (1995). Active shape models —
their training and application. Computer Vision and Image Understanding 61(1), 38–59.
doi:10.1006/cviu.1995.1004  (mean ± k SD mode display)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize

from shapedesc.defaults import DEFAULT_ICOSPHERE_LEVEL, PCA_MODE_SD
from shapedesc.figures import style
from shapedesc.figures.surfaces import (
    View,
    _check_mesh,
    _draw,
    _label_directions,
    _project,
    _scale_bar,
    axis_views,
)


@dataclass(frozen=True)
class ModeSurfaces:
    """Surfaces along the shape-space modes, on one shared mesh.

    Attributes
    ----------
    mean_vertices : ndarray, shape (V, 3), mm
    faces : ndarray, shape (F, 3)
    minus, plus : ndarray, shape (K, V, 3), mm
        Surfaces at mean − k SD and mean + k SD along modes 1..K.
    variance_ratio : ndarray, shape (K,)
        Fraction of the total shape variance each mode explains.
    sd_multiple : float
        k.
    """

    mean_vertices: np.ndarray
    faces: np.ndarray
    minus: np.ndarray
    plus: np.ndarray
    variance_ratio: np.ndarray
    sd_multiple: float


def vertex_normals(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Area-weighted unit vertex normals (V, 3) of an outward-oriented mesh."""
    v, f = _check_mesh(vertices, faces)
    fn = np.cross(v[f[:, 1]] - v[f[:, 0]], v[f[:, 2]] - v[f[:, 0]])  # length 2·area
    n = np.zeros_like(v)
    for k in range(3):
        np.add.at(n, f[:, k], fn)
    norm = np.linalg.norm(n, axis=1, keepdims=True)
    return n / np.where(norm > 0, norm, 1.0)


def normal_displacement(vertices: np.ndarray, reference: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Displacement (V,) in mm of ``vertices`` from ``reference`` along its outward normals."""
    return np.einsum("ij,ij->i", np.asarray(vertices, float) - reference,
                     vertex_normals(reference, faces))


def mode_surfaces(shape_space, degree: int, *, n_modes: int = 3,
                  sd_multiple: float = PCA_MODE_SD,
                  level: int = DEFAULT_ICOSPHERE_LEVEL) -> ModeSurfaces:
    """Rebuild mean and mean ± k SD surfaces from a shape-space result.

    Parameters
    ----------
    shape_space : shapedesc.stats.shapespace.ShapeSpace
        ``mean`` (F,), ``components`` (K, F), ``explained_variance`` (K,) and
        ``explained_variance_ratio`` (K,) of canonical-pose coefficient features (mm).
    degree : int
        Highest degree the features hold.
    n_modes : int
        Modes drawn (at most K).
    sd_multiple : float
        k in mean ± k SD.
    level : int
        Icosphere level of the reconstructions.

    Returns
    -------
    ModeSurfaces
    """
    from shapedesc.reconstruct import reconstruct_values
    from shapedesc.stats.shapespace import features_to_coefficients

    comps = np.asarray(shape_space.components, float)
    var = np.asarray(shape_space.explained_variance, float)
    k = min(int(n_modes), comps.shape[0])
    if k < 1:
        raise ValueError(f"need at least one mode, got n_modes={n_modes} and "
                         f"{comps.shape[0]} modes in the shape space")
    if not sd_multiple > 0:
        raise ValueError(f"sd_multiple must be positive, got {sd_multiple}")
    mean = np.asarray(shape_space.mean, float)

    def surface(features):
        return reconstruct_values(features_to_coefficients(features, degree), degree,
                                  level=level)

    mv, faces = surface(mean)
    minus, plus = [], []
    for i in range(k):
        step = sd_multiple * np.sqrt(max(var[i], 0.0)) * comps[i]
        minus.append(surface(mean - step)[0])
        plus.append(surface(mean + step)[0])
    return ModeSurfaces(mv, np.asarray(faces), np.stack(minus), np.stack(plus),
                        np.asarray(shape_space.explained_variance_ratio, float)[:k],
                        float(sd_multiple))


def plot_shape_modes(modes: ModeSurfaces, *, view: View | None = None,
                     panel_size_in: float = 1.5, title: str | None = None):
    """Rows: modes; columns: mean − k SD, mean, mean + k SD; coloured by displacement.

    Parameters
    ----------
    modes : ModeSurfaces
    view : View, optional
        Camera; default the first of :func:`shapedesc.figures.surfaces.axis_views`
        (canonical pose, long axis across the panel).
    panel_size_in : float
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Row labels carry each mode's percentage of variance explained.
    """
    mv, f = _check_mesh(modes.mean_vertices, modes.faces, what="mean surface")
    k = modes.minus.shape[0]
    if modes.minus.shape != (k, mv.shape[0], 3) or modes.plus.shape != modes.minus.shape:
        raise ValueError(f"mode surfaces must have shape (K, {mv.shape[0]}, 3); got "
                         f"{modes.minus.shape} and {modes.plus.shape}")
    view = axis_views()[0] if view is None else view
    disp_minus = [normal_displacement(modes.minus[i], mv, f) for i in range(k)]
    disp_plus = [normal_displacement(modes.plus[i], mv, f) for i in range(k)]
    lo, hi = style.symmetric_limits(np.concatenate(disp_minus + disp_plus))
    norm = Normalize(lo, hi)
    cmap = style.DIVERGING_CMAP
    every = [mv] + list(modes.minus) + list(modes.plus)
    centre = mv.mean(axis=0)
    radius = 1.04 * max(float(np.max(np.abs(_project(v - centre, view)[0]))) for v in every)
    sd = f"{modes.sd_multiple:g} SD"
    with style.figure_style():
        height = panel_size_in * k + 0.5
        fig = style.new_figure(panel_size_in * 3 + 1.4, height)
        gs = fig.add_gridspec(k, 4, width_ratios=[1, 1, 1, 0.07], wspace=0.06, hspace=0.15,
                              top=1.0 - 0.5 / height, bottom=0.02)
        for i in range(k):
            cells = [(modes.minus[i], disp_minus[i], f"mean − {sd}"),
                     (mv, np.zeros(mv.shape[0]), "mean"),
                     (modes.plus[i], disp_plus[i], f"mean + {sd}")]
            for j, (v, d, name) in enumerate(cells):
                ax = fig.add_subplot(gs[i, j])
                _draw(ax, v, f, view, d, cmap, norm, None, "outline", style.NEUTRAL_GREY,
                      None, "", centre, radius)
                _label_directions(ax, view)
                if i == 0:
                    ax.set_title(name, fontsize=8)
                if j == 0:
                    ax.text(-0.04, 0.5, f"mode {i + 1}\n{100 * modes.variance_ratio[i]:.1f} % "
                            "of variance", transform=ax.transAxes, rotation=90, ha="right",
                            va="center", fontsize=7)
                    if i == k - 1:
                        _scale_bar(ax, radius)
        cax = fig.add_subplot(gs[:, -1])
        cb = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax)
        cb.set_label("displacement from mean along normal (mm)")
        fig.suptitle(title or f"Shape modes (mean ± {sd}), view {view.name}",
                     y=1.0 - 0.08 / height, va="top")
    return fig
