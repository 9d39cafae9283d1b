"""Reading integer label volumes (NIfTI-1 and NIfTI-2, plain or gzip-compressed).

Voxel indices map to world millimetres through the image affine exactly as stored
(anisotropic, oblique and negative-determinant affines alike): nothing is reoriented,
so left and right are never exchanged.
"""

from __future__ import annotations

import logging
import os
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from shapedesc import defaults
from shapedesc.errors import IntensityLikeVolumeWarning, LabelError, SurfaceFormatError, VolumeFormatError
from shapedesc.io._limits import read_bytes_limited

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class LabelVolume:
    """An integer label volume in world millimetres.

    Parameters
    ----------
    data : ndarray, shape (I, J, K), integer
        Label of each voxel; 0 is background.
    affine : ndarray, shape (4, 4), float64
        Voxel (i, j, k) -> world (x, y, z) in mm, as stored in the file (units converted
        to mm when the header declares metres or micrometres).
    path : str
        Where the volume came from.
    voxel_size_mm : tuple of 3 float
        Length of the affine's columns: voxel edge lengths along i, j, k (mm).
    labels : tuple of int
        Non-zero labels present, ascending.
    history : tuple of str
        What was done when reading (squeezed axis, converted type or units).
    """

    data: np.ndarray
    affine: np.ndarray
    path: str = "<memory>"
    voxel_size_mm: tuple[float, float, float] = (1.0, 1.0, 1.0)
    labels: tuple[int, ...] = ()
    history: tuple[str, ...] = field(default_factory=tuple)

    def __post_init__(self):
        data = np.asarray(self.data)
        if data.ndim != 3:
            raise VolumeFormatError(
                f"{self.path}: label data must be 3-D, got shape {data.shape}; give a 3-D volume"
            )
        if not np.issubdtype(data.dtype, np.integer):
            raise VolumeFormatError(
                f"{self.path}: label data must be integer, got {data.dtype}; "
                "use read_label_volume to convert integer-valued data"
            )
        affine = np.array(self.affine, dtype=np.float64)
        if affine.shape != (4, 4) or not np.all(np.isfinite(affine)) \
                or abs(np.linalg.det(affine[:3, :3])) < 1e-12:
            raise VolumeFormatError(
                f"{self.path}: the affine must be a finite, invertible 4x4 matrix, got\n{affine}"
            )
        data.setflags(write=False)
        affine.setflags(write=False)
        object.__setattr__(self, "data", data)
        object.__setattr__(self, "affine", affine)
        object.__setattr__(self, "voxel_size_mm",
                           tuple(float(x) for x in np.linalg.norm(affine[:3, :3], axis=0)))
        object.__setattr__(self, "labels", _labels_present(data))
        object.__setattr__(self, "history", tuple(self.history))

    @property
    def shape(self) -> tuple[int, int, int]:
        return tuple(int(n) for n in self.data.shape)

    @property
    def voxel_volume_mm3(self) -> float:
        """Volume of one voxel, |det| of the affine's 3x3 part (mm³)."""
        return float(abs(np.linalg.det(self.affine[:3, :3])))

    def require_label(self, label: int) -> np.ndarray:
        """Boolean mask (I, J, K) of ``label``; LabelError when the volume is empty or lacks it."""
        if not self.labels:
            raise LabelError(
                f"{self.path}: the label volume holds no labels (every voxel is 0); check "
                "that the segmentation ran and that this is the right file."
            )
        label = int(label)
        if label not in self.labels:
            shown = ", ".join(str(v) for v in self.labels[:20])
            more = f" ... ({len(self.labels)} in all)" if len(self.labels) > 20 else ""
            raise LabelError(
                f"{self.path}: label {label} is absent from the volume; labels present: "
                f"{shown}{more}. Give one of these with --label."
            )
        return self.data == label

    def count(self, label: int) -> int:
        """Number of voxels with ``label``."""
        return int(np.count_nonzero(self.data == int(label)))


def _labels_present(data: np.ndarray) -> tuple[int, ...]:
    if data.size == 0:
        return ()
    lo, hi = int(data.min()), int(data.max())
    if lo >= 0 and hi < 1 << 20:
        present = np.flatnonzero(np.bincount(data.ravel(), minlength=hi + 1))
    else:
        present = np.unique(data)
    return tuple(int(v) for v in present if v != 0)


def voxel_to_world(ijk: np.ndarray, affine: np.ndarray) -> np.ndarray:
    """Map voxel coordinates to world millimetres through an affine.

    Parameters
    ----------
    ijk : array_like, shape (N, 3) or (3,)
        Voxel coordinates (may be fractional, e.g. marching-cubes vertices).
    affine : array_like, shape (4, 4)
        Voxel -> world (mm) matrix.

    Returns
    -------
    ndarray, shape (N, 3) or (3,), float64
        ``affine[:3, :3] @ ijk + affine[:3, 3]`` for every point.
    """
    a = np.asarray(affine, dtype=np.float64)
    if a.shape != (4, 4):
        raise ValueError(f"affine must have shape (4, 4), got {a.shape}")
    p = np.asarray(ijk, dtype=np.float64)
    if p.shape[-1] != 3:
        raise ValueError(f"ijk must have shape (N, 3) or (3,), got {p.shape}")
    return p @ a[:3, :3].T + a[:3, 3]


_UNIT_TO_MM = {"mm": 1.0, "meter": 1000.0, "micron": 0.001}


def read_label_volume(path: str | os.PathLike, *,
                      max_bytes: int = defaults.MAX_INPUT_BYTES) -> LabelVolume:
    """Read a NIfTI-1/2 integer label volume.

    Parameters
    ----------
    path : path-like
        ``.nii`` or ``.nii.gz`` (recognised by content; gzip detected by its magic bytes).
    max_bytes : int, keyword-only
        Largest accepted size in bytes, on disk and after inflating.

    Returns
    -------
    LabelVolume
        The labels as an integer array and the affine in mm. An all-zero volume is
        returned (``labels == ()``); asking it for a label raises LabelError.

    Raises
    ------
    FileNotFoundError, InputTooLargeError
    SurfaceFormatError
        Empty, truncated, corrupt, or not NIfTI.
    VolumeFormatError
        Not 3-D (a 4-D volume with a singleton 4th axis is squeezed, and says so in
        ``history``), non-integer values, a non-invertible affine.
    """
    import nibabel as nib

    path = Path(path)
    data, was_gzip = read_bytes_limited(path, max_bytes=int(max_bytes), kind="label volume")
    head = data[:4]
    kind = None
    if len(data) >= 348:
        for order in ("<", ">"):
            n = int(np.frombuffer(head, dtype=order + "i4")[0])
            if n in (348, 540):
                kind = n
    if kind is None:
        raise SurfaceFormatError(
            f"{path}: not a NIfTI-1/2 file (tried NIfTI: the header size field is not "
            "348 or 540); give a .nii or .nii.gz label volume."
        )
    cls = nib.Nifti1Image if kind == 348 else nib.Nifti2Image
    try:
        img = cls.from_bytes(data)
        shape = img.shape
        if len(shape) < 3 or len(shape) > 4 or (len(shape) == 4 and shape[3] != 1):
            arr = None
        else:
            arr = np.asanyarray(img.dataobj)
    except Exception as exc:
        raise SurfaceFormatError(
            f"{path}: could not be read as NIfTI ({type(exc).__name__}: {exc}); the file "
            "may be truncated or corrupt. Re-export it, or check that the copy finished."
        ) from exc
    history = [f"read NIfTI-{1 if kind == 348 else 2}{' (gzip)' if was_gzip else ''}: shape {shape}"]
    if arr is None:
        what = f"{len(shape)}-D volume of shape {shape}"
        todo = ("give one 3-D label volume (extract one volume of the series first)"
                if len(shape) == 4 else "give a 3-D label volume")
        raise VolumeFormatError(f"{path}: a {what}; labels need a 3-D volume: {todo}.")
    if arr.ndim == 4:
        arr = arr[..., 0]
        history.append("squeezed a singleton 4th axis (shape "
                       f"{shape} -> {arr.shape})")
        logger.info("%s: squeezed a singleton 4th axis", path)
    arr = _as_labels(arr, path=path)
    affine = np.array(img.affine, dtype=np.float64)
    unit = img.header.get_xyzt_units()[0]
    scale = _UNIT_TO_MM.get(unit, 1.0)
    if scale != 1.0:
        affine[:3, :] *= scale
        history.append(f"spatial unit '{unit}' converted to mm (x{scale:g})")
    volume = LabelVolume(data=arr, affine=affine, path=str(path), history=tuple(history))
    step = _intensity_like_step(volume.data, volume.labels)
    if step is not None:
        n_distinct, median_step = step
        msg = (f"{path}: {n_distinct} distinct non-zero values whose neighbouring voxels "
               f"differ by a median of only {median_step:g}: this looks like a probability or "
               "intensity map stored as integers, not a segmentation. Threshold it into a "
               "label image first; the values are used as labels as they are.")
        warnings.warn(msg, IntensityLikeVolumeWarning, stacklevel=2)
        volume = replace(volume, history=volume.history
                         + ("warned: looks like a quantised probability/intensity map",))
    return volume


def _intensity_like_step(data: np.ndarray, present: tuple[int, ...]) -> tuple[int, float] | None:
    """(distinct count, median neighbour step) when ``data`` looks like a smooth quantised map.

    A segmentation has few labels and arbitrary codes across parcel borders; a probability
    map stored as integers has many values that change gradually between neighbours
    (thresholds ``defaults.LABEL_INTENSITY_*``); ``present`` are its sorted non-zero
    values. Returns None for a plausible label image.
    """
    if len(present) < defaults.LABEL_INTENSITY_MIN_DISTINCT:
        return None
    steps = []
    for axis in range(data.ndim):
        a = np.moveaxis(data, axis, 0)
        lo, hi = a[:-1], a[1:]
        keep = (lo != 0) & (hi != 0) & (lo != hi)
        steps.append(np.abs(lo[keep].astype(np.int64) - hi[keep].astype(np.int64)))
    steps = np.concatenate(steps)
    if steps.size == 0:
        return None
    median_step = float(np.median(steps))
    span = present[-1] - present[0]
    if median_step > defaults.LABEL_INTENSITY_MAX_NEIGHBOUR_STEP_FRACTION * span:
        return None
    return len(present), median_step


def _as_labels(arr: np.ndarray, *, path: Path) -> np.ndarray:
    """Integer labels from stored data; refuse non-integer values."""
    if np.issubdtype(arr.dtype, np.integer) or arr.dtype == bool:
        out = arr.astype(np.int64)
    elif np.issubdtype(arr.dtype, np.floating):
        finite = np.isfinite(arr)
        if not finite.all():
            ijk = tuple(int(i) for i in np.argwhere(~finite)[0])
            raise VolumeFormatError(
                f"{path}: non-finite value {arr[ijk]} at voxel {ijk}; a label volume holds "
                "integer labels. Check that this is a segmentation, not an intensity image."
            )
        frac = arr != np.round(arr)
        if frac.any():
            ijk = tuple(int(i) for i in np.argwhere(frac)[0])
            raise VolumeFormatError(
                f"{path}: non-integer value {float(arr[ijk]):g} at voxel {ijk} "
                f"({int(frac.sum())} such voxels); a label volume holds integer labels. "
                "This looks like a probability or intensity map: threshold it into a "
                "label image first."
            )
        out = arr.astype(np.int64)
    else:
        raise VolumeFormatError(
            f"{path}: voxel type {arr.dtype} cannot hold labels; give an integer label volume."
        )
    if out.size and int(out.min()) >= np.iinfo(np.int32).min and int(out.max()) <= np.iinfo(np.int32).max:
        out = out.astype(np.int32)
    return out
