"""The coefficient container: values plus every convention needed to read them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from shapedesc import defaults

from ._checks import check_degree, check_kind, check_points
from .sh_basis import _angles, _complex_rows, _real_rows
from .conversions import _as_2d, complex_to_real, degree_energy, real_to_complex

__all__ = ["SHCoefficients", "evaluate"]

_NORMALIZATION = "orthonormal"
_CSPHASE = -1
_ORDERING = "l*l+l+m"
_FORMAT = "shapedesc.SHCoefficients"


@dataclass(frozen=True, eq=False)
class SHCoefficients:
    """Spherical-harmonic coefficients of k real (or complex) functions on the unit sphere.

    Parameters
    ----------
    values : array_like, shape ((lmax+1)**2, k) or ((lmax+1)**2,)
        Row l*l + l + m holds degree l, order m; column c is channel c (e.g. x, y, z in
        mm for a surface).  1-D input is stored as one channel.  Stored read-only.
    lmax : int, optional
        Degree; inferred from the row count when omitted.
    kind : {"real", "complex"}
        Real basis (float64 values) or complex Y_l^m (complex128 values).
    normalization, csphase, ordering
        Stored conventions: "orthonormal" (∫|Y|² dΩ = 1), -1 (Condon–Shortley phase in
        the complex harmonics the real basis is built from), "l*l+l+m".  Only these are
        supported; other values are refused so that foreign coefficients are converted
        explicitly before they enter.

    Notes
    -----
    The units of ``values`` are those of the functions expanded (mm for coordinates).
    """

    values: np.ndarray
    lmax: int | None = None
    kind: str = "real"
    normalization: str = _NORMALIZATION
    csphase: int = _CSPHASE
    ordering: str = _ORDERING

    def __post_init__(self):
        kind = check_kind(self.kind)
        if self.normalization != _NORMALIZATION:
            raise ValueError(f"normalization must be {_NORMALIZATION!r}, got {self.normalization!r};"
                             " rescale the coefficients to orthonormal harmonics first")
        if self.csphase != _CSPHASE:
            raise ValueError(f"csphase must be -1 (Condon-Shortley), got {self.csphase!r}; "
                             "multiply complex coefficients by (-1)^m first")
        if self.ordering != _ORDERING:
            raise ValueError(f"ordering must be {_ORDERING!r}, got {self.ordering!r}; "
                             "reorder the rows to l*l + l + m first")
        v = np.asarray(self.values)
        if kind == "real" and np.iscomplexobj(v):
            raise ValueError("kind='real' needs real values; got a complex array "
                             "(use kind='complex', or convert with complex_to_real)")
        dtype = np.float64 if kind == "real" else np.complex128
        v, lmax, _ = _as_2d(v, self.lmax, dtype, "SHCoefficients.values")
        if not np.all(np.isfinite(v)):
            raise ValueError("SHCoefficients.values holds NaN or infinite entries")
        v = np.array(v, dtype=dtype, order="C", copy=True)
        v.setflags(write=False)
        object.__setattr__(self, "values", v)
        object.__setattr__(self, "lmax", lmax)

    # ----------------------------------------------------------------- basic facts
    @property
    def n_channels(self) -> int:
        """Number of functions k."""
        return self.values.shape[1]

    def __repr__(self) -> str:
        return (f"SHCoefficients(lmax={self.lmax}, kind={self.kind!r}, channels={self.n_channels}, "
                f"normalization={self.normalization!r}, csphase={self.csphase}, "
                f"ordering={self.ordering!r})")

    # ----------------------------------------------------------------- conversions
    def to_complex(self) -> SHCoefficients:
        """Same functions in the complex (Condon–Shortley) basis."""
        if self.kind == "complex":
            return self
        return SHCoefficients(real_to_complex(self.values, self.lmax), self.lmax, "complex")

    def to_real(self) -> SHCoefficients:
        """Same functions in the real basis (ValueError when they are not real-valued)."""
        if self.kind == "real":
            return self
        return SHCoefficients(complex_to_real(self.values, self.lmax), self.lmax, "real")

    def energy_per_degree(self) -> np.ndarray:
        """E_l = Σ_m Σ_channels |c_lm|², shape (lmax+1,) (units of values squared)."""
        return degree_energy(self.values, self.lmax)

    def truncated(self, lmax) -> SHCoefficients:
        """The expansion cut at degree ``lmax`` (<= self.lmax)."""
        lmax = check_degree(lmax)
        if lmax > self.lmax:
            raise ValueError(f"cannot truncate degree {self.lmax} coefficients to the higher degree {lmax}")
        return SHCoefficients(self.values[: (lmax + 1) ** 2], lmax, self.kind)

    def smoothed(self, bandwidth: float) -> SHCoefficients:
        """Heat-kernel smoothing: c_lm · exp(-l(l+1)σ) (Chung et al. 2007).

        Parameters
        ----------
        bandwidth : float
            σ >= 0 (dimensionless, unit sphere; the diffusion time of the heat kernel).

        References
        ----------
        .. [1] M. K. Chung, K. M. Dalton, L. Shen, A. C. Evans, R. J. Davidson, "Weighted
           Fourier series representation and its application to quantifying the amount of
           gray matter", IEEE Trans. Med. Imaging 26 (2007) 566–581,
           doi:10.1109/TMI.2007.892519.
        """
        factor = heat_kernel_factors(self.lmax, bandwidth)
        return SHCoefficients(self.values * factor[:, None], self.lmax, self.kind)

    def evaluate(self, points) -> np.ndarray:
        """Values of the k functions at unit vectors ``points`` (n, 3): shape (n, k)."""
        return evaluate(self.values, self.lmax, points, kind=self.kind)

    def rotated(self, R) -> SHCoefficients:
        """Coefficients of f(R^{-1} x): the functions (object) rotated by the 3x3 rotation R."""
        from .rotation import rotate_coefficients

        return SHCoefficients(rotate_coefficients(self.values, self.lmax, R, kind=self.kind),
                              self.lmax, self.kind)

    # ----------------------------------------------------------------- persistence
    def to_dict(self) -> dict:
        """JSON-safe dictionary (lists, numbers, strings); complex values as re/im lists."""
        if self.kind == "complex":
            vals = {"re": self.values.real.tolist(), "im": self.values.imag.tolist()}
        else:
            vals = self.values.tolist()
        return {
            "format": _FORMAT,
            "version": 1,
            "lmax": int(self.lmax),
            "kind": self.kind,
            "normalization": self.normalization,
            "csphase": int(self.csphase),
            "ordering": self.ordering,
            "n_channels": int(self.n_channels),
            "values": vals,
        }

    @classmethod
    def from_dict(cls, d: dict) -> SHCoefficients:
        """Inverse of :meth:`to_dict` (conventions are checked, not assumed)."""
        if not isinstance(d, dict) or d.get("format") != _FORMAT:
            raise ValueError(f"not a {_FORMAT} dictionary (missing or wrong 'format' key)")
        if d.get("version") != 1:
            raise ValueError(f"unsupported {_FORMAT} version {d.get('version')!r}; expected 1")
        kind = d.get("kind")
        vals = d.get("values")
        if kind == "complex":
            if not isinstance(vals, dict) or set(vals) != {"re", "im"}:
                raise ValueError("complex SHCoefficients need values as {'re': [...], 'im': [...]}")
            v = np.asarray(vals["re"], dtype=np.float64) + 1j * np.asarray(vals["im"], dtype=np.float64)
        else:
            v = np.asarray(vals, dtype=np.float64)
        out = cls(v, d.get("lmax"), kind, d.get("normalization"), d.get("csphase"), d.get("ordering"))
        if "n_channels" in d and d["n_channels"] != out.n_channels:
            raise ValueError(f"n_channels={d['n_channels']} but values hold {out.n_channels} channels")
        return out


def heat_kernel_factors(lmax, bandwidth) -> np.ndarray:
    """exp(-l(l+1)σ) for every flat row up to ``lmax``, shape ((lmax+1)**2,) (Chung et al. 2007)."""
    lmax = check_degree(lmax)
    sigma = float(bandwidth)
    if not np.isfinite(sigma) or sigma < 0:
        raise ValueError(f"heat-kernel bandwidth must be a finite number >= 0, got {bandwidth!r}")
    l = np.repeat(np.arange(lmax + 1), 2 * np.arange(lmax + 1) + 1).astype(np.float64)
    return np.exp(-l * (l + 1.0) * sigma)


def evaluate(values, lmax, points, *, kind: str = "real") -> np.ndarray:
    """Evaluate an expansion at unit vectors, in chunks of points.

    Parameters
    ----------
    values : array_like, shape (K,) or (K, k), K = (lmax+1)**2
    lmax : int
    points : array_like, shape (n, 3)
        Unit vectors.
    kind : {"real", "complex"}, keyword-only

    Returns
    -------
    ndarray, shape (n, k) (float64 for real kind, complex128 for complex kind)
    """
    kind = check_kind(kind)
    dtype = np.float64 if kind == "real" else np.complex128
    v, lmax, _ = _as_2d(values, lmax, dtype, "coefficients")
    p = check_points(points)
    K = (lmax + 1) ** 2
    out = np.empty((p.shape[0], v.shape[1]), dtype=np.result_type(dtype, v.dtype))
    step = chunk_rows(K, complex_=(kind == "complex"))
    for start in range(0, p.shape[0], step):
        sl = slice(start, start + step)
        z, s, phi = _angles(p[sl])
        B = _real_rows(lmax, z, s, phi) if kind == "real" else _complex_rows(lmax, z, s, phi)
        out[sl] = B.T @ v
    return out


def chunk_rows(n_columns: int, *, complex_: bool = False) -> int:
    """Points per chunk so one (n_columns, chunk) basis block fits ``defaults.SH_CHUNK_BYTES``."""
    item = 16 if complex_ else 8
    return max(256, int(defaults.SH_CHUNK_BYTES // (item * max(n_columns, 1))))
