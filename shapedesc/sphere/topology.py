"""Input checks for sphere mapping: a closed, consistently oriented, genus-0 triangle mesh.

A map to the sphere exists only for a closed orientable surface of genus 0 (Euler
characteristic χ = V − E + F = 2, one component). Anything else is refused with the
reason, never mapped silently.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ..errors import MeshGeometryError, MeshTopologyError
from ..mesh.measures import enclosed_volume

__all__ = ["check_sphere_topology"]


def check_sphere_topology(vertices: np.ndarray, faces: np.ndarray, *, source: str = "<memory>"
                          ) -> tuple[np.ndarray, np.ndarray]:
    """Validate a mesh for sphere mapping; return contiguous float64/int64 copies.

    Parameters
    ----------
    vertices : array_like, shape (V, 3)
        Coordinates (mm), finite.
    faces : array_like, shape (F, 3)
        Vertex indices, counter-clockwise seen from outside.
    source : str
        Name used in error messages (file path or generator name).

    Raises
    ------
    MeshGeometryError
        Wrong shapes, non-finite coordinates, out-of-range indices, unused vertices.
    MeshTopologyError
        Open boundary, non-manifold edge, inconsistent orientation, more than one
        component, Euler characteristic ≠ 2 (genus > 0), or faces oriented inward.
    """
    v = np.ascontiguousarray(vertices, dtype=np.float64)
    f = np.asarray(faces)
    if v.ndim != 2 or v.shape[1] != 3 or len(v) < 4:
        raise MeshGeometryError(f"{source}: vertices must have shape (V >= 4, 3), got {v.shape}")
    if f.ndim != 2 or f.shape[1] != 3 or len(f) < 4:
        raise MeshGeometryError(f"{source}: faces must have shape (F >= 4, 3), got {f.shape}")
    if not np.issubdtype(f.dtype, np.integer):
        raise MeshGeometryError(f"{source}: faces must be integers, got dtype {f.dtype}")
    f = np.ascontiguousarray(f, dtype=np.int64)
    if not np.all(np.isfinite(v)):
        raise MeshGeometryError(f"{source}: {int((~np.isfinite(v)).any(axis=1).sum())} vertices "
                                "have non-finite coordinates; repair or drop them first")
    if f.min() < 0 or f.max() >= len(v):
        raise MeshGeometryError(f"{source}: face indices must lie in [0, {len(v) - 1}], "
                                f"found [{f.min()}, {f.max()}]")
    if np.any((f[:, 0] == f[:, 1]) | (f[:, 1] == f[:, 2]) | (f[:, 0] == f[:, 2])):
        raise MeshGeometryError(f"{source}: some faces repeat a vertex; remove degenerate faces")
    used = np.zeros(len(v), dtype=bool)
    used[f.ravel()] = True
    if not used.all():
        raise MeshGeometryError(f"{source}: {int((~used).sum())} vertices belong to no face; "
                                "drop unreferenced vertices before mapping")
    nv = np.int64(len(v))
    i = np.concatenate([f[:, 0], f[:, 1], f[:, 2]])
    j = np.concatenate([f[:, 1], f[:, 2], f[:, 0]])
    directed = np.sort(i * nv + j)  # 1-D keys: much faster than unique rows
    if np.any(directed[1:] == directed[:-1]):
        raise MeshTopologyError(f"{source}: faces are not consistently oriented (a directed edge "
                                "occurs twice); orient the faces coherently first")
    und, counts = np.unique(np.minimum(i, j) * nv + np.maximum(i, j), return_counts=True)
    if np.any(counts == 1):
        raise MeshTopologyError(f"{source}: surface is open ({int((counts == 1).sum())} boundary "
                                "edges); only closed surfaces can be mapped to the sphere — "
                                "close the holes first")
    if np.any(counts > 2):
        raise MeshTopologyError(f"{source}: {int((counts > 2).sum())} non-manifold edges (shared "
                                "by more than two faces); repair the mesh first")
    ea, eb = und // nv, und % nv
    adj = sp.coo_matrix((np.ones(len(und)), (ea, eb)), shape=(len(v),) * 2)
    n_comp, _ = connected_components(adj, directed=False)
    if n_comp != 1:
        raise MeshTopologyError(f"{source}: mesh has {n_comp} connected components; map each "
                                "structure separately")
    chi = len(v) - len(und) + len(f)  # Euler characteristic V − E + F
    if chi != 2:
        raise MeshTopologyError(f"{source}: Euler characteristic is {chi} (genus "
                                f"{(2 - chi) / 2:g}); only genus-0 surfaces (χ = 2) map to the "
                                "sphere — fill handles/tunnels first")
    if enclosed_volume(v, f) <= 0:
        raise MeshTopologyError(f"{source}: faces are oriented inward (enclosed volume <= 0); "
                                "reverse the face order (outward normals expected)")
    return v, f
