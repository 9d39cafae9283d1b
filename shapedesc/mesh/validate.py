"""Validation of triangle surfaces: what is wrong with a mesh, and can it be used.

:func:`inspect_mesh` measures a surface (counts of components, boundary and non-manifold
edges, non-manifold vertices, Euler characteristic and genus, degenerate faces,
duplicate and unreferenced vertices, orientation, non-finite coordinates, bad indices,
area and enclosed volume) and gives a verdict: ``usable`` (closed, manifold, one
component, genus 0, consistently outward, nothing degenerate), ``usable after repair``
(the safe repairs of :func:`shapedesc.mesh.repair.repair_mesh` make it so; the repairs
are listed), or ``unusable`` (with reasons saying what to do). It never raises on a bad
mesh.

Definitions (common practice in mesh processing, e.g. Botsch et al., *Polygon Mesh
Processing*, AK Peters 2010, ch. 2):

* boundary edge: used by exactly one face; non-manifold edge: used by more than two;
* non-manifold vertex: its incident faces form more than one fan (edge-connected set
  around the vertex), e.g. two cones touching at their tips;
* orientation consistent: every edge shared by two faces is traversed in opposite
  directions by them; outward when, in addition, the signed enclosed volume is positive;
* Euler characteristic χ = V − E + F over referenced vertices; for a closed, orientable,
  connected manifold the genus is g = (2 − χ) / 2.

Topology counts are taken over faces whose indices are valid and distinct; faces with
a repeated index are counted as degenerate.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
import math

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph

from shapedesc import defaults
from shapedesc.mesh import measures
from shapedesc.surface import Surface

USABLE = "usable"
USABLE_AFTER_REPAIR = "usable after repair"
UNUSABLE = "unusable"

RETRY_FROM_VOLUME = (
    "a mesh topology fix is out of scope for surface inputs; re-extract the surface from "
    "a label volume with `shapedesc check --label` / the volume path"
)


@dataclass(frozen=True)
class MeshReport:
    """What :func:`inspect_mesh` found. Counts are of the mesh as given (before repair).

    Attributes
    ----------
    source : str
        The surface's source (file path).
    n_vertices, n_faces : int
    n_components : int
        Connected components of the referenced vertices (through face edges).
    n_boundary_edges, n_nonmanifold_edges, n_nonmanifold_vertices : int
    euler_characteristic : int
        V − E + F over referenced vertices and valid, non-degenerate-index faces.
    genus : int or None
        (2 − χ) / 2 when the mesh is a closed, orientable, connected manifold; else None.
    n_degenerate_faces : int
        Faces with a repeated vertex index or (near-)zero area
        (``defaults.DEGENERATE_FACE_REL_AREA``).
    n_duplicate_vertices : int
        Vertices that coincide with an earlier one within ``defaults.MERGE_TOLERANCE_MM``.
    n_unreferenced_vertices : int
    orientation : str
        ``"consistent outward"``, ``"consistent inward"``, ``"inconsistent"`` or ``"n/a"``
        (no usable faces, or coordinates/indices broken). For an open mesh outward/inward
        is judged from the signed volume of the cone to the vertex centroid.
    n_nonfinite_coordinates : int
        Vertices with a NaN or infinite coordinate.
    n_bad_face_indices : int
        Faces indexing a vertex that does not exist.
    area_mm2 : float
        Total area (NaN when coordinates are non-finite).
    volume_mm3 : float
        Signed enclosed volume (negative for inward orientation; NaN when not computable).
    verdict : str
        ``"usable"``, ``"usable after repair"`` or ``"unusable"``.
    repairs_needed : tuple of str
        The repairs that make it usable (verdict ``usable after repair``).
    reasons : tuple of str
        Why it is not usable as is, and what to do.
    """

    source: str
    n_vertices: int
    n_faces: int
    n_components: int
    n_boundary_edges: int
    n_nonmanifold_edges: int
    n_nonmanifold_vertices: int
    euler_characteristic: int
    genus: int | None
    n_degenerate_faces: int
    n_duplicate_vertices: int
    n_unreferenced_vertices: int
    orientation: str
    n_nonfinite_coordinates: int
    n_bad_face_indices: int
    area_mm2: float
    volume_mm3: float
    verdict: str
    repairs_needed: tuple[str, ...] = ()
    reasons: tuple[str, ...] = ()

    @property
    def usable(self) -> bool:
        """True unless the verdict is ``unusable``."""
        return self.verdict != UNUSABLE

    def to_row(self) -> dict:
        """Plain dict for tables and JSON (tuples as lists, NaN as None)."""
        row = asdict(self)
        for k, v in row.items():
            if isinstance(v, tuple):
                row[k] = list(v)
            elif isinstance(v, float) and not math.isfinite(v):
                row[k] = None
        return row


@dataclass(frozen=True)
class _Topology:
    """Edge structure of a face array (private; shared with repair)."""

    faces: np.ndarray          # (F, 3) the faces analysed
    order: np.ndarray          # (3F,) half-edges sorted by undirected key
    group_start: np.ndarray    # (E,) start of each undirected edge's run in ``order``
    counts: np.ndarray         # (E,) faces per undirected edge
    edge_of_half: np.ndarray   # (3F,) undirected edge id of each half-edge
    he_from: np.ndarray        # (3F,)
    he_to: np.ndarray          # (3F,)

    @property
    def n_edges(self) -> int:
        return int(len(self.counts))

    def edge_vertices(self) -> np.ndarray:
        """(E, 2) vertex pairs of the undirected edges."""
        h = self.order[self.group_start]
        return np.stack([self.he_from[h], self.he_to[h]], axis=1)

    def manifold_pairs(self) -> tuple[np.ndarray, np.ndarray]:
        """Half-edge pairs (h1, h2) of edges shared by exactly two faces."""
        starts = self.group_start[self.counts == 2]
        return self.order[starts], self.order[starts + 1]

    def consecutive_pairs(self) -> tuple[np.ndarray, np.ndarray]:
        """Consecutive half-edges on the same undirected edge (any count >= 2)."""
        same = self.edge_of_half[self.order[1:]] == self.edge_of_half[self.order[:-1]]
        return self.order[:-1][same], self.order[1:][same]


def _argsort_with_keys(key: np.ndarray, *, max_key: int) -> tuple[np.ndarray, np.ndarray]:
    """(argsort of ``key``, sorted ``key``) for non-negative int64 keys below ``max_key``.

    When key and position fit together in 63 bits, the position is packed into the low
    bits and one value sort (several times faster than numpy's argsort) does both.
    """
    n = len(key)
    bits = max(int(n).bit_length(), 1)
    if n and (int(max_key) << bits) < (1 << 62):
        packed = np.sort((key << np.int64(bits)) | np.arange(n, dtype=np.int64))
        return packed & np.int64((1 << bits) - 1), packed >> np.int64(bits)
    order = np.argsort(key)
    return order, key[order]


def _topology(faces: np.ndarray, n_vertices: int) -> _Topology:
    f = np.asarray(faces, dtype=np.int64)
    he_from = f.reshape(-1)
    he_to = f[:, [1, 2, 0]].reshape(-1)
    lo = np.minimum(he_from, he_to)
    hi = np.maximum(he_from, he_to)
    key = lo * np.int64(max(n_vertices, 1)) + hi
    order, ks = _argsort_with_keys(key, max_key=max(n_vertices, 1) ** 2)
    if len(ks):
        new = np.empty(len(ks), dtype=bool)
        new[0] = True
        np.not_equal(ks[1:], ks[:-1], out=new[1:])
        group_start = np.flatnonzero(new)
        counts = np.diff(np.append(group_start, len(ks)))
        edge_sorted = np.cumsum(new) - 1
        edge_of_half = np.empty(len(ks), dtype=np.int64)
        edge_of_half[order] = edge_sorted
    else:
        group_start = counts = edge_of_half = np.zeros(0, dtype=np.int64)
    return _Topology(f, order, group_start, counts, edge_of_half, he_from, he_to)


def _next_half(h: np.ndarray) -> np.ndarray:
    """The half-edge after ``h`` in its face (3*face + k -> 3*face + (k+1) % 3)."""
    return h + 1 - 3 * (h % 3 == 2)


def _corner_at(h: np.ndarray, vertex: np.ndarray, topo: _Topology) -> np.ndarray:
    """Corner index (3*face + k) of ``vertex`` in the face of half-edge ``h``.

    Corner 3*face + k is the face's k-th vertex, i.e. the start of half-edge 3*face + k.
    """
    return np.where(topo.he_from[h] == vertex, h, _next_half(h))


def _nonmanifold_vertices(topo: _Topology, n_vertices: int, *,
                          pairs: tuple[np.ndarray, np.ndarray] | None = None,
                          n_same_direction: int | None = None) -> np.ndarray:
    """Boolean (V,) of vertices whose incident faces form more than one fan.

    Corners (face, vertex) are linked when their faces share an edge through the vertex;
    a vertex is non-manifold when its corners fall in more than one linked group.
    """
    n_corners = 3 * len(topo.faces)
    out = np.zeros(n_vertices, dtype=bool)
    if n_corners == 0:
        return out
    h1, h2 = topo.manifold_pairs() if pairs is None else pairs
    if n_same_direction is None:
        n_same_direction = int(np.count_nonzero(topo.he_from[h1] == topo.he_from[h2]))
    if not np.any(topo.counts > 2) and n_same_direction == 0:
        # Edge-manifold and consistently oriented: corner h (start of half-edge h, v->w)
        # is linked to the corner of v in the face across, the half-edge after the twin.
        succ = np.arange(n_corners)
        succ[h1] = _next_half(h2)
        succ[h2] = _next_half(h1)
        if not np.any(topo.counts == 1):
            # closed: succ is a permutation and each fan one of its cycles. Label every
            # corner with the smallest corner on its cycle by pointer doubling: after k
            # steps the label covers 2**k successors, and no cycle is longer than the
            # number of corners at its vertex.
            longest = int(np.bincount(topo.faces.reshape(-1)).max())
            label = np.arange(n_corners)
            jump = succ
            for _ in range(max(longest - 1, 1).bit_length()):
                np.minimum(label, label[jump], out=label)
                jump = jump[jump]
            n_fans = int(np.count_nonzero(label == np.arange(n_corners)))
            return _fans_to_vertices(n_fans, label, topo, n_vertices, label_bound=n_corners)
        g = sparse.csr_matrix((np.ones(n_corners, dtype=np.int8), succ,
                               np.arange(n_corners + 1)), shape=(n_corners, n_corners))
    else:
        h1, h2 = topo.consecutive_pairs()
        a = topo.he_from[h1]
        b = topo.he_to[h1]
        rows = np.concatenate([_corner_at(h1, a, topo), _corner_at(h1, b, topo)])
        cols = np.concatenate([_corner_at(h2, a, topo), _corner_at(h2, b, topo)])
        g = sparse.coo_matrix((np.ones(len(rows), dtype=np.int8), (rows, cols)),
                              shape=(n_corners, n_corners)).tocsr()
    n_fans, label = csgraph.connected_components(g, directed=False)
    return _fans_to_vertices(n_fans, label, topo, n_vertices)


def _fans_to_vertices(n_fans: int, label: np.ndarray, topo: _Topology, n_vertices: int, *,
                      label_bound: int | None = None) -> np.ndarray:
    """Vertices with more than one fan, from a fan label per corner (labels < label_bound)."""
    out = np.zeros(n_vertices, dtype=bool)
    corner_vertex = topo.faces.reshape(-1)
    n_ref = int(np.count_nonzero(np.bincount(corner_vertex, minlength=n_vertices)))
    if n_fans == n_ref:  # every vertex has exactly one fan
        return out
    bound = np.int64(n_fans if label_bound is None else label_bound)
    pair = np.unique(corner_vertex * bound + label)
    fans_per_vertex = np.bincount(pair // bound, minlength=n_vertices)
    return fans_per_vertex > 1


def _vertex_components(topo: _Topology, n_vertices: int) -> tuple[int, np.ndarray]:
    """Components of the referenced vertices; labels (V,), -1 for unreferenced ones."""
    ev = topo.edge_vertices()  # sorted by (smaller, larger) index: already CSR row order
    lo = np.minimum(ev[:, 0], ev[:, 1])
    hi = np.maximum(ev[:, 0], ev[:, 1])
    indptr = np.zeros(n_vertices + 1, dtype=np.int64)
    np.cumsum(np.bincount(lo, minlength=n_vertices), out=indptr[1:])
    g = sparse.csr_matrix((np.ones(len(hi), dtype=np.int8), hi, indptr),
                          shape=(n_vertices, n_vertices))
    _, label = csgraph.connected_components(g, directed=False)
    referenced = np.zeros(n_vertices, dtype=bool)
    referenced[topo.faces.reshape(-1)] = True
    present = np.bincount(label[referenced], minlength=int(label.max()) + 1 if len(label) else 0) > 0
    relabel = np.cumsum(present) - 1  # consecutive ids over components with faces
    out = np.where(referenced, relabel[label], -1).astype(np.int64)
    return int(np.count_nonzero(present)), out


def _duplicate_groups(vertices: np.ndarray, tol: float) -> np.ndarray:
    """Representative index (V,) of each vertex: the first vertex on the same tolerance cell.

    Vertices are rounded to a grid of step ``tol`` (mm); those on the same grid point are
    duplicates. Only vertices whose rounded coordinates hash alike are compared further,
    so a mesh without duplicates costs one sort.
    """
    n = len(vertices)
    rep = np.arange(n)
    finite = np.all(np.isfinite(vertices), axis=1)
    idx = np.flatnonzero(finite)
    if len(idx) < 2:
        return rep
    q = np.round(vertices[idx] / tol)
    # one sort on a hash of the rounded coordinates; equal hashes are then compared exactly
    qi = np.clip(q, -(2.0**60), 2.0**60).astype(np.int64)
    key = qi[:, 0] * np.int64(73856093) ^ qi[:, 1] * np.int64(19349663) ^ qi[:, 2] * np.int64(83492791)
    bits = max(int(len(key)).bit_length(), 1)
    # hash in the high bits, position in the low bits: one value sort
    packed = np.sort((key & ~np.int64((1 << bits) - 1)) | np.arange(len(key), dtype=np.int64))
    ox = packed & np.int64((1 << bits) - 1)
    ks = packed >> np.int64(bits)
    tied = np.zeros(len(ks), dtype=bool)
    eq = ks[1:] == ks[:-1]
    tied[1:] |= eq
    tied[:-1] |= eq
    if not tied.any():
        return rep
    # runs of equal hash; within a run positions ascend, so its first is the smallest index
    new = np.ones(len(ks), dtype=bool)
    new[1:] = ~eq
    run_first = ox[np.flatnonzero(new)][np.cumsum(new) - 1]
    same = np.all(q[ox] == q[run_first], axis=1)
    rep[idx[ox]] = idx[np.where(same, run_first, ox)]
    if not same.all():  # hash collisions: resolve those runs exactly (rare)
        bad_runs = np.unique((np.cumsum(new) - 1)[~same])
        in_bad = np.isin(np.cumsum(new) - 1, bad_runs)
        cand = ox[in_bad]
        qc = q[cand]
        order = np.lexsort((cand, qc[:, 2], qc[:, 1], qc[:, 0]))
        qs = qc[order]
        start = np.ones(len(qs), dtype=bool)
        start[1:] = np.any(qs[1:] != qs[:-1], axis=1)
        firsts = cand[order][np.flatnonzero(start)][np.cumsum(start) - 1]
        rep[idx[cand[order]]] = idx[firsts]
    return rep


def _cross_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise cross product of (N, 3) arrays (faster than numpy.cross for large N)."""
    out = np.empty_like(a)
    out[:, 0] = a[:, 1] * b[:, 2] - a[:, 2] * b[:, 1]
    out[:, 1] = a[:, 2] * b[:, 0] - a[:, 0] * b[:, 2]
    out[:, 2] = a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]
    return out


def _area_volume(vertices: np.ndarray, faces: np.ndarray) -> tuple[np.ndarray, float]:
    """Face areas (F,) in mm² and signed enclosed volume in mm³ from one cross product.

    Same quantities as :func:`shapedesc.mesh.measures.face_areas` and
    :func:`~shapedesc.mesh.measures.enclosed_volume` (volume relative to the vertex
    centroid, divergence theorem), computed together for speed.
    """
    c = vertices.mean(axis=0)
    p0 = np.take(vertices, faces[:, 0], axis=0)
    n = _cross_rows(np.take(vertices, faces[:, 1], axis=0) - p0,
                    np.take(vertices, faces[:, 2], axis=0) - p0)
    areas = 0.5 * np.sqrt(np.einsum("ij,ij->i", n, n))
    p0 -= c
    volume = float(np.einsum("ij,ij->i", p0, n).sum() / 6.0)
    return areas, volume


def _degenerate_area(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Boolean (F,) of faces with (near-)zero area relative to the bounding box."""
    if len(faces) == 0:
        return np.zeros(0, dtype=bool)
    diag2 = float(np.sum((vertices.max(axis=0) - vertices.min(axis=0)) ** 2))
    areas = measures.face_areas(vertices, faces)
    return areas <= defaults.DEGENERATE_FACE_REL_AREA * max(diag2, np.finfo(float).tiny)


@dataclass(frozen=True)
class _Measured:
    report: dict
    clean: bool
    fatal: bool


def _measure(surface: Surface) -> _Measured:
    v = surface.vertices
    f = surface.faces
    n_v, n_f = len(v), len(f)
    finite_v = np.all(np.isfinite(v), axis=1)
    n_nonfinite = int(np.count_nonzero(~finite_v))
    if n_f and (f.min() < 0 or f.max() >= n_v):
        bad_idx = np.any((f < 0) | (f >= n_v), axis=1)
        fv = f[~bad_idx]
    else:
        bad_idx = np.zeros(n_f, dtype=bool)
        fv = f
    n_bad = int(np.count_nonzero(bad_idx))
    repeated = (fv[:, 0] == fv[:, 1]) | (fv[:, 1] == fv[:, 2]) | (fv[:, 2] == fv[:, 0])
    good = fv[~repeated] if repeated.any() else fv

    geometry_ok = n_nonfinite == 0
    volume = float("nan")
    if geometry_ok and len(good):
        areas, volume = _area_volume(v, good)
        diag2 = float(np.sum((v.max(axis=0) - v.min(axis=0)) ** 2))
        zero_area = areas <= defaults.DEGENERATE_FACE_REL_AREA * max(diag2, np.finfo(float).tiny)
        area = float(areas.sum())  # faces with a repeated index have zero area
    else:
        zero_area = np.zeros(len(good), dtype=bool)
        area = float("nan") if not geometry_ok else 0.0
    n_degenerate = int(np.count_nonzero(repeated) + np.count_nonzero(zero_area))

    topo = _topology(good, n_v)
    counts = topo.counts
    n_boundary = int(np.count_nonzero(counts == 1))
    n_nm_edges = int(np.count_nonzero(counts > 2))
    h1, h2 = topo.manifold_pairs()
    n_same_direction = int(np.count_nonzero(topo.he_from[h1] == topo.he_from[h2]))
    n_nm_vertices = int(np.count_nonzero(_nonmanifold_vertices(
        topo, n_v, pairs=(h1, h2), n_same_direction=n_same_direction)))
    n_components, _ = _vertex_components(topo, n_v) if len(good) else (0, None)
    uses = np.bincount(fv.reshape(-1), minlength=n_v) if len(fv) else np.zeros(n_v, dtype=np.int64)
    n_unref = int(n_v - np.count_nonzero(uses))
    if good is fv:
        n_ref_good = n_v - n_unref
    else:
        n_ref_good = int(np.count_nonzero(np.bincount(good.reshape(-1), minlength=n_v))) if len(good) else 0
    chi = n_ref_good - topo.n_edges + len(good)
    rep = _duplicate_groups(v, defaults.MERGE_TOLERANCE_MM)
    n_dup = int(np.count_nonzero(rep != np.arange(n_v)))

    if len(good) == 0 or not geometry_ok:
        orientation = "n/a"
    else:
        if n_same_direction:
            orientation = "inconsistent"
        else:
            orientation = "consistent outward" if volume > 0 else "consistent inward"
    closed_manifold = (n_boundary == 0 and n_nm_edges == 0 and n_nm_vertices == 0
                       and n_components == 1 and n_same_direction == 0 and len(good) > 0)
    genus = (2 - chi) // 2 if closed_manifold and chi % 2 == 0 else None

    fatal = n_nonfinite > 0 or n_bad > 0 or n_v < defaults.MIN_SURFACE_VERTICES or n_f == 0
    clean = (not fatal and closed_manifold and genus == 0 and n_degenerate == 0
             and n_dup == 0 and n_unref == 0 and orientation == "consistent outward")
    report = dict(
        source=surface.source, n_vertices=n_v, n_faces=n_f, n_components=n_components,
        n_boundary_edges=n_boundary, n_nonmanifold_edges=n_nm_edges,
        n_nonmanifold_vertices=n_nm_vertices, euler_characteristic=int(chi), genus=genus,
        n_degenerate_faces=n_degenerate, n_duplicate_vertices=n_dup,
        n_unreferenced_vertices=n_unref, orientation=orientation,
        n_nonfinite_coordinates=n_nonfinite, n_bad_face_indices=n_bad,
        area_mm2=float(area), volume_mm3=float(volume),
    )
    return _Measured(report, clean, fatal)


def describe_problems(report: dict, *, fill_holes: bool = False,
                      keep_largest_component: bool = False) -> list[str]:
    """Reasons a measured mesh is not usable, each saying what to do.

    Parameters
    ----------
    report : dict
        Counts as in :class:`MeshReport` (without verdict, repairs and reasons).
    fill_holes, keep_largest_component : bool, keyword-only
        Whether those repairs were allowed (changes the advice given).

    Returns
    -------
    list of str
    """
    r = report
    out = []
    if r["n_nonfinite_coordinates"]:
        out.append(f"{r['n_nonfinite_coordinates']} vertices have NaN or infinite coordinates; "
                   "re-export the surface from the tool that made it")
    if r["n_bad_face_indices"]:
        out.append(f"{r['n_bad_face_indices']} faces index vertices that do not exist (valid "
                   f"indices are 0..{r['n_vertices'] - 1}); the file is corrupt, re-export it")
    if r["n_faces"] == 0:
        out.append("the mesh has no faces; give a triangle surface")
    if r["n_vertices"] < defaults.MIN_SURFACE_VERTICES:
        out.append(f"only {r['n_vertices']} vertices; a closed surface needs at least "
                   f"{defaults.MIN_SURFACE_VERTICES}")
    if out:
        return out
    if r["n_components"] > 1:
        todo = ("" if keep_largest_component else
                "; pass --repair-largest-component to keep only the largest, or split the file")
        out.append(f"{r['n_components']} separate components{todo}")
    if r["n_boundary_edges"]:
        todo = (f"holes larger than {defaults.MAX_HOLE_EDGES} edges are not filled" if fill_holes
                else f"pass --fill-holes to close holes of up to {defaults.MAX_HOLE_EDGES} edges")
        out.append(f"open surface: {r['n_boundary_edges']} boundary edges; close it in the tool "
                   f"that made it ({todo}), or re-extract it from a label volume")
    if r["n_nonmanifold_edges"]:
        out.append(f"{r['n_nonmanifold_edges']} non-manifold edges (shared by more than two "
                   "faces); re-extract the surface, e.g. from its label volume with "
                   "`shapedesc check --label`")
    if r["n_nonmanifold_vertices"]:
        out.append(f"{r['n_nonmanifold_vertices']} non-manifold vertices (faces meeting at a "
                   "point only); re-extract the surface, e.g. from its label volume")
    if r["orientation"] == "inconsistent":
        out.append("face orientation cannot be made consistent (non-orientable or "
                   "non-manifold); re-extract the surface")
    if r["genus"] is not None and r["genus"] != 0:
        out.append(f"genus {r['genus']} (Euler characteristic {r['euler_characteristic']}, "
                   f"{r['genus']} handle(s)); {RETRY_FROM_VOLUME}")
    elif r["genus"] is None and not out:
        out.append(f"Euler characteristic {r['euler_characteristic']} is not that of a sphere (2); "
                   f"{RETRY_FROM_VOLUME}")
    if r["n_degenerate_faces"]:
        out.append(f"{r['n_degenerate_faces']} degenerate (zero-area) faces remain; re-export or "
                   "remesh the surface")
    if r["n_duplicate_vertices"]:
        out.append(f"{r['n_duplicate_vertices']} duplicate vertices remain")
    if r["orientation"] == "consistent inward":
        out.append("faces point inward")
    return out


def inspect_mesh(surface: Surface, *, keep_largest_component: bool = False,
                 fill_holes: bool = False,
                 max_hole_edges: int = defaults.MAX_HOLE_EDGES) -> MeshReport:
    """Measure a surface and decide whether it is usable, usable after repair, or unusable.

    Parameters
    ----------
    surface : Surface
        Vertices (V, 3) mm, faces (F, 3); may be broken in any way (never raises for that).
    keep_largest_component, fill_holes, max_hole_edges : keyword-only
        Options of :func:`shapedesc.mesh.repair.repair_mesh` allowed when judging whether
        a repair makes the mesh usable.

    Returns
    -------
    MeshReport
        Counts of the mesh as given; ``verdict``, ``repairs_needed`` and ``reasons``.
    """
    if not isinstance(surface, Surface):
        raise TypeError(f"inspect_mesh expects a Surface, got {type(surface).__name__}")
    m = _measure(surface)
    if m.clean:
        return MeshReport(**m.report, verdict=USABLE)
    if m.fatal:
        return MeshReport(**m.report, verdict=UNUSABLE,
                          reasons=tuple(describe_problems(m.report)))
    from shapedesc.mesh.repair import repair_mesh

    opts = dict(keep_largest_component=keep_largest_component, fill_holes=fill_holes,
                max_hole_edges=max_hole_edges)
    try:
        repaired = repair_mesh(surface, **opts)
    except ValueError as exc:
        return MeshReport(**m.report, verdict=UNUSABLE, reasons=(str(exc),))
    after = _measure(repaired)
    done = repaired.history[len(surface.history):]
    if after.clean:
        return MeshReport(**m.report, verdict=USABLE_AFTER_REPAIR, repairs_needed=tuple(done))
    reasons = describe_problems(after.report, fill_holes=fill_holes,
                                keep_largest_component=keep_largest_component)
    if done:
        reasons = [f"after the safe repairs ({'; '.join(done)}): " + reasons[0]] + reasons[1:] \
            if reasons else reasons
    return MeshReport(**m.report, verdict=UNUSABLE, reasons=tuple(reasons))
