"""Genus-0 surface → unit sphere: conformal map, Möbius centring, area correction, QC, inverse.

Public interface::

    map_to_sphere(vertices, faces, *, shear_weight=..., source="<memory>") -> SphereMap
    SphereMap, SphereMapQC
    locate_on_sphere(sphere_vertices, faces, points) -> (face_index, barycentric)
    pull_back(sphere_map, surface_vertices, points) -> (n, 3) surface positions

See :mod:`.api` for the chain and :mod:`.conformal`, :mod:`.hierarchy` (start for
surfaces whose conformal map crowds), :mod:`.mobius`, :mod:`.area`, :mod:`.multires`,
:mod:`.linsolve` for the methods and their references.
"""

from .api import SphereMap, SphereMapQC, map_to_sphere
from .inverse import locate_on_sphere, pull_back

__all__ = ["map_to_sphere", "SphereMap", "SphereMapQC", "locate_on_sphere", "pull_back"]
