"""Point-wise shape differences on the correspondence icosphere.

Every subject's reconstruction is sampled at the same icosphere vertices (vertex k is
the same point of the canonical parameter sphere for all subjects), so vertex k of the
subjects corresponds.  The displacement of subject s at vertex k from the overall mean
surface, projected on the mean surface's outward unit normal, is a signed distance in mm
(positive outward).  Each vertex gets the same GLM as the degree tests, with
Freedman–Lane permutations and family-wise control across vertices by the maximum
statistic (Nichols & Holmes 2002; Winkler et al. 2014).

References
----------
Nichols TE, Holmes AP (2002). Nonparametric permutation tests for functional
neuroimaging: a primer with examples. Hum Brain Mapp 15:1-25. doi:10.1002/hbm.1058
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from shapedesc import defaults
from shapedesc.errors import StatsInputError
from shapedesc.mesh.measures import face_normals_unnormalised
from shapedesc.stats.permutation import PermutationResult, freedman_lane

__all__ = [
    "VertexTests",
    "vertex_normals",
    "normal_displacement",
    "vertex_tests",
    "write_vertex_gifti",
    "write_surface_gifti",
]


@dataclass(frozen=True)
class VertexTests:
    """Per-vertex group test of normal displacements.

    Attributes
    ----------
    mean_vertices : ndarray, shape (V, 3), mm
        Overall mean surface (over all subjects).
    faces : ndarray, shape (F, 3)
    displacement : ndarray, shape (n, V), mm
        Normal-projected displacement of each subject from the mean surface.
    group_means : dict of str -> ndarray, shape (V,), mm
        Mean displacement of each group level.
    test : PermutationResult
        Statistic and p-values per vertex (``p_fwer`` across vertices).
    group_mean_vertices : dict of str -> ndarray, shape (V, 3), mm
        Mean surface of each group level (same faces).
    """

    mean_vertices: np.ndarray
    faces: np.ndarray
    displacement: np.ndarray
    group_means: dict
    test: PermutationResult
    group_mean_vertices: dict


def vertex_normals(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """Area-weighted outward unit vertex normals, shape (V, 3).

    Each vertex gets the sum of the (unnormalised, twice-area-length) normals of its
    faces, normalised; faces must be oriented outward (counter-clockwise seen from outside).
    """
    v = np.asarray(vertices, dtype=float)
    f = np.asarray(faces, dtype=np.int64)
    fn = face_normals_unnormalised(v, f)
    acc = np.zeros_like(v)
    for k in range(3):
        np.add.at(acc, f[:, k], fn)
    length = np.linalg.norm(acc, axis=1, keepdims=True)
    if np.any(length == 0):
        raise StatsInputError(
            f"mean surface has {int((length == 0).sum())} vertices without a defined normal "
            "(degenerate neighbourhood); check the reconstructions"
        )
    return acc / length


def normal_displacement(
    vertices: np.ndarray, mean_vertices: np.ndarray, mean_normals: np.ndarray
) -> np.ndarray:
    """Displacement of each subject from the mean surface along the mean normals.

    Parameters
    ----------
    vertices : ndarray, shape (n, V, 3), mm
        Corresponding vertices of every subject.
    mean_vertices : ndarray, shape (V, 3), mm
    mean_normals : ndarray, shape (V, 3)
        Unit outward normals of the mean surface.

    Returns
    -------
    ndarray, shape (n, V), mm
        ``(x_sk - m_k) . n_k``: positive where the subject lies outside the mean surface.
    """
    x = np.asarray(vertices, dtype=float)
    mv = np.asarray(mean_vertices, dtype=float)
    nv = np.asarray(mean_normals, dtype=float)
    if x.ndim != 3 or x.shape[1:] != mv.shape or mv.shape != nv.shape or mv.shape[1] != 3:
        raise StatsInputError(
            f"vertices {x.shape}, mean {mv.shape} and normals {nv.shape} must be (n, V, 3), "
            "(V, 3), (V, 3) with the same V"
        )
    return np.einsum("svk,vk->sv", x - mv[None], nv)


def vertex_tests(
    vertices: np.ndarray,
    faces: np.ndarray,
    design: np.ndarray,
    contrast: np.ndarray,
    group_codes: np.ndarray,
    levels: tuple[str, ...],
    *,
    n_permutations: int = defaults.DEFAULT_PERMUTATIONS,
    rng: np.random.Generator | int | None = None,
    blocks: np.ndarray | None = None,
) -> VertexTests:
    """Per-vertex GLM on normal displacements with max-statistic FWER across vertices.

    Parameters
    ----------
    vertices : ndarray, shape (n, V, 3), mm
        Corresponding reconstructions (same icosphere for every subject).
    faces : ndarray, shape (F, 3)
        Faces of the icosphere (shared by all subjects), outward.
    design : ndarray, shape (n, p)
    contrast : ndarray, shape (p,) or (p, s)
    group_codes : ndarray, shape (n,), int
        Index into ``levels`` of each subject (for the group mean maps).
    levels : tuple of str
    n_permutations : int
    rng : numpy.random.Generator, int or None
    blocks : ndarray, shape (n,), optional

    Returns
    -------
    VertexTests
    """
    x = np.asarray(vertices, dtype=float)
    if x.ndim != 3 or x.shape[2] != 3:
        raise StatsInputError(f"vertices must have shape (n, V, 3), got {x.shape}")
    codes = np.asarray(group_codes, dtype=np.int64)
    if codes.shape != (x.shape[0],):
        raise StatsInputError(f"group_codes has shape {codes.shape}, expected ({x.shape[0]},)")
    mean = x.mean(axis=0)
    normals = vertex_normals(mean, faces)
    disp = normal_displacement(x, mean, normals)
    test = freedman_lane(disp, design, contrast, n_permutations=n_permutations, rng=rng,
                         blocks=blocks)
    means = {lv: disp[codes == i].mean(axis=0) for i, lv in enumerate(levels)}
    surfaces = {lv: x[codes == i].mean(axis=0) for i, lv in enumerate(levels)}
    return VertexTests(mean_vertices=mean, faces=np.asarray(faces, dtype=np.int64),
                       displacement=disp, group_means=means, test=test,
                       group_mean_vertices=surfaces)


def write_vertex_gifti(path, result: VertexTests, *, overwrite: bool = False) -> None:
    """Write the per-vertex maps as GIFTI data arrays (one per map, named in metadata).

    Arrays: the statistic (``NIFTI_INTENT_TTEST`` or ``FTEST``), ``p_parametric``,
    ``p_perm``, ``p_fwer`` (``NIFTI_INTENT_PVAL``), and the mean normal displacement of
    each group in mm (``NIFTI_INTENT_SHAPE``).  Each array's ``Name`` metadata says what it
    is.  The mean surface they lie on is written with :func:`write_surface_gifti`
    (the CLI writes ``mean_surface.surf.gii`` beside it).
    """
    import nibabel as nib

    from shapedesc.io.atomic import atomic_path

    t = result.test
    stat_intent = "NIFTI_INTENT_TTEST" if t.kind == "t" else "NIFTI_INTENT_FTEST"
    arrays = [(t.kind, t.statistic, stat_intent),
              ("p_parametric", t.p_parametric, "NIFTI_INTENT_PVAL"),
              ("p_perm", t.p_perm, "NIFTI_INTENT_PVAL"),
              ("p_fwer", t.p_fwer, "NIFTI_INTENT_PVAL")]
    arrays += [(f"mean_displacement_mm[{lv}]", m, "NIFTI_INTENT_SHAPE")
               for lv, m in result.group_means.items()]
    img = nib.gifti.GiftiImage()
    for name, data, intent in arrays:
        da = nib.gifti.GiftiDataArray(np.asarray(data, dtype=np.float32), intent=intent,
                                      datatype="NIFTI_TYPE_FLOAT32",
                                      meta=nib.gifti.GiftiMetaData({"Name": name}))
        img.add_gifti_data_array(da)
    with atomic_path(path, overwrite=overwrite) as tmp:
        nib.save(img, str(tmp))


def write_surface_gifti(path, vertices: np.ndarray, faces: np.ndarray, *,
                        overwrite: bool = False) -> None:
    """Write a surface (vertices mm, faces) as a GIFTI pointset + triangle file."""
    import nibabel as nib

    from shapedesc.io.atomic import atomic_path

    img = nib.gifti.GiftiImage()
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        np.asarray(vertices, dtype=np.float32), intent="NIFTI_INTENT_POINTSET",
        datatype="NIFTI_TYPE_FLOAT32"))
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        np.asarray(faces, dtype=np.int32), intent="NIFTI_INTENT_TRIANGLE",
        datatype="NIFTI_TYPE_INT32"))
    with atomic_path(path, overwrite=overwrite) as tmp:
        nib.save(img, str(tmp))
