"""3-D renders of closed surfaces from fixed standard views, with matplotlib only.

The renderer is a small orthographic painter's algorithm: faces turned away from the
camera are culled (the surfaces are closed and outward-oriented), the rest are sorted
far-to-near by the depth of their centroid and drawn as one
:class:`matplotlib.collections.PolyCollection`, each face's colour scaled by Lambert's
cosine law for a light just above and left of the viewer.  No z-buffer is needed for the
nearly convex subcortical structures this package draws; deeply folded surfaces may show
small ordering errors where two front-facing sheets overlap.

Coordinates are millimetres in RAS+ orientation (x to the subject's right, y anterior,
z superior), as world coordinates from NIfTI/GIFTI files are.  The standard views are
named for a structure of the given hemisphere: *lateral* looks at it from outside the
brain (from the left for a left structure), *medial* from the midline, *superior* from
above with anterior up, *anterior* from the front.

References
----------
Foley, J. D., van Dam, A., Feiner, S. K. & Hughes, J. F. (1990). *Computer Graphics:
Principles and Practice*, 2nd ed., §15.5 (depth-sort / painter's algorithm) and §16.1
(Lambertian reflection). Addison-Wesley.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.cm import ScalarMappable
from matplotlib.collections import LineCollection, PolyCollection
from matplotlib.colors import Colormap, Normalize

from shapedesc.defaults import SURFACE_AMBIENT, SURFACE_COLOUR_PERCENTILE, SURFACE_DIFFUSE
from shapedesc.figures import style

_AXIS_LETTERS_RAS = {(0, 1): "R", (0, -1): "L", (1, 1): "A", (1, -1): "P", (2, 1): "S", (2, -1): "I"}


@dataclass(frozen=True)
class View:
    """An orthographic camera.

    Attributes
    ----------
    name : str
        Name printed above the panel (``"lateral"``, ...).
    direction : tuple of float, shape (3,)
        Unit vector from the object towards the camera, RAS+ millimetre frame.
    up : tuple of float, shape (3,)
        Unit vector that points up on the screen (orthogonal to ``direction``).
    frame : {"RAS", "axes"}
        How panel edges are labelled: anatomical letters (R/L, A/P, S/I) for RAS+
        coordinates, or ``+x``/``−x``... for the canonical pose.
    """

    name: str
    direction: tuple[float, float, float]
    up: tuple[float, float, float]
    frame: str = "RAS"

    @property
    def right(self) -> np.ndarray:
        """Screen-right unit vector, ``up × direction`` (right-handed screen frame)."""
        return np.cross(np.asarray(self.up, float), np.asarray(self.direction, float))


def standard_views(hemisphere: str = "left") -> tuple[View, ...]:
    """The four standard views (lateral, medial, superior, anterior) of one hemisphere.

    Parameters
    ----------
    hemisphere : {"left", "right"}
        Side of the structure; decides which side *lateral* and *medial* look from.

    Returns
    -------
    tuple of View
    """
    if hemisphere not in ("left", "right"):
        raise ValueError(f"hemisphere must be 'left' or 'right', got {hemisphere!r}")
    out = -1.0 if hemisphere == "left" else 1.0
    return (
        View("lateral", (out, 0.0, 0.0), (0.0, 0.0, 1.0)),
        View("medial", (-out, 0.0, 0.0), (0.0, 0.0, 1.0)),
        View("superior", (0.0, 0.0, 1.0), (0.0, 1.0, 0.0)),
        View("anterior", (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)),
    )


def axis_views() -> tuple[View, ...]:
    """Four views along the coordinate axes, for surfaces in the canonical pose.

    In the canonical pose (``shapedesc.align``) the first-order ellipsoid's axes lie
    along x, y, z in decreasing length, so anatomical names do not apply; the views are
    named by the axis the camera sits on: from +z and −z (the long and middle axes in
    the picture plane), from +y, and from +x (looking down the long axis).
    """
    return (
        View("from +z", (0.0, 0.0, 1.0), (0.0, 1.0, 0.0), "axes"),
        View("from −z", (0.0, 0.0, -1.0), (0.0, 1.0, 0.0), "axes"),
        View("from +y", (0.0, 1.0, 0.0), (0.0, 0.0, 1.0), "axes"),
        View("from +x", (1.0, 0.0, 0.0), (0.0, 0.0, 1.0), "axes"),
    )


def view_by_name(name: str, hemisphere: str = "left") -> View:
    """One of :func:`standard_views` by its name."""
    for v in standard_views(hemisphere):
        if v.name == name:
            return v
    raise ValueError(f"unknown view {name!r}; use one of "
                     f"{[v.name for v in standard_views(hemisphere)]}")


def _check_mesh(vertices, faces, what: str = "surface") -> tuple[np.ndarray, np.ndarray]:
    v = np.asarray(vertices, dtype=float)
    f = np.asarray(faces)
    if v.ndim != 2 or v.shape[1] != 3 or v.shape[0] < 4:
        raise ValueError(f"{what}: vertices must have shape (V, 3) with V >= 4, got {v.shape}")
    if f.ndim != 2 or f.shape[1] != 3 or f.shape[0] < 4 or not np.issubdtype(f.dtype, np.integer):
        raise ValueError(f"{what}: faces must be an integer array (F, 3) with F >= 4, "
                         f"got {f.dtype} {f.shape}")
    if f.min() < 0 or f.max() >= v.shape[0]:
        raise ValueError(f"{what}: face indices must lie in [0, {v.shape[0] - 1}], found "
                         f"[{f.min()}, {f.max()}]")
    if not np.all(np.isfinite(v)):
        raise ValueError(f"{what}: vertices hold non-finite coordinates; repair the mesh first")
    return v, f.astype(np.int64)


def _check_values(v, scalars, significant, what: str = "surface"):
    s = sig = None
    if scalars is not None:
        s = np.asarray(scalars, dtype=float)
        if s.shape != (v.shape[0],):
            raise ValueError(f"{what}: scalars must have shape ({v.shape[0]},) (one per "
                             f"vertex), got {s.shape}")
    if significant is not None:
        sig = np.asarray(significant, dtype=bool)
        if sig.shape != (v.shape[0],):
            raise ValueError(f"{what}: significant must have shape ({v.shape[0]},), got "
                             f"{sig.shape}")
    return s, sig


def _face_normals(v: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Unit outward face normals (F, 3); flipped globally if the mesh is inward-oriented."""
    a, b, c = v[f[:, 0]], v[f[:, 1]], v[f[:, 2]]
    n = np.cross(b - a, c - a)
    # Signed volume by the divergence theorem: negative means faces wind clockwise
    # seen from outside, so every normal points in.
    if np.einsum("ij,ij->", a, np.cross(b, c)) < 0:
        n = -n
    norm = np.linalg.norm(n, axis=1, keepdims=True)
    return n / np.where(norm > 0, norm, 1.0)


def _edge_faces(f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Interior edges (E, 2) of a triangle mesh with the two faces (E, 2) sharing each."""
    e = np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]])
    fid = np.tile(np.arange(f.shape[0]), 3)
    e = np.sort(e, axis=1)
    order = np.lexsort((e[:, 1], e[:, 0]))
    e, fid = e[order], fid[order]
    same = np.all(e[1:] == e[:-1], axis=1)
    i = np.nonzero(same)[0]
    return e[i], np.stack([fid[i], fid[i + 1]], axis=1)


def _light(view: View) -> np.ndarray:
    d = np.asarray(view.direction, float)
    light = d + 0.35 * np.asarray(view.up, float) - 0.25 * view.right
    return light / np.linalg.norm(light)


@dataclass(frozen=True)
class Drawn:
    """What :func:`draw_surface` put on an axes (kept for tests and callers).

    Attributes
    ----------
    faces : ndarray, shape (K,)
        Indices of the drawn (front-facing) faces, in drawing order (far to near).
    face_values : ndarray, shape (K,)
        Scalar value of each drawn face (mean of its vertices), NaN without scalars.
    collection : PolyCollection
    """

    faces: np.ndarray
    face_values: np.ndarray
    collection: PolyCollection


def draw_surface(ax, vertices, faces, *, view: View, scalars=None,
                 cmap: Colormap | str | None = None, norm: Normalize | None = None,
                 significant=None, significance_style: str = "outline",
                 colour=style.NEUTRAL_GREY, silhouette_of=None,
                 silhouette_colour: str = "#D55E00", centre=None, radius=None) -> Drawn:
    """Draw one surface from one view onto ``ax`` (orthographic, shaded).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    vertices : array_like, shape (V, 3)
        Coordinates in mm (RAS+).
    faces : array_like of int, shape (F, 3)
    view : View
    scalars : array_like, shape (V,), optional
        Per-vertex values coloured with ``cmap``/``norm``; faces take the mean of their
        vertices.  Without scalars the surface is drawn in ``colour``.
    cmap, norm : optional
        Colour map and normalisation of ``scalars`` (default: the package's diverging
        map with symmetric limits around zero).
    significant : array_like of bool, shape (V,), optional
        Vertices in the corrected-significant region.  A face belongs to the region when
        at least two of its vertices do.
    significance_style : {"outline", "mask"}
        ``"outline"`` darkens the faces on the region's border (a depth-correct outline);
        ``"mask"`` greys out every face outside the region.
    colour : colour
        Face colour without scalars.
    silhouette_of : tuple (vertices, faces), optional
        A second surface whose silhouette (edges between a front- and a back-facing face)
        is drawn on top as lines, e.g. a reconstruction over its input.
    silhouette_colour : colour
    centre, radius : optional
        Centre (3,) in mm and half-width in mm of the square shown; default from the
        vertices, so several panels can share one scale.

    Returns
    -------
    Drawn
    """
    v, f = _check_mesh(vertices, faces)
    if significance_style not in ("outline", "mask"):
        raise ValueError(f"significance_style must be 'outline' or 'mask', got "
                         f"{significance_style!r}")
    s, sig = _check_values(v, scalars, significant)
    if norm is None and s is not None:
        norm = Normalize(*style.symmetric_limits(s))
    cmap = style.DIVERGING_CMAP if cmap is None else cmap
    if isinstance(cmap, str):
        import matplotlib

        cmap = matplotlib.colormaps[cmap]
    return _draw(ax, v, f, view, s, cmap, norm, sig, significance_style, colour,
                 silhouette_of, silhouette_colour, centre, radius)


def _project(v: np.ndarray, view: View) -> tuple[np.ndarray, np.ndarray]:
    r, u = view.right, np.asarray(view.up, float)
    d = np.asarray(view.direction, float)
    return np.stack([v @ r, v @ u], axis=1), v @ d


def _draw(ax, v, f, view, s, cmap, norm, sig, sig_style, colour, silhouette_of,
          silhouette_colour, centre, radius) -> Drawn:
    n = _face_normals(v, f)
    d = np.asarray(view.direction, float)
    facing = n @ d
    front = np.nonzero(facing > 0)[0]
    xy, depth = _project(v, view)
    order = front[np.argsort(depth[f[front]].mean(axis=1), kind="stable")]

    shade = SURFACE_AMBIENT + SURFACE_DIFFUSE * np.clip(n[order] @ _light(view), 0.0, 1.0)
    if s is not None:
        fv = s[f[order]].mean(axis=1)
        rgba = np.asarray(cmap(norm(fv)))
        rgba[~np.isfinite(fv)] = (*style.NEUTRAL_GREY, 1.0)
    else:
        fv = np.full(order.shape, np.nan)
        rgba = np.tile(np.append(np.asarray(_rgb(colour)), 1.0), (order.size, 1))
    polys = xy[f[order]]
    if sig is not None and sig_style == "mask":
        in_region = sig[f[order]].sum(axis=1) >= 2
        rgba[~in_region, :3] = style.NEUTRAL_GREY
    rgba[:, :3] *= shade[:, None]
    if sig is not None and sig_style == "outline":
        polys, rgba = _with_outline(polys, rgba, sig[f[order]], xy, f[order], radius or
                                    float(np.ptp(xy, axis=0).max()) / 2)
    # Without antialiasing, Agg fills each pixel whose centre lies in a polygon, so
    # faces sharing an edge tile the image with no cracks and no edge strokes are needed.
    pc = PolyCollection(polys, facecolors=rgba, edgecolors="none", linewidths=0.0,
                        antialiaseds=False)
    # In SVG/PDF the thousands of faces go in as one embedded image at the save dpi;
    # text, colour bar and outlines stay vector (small files that open fast).
    pc.set_rasterized(True)
    ax.add_collection(pc)

    if silhouette_of is not None:
        v2, f2 = _check_mesh(*silhouette_of, what="silhouette surface")
        n2 = _face_normals(v2, f2)
        edges, pairs = _edge_faces(f2)
        fr = (n2 @ d) > 0
        sil = edges[fr[pairs[:, 0]] != fr[pairs[:, 1]]]
        xy2, _ = _project(v2, view)
        ax.add_collection(LineCollection(xy2[sil], colors=silhouette_colour, linewidths=0.9))

    c = v.mean(axis=0) if centre is None else np.asarray(centre, float)
    if radius is None:
        radius = float(np.max(np.abs(xy - _project(c[None], view)[0]))) * 1.04
    cx, cy = _project(c[None], view)[0][0]
    ax.set_xlim(cx - radius, cx + radius)
    ax.set_ylim(cy - radius, cy + radius)
    ax.set_aspect("equal")
    ax.set_axis_off()
    return Drawn(order, fv, pc)


def _with_outline(polys, rgba, face_sig, xy, face_idx, radius):
    """Insert the region's border, as thin dark quads, right after each border face.

    The border is the 0.5 level line of the vertex indicator (a segment between the
    midpoints of the two edges whose ends differ, per mixed face).  Because each quad is
    drawn just after its own face in the far-to-near order, nearer faces hide it: the
    outline is as depth-correct as the surface itself.
    """
    k = polys.shape[0]
    mixed = np.nonzero((face_sig.sum(axis=1) == 1) | (face_sig.sum(axis=1) == 2))[0]
    tri4 = np.concatenate([polys, polys[:, 2:3]], axis=1)  # (K, 4, 2), last point repeated
    if mixed.size == 0:
        return tri4, rgba
    b = face_sig[mixed]
    p = xy[face_idx[mixed]]  # (M, 3, 2)
    mids = []
    for a, c in ((0, 1), (1, 2), (2, 0)):
        mids.append(((b[:, a] != b[:, c]), 0.5 * (p[:, a] + p[:, c])))
    # exactly two of the three edges of a mixed face change sign: take them in order
    sel = np.stack([m for m, _ in mids], axis=1)
    pts = np.stack([q for _, q in mids], axis=1)  # (M, 3, 2)
    first = np.argmax(sel, axis=1)
    second = 2 - np.argmax(sel[:, ::-1], axis=1)
    m1 = pts[np.arange(mixed.size), first]
    m2 = pts[np.arange(mixed.size), second]
    t = m2 - m1
    length = np.linalg.norm(t, axis=1, keepdims=True)
    nrm = np.stack([-t[:, 1], t[:, 0]], axis=1) / np.where(length > 0, length, 1.0)
    w = 0.012 * radius
    ext = t / np.where(length > 0, length, 1.0) * w * 0.5  # overlap neighbours: no gaps
    quads = np.stack([m1 - ext - w * nrm, m2 + ext - w * nrm, m2 + ext + w * nrm,
                      m1 - ext + w * nrm], axis=1)
    key = np.concatenate([2 * np.arange(k), 2 * mixed + 1])
    allp = np.concatenate([tri4, quads])
    allc = np.concatenate([rgba, np.tile(np.append(_rgb(style.OUTLINE_COLOUR), 1.0),
                                         (mixed.size, 1))])
    o = np.argsort(key, kind="stable")
    return allp[o], allc[o]


def _rgb(colour) -> tuple[float, float, float]:
    from matplotlib.colors import to_rgb

    return to_rgb(colour)


def _direction_letter(vec: np.ndarray, frame: str = "RAS") -> str:
    i = int(np.argmax(np.abs(vec)))
    sign = 1 if vec[i] > 0 else -1
    if frame == "axes":
        return ("+" if sign > 0 else "−") + "xyz"[i]
    return _AXIS_LETTERS_RAS[(i, sign)]


def _label_directions(ax, view: View) -> None:
    r, u = view.right, np.asarray(view.up, float)
    kw = dict(transform=ax.transAxes, fontsize=6, color="0.35", ha="center", va="center")
    ax.text(0.04, 0.5, _direction_letter(-r, view.frame), **kw)
    ax.text(0.96, 0.5, _direction_letter(r, view.frame), **kw)
    ax.text(0.5, 0.97, _direction_letter(u, view.frame), **kw)


def _nice_length(span_mm: float) -> float:
    """A round scale-bar length (1, 2 or 5 × 10^k mm) near a quarter of ``span_mm``."""
    target = max(span_mm / 4.0, 1e-9)
    k = np.floor(np.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * 10**k <= target:
            return float(m * 10**k)
    return float(10**k)


def _scale_bar(ax, radius: float) -> None:
    length = _nice_length(2 * radius)
    x0, x1 = ax.get_xlim()
    y0, _ = ax.get_ylim()
    xs = x0 + 0.06 * (x1 - x0)
    ys = y0 + 0.05 * (x1 - x0)
    ax.plot([xs, xs + length], [ys, ys], color="black", linewidth=1.5, solid_capstyle="butt")
    ax.text(xs + length / 2, ys + 0.03 * (x1 - x0), f"{length:g} mm", ha="center",
            va="bottom", fontsize=6)


@dataclass(frozen=True)
class SurfaceRow:
    """One row of a surface grid: a surface, optionally coloured.

    Attributes
    ----------
    label : str
        Row label (group name, ``"mean −2 SD"``, ...).
    vertices : ndarray, shape (V, 3)
        Coordinates in mm (RAS+).
    faces : ndarray, shape (F, 3)
    scalars : ndarray, shape (V,), optional
    significant : ndarray of bool, shape (V,), optional
    """

    label: str
    vertices: np.ndarray
    faces: np.ndarray
    scalars: np.ndarray | None = None
    significant: np.ndarray | None = None


def plot_surface_grid(rows, *, views=None, hemisphere: str = "left",
                      scalar_label: str = "displacement", units: str = "mm",
                      limits: tuple[float, float] | None = None, cmap=None,
                      significance_style: str = "outline", title: str | None = None,
                      panel_size_in: float = 1.6, scale_bar: bool = True):
    """A grid of surface renders: one row per surface, one column per view.

    All panels share one colour normalisation (symmetric around zero for the default
    diverging map) and one spatial scale, so sizes and colours compare across panels.

    Parameters
    ----------
    rows : sequence of SurfaceRow
    views : sequence of View, optional
        Default :func:`standard_views` of ``hemisphere``.
    hemisphere : {"left", "right"}
    scalar_label, units : str
        Colour-bar label, printed as ``"<scalar_label> (<units>)"``.
    limits : (float, float), optional
        Colour limits; default symmetric around zero at ± the
        :data:`shapedesc.defaults.SURFACE_COLOUR_PERCENTILE` percentile of the
        magnitudes over all rows (the colour bar gets arrows when values lie beyond).
    cmap : Colormap or str, optional
        Default :data:`shapedesc.figures.style.DIVERGING_CMAP`.
    significance_style : {"outline", "mask"}
    title : str, optional
    panel_size_in : float
        Width and height of one panel in inches.
    scale_bar : bool
        Draw a millimetre scale bar in the first panel of each row.

    Returns
    -------
    matplotlib.figure.Figure
    """
    rows = list(rows)
    if not rows:
        raise ValueError("plot_surface_grid needs at least one SurfaceRow")
    views = tuple(standard_views(hemisphere) if views is None else views)
    checked = []
    for r in rows:
        what = f"surface {r.label!r}"
        v, f = _check_mesh(r.vertices, r.faces, what=what)
        s, sig = _check_values(v, r.scalars, r.significant, what=what)
        checked.append(((v, f), SurfaceRow(r.label, v, f, s, sig)))
    with_scalars = [r.scalars for _, r in checked if r.scalars is not None]
    norm, extend = None, "neither"
    if with_scalars:
        every = np.concatenate(with_scalars)
        lo, hi = limits if limits is not None else style.symmetric_limits(
            every, percentile=SURFACE_COLOUR_PERCENTILE)
        norm = Normalize(lo, hi)
        finite = every[np.isfinite(every)]
        below, above = bool(np.any(finite < lo)), bool(np.any(finite > hi))
        extend = {(True, True): "both", (True, False): "min", (False, True): "max"}.get(
            (below, above), "neither")
    cmap = style.DIVERGING_CMAP if cmap is None else cmap
    if isinstance(cmap, str):
        import matplotlib

        cmap = matplotlib.colormaps[cmap]
    # One scale for every panel: the largest half-width over rows and views.
    centres = [v.mean(axis=0) for (v, _), _ in checked]
    # 1.25: the shape ends 10 % of a panel from its edge, leaving room for the direction
    # letters at 4 % so that they never sit on the surface
    radius = 1.25 * max(float(np.max(np.abs(_project(v - c, view)[0])))
                        for ((v, _), _), c in zip(checked, centres) for view in views)

    with style.figure_style():
        extra = 0.9 if norm is not None else 0.0
        height = panel_size_in * len(rows) + (0.45 if title else 0.2)
        fig = style.new_figure(panel_size_in * len(views) + extra + 0.5, height)
        width_ratios = [1.0] * len(views) + ([0.07] if norm is not None else [])
        gs = fig.add_gridspec(len(rows), len(width_ratios), width_ratios=width_ratios,
                              wspace=0.25, hspace=0.12,
                              top=1.0 - (0.45 if title else 0.2) / height, bottom=0.02)
        for i, ((v, f), r) in enumerate(checked):
            for j, view in enumerate(views):
                ax = fig.add_subplot(gs[i, j])
                _draw(ax, v, f, view, r.scalars, cmap, norm, r.significant, significance_style, style.NEUTRAL_GREY, None, "", centres[i], radius)
                _label_directions(ax, view)
                ax.set_title(view.name if i == 0 else "", fontsize=8)
                if j == 0:
                    ax.text(-0.04, 0.5, r.label, transform=ax.transAxes, rotation=90,
                            ha="right", va="center", fontsize=8)
                    if scale_bar:
                        _scale_bar(ax, radius)
        if norm is not None:
            cax = fig.add_subplot(gs[:, -1])
            cb = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax, extend=extend)
            cb.set_label(f"{scalar_label} ({units})")
        if title:
            fig.suptitle(title, y=1.0 - 0.08 / height, va="top")
    return fig


def plot_surface_views(vertices, faces, *, scalars=None, significant=None, label: str = "",
                       **kwargs):
    """Render one surface from the standard views (a one-row :func:`plot_surface_grid`).

    Parameters
    ----------
    vertices : array_like, shape (V, 3)
        Coordinates in mm (RAS+).
    faces : array_like of int, shape (F, 3)
    scalars : array_like, shape (V,), optional
        Values to colour by (e.g. displacement in mm or t).
    significant : array_like of bool, shape (V,), optional
    label : str
        Row label.
    **kwargs
        Passed to :func:`plot_surface_grid` (``views``, ``hemisphere``,
        ``scalar_label``, ``units``, ``limits``, ``title`` ...).

    Returns
    -------
    matplotlib.figure.Figure
    """
    row = SurfaceRow(label, np.asarray(vertices), np.asarray(faces),
                     None if scalars is None else np.asarray(scalars, float),
                     None if significant is None else np.asarray(significant, bool))
    return plot_surface_grid([row], **kwargs)


def render_surface_figure(vertices, faces, path, *, scalars=None, significant=None,
                          pose: str = "native", also: tuple[str, ...] = (),
                          overwrite: bool = True, dpi: int | None = None,
                          **kwargs) -> list[Path]:
    """Render one surface from the standard views and write it to ``path``.

    This is what ``shapedesc reconstruct ... --figure OUT.png`` calls.

    Parameters
    ----------
    vertices : array_like, shape (V, 3)
        Coordinates in mm (RAS+).
    faces : array_like of int, shape (F, 3)
    path : path-like
        ``.png`` (at :data:`shapedesc.defaults.FIGURE_DPI`), ``.svg`` or ``.pdf``.
    scalars : array_like, shape (V,), optional
    significant : array_like of bool, shape (V,), optional
    pose : {"native", "canonical"}
        Coordinates of ``vertices``: ``"native"`` (RAS+ input coordinates) draws the
        anatomical :func:`standard_views`, ``"canonical"`` (ellipsoid axes along x, y,
        z) the :func:`axis_views`.  Ignored when ``views`` is given.
    also : tuple of str
        Further formats written beside ``path`` (``(".svg",)``).
    overwrite : bool
        Replace existing files.  Commands check ``--force`` before calling; pass
        ``overwrite=False`` to have this function refuse instead.
    dpi : int, optional
    **kwargs
        Passed to :func:`plot_surface_grid` (``title``, ``scalar_label``, ``units``,
        ``hemisphere``, ``views`` ...).

    Returns
    -------
    list of Path
        Files written.
    """
    if pose not in ("native", "canonical"):
        raise ValueError(f"pose must be 'native' or 'canonical', got {pose!r}")
    if pose == "canonical" and kwargs.get("views") is None:
        kwargs["views"] = axis_views()
    fig = plot_surface_views(vertices, faces, scalars=scalars, significant=significant,
                             **kwargs)
    return style.save_figure(fig, path, also=also, dpi=dpi, overwrite=overwrite)
