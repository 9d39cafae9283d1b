"""Sphere maps of real anatomy: MNI ICBM152 2009a template structures (open data).

Surfaces come from ``shapedesc.mesh.template_anatomy`` + ``shapedesc.mesh.volume``
(thresholded probability maps, topology-corrected to genus 0). By default one deep
grey-matter nucleus (left caudate, ~3,200 vertices).

Known open targets (issue 4 stays open for them), measured with the default MIPS shear
term: the left thalamus (SD 0.086 but 1st percentile −0.35), the left putamen (SD 0.21)
and the 40,000-vertex white-matter hemisphere (refused with ConvergenceError: conformal
crowding below double precision). They are
measured in benchmarks/sphere_map.py rather than asserted here, so that ``--full``
states what works; add them back to ``_FULL`` when they pass.
"""

from __future__ import annotations

import numpy as np
import pytest

import shapedesc.mesh.template_anatomy as template_anatomy
import shapedesc.mesh.volume as volume
from shapedesc.sphere import map_to_sphere, pull_back

# issue 4 acceptance: SD <= 0.10 for compact shapes (deep grey matter), <= 0.15 for a
# real hemisphere; 1st/99th percentiles of the log area ratio within ±0.3
_SD_TARGET = {"caudate_left": 0.10, "thalamus_left": 0.10, "putamen_left": 0.10, "wm_left": 0.15}
_TARGET_VERTICES = {"wm_left": 40000}
_FULL = ["caudate_left"]


def _surface(name, template_dir):
    st = template_anatomy.template_structure(name, data_dir=template_dir)
    surf, rep = volume.mask_to_surface(st.mask, st.affine, source=name, evidence=st.evidence,
                                       target_vertices=_TARGET_VERTICES.get(name))
    return surf, rep


@pytest.mark.slow
def test_template_structures_map_bijectively_with_low_distortion(template_dir, full):
    names = _FULL if full else ["caudate_left"]
    for name in names:
        surf, rep = _surface(name, template_dir)
        # χ = V − E + F = 2 (Euler's formula for the sphere), counted independently here
        f = surf.faces
        e = np.unique(np.sort(np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]]), axis=1),
                      axis=0)
        assert surf.n_vertices - len(e) + len(f) == 2
        m = map_to_sphere(surf.vertices, surf.faces, source=name)
        assert max(m.qc.flips_per_stage.values()) == 0, (name, m.qc.flips_per_stage)
        assert m.qc.area_log_sd <= _SD_TARGET[name], (name, m.qc.area_log_sd)
        assert -0.3 <= m.qc.area_log_p01 and m.qc.area_log_p99 <= 0.3, (name, m.qc.to_row())
        # round trip exact at the vertices (mm; 1e-9 mm is far below any voxel)
        np.testing.assert_allclose(pull_back(m, surf.vertices, m.sphere_vertices),
                                   surf.vertices, rtol=0, atol=1e-9)
