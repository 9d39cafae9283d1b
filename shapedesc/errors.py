"""Domain exceptions of shapedesc.

Every exception subclasses a built-in so that callers who do not know this package can
still catch it (``except ValueError``).  Messages follow one rule: name the file (or the
subject and stage), say what was found, and say what to do about it.
"""

from __future__ import annotations


class ShapedescWarning(UserWarning):
    """Base class of the warnings this package emits."""


class PoseWarning(ShapedescWarning):
    """The canonical pose is unstable (two first-order ellipsoid axes nearly equal)."""


class RepairWarning(ShapedescWarning):
    """A surface was changed by a repair step before use."""


class IllConditionedFitWarning(ShapedescWarning):
    """A least-squares harmonic fit was ill-conditioned and solved by eigen-decomposition."""


class ShearedMapWarning(ShapedescWarning):
    """A large share of a surface is mapped to the sphere with strong shear (thin necks or
    flanges), where the sphere map, and so the spectra, are not unique."""


class IntensityLikeVolumeWarning(ShapedescWarning):
    """An integer volume read as labels looks like a quantised probability or intensity map."""


class SurfaceFormatError(ValueError):
    """A file could not be read as a surface or volume (empty, truncated, corrupt, wrong format)."""


class InputTooLargeError(ValueError):
    """A file, or what it inflates to, is past the configured size limit."""


class MeshTopologyError(ValueError):
    """A mesh is not a closed, manifold, single-component genus-0 triangle surface."""


class MeshGeometryError(ValueError):
    """A mesh has non-finite coordinates, out-of-range face indices, or too few elements."""


class LabelError(ValueError):
    """A requested label is absent from a label volume, or the volume holds no labels."""


class VolumeFormatError(ValueError):
    """A label volume has the wrong dimensionality or data type."""


class SphereMapError(RuntimeError):
    """A sphere map could not be computed or failed its bijectivity checks."""


class ConvergenceError(RuntimeError):
    """An iterative solver did not converge; the message names the surface and stage."""


class ManifestError(ValueError):
    """A study manifest has problems; the message lists every one found."""


class StatsInputError(ValueError):
    """A statistical model cannot be fitted to the given table (too few subjects, NaNs, collinearity)."""


class OutputExistsError(FileExistsError):
    """An output would overwrite existing files made with other parameters (use --force)."""
