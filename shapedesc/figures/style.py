"""One place for the look of every figure: resolution, fonts, colour maps, saving.

Colour maps
-----------
* Sequential values use ``cividis`` (Nuñez et al. 2018), whose lightness rises
  monotonically, so it reads the same in greyscale and for the common colour-vision
  deficiencies.
* Signed values (displacement in mm, t statistics) use :data:`DIVERGING_CMAP`, a map
  built here in CIELAB: lightness falls linearly from L* = 95 at zero to L* = 30 at
  both ends, and the hue is blue for negative and orange-red for positive values, the
  blue–orange axis that survives red–green colour-vision deficiency (common practice).
  Equal steps in value give near-equal CIEDE2000 colour differences (checked in the
  tests).  In greyscale the map shows the magnitude; the sign is read from the hue and
  the labelled colour bar.

Every figure is a :class:`matplotlib.figure.Figure` drawn by the Agg canvas (never
pyplot, so no display and no global figure list), made inside :func:`figure_style`, and
written by :func:`save_figure`
(PNG at :data:`shapedesc.defaults.FIGURE_DPI`, or SVG/PDF by suffix), atomically.

References
----------
Nuñez, J. R., Anderton, C. R. & Renslow, R. S. (2018). Optimizing colormaps with
consideration for color vision deficiency to enable accurate interpretation of
scientific data. PLoS ONE 13(7), e0199239. doi:10.1371/journal.pone.0199239

Sharma, G., Wu, W. & Dalal, E. N. (2005). The CIEDE2000 color-difference formula.
Color Research & Application 30(1), 21–30. doi:10.1002/col.20070
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure

from shapedesc.defaults import FIGURE_DPI
from shapedesc.io.atomic import atomic_path

#: Sequential colour map (perceptually uniform, monotone lightness).
SEQUENTIAL_CMAP = "cividis"

#: Qualitative colours for groups: Okabe & Ito's colour-blind-safe palette
#: (Okabe, M. & Ito, K., "Color Universal Design", 2008; from memory), in the order
#: blue, vermillion, bluish green, reddish purple, orange, sky blue, yellow, black.
GROUP_COLOURS: tuple[str, ...] = (
    "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000",
)
#: Line styles cycled with the group colours, so groups differ in greyscale too.
GROUP_LINESTYLES: tuple[str, ...] = ("-", "--", "-.", ":")
#: Marker shapes cycled with the group colours.
GROUP_MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P", "X", "*")

#: Colour of the outline of corrected-significant regions on surfaces.
OUTLINE_COLOUR = "black"
#: Grey for surfaces without scalar values (and masked, non-significant faces).
NEUTRAL_GREY = (0.78, 0.78, 0.78)

_RC = {
    "font.family": "DejaVu Sans",  # ships with matplotlib: same glyphs everywhere
    "font.size": 8.0,
    "axes.titlesize": 9.0,
    "axes.labelsize": 8.0,
    "xtick.labelsize": 7.0,
    "ytick.labelsize": 7.0,
    "legend.fontsize": 7.0,
    "figure.titlesize": 10.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.linewidth": 0.8,
    "lines.linewidth": 1.4,
    "savefig.bbox": "tight",
    "savefig.pad_inches": 0.04,
    "svg.fonttype": "none",  # text stays text in SVG (editable in a paper)
    "pdf.fonttype": 42,  # TrueType in PDF (journals ask for embedded fonts)
    "svg.hashsalt": "shapedesc",  # deterministic SVG ids
    "path.simplify": False,
}


def _diverging_lab(n: int = 256) -> np.ndarray:
    """CIELAB coordinates (n, 3) of the diverging map (see module docstring)."""
    s = np.linspace(-1.0, 1.0, n)
    a = np.abs(s)
    lightness = 95.0 - (95.0 - 30.0) * a
    x = np.clip(a / 0.7, 0.0, 1.0)
    chroma = 30.0 * x * x * (3.0 - 2.0 * x)  # smoothstep: no colour jump at zero
    hue = np.where(s < 0, 262.0, 40.0) * np.pi / 180.0
    return np.stack([lightness, chroma * np.cos(hue), chroma * np.sin(hue)], axis=-1)


def _lab_to_srgb(lab: np.ndarray) -> np.ndarray:
    """CIELAB (D65 white) to sRGB in [0, 1], shape (n, 3) -> (n, 3), clipped to the gamut.

    CIE 15:2004 inverse L*a*b* transform, then IEC 61966-2-1 sRGB matrix and transfer
    curve (constants from memory; the tests check against scikit-image).
    """
    white = np.array([0.95047, 1.0, 1.08883])
    fy = (lab[:, 0] + 16.0) / 116.0
    f = np.stack([fy + lab[:, 1] / 500.0, fy, fy - lab[:, 2] / 200.0], axis=1)
    eps = 6.0 / 29.0
    xyz = np.where(f > eps, f**3, 3 * eps**2 * (f - 4.0 / 29.0)) * white
    m = np.array([[3.2404542, -1.5371385, -0.4985314],
                  [-0.9692660, 1.8760108, 0.0415560],
                  [0.0556434, -0.2040259, 1.0572252]])
    lin = np.clip(xyz @ m.T, 0.0, 1.0)
    return np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)


def _make_diverging() -> ListedColormap:
    rgb = np.clip(_lab_to_srgb(_diverging_lab()), 0.0, 1.0)
    return ListedColormap(rgb, name="shapedesc_diverging").with_extremes(bad=NEUTRAL_GREY)


#: Diverging colour map for signed values (centre it on zero with symmetric limits).
DIVERGING_CMAP: ListedColormap = _make_diverging()


def group_style(index: int) -> dict:
    """Colour, line style and marker of the ``index``-th group (cycled)."""
    return {
        "color": GROUP_COLOURS[index % len(GROUP_COLOURS)],
        "linestyle": GROUP_LINESTYLES[index % len(GROUP_LINESTYLES)],
        "marker": GROUP_MARKERS[index % len(GROUP_MARKERS)],
    }


def symmetric_limits(values: np.ndarray, *, percentile: float = 100.0,
                     floor: float = 1e-12) -> tuple[float, float]:
    """Colour limits ``(-m, m)``, ``m`` the given percentile of the finite magnitudes.

    ``percentile=100`` takes the largest magnitude; a lower one keeps a few extreme
    vertices from washing out the rest of a map (draw the colour bar with
    ``extend="both"`` then).  ``floor`` keeps the range non-empty when all are zero.
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    m = float(np.percentile(np.abs(v), percentile)) if v.size else 0.0
    m = max(m, floor)
    return -m, m


@contextlib.contextmanager
def figure_style():
    """Context in which every figure of this package is made (fonts, sizes, spines)."""
    with matplotlib.rc_context(_RC):
        yield


def new_figure(width_in: float, height_in: float) -> Figure:
    """A figure drawn by the Agg canvas, outside pyplot (no display, no global state).

    Parameters
    ----------
    width_in, height_in : float
        Size in inches.
    """
    fig = Figure(figsize=(width_in, height_in))
    FigureCanvasAgg(fig)
    return fig


_FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}


def save_figure(fig, path: str | Path, *, also: tuple[str, ...] = (), dpi: int | None = None,
                overwrite: bool = True) -> list[Path]:
    """Write ``fig`` to ``path`` (format from the suffix) and to the ``also`` suffixes.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : path-like
        Destination ending in ``.png``, ``.svg`` or ``.pdf``.
    also : tuple of str
        Further suffixes to write beside ``path`` (e.g. ``(".svg", ".pdf")``).
    dpi : int, optional
        Raster resolution; :data:`shapedesc.defaults.FIGURE_DPI` when omitted.
    overwrite : bool
        If False, refuse to replace an existing file (``FileExistsError``).

    Returns
    -------
    list of Path
        The files written.
    """
    path = Path(path)
    suffixes = [path.suffix.lower()] + [s.lower() if s.startswith(".") else "." + s.lower()
                                        for s in also]
    for s in suffixes:
        if s not in _FORMATS:
            raise ValueError(f"{path.with_suffix(s)}: cannot write figure format {s!r}; "
                             f"use one of {sorted(_FORMATS)}")
    written = []
    for s in dict.fromkeys(suffixes):
        target = path.with_suffix(s)
        with atomic_path(target, overwrite=overwrite) as tmp, figure_style():
            fig.savefig(tmp, format=_FORMATS[s], dpi=dpi or FIGURE_DPI,
                        metadata=_metadata(_FORMATS[s]))
        written.append(target)
    return written


def _metadata(fmt: str) -> dict:
    # Fixed metadata: no creation date, so the same inputs give the same bytes.
    if fmt == "png":
        return {"Software": "shapedesc"}
    if fmt == "svg":
        return {"Date": None, "Creator": "shapedesc"}
    return {"CreationDate": None, "Creator": "shapedesc", "Producer": "shapedesc"}


def figure_png_bytes(fig, *, dpi: int | None = None) -> bytes:
    """Render ``fig`` to PNG bytes in memory (for embedding in the HTML report)."""
    buf = io.BytesIO()
    with figure_style():
        fig.savefig(buf, format="png", dpi=dpi or FIGURE_DPI, metadata=_metadata("png"))
    return buf.getvalue()
