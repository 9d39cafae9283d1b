"""Coarse-to-fine initial map for surfaces whose conformal map crowds below double precision.

Why not another harmonic map
----------------------------
The conformal map compresses a thin protrusion of length ``ℓ`` and circumference ``c``
by about ``exp(−2πℓ/c)`` (the crowding of conformal maps, Driscoll & Trefethen 2002,
§2.6). The white-matter mask of a hemisphere has protrusions (fornix, thin medial fins,
brain-stem stubs) whose images fall far below what double precision resolves: the
linear solve puts whole patches of vertices on one point. Other positive-weight
(Tutte/Floater) harmonic maps do not escape this: on a triangulated tube the ring
modes ``e^{ikθ}`` of *any* discrete harmonic map with positive edge weights that are
constant along the tube decay by a fixed factor per ring — with weight ε on the ring
edges and 1 on the zig-zag edges between rings, ``g_{n+1} + g_{n−1} =
(2 + ε(1 − cos α))/cos(α/2) · g_n`` (α = 2π/c), i.e. a decay rate between
``π/c`` (ε → 0) and ``(√3/2)·2π/c`` (ε = 1) per ring, so uniform, mean-value or
"radially stiffened" weights only change the constant in the exponent; weights that
vary *along* the tube slow the decay only if they themselves vary by more than the
crowding factor. We measured exactly that on the MNI hemisphere and putamen (offset
copies, distance-aligned anisotropic weights, iterative area reweighting: the
collapsed patches remain or the solve becomes ill-conditioned).

What does work is not to ask one linear solve for the whole dynamic range:

1. **Coarsen** the surface by rounds of independent half-edge collapses, cheapest
   quadric error first (Garland & Heckbert 1997; ties by edge length). A collapse is
   kept only if it passes the link condition of Dey et al. (1999) — so every level is
   a closed genus-0 2-manifold — and leaves every vertex at least three neighbours; no
   geometric check is needed because the coarse levels only carry the connectivity and
   the area shares. Moving a vertex along a thin tube costs almost no quadric error, so
   thin protrusions are shortened before the body is coarsened. (Shortest-edge order
   does the opposite: it shrinks the tube's rings to triangles, which then cannot be
   collapsed further, and a tube of triangles is the "nested triangles" graph whose
   Tutte drawing needs exponentially small features — measured: 1 % of the faces of a
   500-vertex MNI putamen below 1e-13 of the mean area.) Each vertex carries the
   surface area of the vertices collapsed into it.
2. **Map** the coarse surface — the largest of ``SPHERE_HIERARCHY_COARSE_VERTICES``
   whose map has no flipped face at any stage and every ``det`` above
   ``SPHERE_MIN_REL_DET`` of the mean — by the Tutte embedding with uniform weights
   (the coarse geometry is a rough sub-sample; the graph is what matters), centre it
   (Möbius, with the carried areas) and area-correct it with the *pure area* energy
   (``w = 0``: area shares from the carried areas, no shear term; see "Why no shear on
   the coarse levels" below).
3. **Refine** round by round in reverse: every removed vertex ``b`` is re-inserted next
   to the vertex ``a`` it was collapsed into, moved from ``a`` along a tangent
   direction into the wedge between the two vertices opposite the edge ``ab`` (the
   bisector of that wedge, or the direction to the centroid of ``b``'s neighbours) by
   the largest step of a halving ladder that leaves *every* face around ``b`` with
   ``det > 0``. For small enough steps this always exists (the faces around ``b`` tend
   to the faces around ``a``, which are positive), so each refinement is bijective
   (vertex splits as in the progressive-mesh parameterisations of Praun & Hoppe 2003).
   A split into a very thin wedge can need a tiny step; faces a round leaves below
   ``SPHERE_HIERARCHY_OPEN_REL_DET`` of the mean ``det`` are opened at once by a local
   pure-area descent of their own vertices (:func:`_open_collapsed`), before the global
   relaxation below, which cannot open them (measured on a 40,000-vertex MNI
   hemisphere: one split in 29 halvings, 1e-11 rad wide; left to the relaxation it
   ended at ~1e-13 rad and the fine solve stopped at area SD 0.73; opened: SD 0.072).
   Whenever the mesh has grown by ``SPHERE_HIERARCHY_GROWTH`` since the last time, a
   few (``SPHERE_HIERARCHY_ITER``) iterations of the bijective pure-area correction
   (:mod:`.area` with ``w = 0``) on the current level even out the new, small
   triangles, so the nesting of splits never compounds into exponential compression.

The result, a bijective map of the full mesh with representable triangles, is the
start of the usual multiresolution area correction (with the caller's shear weight).

Why no shear on the coarse levels
---------------------------------
The area/shear energy has more than one minimum on elongated shapes: besides the
"polar" map that the descent from the centred conformal map reaches (the long axis
runs pole to pole), a map whose tube *winds* around the sphere like a strip has less
shear and a lower energy (demo-study arc, w = 0.12: E 0.043, area SD 0.149, 12.6°,
against the polar map's E 0.085, SD 0.077, 28.7°). Which one a descent reaches depends
on its start, and the winding has no canonical direction, so maps of similar shapes
that took different starts are not comparable: forcing the coarse-to-fine start on 10
demo arcs gave maps 27–35° (mean over vertices, after the best rotation) away from
their conformal-start maps in 9 of them, and log spectra differing by 2–6 (degrees
2–15), 8–31 times the between-subject SD. The coarse levels' geometry is a crude
sub-sample whose thin parts QEM has shortened, so its angles are no reference for a
shear term, and with one the coarse descent went winding (the tips of a demo arc
156° → 80° apart on the sphere in the coarse level's correction). Pure area there
gives the same polar map as the conformal start (mean difference 0.2–1.6° on the same
10 arcs and 0.8° on a 6:1 ellipsoid, same QC), and a better start for real anatomy
(measured with the cone-volume area term, then with the spherical-area one of
:mod:`.area`): MNI left putamen area SD 0.105 → 0.092, 1st/99th percentiles
−0.28/0.35 → −0.24/0.29 (spherical: 0.101, −0.31/0.27 → 0.092, −0.26/0.29);
40,000-vertex white-matter hemisphere SD 0.119 → 0.089, −0.30/0.37 → −0.24/0.27
(spherical: 0.111, −0.29/0.35 → 0.093, −0.26/0.28); caudate 0.052 → 0.055, thalamus
forced to this start 0.071 both. Only the final
multiresolution correction of the full mesh uses the caller's ``shear_weight``.

Everything is deterministic (no
random numbers; ties broken by index). It is used only when the conformal start is
crowded (see :func:`shapedesc.sphere.api.map_to_sphere`); the QC records which start
was used.

References
----------
Garland, M. & Heckbert, P. S. (1997). Surface simplification using quadric error
metrics. *Proc. SIGGRAPH 97*, 209–216. doi:10.1145/258734.258849
Dey, T. K., Edelsbrunner, H., Guha, S. & Nekhayev, D. V. (1999). Topology preserving
edge contraction. *Publ. Inst. Math. (Beograd)* 66(80), 23–45.
Driscoll, T. A. & Trefethen, L. N. (2002). *Schwarz–Christoffel Mapping*. Cambridge
University Press. doi:10.1017/CBO9780511546808
Hoppe, H. (1996). Progressive meshes. *Proc. SIGGRAPH 96*, 99–108.
doi:10.1145/237170.237216
Praun, E. & Hoppe, H. (2003). Spherical parametrization and remeshing. *ACM Trans.
Graph.* 22(3), 340–349. doi:10.1145/882262.882274
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..defaults import (SPHERE_HIERARCHY_COARSE_VERTICES, SPHERE_HIERARCHY_GROWTH,
                        SPHERE_HIERARCHY_ITER, SPHERE_HIERARCHY_OPEN_ITER,
                        SPHERE_HIERARCHY_OPEN_REL_DET, SPHERE_MIN_REL_DET)
from ..errors import ConvergenceError
from ..mesh.decimate import independent_collapses
from ..mesh.measures import vertex_areas
from .area import AreaProblem, correct_area
from .conformal import conformal_sphere_map, sphere_face_det
from .laplacian import clamped_cotangent_laplacian
from .mobius import mobius_centre

__all__ = ["HierarchyStart", "coarse_to_fine_map"]


@dataclass(frozen=True)
class HierarchyStart:
    """Output of :func:`coarse_to_fine_map`.

    Attributes
    ----------
    sphere_vertices : ndarray, shape (V, 3)
        Bijective map of the full mesh (every face ``det > 0``).
    coarse_vertices : int
        Vertex count of the coarsest surface.
    rounds : int
        Collapse rounds (= refinement rounds).
    iterations : int
        Area-correction iterations spent on the coarse and intermediate levels.
    coarse_flips_planar, coarse_flips_projected, coarse_flips_corrected : int
        Flipped faces of the coarse surface's map after its harmonic step, stereographic
        projection and pole correction (as in :class:`.conformal.ConformalResult`).
    """

    sphere_vertices: np.ndarray
    coarse_vertices: int
    rounds: int
    iterations: int
    coarse_flips_planar: int
    coarse_flips_projected: int
    coarse_flips_corrected: int


def _edges(f: np.ndarray) -> np.ndarray:
    e = np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]])
    return e[e[:, 0] < e[:, 1]]  # closed oriented mesh: each edge once


def _adjacency(e: np.ndarray, n: int) -> sp.csr_matrix:
    """Symmetric 0/1 vertex adjacency (n, n) of the undirected edges ``e`` (E, 2)."""
    return sp.csr_matrix((np.ones(2 * len(e)), (np.r_[e[:, 0], e[:, 1]], np.r_[e[:, 1], e[:, 0]])),
                         shape=(n, n))


def _face_quadrics(v: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Area-weighted plane quadrics summed at the vertices, shape (V, 4, 4) (Garland &
    Heckbert 1997)."""
    p = v[f]
    n = np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0])
    area2 = np.linalg.norm(n, axis=1)
    n = n / np.where(area2 == 0, 1.0, area2)[:, None]
    plane = np.concatenate([n, -np.einsum("ij,ij->i", n, p[:, 0])[:, None]], axis=1)
    qf = 0.5 * area2[:, None, None] * plane[:, :, None] * plane[:, None, :]
    q = np.zeros((len(v), 4, 4))
    for k in range(3):
        np.add.at(q, f[:, k], qf)
    return q


def _collapse_round(v: np.ndarray, f: np.ndarray, q: np.ndarray, wanted: int, tries: int = 12):
    """Independent half-edge collapses ``b → a`` (``a`` keeps its position); original ids.

    Edges are taken in order of the quadric error of the collapse (Garland & Heckbert
    1997; ties by length): moving a vertex along a thin tube costs almost nothing, so thin
    protrusions are shortened before the body is coarsened.
    """
    nv = len(v)
    e = _edges(f)
    qs = q[e[:, 0]] + q[e[:, 1]]
    h0 = np.concatenate([v[e[:, 0]], np.ones((len(e), 1))], axis=1)
    h1 = np.concatenate([v[e[:, 1]], np.ones((len(e), 1))], axis=1)
    c0 = np.einsum("ni,nij,nj->n", h0, qs, h0)  # keep e0, drop e1
    c1 = np.einsum("ni,nij,nj->n", h1, qs, h1)  # keep e1, drop e0
    swap = c1 < c0
    e = np.where(swap[:, None], e[:, ::-1], e)
    cost = np.minimum(c0, c1)
    length = np.linalg.norm(v[e[:, 0]] - v[e[:, 1]], axis=1)
    rank = np.empty(len(e), np.int64)
    rank[np.lexsort((length, cost))] = np.arange(len(e))
    adj = _adjacency(e, nv)
    degree = np.diff(adj.indptr)
    # link condition (exactly two common neighbours) and valence, for every edge at once
    n_common_all = np.diff(adj[e[:, 0]].multiply(adj[e[:, 1]]).tocsr().indptr)
    candidate = (n_common_all == 2) & (degree[e[:, 0]] + degree[e[:, 1]] - 4 >= 3)
    a, b = independent_collapses(e, rank, adj, candidate, wanted, tries=tries)
    n_acc = len(a)
    if n_acc == 0:
        return f, np.zeros(0, np.int64), np.zeros(0, np.int64)
    remap = np.arange(nv)
    remap[b] = a
    g = remap[f]
    g = g[(g[:, 0] != g[:, 1]) & (g[:, 1] != g[:, 2]) & (g[:, 2] != g[:, 0])]
    return g, a, b


def _tangent_unit(x: np.ndarray, d: np.ndarray) -> np.ndarray:
    d = d - np.einsum("ij,ij->i", d, x)[:, None] * x
    n = np.linalg.norm(d, axis=1, keepdims=True)
    return d / np.where(n == 0, 1.0, n)


def _split(x: np.ndarray, f_fine: np.ndarray, a: np.ndarray, b: np.ndarray, *, what: str) -> None:
    """Re-insert every ``b`` next to ``a`` on the sphere (in place) so all faces stay positive."""
    nv = len(x)
    pid = np.full(nv, -1)
    pid[b] = np.arange(len(b))
    fb_mask = pid[f_fine].max(axis=1) >= 0
    fb = f_fine[fb_mask]  # faces around some b (each around exactly one)
    owner = pid[fb].max(axis=1)
    # the two vertices opposite edge ab, and b's neighbours
    has_a = (fb == a[owner][:, None]).any(axis=1)
    opp_sum = np.zeros((len(b), 3))
    ring_sum = np.zeros((len(b), 3))
    ring_n = np.zeros(len(b))
    dist = np.full(len(b), np.inf)  # distance from a to its nearest other neighbour of b
    xa = x[a]
    for k in range(3):
        vk = fb[:, k]
        other = (vk != b[owner]) & (vk != a[owner])
        sel = other & has_a
        d = _tangent_unit(xa[owner[sel]], x[vk[sel]] - xa[owner[sel]])
        np.add.at(opp_sum, owner[sel], d)
        np.add.at(ring_sum, owner[other], x[vk[other]])
        np.add.at(ring_n, owner[other], 1.0)
        np.minimum.at(dist, owner[other], np.linalg.norm(x[vk[other]] - xa[owner[other]], axis=1))
    bis = _tangent_unit(xa, opp_sum)
    cen = _tangent_unit(xa, ring_sum / np.maximum(ring_n, 1)[:, None] - xa)
    pending = np.ones(len(b), bool)
    out = np.empty((len(b), 3))
    # first choice: a and b both at the uniform (Tutte) average of their neighbours, the
    # rest of the 1-ring of edge ab fixed (a 2x2 system per split); kept where every face
    # around a and b is positive. Moves a as well, which some splits need (a vertex left
    # with three neighbours must lie inside their triangle).
    e = _edges(f_fine)
    adj = _adjacency(e, nv)
    deg = np.diff(adj.indptr).astype(np.float64)
    x[b] = x[a]
    nbr = adj @ x
    sa, sb = nbr[a] - x[b], nbr[b] - x[a]
    da, db = deg[a][:, None], deg[b][:, None]
    den = da * db - 1.0
    ya = (db * sa + sb) / den
    yb = (da * sb + sa) / den
    ya /= np.linalg.norm(ya, axis=1, keepdims=True)
    yb /= np.linalg.norm(yb, axis=1, keepdims=True)
    aid = np.full(nv, -1)
    aid[a] = np.arange(len(a))
    fab = f_fine[(np.maximum(pid[f_fine], aid[f_fine])).max(axis=1) >= 0]
    own = np.maximum(pid[fab], aid[fab]).max(axis=1)
    x_old_a = x[a].copy()
    x[a], x[b] = ya, yb
    good = np.ones(len(b), bool)
    np.logical_and.at(good, own, sphere_face_det(x, fab) > 0)
    x[a[~good]] = x_old_a[~good]
    out[good] = yb[good]
    pending &= ~good
    xa = x[a]
    # tangent frame at a for a fan of further directions (when the wedge is nearly flat
    # the bisector is ill-defined)
    e1 = _tangent_unit(xa, np.where(np.abs(xa[:, :1]) < 0.9, [[1.0, 0.0, 0.0]], [[0.0, 1.0, 0.0]]))
    e2 = np.cross(xa, e1)
    fan = [np.cos(th) * e1 + np.sin(th) * e2 for th in np.arange(12) * (np.pi / 6)]
    for j in range(1, 40):  # largest step first, over all candidate directions
        for direction in (cen, bis, -bis, *fan):
            if not pending.any():
                break
            t = dist * 0.5**j
            trial = xa + t[:, None] * direction
            trial /= np.linalg.norm(trial, axis=1, keepdims=True)
            x[b[pending]] = trial[pending]  # tentative; faces in fb read only their own b
            det = sphere_face_det(x, fb)
            good = np.ones(len(b), bool)
            np.logical_and.at(good, owner, det > 0)
            newly = pending & good
            out[newly] = trial[newly]
            pending &= ~good
        if not pending.any():
            break
    if pending.any():
        raise ConvergenceError(f"{what}: coarse-to-fine start: {int(pending.sum())} vertices "
                               "could not be re-inserted without a flipped face; please report "
                               "this surface")
    x[b] = out


def _compact(f: np.ndarray, nv: int):
    used = np.zeros(nv, bool)
    used[f.ravel()] = True
    ids = np.flatnonzero(used)
    new = np.full(nv, -1)
    new[ids] = np.arange(len(ids))
    return ids, new[f]


def _face_shares(fc: np.ndarray, mass: np.ndarray) -> np.ndarray:
    """Per-face area shares of a level: each vertex's mass split evenly over its faces."""
    val = np.bincount(fc.ravel(), minlength=len(mass)).astype(np.float64)
    share = (mass / val)[fc].sum(axis=1)
    return share / share.sum()


def _graph_laplacian(fc: np.ndarray, n: int) -> sp.csr_matrix:
    e = _edges(fc)
    adj = _adjacency(e, n)
    return (sp.diags(np.asarray(adj.sum(axis=1)).ravel()) - adj).tocsr()


def _relax(v, x, f, mass, iters, what):
    """A few bijective pure-area (``w = 0``) iterations on the level with faces ``f`` (in place)."""
    ids, fc = _compact(f, len(v))
    vc = v[ids]
    p = AreaProblem(vc, fc, shear_weight=0.0, area_shares=_face_shares(fc, mass[ids]),
                    laplacian=clamped_cotangent_laplacian(vc, fc), what=what)
    r = correct_area(p, x[ids], max_iter=iters, raise_on_budget=False)
    x[ids] = r.sphere_vertices
    return r.iterations


class _Pinned:
    """An :class:`.area.AreaProblem` whose vertices outside ``free`` do not move (their
    gradient is zero; solved by plain gradient steps, for :func:`_open_collapsed`)."""

    def __init__(self, problem: AreaProblem, free: np.ndarray):
        self.problem, self.free = problem, free
        self.what, self.n, self.dets = problem.what, problem.n, problem.dets

    def energy_grad(self, x, *, allow_flip=False):
        e, g = self.problem.energy_grad(x, allow_flip=allow_flip)
        if g is not None:
            g[~self.free] = 0.0
        return e, g

    def precondition(self, g, x):
        return g


def _open_collapsed(v, x, f, mass, what) -> int:
    """Open the faces a vertex split left nearly collapsed (in place); returns iterations.

    A split whose wedge is very thin can only place the new vertex within ~1e-9 of its
    partner's distance to their neighbours (:func:`_split` halves the step up to 39
    times). Measured on a 40,000-vertex MNI hemisphere: one such split (of 5,374 in its
    round) left faces near 1e-11 rad wide; the level's global relaxation, whose
    preconditioned direction spreads that face's pull over a smooth bump, could not open
    them and pushed them to ~1e-13 rad, where no step of double precision decreases the
    energy, and the whole fine solve stopped there at area SD 0.73. Here the vertices of
    every face below ``SPHERE_HIERARCHY_OPEN_REL_DET`` of the mean ``det`` move alone,
    by the pure-area descent on their own faces with plain gradients (their neighbours
    fixed), before the level is relaxed.
    """
    ids, fc = _compact(f, len(v))
    det = sphere_face_det(x[ids], fc)
    bad = det < SPHERE_HIERARCHY_OPEN_REL_DET * det.mean()
    if not bad.any():
        return 0
    free = np.zeros(len(ids), bool)
    free[fc[bad].ravel()] = True
    patch = free[fc].any(axis=1)
    pid, pf = _compact(fc[patch], len(ids))
    shares = _face_shares(fc, mass[ids])[patch]
    problem = AreaProblem(v[ids][pid], pf, shear_weight=0.0, area_shares=shares,
                          what=f"{what} (coarse-to-fine start, opening collapsed faces)")
    # plain gradient steps (no L-BFGS history): its updates would move the pinned
    # vertices through the round-off rows of the steps, and faces outside the patch flip
    # unseen (measured: one on a subdivided MNI right putamen)
    r = correct_area(_Pinned(problem, free[pid]), x[ids][pid],
                     max_iter=SPHERE_HIERARCHY_OPEN_ITER, raise_on_budget=False,
                     precondition=False, lbfgs=False)
    # only the free vertices: the retraction's normalisation may change the others' last bit
    moved = free[pid]
    x[ids[pid][moved]] = r.sphere_vertices[moved]
    return r.iterations


def coarse_to_fine_map(vertices: np.ndarray, faces: np.ndarray, *, what: str,
                       coarse_vertices=SPHERE_HIERARCHY_COARSE_VERTICES,
                       growth: float = SPHERE_HIERARCHY_GROWTH,
                       iterations: int = SPHERE_HIERARCHY_ITER) -> HierarchyStart:
    """Bijective start map of a validated genus-0 mesh by coarsening and vertex splits.

    Parameters
    ----------
    vertices : ndarray, shape (V, 3)
        Normalised surface coordinates.
    faces : ndarray, shape (F, 3), int64
        Outward, closed, genus 0 (checked by :mod:`.topology`).
    what : str
        Surface name for error messages.
    coarse_vertices : sequence of int
        Vertex counts of the candidate coarsest surfaces; the largest whose map passes
        (no flipped face at any stage, every ``det`` above ``SPHERE_MIN_REL_DET`` of the
        mean) is used.
    growth, iterations :
        See the module docstring (``defaults.SPHERE_HIERARCHY_*``).

    Returns
    -------
    HierarchyStart

    Raises
    ------
    ConvergenceError
        If the coarse map has a flipped face or a vertex cannot be re-inserted.
    """
    v = np.asarray(vertices, dtype=np.float64)
    f = np.asarray(faces, dtype=np.int64)
    nv = len(v)
    mass = vertex_areas(v, f).astype(np.float64)
    quad = _face_quadrics(v, f)
    targets = sorted({int(c) for c in coarse_vertices}, reverse=True)
    levels = []
    g = f
    n_active = nv
    checkpoints = []  # (levels done, faces, n_active, masses) when a target is reached
    for target in targets:
        while n_active > target:
            g_new, a, b = _collapse_round(v, g, quad, n_active - target)
            if len(a) == 0:
                break
            levels.append((g, a, b, mass[b].copy()))
            np.add.at(mass, a, mass[b])
            np.add.at(quad, a, quad[b])
            g = g_new
            n_active -= len(a)
        if not checkpoints or checkpoints[-1][2] != n_active:
            checkpoints.append((len(levels), g, n_active, mass.copy()))
    # coarse map: the finest checkpoint whose Tutte map is bijective and resolvable
    report = []
    for n_levels, g, n_active, m in checkpoints:
        ids, gc = _compact(g, nv)
        vc = v[ids]
        conf = conformal_sphere_map(vc, gc, source=what,
                                    laplacian=_graph_laplacian(gc, len(ids)))
        xc, _ = mobius_centre(conf.sphere_vertices, m[ids],
                              what=f"{what}: coarse-to-fine start (coarse Möbius centring)")
        det = sphere_face_det(xc, gc)
        stages = (conf.flips_planar, conf.flips_projected, conf.flips_corrected)
        if max(stages) == 0 and det.min() > SPHERE_MIN_REL_DET * det.mean():
            break
        report.append(f"{len(ids)} vertices: {int(np.sum(det <= 0))} flipped, "
                      f"{int(np.sum(det <= SPHERE_MIN_REL_DET * det.mean()))} collapsed")
    else:
        raise ConvergenceError(f"{what}: coarse-to-fine start: no coarse surface maps "
                               f"bijectively ({'; '.join(report)}); check the segmentation "
                               "for extremely thin parts")
    mass = m
    levels = levels[:n_levels]
    x = np.zeros((nv, 3))
    x[ids] = xc
    n_active = len(ids)
    total = _relax(v, x, g, mass, 10 * iterations,
                   f"{what} (coarse-to-fine start, coarse level)")
    last = n_active
    for g_fine, a, b, mb in reversed(levels):
        _split(x, g_fine, a, b, what=what)
        mass[a] -= mb
        mass[b] = mb
        total += _open_collapsed(v, x, g_fine, mass, what)
        n_active += len(a)
        if n_active >= growth * last or n_active == nv:
            total += _relax(v, x, g_fine, mass, iterations,
                            f"{what} (coarse-to-fine start, {n_active}-vertex level)")
            last = n_active
    return HierarchyStart(x, len(ids), len(levels), total, conf.flips_planar,
                          conf.flips_projected, conf.flips_corrected)
