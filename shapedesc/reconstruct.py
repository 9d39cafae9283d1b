"""Surfaces from spherical-harmonic coefficients, on the correspondence icosphere.

Every reconstruction is sampled at the vertices of the same subdivided icosahedron
(``correspondence_sphere(level)``), so vertex k is the same point of the canonical
parameter sphere for every subject: this is the point-to-point correspondence the
point-wise statistics use.  The icosphere is trimesh's (deterministic vertex order);
level K has 10·4^K + 2 vertices (level 4: 2,562; level 5: 10,242).

Optional heat-kernel smoothing multiplies degree-l coefficients by exp(−l(l+1)σ), the
spectral form of heat diffusion on the unit sphere for time σ (Chung et al. 2007).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from shapedesc import defaults


@lru_cache(maxsize=8)
def _icosphere(level: int) -> tuple[np.ndarray, np.ndarray]:
    import trimesh

    m = trimesh.creation.icosphere(subdivisions=level, radius=1.0)
    v = np.asarray(m.vertices, dtype=np.float64)
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    f = np.asarray(m.faces, dtype=np.int64)
    v.setflags(write=False)
    f.setflags(write=False)
    return v, f


def correspondence_sphere(level: int = defaults.DEFAULT_ICOSPHERE_LEVEL) -> tuple[np.ndarray, np.ndarray]:
    """Unit-sphere vertices (V, 3) and outward faces (F, 3) of the subdivided icosahedron."""
    level = int(level)
    if not 0 <= level <= 7:
        raise ValueError(f"icosphere level must be between 0 and 7 (7 has 163,842 vertices), got {level}")
    return _icosphere(level)


def reconstruct_values(values: np.ndarray, lmax: int, *, degree: int | None = None,
                       smoothing: float = 0.0,
                       level: int = defaults.DEFAULT_ICOSPHERE_LEVEL) -> tuple[np.ndarray, np.ndarray]:
    """Evaluate real coefficients of x, y, z on the correspondence icosphere.

    Parameters
    ----------
    values : ndarray, shape ((lmax+1)², 3)
        Real orthonormal coefficients (mm).
    lmax : int
    degree : int, optional
        Truncate at this degree (<= lmax).
    smoothing : float
        Heat-kernel bandwidth σ >= 0.
    level : int
        Icosphere subdivision level.

    Returns
    -------
    vertices : ndarray, shape (V, 3), mm
    faces : ndarray, shape (F, 3)
    """
    from shapedesc.harmonics import basis, heat_kernel_factors

    values = np.asarray(values, dtype=np.float64)
    if values.shape[0] != (lmax + 1) ** 2:
        raise ValueError(f"coefficients have {values.shape[0]} rows; degree {lmax} needs {(lmax + 1) ** 2}")
    deg = lmax if degree is None else int(degree)
    if not 0 <= deg <= lmax:
        raise ValueError(f"degree must be between 0 and the file's degree {lmax}, got {deg}")
    n = (deg + 1) ** 2
    c = values[:n] * heat_kernel_factors(deg, smoothing)[:, None]
    u, faces = correspondence_sphere(level)
    return basis(deg, u) @ c, faces


@lru_cache(maxsize=8)
def _icosphere_loc(level: int) -> np.ndarray:
    from shapedesc.harmonics.pointsets import _nufft_loc

    loc = _nufft_loc(correspondence_sphere(level)[0])
    loc.setflags(write=False)
    return loc


def _measure_surface(values: np.ndarray, lmax: int, level: int) -> tuple[np.ndarray, np.ndarray]:
    """``reconstruct_values(values, lmax, level=level)`` through ducc0's NUFFT synthesis.

    Same surface to ``defaults.SH_NUFFT_EPSILON`` relative to the coefficients (~1e-13;
    tests/test_reconstruct.py), at a fraction of the cost of the dense basis; describe
    measures the fitted volume and area on it.
    """
    from shapedesc.harmonics.pointsets import _nufft_synthesis

    faces = correspondence_sphere(level)[1]
    return _nufft_synthesis(_icosphere_loc(level), np.asarray(values, dtype=np.float64), lmax), faces


def reconstruct(coefficients, *, degree: int | None = None, smoothing: float = 0.0,
                level: int = defaults.DEFAULT_ICOSPHERE_LEVEL,
                pose: str = "canonical") -> tuple[np.ndarray, np.ndarray]:
    """Surface from coefficients on the correspondence icosphere.

    Parameters
    ----------
    coefficients : CoefficientRecord or SHCoefficients
        A record from ``shapedesc.descriptors.read_coefficients`` (``pose`` chooses
        canonical or native coordinates) or real ``SHCoefficients`` with 3 channels.
    degree, smoothing, level
        See ``reconstruct_values``.
    pose : {"canonical", "native"}
        Only for records: canonical pose (centred, rotated, mm) or the input's coordinates.

    Returns
    -------
    vertices : ndarray, shape (V, 3), mm
    faces : ndarray, shape (F, 3)
    """
    from shapedesc.descriptors import CoefficientRecord

    if isinstance(coefficients, CoefficientRecord):
        sh = coefficients.coefficients(pose)
    else:
        sh = coefficients
    if getattr(sh, "kind", "real") != "real":
        sh = sh.to_real()
    values = np.asarray(sh.values, dtype=np.float64)
    if values.ndim != 2 or values.shape[1] != 3:
        raise ValueError(f"need coefficients of x, y, z (3 channels), got shape {values.shape}")
    return reconstruct_values(values, int(sh.lmax), degree=degree, smoothing=smoothing, level=level)
