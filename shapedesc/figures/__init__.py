"""Figures of shapedesc results (matplotlib, Agg canvas; no display needed).

One module per kind of figure, each taking its values from the result tables or arrays
it is given (nothing is re-estimated here):

``style`` resolution, fonts, colour maps, saving · ``spectra`` group spectra and effect
sizes by degree · ``surfaces`` shaded 3-D renders from standard views · ``modes``
shape-space modes · ``qc`` per-subject quality-control gallery.
"""

from shapedesc.figures.modes import ModeSurfaces, mode_surfaces, plot_shape_modes
from shapedesc.figures.qc import QCThumbnail, plot_qc_gallery, qc_caption
from shapedesc.figures.spectra import plot_effect_sizes, plot_group_spectra, summarise_spectra
from shapedesc.figures.style import DIVERGING_CMAP, SEQUENTIAL_CMAP, save_figure
from shapedesc.figures.surfaces import (
    SurfaceRow,
    View,
    plot_surface_grid,
    plot_surface_views,
    render_surface_figure,
    axis_views,
    standard_views,
)

__all__ = [
    "ModeSurfaces", "mode_surfaces", "plot_shape_modes",
    "QCThumbnail", "plot_qc_gallery", "qc_caption",
    "plot_effect_sizes", "plot_group_spectra", "summarise_spectra",
    "DIVERGING_CMAP", "SEQUENTIAL_CMAP", "save_figure",
    "SurfaceRow", "View", "plot_surface_grid", "plot_surface_views",
    "render_surface_figure", "standard_views", "axis_views",
]
