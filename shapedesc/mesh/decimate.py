"""Topology-preserving decimation of closed triangle meshes by batched edge collapse.

Each round picks a set of short edges far enough apart that their collapses do not
interact (no endpoint of one lies in the 1-ring of another's endpoints), keeps those
that pass the link condition and do not fold any face, and collapses them to their
midpoints.  The link condition (the endpoints' common neighbours are exactly the two
vertices opposite the edge) guarantees the collapse keeps a closed 2-manifold and its
topology (Dey, Edelsbrunner, Guha & Nekhayev 1999); the fold check keeps the embedding
locally valid.  Rounds repeat until the vertex count reaches the target or no edge
qualifies.

References
----------
T. K. Dey, H. Edelsbrunner, S. Guha and D. V. Nekhayev, "Topology preserving edge
contraction", Publications de l'Institut Mathématique (Beograd) 66(80):23-45, 1999.

H. Hoppe, T. DeRose, T. Duchamp, J. McDonald and W. Stuetzle, "Mesh optimization",
SIGGRAPH 1993, doi:10.1145/166117.166119.
"""

from __future__ import annotations

import numpy as np
from scipy import sparse

from shapedesc import defaults

__all__ = ["decimate"]


def decimate(vertices: np.ndarray, faces: np.ndarray, target_vertices: int, *,
             min_cos: float = defaults.DECIMATE_MIN_FACE_COS,
             max_rounds: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """Reduce a closed, consistently oriented manifold mesh to about ``target_vertices``.

    Parameters
    ----------
    vertices : ndarray, shape (V, 3), float64
    faces : ndarray, shape (F, 3), int
        Closed, edge- and vertex-manifold, consistently oriented.
    target_vertices : int
        Stop once the mesh has at most this many vertices (>= 4).
    min_cos : float
        A collapse is refused when it turns any remaining face's normal by more than
        arccos(min_cos).
    max_rounds : int
        Upper bound on rounds (each round collapses an independent set of edges).

    Returns
    -------
    vertices : ndarray, shape (V', 3), float64
    faces : ndarray, shape (F', 3), int64
        Same topology and orientation; V' <= target unless no edge qualified.
    """
    v = np.array(vertices, dtype=np.float64)
    f = np.array(faces, dtype=np.int64)
    target = max(int(target_vertices), 4)
    for _ in range(max_rounds):
        nv = len(v)
        if nv <= target:
            break
        v, f, n_done = _round(v, f, nv - target, min_cos)
        if n_done == 0:
            break
    return v, f


def _round(v, f, wanted, min_cos, tries=6):
    """One round: up to ``wanted`` independent, valid collapses, applied at once."""
    nv = len(v)
    # undirected edges: in a closed oriented mesh each appears once with a < b
    e = np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]])
    e = e[e[:, 0] < e[:, 1]]
    length = np.linalg.norm(v[e[:, 0]] - v[e[:, 1]], axis=1)
    rank = np.empty(len(e), np.int64)
    rank[np.argsort(length, kind="stable")] = np.arange(len(e))
    adj = sparse.coo_matrix((np.ones(2 * len(e)), (np.r_[e[:, 0], e[:, 1]],
                                                   np.r_[e[:, 1], e[:, 0]])),
                            shape=(nv, nv)).tocsr()
    # faces around each vertex (for the fold check)
    vf = sparse.coo_matrix((np.ones(3 * len(f)), (f.ravel(), np.repeat(np.arange(len(f)), 3))),
                           shape=(nv, len(f))).tocsr()
    a, b = independent_collapses(
        e, rank, adj, np.ones(len(e), bool), wanted,
        accept=lambda a, b: _no_fold(v, f, vf, a, b, min_cos), tries=tries)
    n_acc = len(a)
    if n_acc == 0:
        return v, f, 0
    v = v.copy()
    v[a] = 0.5 * (v[a] + v[b])
    remap = np.arange(nv)
    remap[b] = a
    f = remap[f]
    f = f[(f[:, 0] != f[:, 1]) & (f[:, 1] != f[:, 2]) & (f[:, 2] != f[:, 0])]
    used = np.zeros(nv, bool)
    used[f.ravel()] = True
    new_index = np.cumsum(used) - 1
    return v[used], new_index[f], n_acc


def independent_collapses(e, rank, adj, candidate, wanted, *, accept=None, tries=6):
    """Up to ``wanted`` edge collapses that can be applied at once, cheapest first.

    An edge is taken in a pass when its rank is the smallest within two rings of both
    ends (so no two taken edges share a vertex or a face), it passes the link condition
    (exactly two common neighbours, which keeps a closed manifold of the same topology;
    Dey et al. 1999), ``accept`` and the valence rule (each vertex opposite a collapsed
    edge keeps at least three edges, counting all collapses of the round). The closed
    1-rings of taken edges are then blocked, and up to ``tries`` passes fill in the rest.

    Parameters
    ----------
    e : ndarray, shape (E, 2), int
        Undirected edges; ``e[:, 1]`` is the vertex that goes.
    rank : ndarray, shape (E,), int
        Order of preference (0 = collapse first), a permutation of ``range(E)``.
    adj : scipy.sparse.csr_matrix, shape (V, V)
        Vertex adjacency of the mesh.
    candidate : ndarray, shape (E,), bool
        Edges allowed at all (modified in place).
    wanted : int
        Most collapses to return.
    accept : callable (a, b) -> ndarray of bool, optional
        Further condition on candidate edges ``(a[i], b[i])`` (e.g. no fold).
    tries : int
        Passes.

    Returns
    -------
    a, b : ndarray, shape (n,), int64
        Kept and removed vertex of each collapse (n <= wanted).

    References
    ----------
    Dey, T. K., Edelsbrunner, H., Guha, S. & Nekhayev, D. V. (1999). Topology preserving
    edge contraction. *Publ. Inst. Math. (Beograd)* 66(80), 23–45.
    """
    nv = adj.shape[0]
    degree = np.diff(adj.indptr)
    big = np.iinfo(np.int64).max
    blocked = np.zeros(nv, bool)  # closed 1-rings of accepted collapses' endpoints
    loss = np.zeros(nv, np.int64)  # edges the accepted collapses take from each vertex
    acc_a, acc_b = [], []
    n_acc = 0
    for _ in range(tries):
        candidate &= ~(blocked[e[:, 0]] | blocked[e[:, 1]])
        if not candidate.any() or n_acc >= wanted:
            break
        r = np.where(candidate, rank, big)
        vmin = np.full(nv, big)
        np.minimum.at(vmin, e[:, 0], r)
        np.minimum.at(vmin, e[:, 1], r)
        ring2 = vmin.copy()
        np.minimum.at(ring2, e[:, 0], vmin[e[:, 1]])
        np.minimum.at(ring2, e[:, 1], vmin[e[:, 0]])
        sel = np.flatnonzero(candidate & (ring2[e[:, 0]] == r) & (ring2[e[:, 1]] == r))
        if len(sel) == 0:
            break
        a, b = e[sel, 0], e[sel, 1]
        common = adj[a].multiply(adj[b]).tocsr()
        n_common = np.diff(common.indptr)
        ok = n_common == 2  # link condition
        if accept is not None:
            ok &= accept(a, b)
        # the two opposite vertices each lose an edge per collapse (several collapses
        # of a round may share one): each must keep at least 3
        rows = np.repeat(np.arange(len(a)), n_common)
        opp = common.indices
        after = degree - loss - np.bincount(opp[ok[rows]], minlength=nv)
        low = np.zeros(len(a), bool)
        np.logical_or.at(low, rows, after[opp] < 3)
        ok &= ~low
        candidate[sel[~ok]] = False
        keep_rows = ok[rows]
        a, b = a[ok], b[ok]
        if len(a) == 0:
            continue
        take = min(len(a), wanted - n_acc)
        if take < len(a):
            keep_rows &= np.cumsum(ok)[rows] <= take
        loss += np.bincount(opp[keep_rows], minlength=nv)
        a, b = a[:take], b[:take]
        acc_a.append(a)
        acc_b.append(b)
        n_acc += take
        ends = np.r_[a, b]
        blocked[ends] = True
        blocked[adj[ends].indices] = True
    if n_acc == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    return np.concatenate(acc_a).astype(np.int64), np.concatenate(acc_b).astype(np.int64)


def _no_fold(v, f, vf, a, b, min_cos):
    """Whether collapsing each (a, b) to its midpoint keeps every surviving face's
    normal within arccos(min_cos) of its old direction.  The (a, b) are independent, so
    each face belongs to at most one collapse."""
    nv = len(v)
    cid = np.full(nv, -1)
    cid[a] = np.arange(len(a))
    cid[b] = np.arange(len(a))
    mid = 0.5 * (v[a] + v[b])
    hit = np.unique(vf[np.r_[a, b]].indices)
    fh = f[hit]
    owner = np.max(cid[fh], axis=1)
    vanishing = (fh == a[owner][:, None]).any(axis=1) & (fh == b[owner][:, None]).any(axis=1)
    fh, owner = fh[~vanishing], owner[~vanishing]
    old = v[fh]
    new = old.copy()
    moving = cid[fh] >= 0
    new[moving] = mid[cid[fh][moving]]
    n_old = np.cross(old[:, 1] - old[:, 0], old[:, 2] - old[:, 0])
    n_new = np.cross(new[:, 1] - new[:, 0], new[:, 2] - new[:, 0])
    denom = np.linalg.norm(n_old, axis=1) * np.linalg.norm(n_new, axis=1)
    cos = np.divide(np.einsum("ij,ij->i", n_old, n_new), denom, out=np.full(len(fh), -1.0),
                    where=denom > 0)
    worst = np.ones(len(a))
    np.minimum.at(worst, owner, cos)
    return worst >= min_cos
