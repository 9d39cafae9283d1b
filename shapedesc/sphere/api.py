"""``map_to_sphere``: the whole sphere-mapping chain with its QC record.

conformal initial map (:mod:`.conformal`) → Möbius centring (:mod:`.mobius`) →
area/shear correction (:mod:`.area`, :mod:`.multires`) → QC (:mod:`.qc`).

When the centred conformal map is crowded below double precision (a flipped face after
the harmonic step or the stereographic projection, or a face whose ``det`` is below
``SPHERE_MIN_REL_DET`` of the mean — cheap to check, one solve), the chain switches once,
without retries, to the coarse-to-fine start of :mod:`.hierarchy` (coarsen, Tutte map of
the coarse surface, bijective vertex splits); ``SphereMap.parameters["initial_map"]`` and
``SphereMapQC.initial_map`` record which start was used, and
``parameters["conformal_attempt"]`` what the conformal attempt found.

Flips after the stereographic projection count as crowding too, even when the pole
correction then repairs them: the acceptance asks for 0 flipped triangles at *every*
stage, and a flip there means the puncture's neighbourhood is crowded to the edge of
double precision. The MNI left caudate is such a case (2 flips after projection, 0 after
the pole correction, smallest ``det`` 1.6e-12 of the mean, just above
``SPHERE_MIN_REL_DET``); measured, the two starts give the same map (conformal:
SD 0.053, 1st/99th pct −0.20/0.09, 15.6°; coarse-to-fine: SD 0.055, −0.21/0.10, 15.6°;
the two maps 0.7° apart on average after the best rotation), so the strict rule costs
about a second there and nothing in quality. That the starts agree is what makes
subjects that took different starts comparable; it holds because the coarse-to-fine
start uses the pure area energy on its coarse levels (see :mod:`.hierarchy`; with shear
there, elongated shapes went to a different, "winding" minimum).

The map depends only on the intrinsic geometry of the surface (edge lengths, angles,
areas) and on the face order: rotating or translating the surface leaves the sphere
positions unchanged (bit for bit up to the round-off of the rotated coordinates), so the
parameterisation is canonical up to a rotation of the sphere, as the rotation-invariant
spectra require. No random numbers and no threads are used, so the same input gives a
bit-identical map.

Strongly sheared maps
---------------------
A thin neck (or flange) of a structure must be sheared strongly by any area-preserving
sphere map: the loops around the neck are short on the surface but must enclose the
sphere area of the part beyond it, and on the sphere a loop enclosing the share ``s`` of
the area is at least ``4π·R·sqrt(s(1 − s))`` long (spherical isoperimetric inequality;
Schmidt 1943). There the shear penalty is nearly flat (its bounded branch, see
:mod:`.area`), so the map is not unique: how the sheared band twists is left to the
solver's path. The QC therefore reports the share of the surface area whose faces are
stretched more than ``SPHERE_SHEARED_ANISOTROPY`` (10) times more in one direction than
in the other, and warns above ``SPHERE_SHEARED_SHARE_WARN`` (3 %). Measured on MNI
ICBM152 structures (default map; an independently re-triangulated copy is the surface
midpoint-subdivided, then decimated back to the same vertex count; its map compared at
the original vertices' closest points after the best rotation):

==============  ===================  ====================  =====================
structure       area share above 10  re-meshed copy, mean  largest amplitude Δ
==============  ===================  ====================  =====================
caudate L / R   0.85 % / 0.84 %      1.04° / 1.51°         0.21 / 0.21 mm
thalamus L / R  1.22 % / 1.18 %      1.19° / 1.17°         0.35 / 0.49 mm
putamen L / R   7.67 % / 8.78 %      7.32° / 9.24°         1.04 / 0.74 mm
WM L / R (40k)  4.36 % / 4.90 %      7.78° / 10.84°        11.6 / 6.7 mm
==============  ===================  ====================  =====================

(``benchmarks/sphere_consistency.py``, the hemispheres by the same recipe in scratch
runs; the amplitude column includes the copy's geometry, up to 0.4 mm from the original,
0.9 mm for the hemispheres.)
The putamens' sheared parts are not putamen: the box-clipped grey-matter blob of
:mod:`shapedesc.mesh.template_anatomy` carries sheets of claustral and insular grey
matter. Opened by a 2-voxel ball (6-connected, iterated; parts thinner than ~4 mm go),
the left putamen's body (``putamen_body_left``: 4,353 of 6,604 voxels, 2,502 vertices)
maps from the conformal start with 0 % sheared, area SD 0.045, and its re-meshed copy
lies 0.34° away (amplitudes within 0.08 mm; right: the same), as compact as the
caudate; a 1-voxel opening leaves a sheet (4.9 %, 9.1°). So on deep grey matter the
warning mostly means a segmentation that leaks into thin neighbouring tissue; a
white-matter hemisphere's gyral blades are thin by nature.
The putamens' patches with anisotropy above 20 have a median of 60–100; the largest
(3–4 % of the area, left) separates an 11 % lobe from the rest. It is the energy, not
the stop: on the left putamen two fine solves from the same start, with 10 and with 40
L-BFGS pairs, both run to a 1e-7 stall test, end 5.4° apart, and they stay 3.9–8.5°
apart with plain MIPS (area SD 0.15), with shear weight 0.25 (7.4°) or with a linear
slope of the shear penalty beyond its knee (0.03 / 0.1 per unit K: 8.5° / 4.2°).

References
----------
Schmidt, E. (1943). Beweis der isoperimetrischen Eigenschaft der Kugel im hyperbolischen
und sphärischen Raum jeder Dimensionszahl. *Math. Z.* 49, 1–109. doi:10.1007/BF01174192
"""

from __future__ import annotations

import time
import warnings
from dataclasses import asdict, dataclass, field

import numpy as np

from ..defaults import (SPHERE_LU_ORDERING, SPHERE_MIN_REL_DET, SPHERE_SHEAR_WEIGHT,
                        SPHERE_SHEARED_ANISOTROPY, SPHERE_SHEARED_SHARE_WARN)
from ..errors import ShearedMapWarning, SphereMapError
from ..mesh.measures import vertex_areas
from . import qc as _qc
from .area import AreaProblem, continue_on_tail
from .conformal import conformal_sphere_map, sphere_face_det
from .laplacian import clamped_cotangent_laplacian
from .mobius import mobius_centre
from .multires import correct_area_multires
from .hierarchy import coarse_to_fine_map
from .topology import check_sphere_topology

__all__ = ["SphereMap", "SphereMapQC", "map_to_sphere"]


@dataclass(frozen=True)
class SphereMapQC:
    """Quality record of one sphere map (one row of a QC table).

    Attributes
    ----------
    n_flipped : int
        Faces with ``det(a, b, c) <= 0`` in the final map (0, or the map is refused).
    flips_per_stage : dict[str, int]
        Flipped faces after each stage: ``harmonic_plane``, ``stereographic``,
        ``pole_correction`` (before its fallback), ``mobius``, ``refinement`` (see
        ``initial_map``), ``area_correction`` (the largest count over all accepted
        iterates), ``final``.
    area_log_sd, area_log_p01, area_log_p99 : float
        SD and 1st/99th percentiles over faces of log(sphere-area share / surface-area
        share) (natural log, dimensionless).
    angle_distortion_mean_deg : float
        Mean absolute corner-angle change, degrees.
    shear_anisotropy_p99 : float
        99th percentile over faces of the shear anisotropy σ₁/σ₂ (>= 1, dimensionless):
        how much more the map stretches a face in one direction than in the other
        (:func:`.qc.shear_anisotropy`).
    sheared_area_share : float
        Share of the surface area (0–1) in faces with anisotropy above
        ``defaults.SPHERE_SHEARED_ANISOTROPY``; above ``SPHERE_SHEARED_SHARE_WARN`` the
        map is not unique there and :class:`~shapedesc.errors.ShearedMapWarning` is
        issued (see the module docstring, "Strongly sheared maps").
    seconds_conformal, seconds_centring, seconds_area, seconds_total : float
        Wall-clock time of the stages and of the whole call (s); ``seconds_conformal`` is
        the whole initial map (the conformal attempt and, if used, the coarse-to-fine
        start).
    iterations : int
        Area-correction iterations (all levels).
    initial_map : str
        Start of the area correction: ``"conformal"`` (the centred conformal map) or
        ``"coarse-to-fine"`` (used when the conformal map is crowded below double
        precision; :mod:`.hierarchy`). For the latter the first three stage counts are
        those of the coarse surface's map and ``refinement`` counts the start map of the
        full mesh; for the former ``refinement`` is 0.
    """

    n_flipped: int
    flips_per_stage: dict
    area_log_sd: float
    area_log_p01: float
    area_log_p99: float
    angle_distortion_mean_deg: float
    shear_anisotropy_p99: float
    sheared_area_share: float
    seconds_conformal: float
    seconds_centring: float
    seconds_area: float
    seconds_total: float
    iterations: int
    initial_map: str = "conformal"

    def to_row(self) -> dict:
        """Flat dict for a table: stage flip counts become ``flips_<stage>`` columns."""
        row = asdict(self)
        stages = row.pop("flips_per_stage")
        for k, v in stages.items():
            row[f"flips_{k}"] = int(v)
        return row


@dataclass(frozen=True)
class SphereMap:
    """A bijective map of a genus-0 surface onto the unit sphere.

    Attributes
    ----------
    sphere_vertices : ndarray, shape (V, 3), float64
        Unit vector of each surface vertex (same order as the input vertices).
    faces : ndarray, shape (F, 3), int64
        The input faces (counter-clockwise seen from outside on the sphere too).
    qc : SphereMapQC
    face_log_area_ratio : ndarray, shape (F,)
        log(sphere-area share / surface-area share) per face (0 = area-preserving).
    vertex_area_distortion : ndarray, shape (V,)
        The same log ratio for barycentric vertex areas (for figures).
    vertex_angle_distortion_deg : ndarray, shape (V,)
        Mean absolute angle change (degrees) of the corners at each vertex (for figures).
    vertex_shear_log_anisotropy : ndarray, shape (V,)
        Mean over the faces at each vertex of log(σ₁/σ₂), the natural log of the shear
        anisotropy (0 = shape kept; for figures).
    parameters : dict
        ``shear_weight``, ``iterations``, ``solver``, ``ordering``, ``puncture_face``,
        ``pole_correction_used``, ``mobius_iterations``, ``initial_map`` (as in the QC),
        ``conformal_attempt`` (flip and collapsed-face counts of the conformal map, kept
        or not), ``levels``, ``source``; with the coarse-to-fine start also
        ``coarse_vertices``, ``refinement_rounds``, ``coarse_to_fine_iterations``.
    """

    sphere_vertices: np.ndarray
    faces: np.ndarray
    qc: SphereMapQC
    face_log_area_ratio: np.ndarray
    vertex_area_distortion: np.ndarray
    vertex_angle_distortion_deg: np.ndarray
    vertex_shear_log_anisotropy: np.ndarray
    parameters: dict = field(default_factory=dict)

    def __post_init__(self):
        for name in ("sphere_vertices", "faces", "face_log_area_ratio",
                     "vertex_area_distortion", "vertex_angle_distortion_deg",
                     "vertex_shear_log_anisotropy"):
            arr = np.array(getattr(self, name))
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)


def map_to_sphere(vertices, faces, *, shear_weight: float = SPHERE_SHEAR_WEIGHT,
                  source: str = "<memory>") -> SphereMap:
    """Map a closed genus-0 triangle surface bijectively onto the unit sphere.

    Parameters
    ----------
    vertices : array_like, shape (V, 3)
        Surface coordinates (mm).
    faces : array_like, shape (F, 3)
        Triangles, counter-clockwise seen from outside.
    shear_weight : float
        Balance of the shear (conformal) term against the area term (>= 0;
        ``defaults.SPHERE_SHEAR_WEIGHT``). 0 gives the most uniform areas and the most
        shear; larger values keep angles better and areas less uniform.
    source : str
        Name of the surface for error messages and the parameters record.

    Returns
    -------
    SphereMap

    Raises
    ------
    MeshTopologyError
        The surface is open, non-manifold, inconsistently or inward oriented, has more
        than one component, or is not genus 0.
    MeshGeometryError
        Malformed arrays, non-finite coordinates, unused vertices.
    ConvergenceError
        A stage did not converge; the message names ``source`` and the stage.
    SphereMapError
        The final map failed its bijectivity check (never returned silently).
    """
    if not (np.isfinite(shear_weight) and shear_weight >= 0):
        raise ValueError(f"shear_weight must be finite and >= 0, got {shear_weight!r}")
    t0 = time.perf_counter()
    v, f = check_sphere_topology(vertices, faces, source=source)
    # work in a translation/scale-normalised copy: only intrinsic ratios enter
    vn = (v - v.mean(axis=0)) / np.sqrt(np.mean(np.sum((v - v.mean(axis=0)) ** 2, axis=1)))

    va = vertex_areas(vn, f)
    # one clamped cotangent Laplacian for the conformal step and the area correction
    L = clamped_cotangent_laplacian(vn, f)
    conf = conformal_sphere_map(vn, f, source=source, laplacian=L)
    tc = time.perf_counter()
    x, mob_it = mobius_centre(conf.sphere_vertices, va, what=f"{source}: Möbius centring")
    t_centre = time.perf_counter() - tc
    det = sphere_face_det(x, f)
    stage_flips = {"harmonic_plane": conf.flips_planar, "stereographic": conf.flips_projected,
                   "pole_correction": conf.flips_corrected}
    attempt = {"flips_planar": int(conf.flips_planar), "flips_projected": int(conf.flips_projected),
               "collapsed_faces": int(np.sum(det <= SPHERE_MIN_REL_DET * det.mean()))}
    crowded = any(attempt.values())
    initial = "conformal"
    refine_flips = 0
    if crowded:
        # the conformal map crowds below double precision: switch, once, to the
        # coarse-to-fine start (see .hierarchy for why no other harmonic map would do)
        initial = "coarse-to-fine"
        hs = coarse_to_fine_map(vn, f, what=source)
        x = hs.sphere_vertices
        mob_it = 0
        stage_flips = {"harmonic_plane": hs.coarse_flips_planar,
                       "stereographic": hs.coarse_flips_projected,
                       "pole_correction": hs.coarse_flips_corrected}
        refine_flips = _qc.count_flipped(x, f)
    # with the coarse-to-fine start there is no Möbius step: its count is the start's
    flips_mobius = refine_flips if crowded else _qc.count_flipped(x, f)
    t2 = time.perf_counter()
    t1 = t2 - t_centre
    problem = AreaProblem(vn, f, shear_weight=shear_weight, laplacian=L, what=source)
    res = continue_on_tail(problem, correct_area_multires(problem, x, surface_vertices=vn))
    xs = res.sphere_vertices
    t3 = time.perf_counter()

    n_flip = _qc.count_flipped(xs, f)
    sph_area = _qc.spherical_triangle_areas(xs, f)
    if n_flip or abs(sph_area.sum() - 4 * np.pi) > 1e-6 * 4 * np.pi:
        raise SphereMapError(f"{source}: sphere map failed its bijectivity check ({n_flip} "
                             f"flipped faces, spherical areas sum to {sph_area.sum():.9g} "
                             "instead of 4π); please report this surface")
    lr = _qc.face_log_area_ratio(vn, xs, f)
    ang = _qc.angle_distortion_deg(vn, xs, f)
    va_s = np.zeros(len(v))
    for k in range(3):
        va_s += np.bincount(f[:, k], weights=sph_area / 3, minlength=len(v))
    v_lr = np.log((va_s / va_s.sum()) / (va / va.sum()))
    aniso = _qc.shear_anisotropy(vn, xs, f)
    sheared = _qc.sheared_area_share(vn, f, aniso, SPHERE_SHEARED_ANISOTROPY)
    # per vertex: mean over its faces with a defined anisotropy (a degenerate surface
    # triangle has none: inf, which vertex_mean leaves out)
    v_shear = _qc.vertex_mean(f, np.repeat(np.log(aniso)[:, None], 3, axis=1), len(v))
    t4 = time.perf_counter()
    stages = {**stage_flips, "mobius": flips_mobius, "refinement": refine_flips,
              "area_correction": res.n_flipped_max, "final": n_flip}
    qc = SphereMapQC(
        n_flipped=n_flip, flips_per_stage=stages, area_log_sd=float(np.std(lr)),
        area_log_p01=float(np.percentile(lr, 1)), area_log_p99=float(np.percentile(lr, 99)),
        angle_distortion_mean_deg=float(ang.mean()),
        shear_anisotropy_p99=float(np.percentile(aniso, 99)), sheared_area_share=sheared,
        seconds_conformal=t1 - t0,
        seconds_centring=t2 - t1, seconds_area=t3 - t2, seconds_total=t4 - t0,
        iterations=int(res.iterations), initial_map=initial)
    params = {"shear_weight": float(shear_weight), "iterations": int(res.iterations),
              "solver": ("multiresolution (icosphere grids) + L-BFGS with (L + eps M)^-1 "
                         "preconditioner, flip-rejecting Armijo backtracking"),
              "ordering": f"SuperLU {SPHERE_LU_ORDERING}, SymmetricMode, diag_pivot_thresh 0", "puncture_face": conf.puncture_face,
              "pole_correction_used": conf.pole_correction_used,
              "mobius_iterations": int(mob_it),
              "initial_map": initial, "conformal_attempt": attempt,
              "levels": list(res.levels), "source": source}
    if crowded:
        params.update(coarse_vertices=int(hs.coarse_vertices), refinement_rounds=int(hs.rounds),
                      coarse_to_fine_iterations=int(hs.iterations))
    if sheared > SPHERE_SHEARED_SHARE_WARN:
        warnings.warn(
            f"{source}: {sheared:.1%} of the surface area is mapped to the sphere with shear "
            f"above {SPHERE_SHEARED_ANISOTROPY:g}:1 (thin necks or flanges, which any "
            "area-preserving sphere map must shear strongly); the map is not unique there, "
            "so this structure's spectra can change with its triangulation far more than a "
            "compact structure's. If the structure has no such parts, check its "
            "segmentation for leaks into thin neighbouring tissue; otherwise compare with "
            "care, e.g. check that a re-meshed copy gives the same result (qc.tsv: "
            "sheared_area_share)", ShearedMapWarning,
            stacklevel=2)
    return SphereMap(xs, f, qc, lr, v_lr, _qc.vertex_mean(f, ang, len(v)), v_shear, params)
