"""shapedesc: spherical-harmonic shape descriptors of closed anatomical surfaces.

Research use only. Not a diagnostic device; not for diagnosis or treatment decisions.
Follow your institution's ethics and data-protection rules for subject data.

The package is organised as one concern per module (see DEVELOPERS.md):

``io`` files in and out · ``mesh`` validation, repair, label volume to genus-0 surface ·
``sphere`` genus-0 surface to unit sphere · ``harmonics`` spherical-harmonic basis and
transforms · ``align`` canonical pose · ``descriptors`` invariant spectra and indices ·
``reconstruct`` surfaces from coefficients · ``stats`` group comparison ·
``figures`` / ``report`` pictures and HTML · ``pipeline`` study-level batch.
"""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("shapedesc")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"

CAUTION = (
    "Research use only: not a diagnostic device and not for diagnosis or treatment "
    "decisions. Follow your institution's ethics and data-protection rules for subject data."
)

__all__ = ["__version__", "CAUTION"]
