"""Canonical pose: translation, scale and rotation from the first-order ellipsoid.

The degree-1 part of a spherical-harmonic surface x(u) = Σ c_lm Y_lm(u) is a linear map
of the unit sphere, x₁(u) = A u: an ellipsoid.  Writing A = U S Vᵀ (singular value
decomposition), rotating the *object* by Uᵀ and the *parameter sphere* by V makes the
degree-1 block diagonal, x₁'(u) = S u, so the ellipsoid's axes lie along x, y, z in
decreasing length and the parameter's poles sit on its axis ends (Brechbühler, Gerig &
Kübler 1995).  Both rotations are proper (det = +1).

Sign rule (deterministic, documented): the SVD fixes U and V only up to flipping two
axes together.  Axis 1 and axis 2 are each flipped (together with axis 3, which keeps
both rotations proper) so that the area-weighted third central moment of the surface
along that axis is positive — the object's heavier tail points to +x and +y.  When a
third moment is within ``defaults.POSE_SKEW_TOLERANCE`` of zero relative to the axis
length cubed, the sign is ambiguous and this is reported.

Per-degree energies do not depend on any of this: they are invariant to both rotations.
The pose matters for the canonical coefficients (shape-space PCA) and for the
correspondence reconstructions used by point-wise statistics.

References
----------
C. Brechbühler, G. Gerig, O. Kübler, "Parametrization of closed surfaces for 3-D shape
description", Computer Vision and Image Understanding 61(2):154–170, 1995,
doi:10.1006/cviu.1995.1013.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from shapedesc import defaults

#: Real orthonormal degree-1 harmonics are √(3/4π)·(y, z, x) at flat indices 1, 2, 3
#: (m = −1, 0, +1); this maps coordinate axis j to its flat index.
_AXIS_TO_INDEX = (3, 1, 2)
_Y1 = math.sqrt(3.0 / (4.0 * math.pi))
_Y00 = 1.0 / math.sqrt(4.0 * math.pi)


def degree1_matrix(values: np.ndarray) -> np.ndarray:
    """The 3×3 linear map A with x₁(u) = A u, from real coefficients.

    Parameters
    ----------
    values : ndarray, shape ((L+1)², 3)
        Real orthonormal coefficients of x, y, z (columns), flat index l² + l + m.

    Returns
    -------
    ndarray, shape (3, 3)
        ``A[i, j]``: coordinate i's response to parameter axis j (mm).
    """
    a = np.empty((3, 3))
    for j, idx in enumerate(_AXIS_TO_INDEX):
        a[:, j] = _Y1 * values[idx, :]
    return a


@dataclass(frozen=True)
class Pose:
    """A canonical pose and how it was obtained.

    Attributes
    ----------
    translation_mm : ndarray, shape (3,)
        Centre removed (degree-0 term: c₀₀·Y₀₀), mm, in input coordinates.
    object_rotation : ndarray, shape (3, 3)
        U: canonical coordinates are x' = Uᵀ (x − t).  Columns are the ellipsoid axes
        in input coordinates, longest first.
    parameter_rotation : ndarray, shape (3, 3)
        V: canonical parameter u' relates to the map's parameter by u = V u'.
    scale_method : str
        "none", "volume" (cube root of enclosed volume) or "area" (square root of area).
    scale_mm : float
        The length the normalised energies are divided by (squared); 1 for "none".
    ellipsoid_semi_axes_mm : ndarray, shape (3,)
        Singular values of A: semi-axes of the first-order ellipsoid, decreasing.
    unstable : bool
        True when two semi-axes are within ``defaults.POSE_AXIS_TOLERANCE`` (relative)
        or a sign is ambiguous; the rotation is then not reproducible across subjects.
    warnings : tuple of str
        Human-readable reasons for ``unstable``.
    """

    translation_mm: np.ndarray
    object_rotation: np.ndarray
    parameter_rotation: np.ndarray
    scale_method: str
    scale_mm: float
    ellipsoid_semi_axes_mm: np.ndarray
    unstable: bool = False
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict:
        return {
            "translation_mm": self.translation_mm.tolist(),
            "object_rotation": self.object_rotation.tolist(),
            "parameter_rotation": self.parameter_rotation.tolist(),
            "scale_method": self.scale_method,
            "scale_mm": self.scale_mm,
            "ellipsoid_semi_axes_mm": self.ellipsoid_semi_axes_mm.tolist(),
            "unstable": self.unstable,
            "warnings": list(self.warnings),
            "convention": "x_canonical = object_rotation.T @ (x - translation_mm); "
                          "u_map = parameter_rotation @ u_canonical",
        }

    @classmethod
    def from_dict(cls, d: dict) -> "Pose":
        return cls(
            translation_mm=np.asarray(d["translation_mm"], float),
            object_rotation=np.asarray(d["object_rotation"], float),
            parameter_rotation=np.asarray(d["parameter_rotation"], float),
            scale_method=str(d["scale_method"]),
            scale_mm=float(d["scale_mm"]),
            ellipsoid_semi_axes_mm=np.asarray(d["ellipsoid_semi_axes_mm"], float),
            unstable=bool(d["unstable"]),
            warnings=tuple(d["warnings"]),
        )


def scale_length(method: str, *, volume_mm3: float, area_mm2: float) -> float:
    """Length used for scale normalisation (mm).

    Parameters
    ----------
    method : {"none", "volume", "area"}
    volume_mm3, area_mm2 : float
        Enclosed volume and area of the input surface.
    """
    if method not in defaults.SCALE_CHOICES:
        raise ValueError(f"scale must be one of {', '.join(defaults.SCALE_CHOICES)}; got {method!r}")
    if method == "none":
        return 1.0
    if method == "volume":
        if not volume_mm3 > 0:
            raise ValueError(f"cannot normalise by volume: enclosed volume is {volume_mm3} mm³ "
                             "(is the surface closed and outward-oriented?)")
        return float(volume_mm3 ** (1.0 / 3.0))
    if not area_mm2 > 0:
        raise ValueError(f"cannot normalise by area: area is {area_mm2} mm²")
    return float(math.sqrt(area_mm2))


def canonical_pose(values: np.ndarray, *, surface_vertices: np.ndarray,
                   surface_weights: np.ndarray, scale_method: str = defaults.DEFAULT_SCALE,
                   volume_mm3: float, area_mm2: float) -> Pose:
    """Compute the canonical pose of a fitted surface.

    Parameters
    ----------
    values : ndarray, shape ((L+1)², 3)
        Real orthonormal coefficients of x, y, z fitted in input coordinates (mm).
    surface_vertices : ndarray, shape (V, 3)
        Input vertices (mm), for the sign rule.
    surface_weights : ndarray, shape (V,)
        Vertex area shares (sum 1), for the sign rule's third moments.
    scale_method : {"none", "volume", "area"}
    volume_mm3, area_mm2 : float
        Of the input surface.

    Returns
    -------
    Pose
    """
    values = np.asarray(values, dtype=np.float64)
    if values.ndim != 2 or values.shape[1] != 3 or values.shape[0] < 4:
        raise ValueError(f"need real coefficients of shape ((L+1)², 3) with L >= 1, got {values.shape}")
    translation = values[0] * _Y00
    a = degree1_matrix(values)
    u, s, vt = np.linalg.svd(a)
    v = vt.T
    # Make both rotations proper. A is orientation-preserving for an outward surface and
    # an orientation-preserving map, so det(U)det(V) = sign(det A) = +1 normally.
    if np.linalg.det(u) < 0:
        u[:, 2] *= -1
        v[:, 2] *= -1
    warn: list[str] = []
    if np.linalg.det(v) < 0:
        # det A < 0: the first-order ellipsoid is traversed with reversed orientation
        # (possible for strongly bent shapes even when the whole map preserves it).
        # Keep both rotations proper: reverse V's third axis, so the canonical degree-1
        # block is diag(s1, s2, -s3); record it.
        v[:, 2] *= -1
        warn.append("first-order ellipsoid has reversed orientation (det A < 0); "
                    "canonical degree-1 block is diag(s1, s2, -s3)")
    centred = (surface_vertices - translation) @ u
    length3 = float(s[0]) ** 3
    for k in (0, 1):
        m3 = float(np.sum(surface_weights * centred[:, k] ** 3))
        if abs(m3) < defaults.POSE_SKEW_TOLERANCE * length3:
            warn.append(f"sign of axis {k + 1} ambiguous (third moment {m3:.3g} mm³ is near zero)")
        if m3 < 0:
            u[:, [k, 2]] *= -1
            v[:, [k, 2]] *= -1
            centred[:, [k, 2]] *= -1
    rel = (s[:-1] - s[1:]) / s[:-1]
    for k in np.flatnonzero(rel < defaults.POSE_AXIS_TOLERANCE):
        warn.append(f"ellipsoid axes {k + 1} and {k + 2} within {100 * rel[k]:.1f} % "
                    f"({s[k]:.3g} vs {s[k + 1]:.3g} mm): rotation is unstable")
    return Pose(
        translation_mm=translation,
        object_rotation=u,
        parameter_rotation=v,
        scale_method=scale_method,
        scale_mm=scale_length(scale_method, volume_mm3=volume_mm3, area_mm2=area_mm2),
        ellipsoid_semi_axes_mm=s,
        unstable=bool(warn),
        warnings=tuple(warn),
    )
