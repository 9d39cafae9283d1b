"""Multiresolution area correction: coarse corrections on icosphere grids, then the fine solve.

The centred conformal map of an elongated surface compresses its ends by factors up to
e⁹; undoing that is a smooth, large-scale motion of the whole sphere, which a descent on
the fine mesh resolves only slowly (iteration counts grow with the mesh size). We
therefore first solve the same energy on coarse geodesic grids of the sphere
(levels ``defaults.SPHERE_MULTIRES_LEVELS``) and compose the fine map with the
piecewise-linear coarse correction, a nested-grid ("cascadic") scheme in the spirit of
Hormann, Greiner & Campagna (1999) and of Praun & Hoppe (2003):

1. the grid ``G`` (icosphere of the level) gets, per face, the share of the *surface*
   area whose fine faces currently lie in it (binned by centroid; faces hit by fewer
   than ``SPHERE_MULTIRES_MIN_COUNT`` fine centroids take the density sampled at their
   centre instead), and, per vertex, the surface point it currently pulls back to — the
   coarse problem is the area/shear energy of that resampled coarse surface;
2. the coarse problem is solved from the identity by the same bijective L-BFGS descent;
3. every fine vertex is moved by the coarse piecewise-linear map (radial barycentric
   coordinates in ``G``); the move is kept only if the *fine* energy decreases, halving
   it towards the identity otherwise, so no fine face is ever flipped;
4. this is repeated while it gains more than ``SPHERE_MULTIRES_MIN_GAIN`` of the energy,
   then the fine problem is solved to convergence (:func:`.area.correct_area`).

References
----------
Hormann, K., Greiner, G. & Campagna, S. (1999). Hierarchical parametrization of
triangulated surfaces. *Proc. Vision, Modeling and Visualization*, 219–226.
Praun, E. & Hoppe, H. (2003). Spherical parametrization and remeshing. *ACM Trans.
Graph.* 22(3), 340–349. doi:10.1145/882262.882274
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..defaults import (SPHERE_MULTIRES_COARSE_ITER, SPHERE_MULTIRES_CYCLES,
                        SPHERE_MULTIRES_LEVELS, SPHERE_MULTIRES_MIN_COUNT,
                        SPHERE_MULTIRES_MIN_GAIN, SPHERE_MULTIRES_RATIO)
from ..shapes import icosphere
from .area import AreaProblem, correct_area
from .qc import sphere_face_det
from .inverse import locate_on_sphere
from .laplacian import clamped_cotangent_laplacian

__all__ = ["MultiresResult", "correct_area_multires"]


@dataclass(frozen=True)
class MultiresResult:
    """Output of :func:`correct_area_multires` (fields as :class:`.area.AreaResult`)."""

    sphere_vertices: np.ndarray
    iterations: int
    energy_start: float
    energy_end: float
    n_flipped_max: int
    levels: tuple


def _normalise(y: np.ndarray) -> np.ndarray:
    return y / np.linalg.norm(y, axis=1, keepdims=True)


def _grid(level: int):
    """Icosphere of ``level``, its clamped cotangent Laplacian and its face ``det`` values
    (the same for every correction on that level)."""
    cv, cf = icosphere(level)
    return level, cv, cf, clamped_cotangent_laplacian(cv, cf), sphere_face_det(cv, cf)


def _coarse_step(problem: AreaProblem, x: np.ndarray, e0: float, surface_vertices: np.ndarray,
                 grid) -> tuple[np.ndarray, float, int]:
    """One coarse correction on ``grid`` (from :func:`_grid`) of the map ``x`` with fine
    energy ``e0``; returns the new map, its fine energy and the coarse iterations."""
    f = problem.faces
    level, cv, cf, lap, cdet_all = grid
    det = problem.dets(x)
    share = det / det.sum()
    # 1. surface-area share per coarse face; grid positions of the fine vertices
    cen = _normalise(np.take(x, f, axis=0).mean(axis=1))  # (np.take: x[f], faster)
    ci, cw = locate_on_sphere(cv, cf, np.concatenate([cen, x]))
    fi, ti, tw = ci[:len(f)], ci[len(f):], cw[len(f):]
    count = np.bincount(fi, minlength=len(cf))
    mass = np.bincount(fi, weights=problem.a, minlength=len(cf))
    sparse = np.flatnonzero(count < SPHERE_MULTIRES_MIN_COUNT)
    ccen = _normalise(cv[cf[sparse]].mean(axis=1))
    # resampled coarse surface: pull-back of the grid vertices through the current map
    gi, gw = locate_on_sphere(x, f, np.concatenate([cv, ccen]))
    vi, w, gi = gi[:len(cv)], gw[:len(cv)], gi[len(cv):]
    if len(sparse):
        mass[sparse] = problem.a[gi] / share[gi] * (cdet_all[sparse] / cdet_all.sum())
    cpos = np.einsum("nk,nki->ni", w, surface_vertices[f[vi]])
    coarse = AreaProblem(cpos, cf, shear_weight=problem.w,
                         laplacian=lap,
                         what=f"{problem.what} (level-{level} grid)", area_shares=mass)
    # 2. coarse solve from the identity
    res = correct_area(coarse, cv, max_iter=SPHERE_MULTIRES_COARSE_ITER, raise_on_budget=False)
    # 3. compose: fine vertices through the coarse piecewise-linear map
    disp = res.sphere_vertices - cv
    t = 1.0
    for _ in range(8):
        x_new = _normalise(np.einsum("nk,nki->ni", tw, np.take(cv + t * disp, cf[ti], axis=0)))
        e_new = problem.energy(x_new)
        if e_new < e0:
            return x_new, e_new, res.iterations
        t *= 0.5
    return x, e0, res.iterations


def correct_area_multires(problem: AreaProblem, x0: np.ndarray, *, surface_vertices: np.ndarray,
                          levels=SPHERE_MULTIRES_LEVELS, cycles: int = SPHERE_MULTIRES_CYCLES,
                          **fine_options) -> MultiresResult:
    """Coarse-grid corrections (levels with at most ``V/SPHERE_MULTIRES_RATIO`` vertices), then the fine solve.

    Parameters
    ----------
    problem : AreaProblem
        Fine problem.
    x0 : ndarray, shape (V, 3)
        Bijective starting map (unit vectors).
    surface_vertices : ndarray, shape (V, 3)
        The surface the problem was built from (for resampling the grids).
    levels : sequence of int
        Icosphere levels tried, coarse to fine.
    cycles : int
        Largest number of corrections per level.
    **fine_options
        Passed to :func:`.area.correct_area` for the fine solve.
    """
    x = np.array(x0, dtype=np.float64)
    e_start = problem.energy(x)
    e = e_start
    used = []
    iters = 0
    for level in levels:
        if 10 * 4**level + 2 > problem.n / SPHERE_MULTIRES_RATIO:
            break
        grid = _grid(level)
        for _ in range(cycles):
            x_new, e_new, it = _coarse_step(problem, x, e, surface_vertices, grid)
            iters += it
            gain = (e - e_new) / max(e, 1e-300)
            if not e_new < e:
                break
            x, e = x_new, e_new
            used.append(int(level))
            if gain < SPHERE_MULTIRES_MIN_GAIN:
                break
    fine = correct_area(problem, x, **fine_options)
    return MultiresResult(fine.sphere_vertices, iters + fine.iterations, e_start,
                          fine.energy_end, fine.n_flipped_max, tuple(used))
