"""Safe, recorded repairs of triangle surfaces, and the gate every surface input passes.

:func:`repair_mesh` does only what cannot change the shape: merge duplicate vertices
(within ``defaults.MERGE_TOLERANCE_MM``), drop faces with a repeated vertex and exact
duplicate faces, flip the diagonal of zero-area "cap" faces, drop unreferenced vertices,
make the orientation consistent, and turn it outward (per component, by the sign of the
enclosed volume). Keeping only the largest component and filling small holes change the
input and happen only when asked. Every step that changed something is appended to
``Surface.history``.

:func:`prepare_surface` repairs and then requires a closed, manifold, one-component,
genus-0 mesh, raising :class:`~shapedesc.errors.MeshTopologyError` or
:class:`~shapedesc.errors.MeshGeometryError` otherwise.

References
----------
Botsch, Kobbelt, Pauly, Alliez, Lévy, *Polygon Mesh Processing*, AK Peters 2010,
ch. 2 (mesh data structures, orientation) and ch. 9 (mesh repair).
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph

from shapedesc import defaults
from shapedesc.errors import MeshGeometryError, MeshTopologyError, RepairWarning
from shapedesc.mesh.validate import (
    _degenerate_area,
    _duplicate_groups,
    _measure,
    _topology,
    _vertex_components,
    describe_problems,
)
from shapedesc.surface import Surface


def _require_geometry(surface: Surface) -> None:
    v, f = surface.vertices, surface.faces
    bad_v = ~np.all(np.isfinite(v), axis=1)
    if bad_v.any():
        first = int(np.flatnonzero(bad_v)[0])
        raise MeshGeometryError(
            f"{surface.source}: {int(bad_v.sum())} vertices have NaN or infinite coordinates "
            f"(first: vertex {first} = {v[first].tolist()}); re-export the surface from the "
            "tool that made it."
        )
    if len(f):
        bad_f = np.any((f < 0) | (f >= len(v)), axis=1)
        if bad_f.any():
            first = int(np.flatnonzero(bad_f)[0])
            raise MeshGeometryError(
                f"{surface.source}: {int(bad_f.sum())} faces index vertices that do not exist "
                f"(first: face {first} = {f[first].tolist()}, valid indices 0..{len(v) - 1}); "
                "the file is corrupt or truncated, re-export it."
            )


def repair_mesh(surface: Surface, *, keep_largest_component: bool = False,
                fill_holes: bool = False,
                max_hole_edges: int = defaults.MAX_HOLE_EDGES) -> Surface:
    """Apply the safe repairs (and the optional ones asked for), recording each.

    Parameters
    ----------
    surface : Surface
        Vertices (V, 3) mm, faces (F, 3).
    keep_largest_component : bool, keyword-only
        Keep only the component with the most faces (dropping the others is reported).
    fill_holes : bool, keyword-only
        Close boundary loops of at most ``max_hole_edges`` edges: a triangle for a
        3-edge loop, else a fan around a new vertex at the loop's centroid.
    max_hole_edges : int, keyword-only
        Largest loop closed by ``fill_holes`` (edges).

    Returns
    -------
    Surface
        The repaired surface; ``history`` extended by one entry per step that changed
        something (unchanged input gives the same surface back).

    Raises
    ------
    MeshGeometryError
        Non-finite coordinates or face indices out of range (not safely repairable).
    """
    if not isinstance(surface, Surface):
        raise TypeError(f"repair_mesh expects a Surface, got {type(surface).__name__}")
    if int(max_hole_edges) < 3:
        raise ValueError(f"max_hole_edges must be >= 3, got {max_hole_edges!r}")
    _require_geometry(surface)
    v = np.array(surface.vertices)
    f = np.array(surface.faces)
    steps: list[str] = []

    # 1. duplicate vertices
    rep = _duplicate_groups(v, defaults.MERGE_TOLERANCE_MM)
    n_dup = int(np.count_nonzero(rep != np.arange(len(v))))
    if n_dup:
        f = rep[f]
        steps.append(f"merged {n_dup} duplicate vertices (tolerance "
                     f"{defaults.MERGE_TOLERANCE_MM:g} mm)")

    # 2. faces with a repeated vertex, and duplicate faces
    repeated = (f[:, 0] == f[:, 1]) | (f[:, 1] == f[:, 2]) | (f[:, 2] == f[:, 0])
    if repeated.any():
        f = f[~repeated]
        steps.append(f"removed {int(repeated.sum())} degenerate faces with a repeated vertex")
    if len(f):
        first = _first_of_each_face(f, len(v))
        if len(first) < len(f):
            steps.append(f"removed {len(f) - len(first)} duplicate faces")
            f = f[np.sort(first)]

    # 3. largest component (only when asked)
    if keep_largest_component and len(f):
        n_comp, label = _vertex_components(_topology(f, len(v)), len(v))
        if n_comp > 1:
            face_comp = label[f[:, 0]]
            sizes = np.bincount(face_comp, minlength=n_comp)
            keep = int(np.argmax(sizes))
            steps.append(f"kept the largest of {n_comp} components ({int(sizes[keep])} faces); "
                         f"dropped {len(f) - int(sizes[keep])} faces in {n_comp - 1} other "
                         "component(s)")
            f = f[face_comp == keep]

    # 4. consistent orientation
    f, n_flipped = _orient_consistently(f, len(v))
    if n_flipped:
        steps.append(f"flipped {n_flipped} faces to make the orientation consistent")

    # 5. holes (only when asked)
    if fill_holes and len(f):
        v, f, msg = _fill_holes(v, f, int(max_hole_edges))
        if msg:
            steps.append(msg)

    # 6. zero-area caps: flip their longest edge
    if len(f):
        f, n_caps, _n_left = _flip_caps(v, f)
        if n_caps:
            steps.append(f"flipped the longest edge of {n_caps} zero-area faces")
        # faces still of zero area (n_left) stay; validation reports them as degenerate

    # 7. unreferenced vertices
    used = np.zeros(len(v), dtype=bool)
    used[f.reshape(-1)] = True
    n_unused = int(len(v) - used.sum())
    if n_unused:
        new_index = np.cumsum(used) - 1
        v = v[used]
        f = new_index[f]
        steps.append(f"removed {n_unused} unreferenced vertices")

    # 8. outward, per component
    if len(f):
        f, n_out = _orient_outward(v, f)
        if n_out:
            steps.append(f"flipped {n_out} faces so that the normals point outward "
                         "(enclosed volume was negative)")

    if not steps:
        return surface
    out = surface
    for k, step in enumerate(steps):
        last = k == len(steps) - 1
        out = out.with_step(step, vertices=v if last else None, faces=f if last else None)
    return out


def _first_of_each_face(f: np.ndarray, n_vertices: int) -> np.ndarray:
    """Index of the first occurrence of each distinct face (vertex set), ascending order."""
    s = np.sort(f, axis=1)
    n = max(int(n_vertices), 1)
    if n ** 3 < 2**62:
        key = (s[:, 0] * np.int64(n) + s[:, 1]) * np.int64(n) + s[:, 2]
        _, first = np.unique(key, return_index=True)
    else:
        _, first = np.unique(s, axis=0, return_index=True)
    return first


def _orient_consistently(f: np.ndarray, n_vertices: int) -> tuple[np.ndarray, int]:
    """Flip faces so that every two-face edge is traversed in opposite directions.

    Uses a doubled face graph: node (face, state) linked to (neighbour, state XOR
    parity), parity 1 when the two faces traverse their shared edge the same way. A
    component of the face graph is orientable iff its doubled copy splits in two.
    Per component, the smaller of the two consistent flip sets is applied;
    non-orientable components are left as they are.
    """
    nf = len(f)
    if nf == 0:
        return f, 0
    topo = _topology(f, n_vertices)
    h1, h2 = topo.manifold_pairs()
    parity = topo.he_from[h1] == topo.he_from[h2]
    if not parity.any():
        return f, 0
    g1, g2 = h1 // 3, h2 // 3
    rows = np.concatenate([g1, g1 + nf])
    cols = np.concatenate([np.where(parity, g2 + nf, g2), np.where(parity, g2, g2 + nf)])
    doubled = sparse.coo_matrix((np.ones(len(rows), dtype=np.int8), (rows, cols)),
                                shape=(2 * nf, 2 * nf)).tocsr()
    _, lab2 = csgraph.connected_components(doubled, directed=False)
    plain = sparse.coo_matrix((np.ones(len(g1), dtype=np.int8), (g1, g2)), shape=(nf, nf)).tocsr()
    n_comp, comp = csgraph.connected_components(plain, directed=False)
    seed = np.full(n_comp, nf, dtype=np.int64)
    np.minimum.at(seed, comp, np.arange(nf))
    same_as_seed = lab2[:nf] == lab2[seed[comp]]
    flip_as_seed = lab2[nf:] == lab2[seed[comp]]
    orientable = np.ones(n_comp, dtype=bool)
    np.logical_and.at(orientable, comp, same_as_seed | flip_as_seed)
    np.logical_and.at(orientable, comp, ~(same_as_seed & flip_as_seed))
    flip = flip_as_seed & orientable[comp]
    n_in = np.bincount(comp, minlength=n_comp)
    n_flip = np.bincount(comp, weights=flip, minlength=n_comp)
    invert = (n_flip > n_in / 2) & orientable
    flip = np.where(invert[comp], ~flip & orientable[comp], flip)
    if not flip.any():
        return f, 0
    f = f.copy()
    f[flip] = f[flip][:, ::-1]
    return f, int(flip.sum())


def _orient_outward(v: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, int]:
    """Flip every component whose signed enclosed volume is negative."""
    n_comp, label = _vertex_components(_topology(f, len(v)), len(v))
    face_comp = label[f[:, 0]]
    used = np.bincount(f.reshape(-1), minlength=len(v)) > 0
    c = v[used].mean(axis=0)
    a, b, d = v[f[:, 0]] - c, v[f[:, 1]] - c, v[f[:, 2]] - c
    tet = np.einsum("ij,ij->i", a, np.cross(b, d)) / 6.0
    vol = np.bincount(face_comp, weights=tet, minlength=n_comp)
    flip = (vol < 0)[face_comp]
    if not flip.any():
        return f, 0
    f = f.copy()
    f[flip] = f[flip][:, ::-1]
    return f, int(flip.sum())


def _fill_holes(v: np.ndarray, f: np.ndarray, max_edges: int):
    """Close boundary loops of at most ``max_edges`` edges (faces already oriented)."""
    topo = _topology(f, len(v))
    boundary = topo.counts[topo.edge_of_half] == 1
    hb = np.flatnonzero(boundary)
    if len(hb) == 0:
        return v, f, ""
    starts = topo.he_from[hb]
    ends = topo.he_to[hb]
    out_deg = np.bincount(starts, minlength=len(v))
    nxt = {int(s): int(e) for s, e in zip(starts, ends)}
    seen: set[int] = set()
    loops = []
    for s0 in (int(s) for s in starts):
        if s0 in seen:
            continue
        loop = [s0]
        ok = out_deg[s0] == 1
        cur = nxt[s0]
        while cur != s0 and ok and len(loop) <= max_edges:
            if cur in seen or out_deg[cur] != 1 or cur not in nxt:
                ok = False
                break
            loop.append(cur)
            cur = nxt[cur]
        seen.update(loop)
        if ok and cur == s0 and len(loop) <= max_edges:
            loops.append(loop)
    if not loops:
        return v, f, ""
    new_faces = []
    new_vertices = []
    for loop in loops:
        k = len(loop)
        if k == 3:
            # boundary half-edges run loop[0]->loop[1]->loop[2]; the cap runs the other way
            new_faces.append([loop[2], loop[1], loop[0]])
            continue
        c = len(v) + len(new_vertices)
        new_vertices.append(v[loop].mean(axis=0))
        for i in range(k):
            new_faces.append([loop[(i + 1) % k], loop[i], c])
    if new_vertices:
        v = np.vstack([v, np.asarray(new_vertices)])
    f = np.vstack([f, np.asarray(new_faces, dtype=np.int64)])
    sizes = ", ".join(str(len(lp)) for lp in loops)
    return v, f, (f"filled {len(loops)} holes (boundary loops of {sizes} edges) with "
                  f"{len(new_faces)} new faces and {len(new_vertices)} new vertices")


#: Zero-area faces above this number are left for validation to report (one O(F) search each).
_MAX_CAP_FLIPS = 1000


def _flip_caps(v: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, int, int]:
    """Flip the longest edge of zero-area faces whose third vertex lies on that edge."""
    zero = np.flatnonzero(_degenerate_area(v, f))
    if len(zero) == 0:
        return f, 0, 0
    if len(zero) > _MAX_CAP_FLIPS:
        return f, 0, len(zero)
    f = f.copy()
    done = 0
    for t in zero:
        if not _degenerate_area(v, f[t:t + 1])[0]:
            continue
        tri = f[t]
        lengths = [np.linalg.norm(v[tri[(k + 1) % 3]] - v[tri[k]]) for k in range(3)]
        k = int(np.argmax(lengths))
        a, b, c = tri[k], tri[(k + 1) % 3], tri[(k + 2) % 3]
        has_a, has_b = (f == a).any(axis=1), (f == b).any(axis=1)
        across = np.flatnonzero(has_a & has_b)
        across = across[across != t]
        if len(across) != 1:
            continue
        u = int(across[0])
        d_candidates = [x for x in f[u] if x != a and x != b]
        if len(d_candidates) != 1:
            continue
        d = d_candidates[0]
        # the neighbour must run b -> a (consistent orientation) and edge c-d must be new
        ru = list(f[u])
        i = ru.index(b)
        if ru[(i + 1) % 3] != a:
            continue
        if np.any((f == c).any(axis=1) & (f == d).any(axis=1)):
            continue
        f[t] = [c, a, d]
        f[u] = [d, b, c]
        done += 1
    left = int(np.count_nonzero(_degenerate_area(v, f)))
    return f, done, left


def prepare_surface(surface: Surface, **opts) -> Surface:
    """Repair a surface and require a closed, manifold, one-component, genus-0 mesh.

    Parameters
    ----------
    surface : Surface
    **opts
        Keyword options of :func:`repair_mesh` (``keep_largest_component``,
        ``fill_holes``, ``max_hole_edges``).

    Returns
    -------
    Surface
        Consistently outward-oriented, closed genus-0 surface; its history lists the
        repairs. A :class:`~shapedesc.errors.RepairWarning` is emitted when any repair
        changed the input.

    Raises
    ------
    MeshGeometryError
        Non-finite coordinates, face indices out of range, fewer than
        ``defaults.MIN_SURFACE_VERTICES`` vertices, no faces, or zero-area faces that the
        repairs could not remove.
    MeshTopologyError
        Open, non-manifold, several components, non-orientable, or genus > 0 (the
        message gives the genus and says to re-extract the surface from a label volume).
    """
    unknown = set(opts) - {"keep_largest_component", "fill_holes", "max_hole_edges"}
    if unknown:
        raise TypeError(f"prepare_surface got unknown options {sorted(unknown)}")
    _require_geometry(surface)
    _require_size(surface)
    repaired = repair_mesh(surface, **opts)
    _require_size(repaired)
    m = _measure(repaired)
    if not m.clean:
        r = m.report
        problems = describe_problems(r, fill_holes=bool(opts.get("fill_holes")),
                                     keep_largest_component=bool(opts.get("keep_largest_component")))
        done = repaired.history[len(surface.history):]
        after = f" after the safe repairs ({'; '.join(done)})" if done else ""
        text = f"{surface.source}: not a closed genus-0 surface{after}: " + "; ".join(problems)
        topological = (r["n_boundary_edges"] or r["n_nonmanifold_edges"] or r["n_nonmanifold_vertices"]
                       or r["n_components"] != 1 or r["orientation"] == "inconsistent"
                       or r["genus"] != 0)
        raise (MeshTopologyError if topological else MeshGeometryError)(text)
    done = repaired.history[len(surface.history):]
    if done:
        warnings.warn(f"{surface.source}: repaired before use: {'; '.join(done)}",
                      RepairWarning, stacklevel=2)
    return repaired


def _require_size(surface: Surface) -> None:
    if surface.n_faces == 0 or surface.n_vertices < defaults.MIN_SURFACE_VERTICES:
        raise MeshGeometryError(
            f"{surface.source}: {surface.n_vertices} vertices and {surface.n_faces} faces; a "
            f"closed surface needs at least {defaults.MIN_SURFACE_VERTICES} vertices and 4 faces. "
            "Check that the right file was given."
        )


__all__ = ["repair_mesh", "prepare_surface"]
