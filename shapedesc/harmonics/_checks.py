"""Input validation shared by the harmonics modules (private).

Public functions call these and then hand clean arrays to private workers.  Every
message repeats the bad value and says what to do.
"""

from __future__ import annotations

import operator

import numpy as np

from shapedesc import defaults

KINDS = ("real", "complex")


def check_degree(value, name: str = "lmax") -> int:
    """Return ``value`` as a non-negative Python int or raise ValueError.

    Booleans and floats (even integral ones such as ``2.0``) are refused so that a
    degree computed by accident in floating point is noticed.
    """
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"{name} must be a non-negative integer, got the boolean {value!r}")
    try:
        out = operator.index(value)
    except TypeError:
        raise ValueError(
            f"{name} must be a non-negative integer, got {value!r} ({type(value).__name__}); "
            "pass an int"
        ) from None
    if out < 0:
        raise ValueError(f"{name} must be a non-negative integer, got {out}")
    return int(out)


def check_order(value, name: str = "m") -> int:
    """Return ``value`` as a Python int (any sign) or raise ValueError."""
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"{name} must be an integer, got the boolean {value!r}")
    try:
        return int(operator.index(value))
    except TypeError:
        raise ValueError(
            f"{name} must be an integer, got {value!r} ({type(value).__name__}); pass an int"
        ) from None


def check_kind(kind) -> str:
    if kind not in KINDS:
        raise ValueError(f"kind must be 'real' or 'complex', got {kind!r}")
    return kind


def n_coefficients(lmax: int) -> int:
    """Number of (l, m) pairs up to degree ``lmax``: (lmax + 1)**2."""
    return (lmax + 1) ** 2


def lmax_from_count(count: int, what: str = "coefficient array") -> int:
    """Degree whose flat (l*l + l + m) layout has ``count`` rows, or ValueError."""
    lmax = int(round(np.sqrt(count))) - 1
    if lmax < 0 or (lmax + 1) ** 2 != count:
        raise ValueError(
            f"{what} has {count} rows, which is not (lmax+1)**2 for any lmax; "
            "give all degrees 0..lmax in the order l*l + l + m"
        )
    return lmax


def check_points(points, name: str = "points") -> np.ndarray:
    """Validate unit vectors ``(n, 3)`` and return them as float64, renormalised.

    Vectors whose length differs from 1 by more than ``defaults.UNIT_VECTOR_TOL`` are
    refused (they are probably not sphere positions); within the tolerance they are
    divided by their length.
    """
    p = np.asarray(points, dtype=np.float64)
    if p.ndim == 1 and p.shape[0] == 3:
        p = p[None, :]
    if p.ndim != 2 or p.shape[1] != 3:
        raise ValueError(f"{name} must have shape (n, 3) (unit vectors), got shape {p.shape}")
    if not np.all(np.isfinite(p)):
        bad = int(np.count_nonzero(~np.isfinite(p).all(axis=1)))
        raise ValueError(f"{name} holds {bad} rows with NaN or infinite coordinates; remove them")
    r = np.sqrt(np.einsum("ij,ij->i", p, p))
    dev = np.abs(r - 1.0)
    if p.shape[0] and dev.max() > defaults.UNIT_VECTOR_TOL:
        i = int(np.argmax(dev))
        raise ValueError(
            f"{name} must be unit vectors: row {i} has length {r[i]:.9g} "
            f"(tolerance {defaults.UNIT_VECTOR_TOL:g}); project the points onto the sphere first"
        )
    return p / r[:, None]


def check_rotation(R, name: str = "R") -> np.ndarray:
    """Validate a proper 3-D rotation matrix (orthogonal, determinant +1)."""
    R = np.asarray(R, dtype=np.float64)
    if R.shape != (3, 3):
        raise ValueError(f"{name} must be a 3x3 rotation matrix, got shape {R.shape}")
    if not np.all(np.isfinite(R)):
        raise ValueError(f"{name} holds NaN or infinite entries: {R.tolist()}")
    err = np.abs(R.T @ R - np.eye(3)).max()
    if err > defaults.ROTATION_ORTHOGONALITY_TOL:
        raise ValueError(
            f"{name} is not orthogonal (max |R^T R - I| = {err:.3g}, tolerance "
            f"{defaults.ROTATION_ORTHOGONALITY_TOL:g}); orthonormalise it (e.g. by SVD) first"
        )
    det = np.linalg.det(R)
    if det < 0:
        raise ValueError(
            f"{name} has determinant {det:.6g}: it is a reflection, not a rotation; "
            "flip one axis to make the determinant +1"
        )
    return R
