"""Shape descriptors of one genus-0 surface: expansion, pose, invariant spectra, indices.

``describe_surface`` runs the per-structure chain::

    surface ──► sphere map ──► weighted least-squares SH fit of x, y, z ──► canonical pose
            ──► per-degree energies (mm² and scale-normalised) ──► shape indices, QC

The fit weights each vertex by its share of the *original* surface area, so that an
uneven map cannot let crowded vertices dominate (Chung et al. 2007 use the same
weighting idea).  Per-degree energy E_l = Σ_m Σ_{x,y,z} |c_lm|² (l ≥ 1) is invariant
to rotations of the object and of the parameter sphere; with real orthonormal
harmonics it equals the complex-basis value.

Coefficient files (``write_coefficients`` / ``read_coefficients``) are NumPy ``.npz``
archives readable without pickle: numeric arrays plus one JSON string ``metadata``
stating degree, basis, normalisation, phase, ordering, units, pose and scale.  They are
written with fixed zip timestamps, so identical inputs give byte-identical files.

References
----------
M. K. Chung, K. M. Dalton, L. Shen, A. C. Evans, R. J. Davidson, "Weighted Fourier
series representation and its application to quantifying the amount of gray matter",
IEEE Transactions on Medical Imaging 26(4):566–581, 2007, doi:10.1109/TMI.2007.892519.
C. Brechbühler, G. Gerig, O. Kübler, Computer Vision and Image Understanding
61(2):154–170, 1995, doi:10.1006/cviu.1995.1013.
"""

from __future__ import annotations

import io
import json
import logging
import math
import time
import warnings
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from shapedesc import __version__, defaults
from shapedesc.align import Pose, canonical_pose
from shapedesc.errors import PoseWarning
from shapedesc.mesh import measures
from shapedesc.mesh.distance import corresponding_mesh_distances
from shapedesc.surface import Surface

log = logging.getLogger(__name__)

COEFFICIENT_FORMAT = "shapedesc-coefficients/1"


@dataclass(frozen=True)
class ShapeIndices:
    """Scalar shape indices of one structure.

    Volumes in mm³, areas in mm², lengths in mm; ``sphericity`` = π^{1/3}(6V)^{2/3}/A
    (1 for a sphere, Wadell 1935); ``moment_semi_axes_mm`` are the semi-axes of the solid
    ellipsoid with the same second moments (√(5 λ_i) of the solid's covariance);
    ``degree1_semi_axes_mm`` those of the first-order SH ellipsoid; ``degree_95`` and
    ``degree_99`` the smallest degree at which the cumulative normalised energy over
    l = 1..L reaches 95 % and 99 % of its total.
    """

    volume_mm3: float
    area_mm2: float
    sphericity: float
    fit_volume_mm3: float
    fit_area_mm2: float
    fit_sphericity: float
    moment_semi_axes_mm: tuple[float, float, float]
    degree1_semi_axes_mm: tuple[float, float, float]
    degree_95: int
    degree_99: int

    def to_row(self) -> dict:
        row = {
            "volume_mm3": self.volume_mm3,
            "area_mm2": self.area_mm2,
            "sphericity": self.sphericity,
            "fit_volume_mm3": self.fit_volume_mm3,
            "fit_area_mm2": self.fit_area_mm2,
            "fit_sphericity": self.fit_sphericity,
        }
        for k in range(3):
            row[f"ellipsoid_semi_axis_{k + 1}_mm"] = self.moment_semi_axes_mm[k]
        for k in range(3):
            row[f"degree1_semi_axis_{k + 1}_mm"] = self.degree1_semi_axes_mm[k]
        row["degree_95"] = self.degree_95
        row["degree_99"] = self.degree_99
        return row


@dataclass(frozen=True)
class FitResidual:
    """How far the degree-L reconstruction is from the input surface (mm).

    ``rms_mm`` and ``max_mm``: distances from the input vertices to the reconstructed
    surface; ``hausdorff_mm``: symmetric Hausdorff distance between the two meshes.
    """

    rms_mm: float
    max_mm: float
    hausdorff_mm: float


@dataclass(frozen=True)
class ShapeDescription:
    """Everything ``describe_surface`` learns about one structure.

    Attributes
    ----------
    degree : int
        Maximum degree L of the expansion.
    native_values : ndarray, shape ((L+1)², 3)
        Real orthonormal coefficients of x, y, z in input coordinates (mm), as fitted.
    canonical_values : ndarray, shape ((L+1)², 3)
        Coefficients in the canonical pose (degree 0 dropped, object and parameter
        rotated; mm, not scaled).
    pose : Pose
    spectrum_mm2 : ndarray, shape (L,)
        E_l for l = 1..L (mm²).
    spectrum : ndarray, shape (L,)
        E_l / scale² (dimensionless), with the scale of ``pose.scale_method``.
    indices : ShapeIndices
    residual : FitResidual
    sphere_qc : dict
        The sphere map's QC row.
    smoothing : float
        Heat-kernel bandwidth used in the fit (dimensionless, on the unit sphere).
    source : str
    history : tuple of str
        Repairs and steps applied to the input surface before description.
    seconds : dict
        Time per stage (s).
    """

    degree: int
    native_values: np.ndarray
    canonical_values: np.ndarray
    pose: Pose
    spectrum_mm2: np.ndarray
    spectrum: np.ndarray
    indices: ShapeIndices
    residual: FitResidual
    sphere_qc: dict
    smoothing: float
    source: str = "<memory>"
    history: tuple[str, ...] = field(default_factory=tuple)
    seconds: dict = field(default_factory=dict)

    # ----------------------------------------------------------------- table rows
    def spectrum_row(self) -> dict:
        """Normalised energies as ``{"l1": ..., ..., "lL": ...}``."""
        return {f"l{l}": float(e) for l, e in enumerate(self.spectrum, start=1)}

    def spectrum_mm2_row(self) -> dict:
        """Energies in mm² as ``{"l1": ..., ..., "lL": ...}``."""
        return {f"l{l}": float(e) for l, e in enumerate(self.spectrum_mm2, start=1)}

    def shape_row(self) -> dict:
        row = self.indices.to_row()
        row["scale_method"] = self.pose.scale_method
        row["scale_mm"] = self.pose.scale_mm
        return row

    def qc_row(self) -> dict:
        row = dict(self.sphere_qc)
        row.update({
            "fit_degree": self.degree,
            "fit_rms_mm": self.residual.rms_mm,
            "fit_max_mm": self.residual.max_mm,
            "hausdorff_mm": self.residual.hausdorff_mm,
            "pose_unstable": self.pose.unstable,
            "pose_warning": "; ".join(self.pose.warnings),
            "repairs": "; ".join(self.history),
        })
        return row

    # ----------------------------------------------------------------- storage
    def metadata(self) -> dict:
        return {
            "format": COEFFICIENT_FORMAT,
            "degree": self.degree,
            "basis": "real",
            "normalization": "orthonormal",
            "csphase": -1,
            "ordering": "l*l+l+m",
            "channels": ["x", "y", "z"],
            "units": "mm",
            "canonical": "degree 0 dropped; object rotated by pose.object_rotation.T; "
                         "parameter sphere rotated by pose.parameter_rotation; not scaled",
            "pose": self.pose.to_dict(),
            "smoothing": self.smoothing,
            "source": self.source,
            "history": list(self.history),
            "shapedesc_version": __version__,
        }

    def write_coefficients(self, path: str | Path, *, overwrite: bool = True) -> None:
        """Write the coefficients (native and canonical) and their conventions to ``.npz``."""
        write_coefficient_file(path, native_values=self.native_values,
                               canonical_values=self.canonical_values,
                               metadata=self.metadata(), overwrite=overwrite)


@dataclass(frozen=True)
class CoefficientRecord:
    """Coefficients read back from a coefficient file.

    ``values`` are the canonical-pose coefficients ((L+1)², 3) real orthonormal (mm);
    ``native_values`` the fitted ones in input coordinates.
    """

    values: np.ndarray
    native_values: np.ndarray
    lmax: int
    pose: Pose
    metadata: dict
    path: str = "<memory>"

    def coefficients(self, pose: str = "canonical"):
        """As a ``shapedesc.harmonics.SHCoefficients`` in the chosen pose."""
        from shapedesc.harmonics import SHCoefficients

        if pose not in ("canonical", "native"):
            raise ValueError(f"pose must be 'canonical' or 'native', got {pose!r}")
        vals = self.values if pose == "canonical" else self.native_values
        return SHCoefficients(values=vals, lmax=self.lmax, kind="real")


# ============================================================================ core


def _energy_by_degree(values: np.ndarray, lmax: int) -> np.ndarray:
    """E_l for l = 0..L from real coefficients ((L+1)², k)."""
    power = np.sum(np.abs(values) ** 2, axis=1)
    degree = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1)
    return np.bincount(degree, weights=power, minlength=lmax + 1)


def _degree_reaching(spectrum: np.ndarray, fraction: float) -> int:
    total = spectrum.sum()
    if not total > 0:
        return 0
    cum = np.cumsum(spectrum) / total
    return int(np.searchsorted(cum, fraction - 1e-12) + 1)


def _sphericity(volume: float, area: float) -> float:
    if not (volume > 0 and area > 0):
        return float("nan")
    return float(math.pi ** (1 / 3) * (6 * volume) ** (2 / 3) / area)


def describe_surface(surface: Surface, *, degree: int = defaults.DEFAULT_DEGREE,
                     scale: str = defaults.DEFAULT_SCALE, smoothing: float = 0.0,
                     shear_weight: float | None = None, sphere_map=None) -> ShapeDescription:
    """Describe one closed genus-0 surface by spherical harmonics.

    Parameters
    ----------
    surface : Surface
        Closed, outward-oriented, genus-0 mesh in mm (see ``shapedesc.mesh.repair``).
    degree : int
        Maximum degree L (1 <= L <= ``defaults.MAX_DEGREE``).
    scale : {"none", "volume", "area"}
        Normalisation of the dimensionless spectrum: none, cube root of enclosed volume,
        or square root of area.
    smoothing : float
        Heat-kernel bandwidth σ >= 0 (coefficients weighted by exp(−l(l+1)σ); Chung
        et al. 2007). 0 = none.
    shear_weight : float, optional
        Passed to ``shapedesc.sphere.map_to_sphere`` (its default when None).
    sphere_map : SphereMap, optional
        A precomputed map of this surface (skips the mapping stage).

    Returns
    -------
    ShapeDescription

    Notes
    -----
    Beyond the map the work is: the area-weighted fit (``shapedesc.harmonics.fit``; for
    mesh-sized inputs its CG path, which never forms a basis matrix), the pose, the
    spectra, the fitted volume and area on the level-``defaults.MEASURE_ICOSPHERE_LEVEL``
    icosphere (evaluated with ducc0's NUFFT synthesis, equal to
    ``reconstruct_values`` to ~1e-13 relative), and the residual: exact distances from
    every input vertex to the fitted surface (the fit evaluated at the input's own sphere
    positions, with the input's faces) and the exact vertex-sampled symmetric Hausdorff
    distance (``shapedesc.mesh.distance.corresponding_mesh_distances``).  Measured on one
    core (benchmarks/describe.py, CPU time): ~0.12 s at 10,000 vertices / L = 15, ~0.21 s
    at 20,000 / L = 15, ~1.7 s at 160,000 / L = 40 (coefficient file writing included).
    """
    from shapedesc.harmonics import SHCoefficients, fit

    degree = int(degree)
    if not 1 <= degree <= defaults.MAX_DEGREE:
        raise ValueError(f"{surface.source}: degree must be between 1 and {defaults.MAX_DEGREE}, got {degree}")
    if not (np.isfinite(smoothing) and smoothing >= 0):
        raise ValueError(f"smoothing must be a finite bandwidth >= 0, got {smoothing}")
    v, f = surface.vertices, surface.faces
    seconds: dict[str, float] = {}

    t0 = time.perf_counter()
    if sphere_map is None:
        from shapedesc.sphere import map_to_sphere

        kwargs = {} if shear_weight is None else {"shear_weight": shear_weight}
        sphere_map = map_to_sphere(v, f, source=surface.source, **kwargs)
    seconds["map"] = time.perf_counter() - t0
    u = sphere_map.sphere_vertices

    t0 = time.perf_counter()
    varea = measures.vertex_areas(v, f)
    area = float(varea.sum())
    weights = varea / area
    result = fit(u, v, degree, weights=weights, tikhonov=defaults.FIT_TIKHONOV,
                 heat_bandwidth=float(smoothing))
    native = np.asarray(result.coefficients.values, dtype=np.float64)
    seconds["fit"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    volume, _, cov = measures.solid_moments(v, f)  # volume equal to enclosed_volume's
    pose = canonical_pose(native, surface_vertices=v, surface_weights=weights,
                          scale_method=scale, volume_mm3=volume, area_mm2=area)
    for w in pose.warnings:
        warnings.warn(f"{surface.source}: {w}", PoseWarning, stacklevel=2)
    centred = native.copy()
    centred[0] = 0.0
    canonical = SHCoefficients(values=centred, lmax=degree, kind="real").rotated(
        pose.parameter_rotation.T).values @ pose.object_rotation
    canonical = np.asarray(canonical, dtype=np.float64)
    seconds["pose"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    energy = _energy_by_degree(native, degree)[1:]
    spectrum = energy / pose.scale_mm**2

    # Residual: the reconstruction evaluated at the input's own sphere positions,
    # with the input's connectivity, is the fitted surface.
    fitted = np.asarray(result.fitted, dtype=np.float64)
    d_in, hausdorff = corresponding_mesh_distances(v, fitted, f)
    residual = FitResidual(rms_mm=float(np.sqrt(np.sum(weights * d_in**2))),
                           max_mm=float(d_in.max()), hausdorff_mm=hausdorff)

    from shapedesc.reconstruct import _measure_surface

    rv, rf = _measure_surface(native, degree, defaults.MEASURE_ICOSPHERE_LEVEL)
    fit_volume = measures.enclosed_volume(rv, rf)
    fit_area = measures.surface_area(rv, rf)
    lam = np.sort(np.clip(np.linalg.eigvalsh(cov), 0, None))[::-1]
    indices = ShapeIndices(
        volume_mm3=volume,
        area_mm2=area,
        sphericity=_sphericity(volume, area),
        fit_volume_mm3=fit_volume,
        fit_area_mm2=fit_area,
        fit_sphericity=_sphericity(fit_volume, fit_area),
        moment_semi_axes_mm=tuple(float(x) for x in np.sqrt(5 * lam)),
        degree1_semi_axes_mm=tuple(float(x) for x in pose.ellipsoid_semi_axes_mm),
        degree_95=_degree_reaching(spectrum, 0.95),
        degree_99=_degree_reaching(spectrum, 0.99),
    )
    seconds["indices"] = time.perf_counter() - t0
    qc = sphere_map.qc.to_row()
    return ShapeDescription(
        degree=degree, native_values=native, canonical_values=canonical, pose=pose,
        spectrum_mm2=energy, spectrum=spectrum, indices=indices, residual=residual,
        sphere_qc=qc, smoothing=float(smoothing), source=surface.source,
        history=surface.history, seconds=seconds,
    )


# ============================================================================ files


def _npy_bytes(array: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, np.ascontiguousarray(array), allow_pickle=False)
    return buf.getvalue()


def write_coefficient_file(path: str | Path, *, native_values: np.ndarray,
                           canonical_values: np.ndarray, metadata: dict,
                           overwrite: bool = True) -> None:
    """Write a coefficient ``.npz`` deterministically and atomically.

    Members: ``canonical.npy``, ``native.npy`` (float64, ((L+1)², 3)) and
    ``metadata.npy`` (a one-element unicode array holding JSON). Readable with
    ``numpy.load(path, allow_pickle=False)``.
    """
    from shapedesc.io.atomic import atomic_path

    members = {
        "canonical.npy": _npy_bytes(np.asarray(canonical_values, dtype=np.float64)),
        "native.npy": _npy_bytes(np.asarray(native_values, dtype=np.float64)),
        "metadata.npy": _npy_bytes(np.array(json.dumps(metadata, sort_keys=True))),
    }
    with atomic_path(path, overwrite=overwrite) as tmp:
        with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as zf:
            for name, data in members.items():
                info = zipfile.ZipInfo(name, date_time=(1980, 1, 1, 0, 0, 0))
                info.compress_type = zipfile.ZIP_DEFLATED
                info.external_attr = 0o644 << 16
                zf.writestr(info, data)


def read_coefficients(path: str | Path) -> CoefficientRecord:
    """Read a coefficient file written by ``write_coefficients``.

    Raises
    ------
    SurfaceFormatError
        If the file is not a coefficient archive of this package (names the file).
    """
    from shapedesc.errors import SurfaceFormatError

    path = Path(path)
    try:
        with np.load(path, allow_pickle=False) as z:
            canonical = np.asarray(z["canonical"], dtype=np.float64)
            native = np.asarray(z["native"], dtype=np.float64)
            meta = json.loads(str(np.asarray(z["metadata"]).reshape(-1)[0]))
    except (OSError, KeyError, ValueError, zipfile.BadZipFile) as exc:
        raise SurfaceFormatError(
            f"{path}: not a shapedesc coefficient file ({exc}); give a file from the "
            "coefficients/ folder that `shapedesc describe` writes") from exc
    if meta.get("format") != COEFFICIENT_FORMAT:
        raise SurfaceFormatError(f"{path}: unknown coefficient format {meta.get('format')!r}; "
                                 f"this version reads {COEFFICIENT_FORMAT!r}")
    lmax = int(meta["degree"])
    if canonical.shape != ((lmax + 1) ** 2, 3) or native.shape != canonical.shape:
        raise SurfaceFormatError(f"{path}: coefficient arrays have shape {canonical.shape}, "
                                 f"expected {((lmax + 1) ** 2, 3)} for degree {lmax}")
    return CoefficientRecord(values=canonical, native_values=native, lmax=lmax,
                             pose=Pose.from_dict(meta["pose"]), metadata=meta, path=str(path))
