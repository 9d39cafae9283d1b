"""Real anatomy for tests and benchmarks: structures of the MNI ICBM152 2009a template.

The grey- and white-matter probability maps of the symmetric MNI ICBM152 2009a
template (Fonov et al. 2011) ship inside the ``nilearn`` wheel under
``nilearn/datasets/data/`` (``mni_icbm152_{gm,wm}_tal_nlin_sym_09a_converted.nii.gz``,
1 mm voxels, 197 x 233 x 189, probabilities stored as 0-255).  This module thresholds and
extracts a few structures from them, as binary masks on the template grid with the
probability map as evidence for the topology fix:

``wm_left`` / ``wm_right``
    White matter of one hemisphere: WM probability > 0.5 with world x < 0 (left) or
    x > 0 (right); the mid-sagittal plane x = 0 belongs to neither.  About 315,000
    voxels; thresholded like this, its surface has hundreds of apparent handles.
``putamen_left``, ``caudate_left``, ``thalamus_left`` (and ``*_right``, mirrored)
    Deep grey matter: GM probability > 0.5 inside a box around the nucleus (world mm,
    below), largest 26-connected blob.  The blob is clipped by the box where the
    thresholded GM continues into neighbouring grey matter (claustrum/insula for the
    putamen, the septal region for the caudate, the pulvinar/medial GM for the
    thalamus).  4,600-8,900 voxels, a few handles each.
``putamen_body_left`` (and ``_right``)
    The putamen blob opened by a 2-voxel ball (the 6-connected cross iterated twice),
    largest 26-connected part: the claustral and insular grey-matter sheets that the
    box-clipped blob carries (parts thinner than ~4 mm) are gone, leaving the nucleus's
    body (4,353 of 6,604 voxels).  Those sheets are what makes the blob's sphere map
    strongly sheared (see :mod:`shapedesc.sphere.api`, "Strongly sheared maps").

Only nibabel is needed (nilearn itself is not imported); give ``data_dir`` or let the
module find nilearn's installed data folder.

References
----------
V. Fonov, A. C. Evans, K. Botteron, C. R. Almli, R. C. McKinstry, D. L. Collins and the
Brain Development Cooperative Group, "Unbiased average age-appropriate atlases for
pediatric studies", NeuroImage 54(1):313-327, 2011,
doi:10.1016/j.neuroimage.2010.07.033.
"""

from __future__ import annotations

import importlib.util
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import ndimage as ndi

__all__ = ["STRUCTURE_NAMES", "TemplateStructure", "template_data_dir", "template_structure",
           "template_structures", "template_surface"]

_FILES = {"gm": "mni_icbm152_gm_tal_nlin_sym_09a_converted.nii.gz",
          "wm": "mni_icbm152_wm_tal_nlin_sym_09a_converted.nii.gz"}

#: World-mm boxes (x, y, z lower corner; upper corner) of the left deep grey nuclei;
#: the right ones mirror x.  Chosen by looking at the template's GM map (from the
#: anatomy of the MNI space: putamen lateral to the internal capsule, caudate head
#: beside the frontal horn, thalamus medial, behind the capsule's genu).
_BOXES = {
    "putamen": ((-34.0, -14.0, -8.0), (-14.0, 16.0, 16.0)),
    "caudate": ((-22.0, -4.0, -2.0), (-6.0, 26.0, 26.0)),
    "thalamus": ((-22.0, -36.0, -4.0), (-2.0, -2.0, 20.0)),
}

#: Morphological opening (voxels) before the largest blob is taken, per structure kind
#: with its box (the kind's name without ``_body``).
_OPENING = {"putamen_body": 2}

STRUCTURE_NAMES: tuple[str, ...] = (
    "wm_left", "wm_right", "putamen_left", "putamen_right", "caudate_left", "caudate_right",
    "thalamus_left", "thalamus_right", "putamen_body_left", "putamen_body_right")


@dataclass(frozen=True)
class TemplateStructure:
    """One template structure on the template grid.

    Attributes
    ----------
    name : str
    mask : ndarray, shape (197, 233, 189), bool
    affine : ndarray, shape (4, 4)
        Voxel index -> world mm (MNI space).
    evidence : ndarray, shape (197, 233, 189), float64
        The tissue probability (0-1) the mask was thresholded from (read-only, shared
        between structures of one tissue).
    description : str
        How it was extracted.
    source : str
        The probability map's path.
    """

    name: str
    mask: np.ndarray
    affine: np.ndarray
    evidence: np.ndarray
    description: str
    source: str


def template_data_dir() -> Path:
    """nilearn's installed ``datasets/data`` folder (without importing nilearn)."""
    spec = importlib.util.find_spec("nilearn")
    if spec is None or spec.origin is None:
        raise FileNotFoundError("nilearn is not installed, so the MNI ICBM152 2009a maps it "
                                "ships are unavailable; pip install nilearn, or give data_dir")
    return Path(spec.origin).parent / "datasets" / "data"


_CACHE: dict = {}


def _load(data_dir: Path, tissue: str) -> tuple[np.ndarray, np.ndarray, str]:
    import nibabel as nib

    path = Path(data_dir) / _FILES[tissue]
    key = str(path)
    if key not in _CACHE:
        if not path.exists():
            raise FileNotFoundError(f"{path}: template probability map not found; give the "
                                    "folder holding nilearn's MNI ICBM152 2009a maps")
        img = nib.load(str(path))
        raw = np.asanyarray(img.dataobj)
        prob = raw.astype(np.float64)
        if prob.max() > 1.0:  # the 'converted' files store 0-255
            prob /= 255.0
        prob.setflags(write=False)
        if len(_CACHE) >= 2:  # the GM and WM maps (70 MB each as float64)
            _CACHE.clear()
        _CACHE[key] = (prob, np.array(img.affine, dtype=np.float64), str(path))
    return _CACHE[key]


def template_structure(name: str, *, data_dir: str | Path | None = None,
                       threshold: float = 0.5) -> TemplateStructure:
    """Extract one structure (see the module docstring for the list and definitions).

    Parameters
    ----------
    name : str
        One of ``STRUCTURE_NAMES``.
    data_dir : path, optional
        Folder with the template maps; default nilearn's data folder.
    threshold : float
        Probability above which a voxel belongs to the tissue (default 0.5).

    Returns
    -------
    TemplateStructure
    """
    if name not in STRUCTURE_NAMES:
        raise ValueError(f"unknown template structure {name!r}; choose from {STRUCTURE_NAMES}")
    folder = Path(data_dir) if data_dir is not None else template_data_dir()
    kind, side = name.rsplit("_", 1)
    tissue = "wm" if kind == "wm" else "gm"
    prob, affine, path = _load(folder, tissue)
    if kind == "wm":
        x = _world_axis(affine, prob.shape, 0, (slice(None),) * 3)
        half = (x < 0) if side == "left" else (x > 0)
        mask = (prob > threshold) & half
        desc = (f"white matter of the {side} hemisphere: WM probability > {threshold} and "
                f"world x {'<' if side == 'left' else '>'} 0")
    else:
        lo, hi = (np.array(c, dtype=float) for c in _BOXES[kind.removesuffix("_body")])
        if side == "right":
            lo[0], hi[0] = -hi[0], -lo[0]
        # index-space block holding the box (its 8 corners mapped back, rounded outwards)
        corners = np.array([[a, b, c, 1.0] for a in (lo[0], hi[0]) for b in (lo[1], hi[1])
                            for c in (lo[2], hi[2])])
        ijk = (np.linalg.inv(affine) @ corners.T)[:3]
        block = tuple(slice(max(0, int(np.floor(ijk[d].min())) - 1),
                            min(prob.shape[d], int(np.ceil(ijk[d].max())) + 2)) for d in range(3))
        inside = np.ones(prob[block].shape, bool)
        for d in range(3):
            w = _world_axis(affine, prob.shape, d, block)
            inside &= (w >= lo[d]) & (w <= hi[d])
        cand = (prob[block] > threshold) & inside
        radius = _OPENING.get(kind, 0)
        if radius:
            ball = ndi.iterate_structure(ndi.generate_binary_structure(3, 1), radius)
            cand = ndi.binary_opening(cand, structure=ball)
        lab, n = ndi.label(cand, structure=np.ones((3, 3, 3), bool))
        if n == 0:
            raise ValueError(f"{path}: no grey matter above {threshold} in the {name} box")
        sizes = np.bincount(lab.ravel())
        sizes[0] = 0
        mask = np.zeros(prob.shape, bool)
        mask[block] = lab == int(np.argmax(sizes))
        desc = (f"{side} {kind}: GM probability > {threshold} inside the world box "
                f"x [{lo[0]:g}, {hi[0]:g}], y [{lo[1]:g}, {hi[1]:g}], z [{lo[2]:g}, {hi[2]:g}] "
                + (f"mm, opened by a {radius}-voxel ball" if radius else "mm")
                + ", largest 26-connected blob")
    return TemplateStructure(name=name, mask=mask, affine=affine, evidence=prob,
                             description=desc, source=path)


def _world_axis(affine, shape, axis, block):
    """World coordinate ``axis`` (mm) of the voxels of ``block`` (broadcast array)."""
    idx = [np.arange(shape[d])[block[d]] for d in range(3)]
    ii, jj, kk = np.meshgrid(*idx, indexing="ij", sparse=True)
    return affine[axis, 0] * ii + affine[axis, 1] * jj + affine[axis, 2] * kk + affine[axis, 3]


def template_structures(names=STRUCTURE_NAMES, *, data_dir: str | Path | None = None,
                        threshold: float = 0.5) -> dict[str, TemplateStructure]:
    """Several structures by name (default all); see :func:`template_structure`."""
    return {n: template_structure(n, data_dir=data_dir, threshold=threshold) for n in names}


def template_surface(name: str, *, data_dir: str | Path | None = None, threshold: float = 0.5,
                     **options):
    """A template structure as a genus-0 surface (mm) through the label-volume path.

    The probability map is the topology fix's evidence; ``options`` go to
    :func:`shapedesc.mesh.volume.mask_to_surface` (``smoothing_iterations``,
    ``target_vertices``, ``connectivity``).

    Returns
    -------
    surface : Surface
        Source ``"<map path>#<name>"``.
    report : VolumeSurfaceReport
    """
    from shapedesc.mesh.volume import mask_to_surface

    s = template_structure(name, data_dir=data_dir, threshold=threshold)
    return mask_to_surface(s.mask, s.affine, source=f"{s.source}#{name}", evidence=s.evidence,
                           **options)
