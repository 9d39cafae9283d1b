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
* order the columns with the ordering in ``defaults.SPHERE_LU_ORDERING``. We measured
  both on these matrices (``benchmarks/sphere_map.py``, reduced cotangent Laplacian of a
  20,252-vertex mesh): ``MMD_AT_PLUS_A`` (minimum degree on AᵀA + A, the natural choice
  for a symmetric matrix) gave 1.85 M factor entries and 0.26 s, COLAMD 3.35 M and
  0.40 s; the "MMD_AT_PLUS_A is a trap" report we were given did not reproduce here with
  a symmetric, diagonally dominant matrix (it may hold for the row-replaced,
  unsymmetric pinned form ``L`` with identity rows, which we never build: pinned
  vertices are eliminated, keeping ``L_ff`` symmetric);
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
                       options={"SymmetricMode": False})
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
