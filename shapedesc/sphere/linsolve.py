"""Sparse direct solves: one real LU factorisation, reused for every right-hand side.

Solver choice
-------------
SciPy ships SuperLU (``scipy.sparse.linalg.splu``); CHOLMOD is not a dependency. The
matrices here (pinned Laplacians, the Beltrami-weighted Laplacian, the preconditioner
``L + εM``) are real, symmetric and diagonally dominant, so we

* factorise **once** in real arithmetic and solve all coordinates together
  (a ``(V, 2)`` or ``(V, 3)`` right-hand side). Writing the two plane coordinates as one
  complex vector would double the work per entry for the same sparsity (complex LU);
  the benchmark measures the difference (1.5x at 20k vertices);
* order the columns with minimum degree on ``AᵀA + A`` (``defaults.SPHERE_LU_ORDERING``,
  ``MMD_AT_PLUS_A``) **and** run SuperLU in ``SymmetricMode`` (the mode its user guide
  pairs with that ordering for matrices of symmetric structure and a small diagonal
  pivot threshold, from memory of the SuperLU user's guide §2.4). The two settings only
  work together. Measured (``benchmarks/sphere_map.py`` and by hand, CPU s to factorise
  the reduced clamped-cotangent Laplacian, one core; fill = nnz(L) + nnz(U)):

  ======================  =========  =========  ==============  ================
  matrix                  COLAMD     MMD, sym.  MMD, non-sym.   MMD non-sym., fill
  ======================  =========  =========  ==============  ================
  MNI putamen, 4,964 V    0.03 s     0.016 s    0.24 s          214 k
  tube (icosphere), 20 k  0.37 s     0.17 s     0.21 s          1.85 M
  same, vertices shuffled —          —          48 s            2.1 M
  MNI WM hemisphere, 40 k 0.64 s     0.27 s     57 s            2.3 M
  tube (icosphere), 161 k 6.9 s      2.6 s      3.3 s           20 M
  ======================  =========  =========  ==============  ================

  Without ``SymmetricMode`` the fill stays small but the factorisation becomes extremely
  slow unless the vertex numbering happens to be geometric (icosphere meshes are;
  marching-cubes and shuffled meshes are not); our reading, not verified in the SuperLU
  source, is that the non-symmetric mode post-orders the symmetric ordering by the
  column elimination tree of AᵀA, which breaks up the supernodes. That
  is the "MMD_AT_PLUS_A is a trap" measurement we were given (30x on such a mesh; 200x
  here on the hemisphere). With ``SymmetricMode`` the same ordering is 2-3x faster than
  COLAMD and has half its fill on every mesh we tried;
* set ``diag_pivot_thresh`` = 0 (no row interchanges: the matrices are diagonally
  dominant, so the diagonal pivots are safe and the symmetric ordering is kept).

References
----------
Li, X. S. (2005). An overview of SuperLU. *ACM Trans. Math. Softw.* 31(3), 302–325.
doi:10.1145/1089014.1089017
Davis, T. A., Gilbert, J. R., Larimore, S. I. & Ng, E. G. (2004). A column approximate
minimum degree ordering algorithm. *ACM Trans. Math. Softw.* 30(3), 353–376.
doi:10.1145/1024074.1024079
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..defaults import SPHERE_LU_ORDERING
from ..errors import ConvergenceError

__all__ = ["factorise"]


def factorise(matrix: sp.spmatrix, *, what: str, ordering: str = SPHERE_LU_ORDERING):
    """Real sparse LU of ``matrix`` (SuperLU, given column ordering); returns ``solve(b)``.

    Parameters
    ----------
    matrix : sparse matrix, shape (n, n), real
    what : str
        Surface and stage for error messages.
    ordering : str
        SuperLU ``permc_spec`` (default ``defaults.SPHERE_LU_ORDERING``).

    Returns
    -------
    callable
        ``solve(b)`` for ``b`` of shape (n,) or (n, k), real; raises
        :class:`~shapedesc.errors.ConvergenceError` on a singular matrix or a non-finite
        solution.
    """
    A = sp.csc_matrix(matrix, dtype=np.float64)
    try:
        lu = spla.splu(A, permc_spec=ordering, diag_pivot_thresh=0.0,
                       options={"SymmetricMode": True})
    except RuntimeError as exc:  # "Factor is exactly singular"
        raise ConvergenceError(f"{what}: sparse LU factorisation failed ({exc}); the mesh "
                               "may have degenerate or disconnected parts") from exc

    def solve(b: np.ndarray) -> np.ndarray:
        x = lu.solve(np.ascontiguousarray(b, dtype=np.float64))
        if not np.all(np.isfinite(x)):
            raise ConvergenceError(f"{what}: linear solve gave non-finite values; the mesh "
                                   "may have degenerate triangles")
        return x

    solve.lu = lu
    return solve
