"""Spherical harmonics: basis, Legendre recurrences, transforms, least-squares fits, rotation.

Conventions (also stored on every :class:`SHCoefficients`): orthonormal on the unit
sphere (∫|Y|² dΩ = 1); complex Y_l^m with the Condon–Shortley phase; real basis
m > 0 ↔ √2(-1)^m Re Y_l^m, m < 0 ↔ √2(-1)^m Im Y_l^|m|, m = 0 ↔ Y_l^0 (equal to
pyshtools' real 'ortho' harmonics with csphase=1); one flat ordering l*l + l + m;
θ colatitude from +z, φ longitude from +x towards +y.
"""

from .sh_basis import basis, cartesian_to_spherical, degrees_orders, sh_index, spherical_to_cartesian
from .coefficients import SHCoefficients, evaluate, heat_kernel_factors
from .conversions import complex_to_real, degree_energy, real_to_complex
from .lsq import SHFit, fit
from .associated_legendre import legendre, legendre_all, legendre_index
from .rotation import (
    euler_to_rotation_matrix,
    rotate_coefficients,
    rotation_matrix_to_euler,
    wigner_D,
    wigner_small_d,
)
from .transforms import GLGrid, gl_analysis, gl_grid, gl_synthesis

__all__ = [
    "basis", "cartesian_to_spherical", "degrees_orders", "sh_index", "spherical_to_cartesian",
    "SHCoefficients", "evaluate", "heat_kernel_factors",
    "complex_to_real", "degree_energy", "real_to_complex",
    "SHFit", "fit",
    "legendre", "legendre_all", "legendre_index",
    "euler_to_rotation_matrix", "rotate_coefficients", "rotation_matrix_to_euler",
    "wigner_D", "wigner_small_d",
    "GLGrid", "gl_analysis", "gl_grid", "gl_synthesis",
]
