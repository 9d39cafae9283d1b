"""The invented demo study end to end: describe, then compare, finds its one known effect.

Ground truth (shapedesc/demo_study.py, example_meshes/README.md): group B has an inward
dent (1.5 mm deep, radius 6 mm) on the ``arc``; the ``bean`` has no group difference.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from shapedesc.cli.main import main


@pytest.mark.slow
def test_demo_effect_found_at_its_place(tmp_path, full):
    """Reduced (default): 6 subjects per group, icosphere level 3 (642 vertices) surfaces.
    Full (``--full``): 15 per group at level 4 (2,562 vertices), as the shipped demo."""
    nib = pytest.importorskip("nibabel")
    from shapedesc.demo_study import generate_demo_study

    n_per_group, level = (15, 4) if full else (6, 3)
    manifest = generate_demo_study(tmp_path / "study", n_per_group=n_per_group, level=level,
                                   n_volumes=0)
    truth = json.loads((tmp_path / "study" / "ground_truth.json").read_text())["effect"]
    assert main(["-q", "describe", str(manifest), "-o", str(tmp_path / "out")]) == 0
    assert main(["-q", "compare", str(tmp_path / "out"), "-o", str(tmp_path / "stats"),
                 "--group", "group", "--levels", "A,B", "--covariates",
                 "age,sex,head_size_mm3", "--permutations", "1000", "--bootstrap", "500",
                 "--classification-permutations", "9"]) == 0
    stats = tmp_path / "stats"
    dt = pd.read_csv(stats / "degree_tests.tsv", sep="\t")
    hits = dt[dt.p_fwer <= 0.05].groupby("structure").size()
    # the spectra of the dented structure differ (FWER across degrees); the null one not
    assert hits.get(truth["structure"], 0) >= 1
    assert hits.get("bean", 0) == 0
    # point-wise: significant vertices on the arc, none on the bean
    maps = {}
    for s in ("arc", "bean"):
        img = nib.load(stats / f"vertex_tests_{s}.gii")
        maps[s] = {da.meta["Name"]: np.asarray(da.data) for da in img.darrays}
    arc, bean = maps["arc"], maps["bean"]
    sig = arc["p_fwer"] <= 0.05
    assert sig.any() and not (bean["p_fwer"] <= 0.05).any()
    # at its place: the significant vertices are a dent (B inside A: t < 0, B's mean
    # displacement below A's) gathered within the dent's radius of the peak vertex
    verts = nib.load(stats / "mean_surface_arc.surf.gii").darrays[0].data
    peak = int(np.argmax(np.abs(arc["t"])))
    assert np.all(arc["t"][sig] < 0)
    diff = arc["mean_displacement_mm[B]"] - arc["mean_displacement_mm[A]"]
    assert np.all(diff[sig] < 0)
    assert np.linalg.norm(verts[sig] - verts[peak], axis=1).max() <= truth["radius_mm"]
    # depth: inward by less than the true 1.5 mm (degree-15 truncation smooths the
    # 6 mm dent), and by more than a tenth of it
    assert -truth["depth_mm"] * 1.05 < diff[peak] < -0.1 * truth["depth_mm"]
