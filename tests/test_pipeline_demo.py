"""The demo study: generator, committed copy, and ``shapedesc demo``."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
import trimesh

from shapedesc import demo_study
from shapedesc.demo_study import DEMO_STRUCTURES, generate_demo_study
from shapedesc.pipeline.manifest import read_manifest

COMMITTED = Path(__file__).resolve().parents[1] / "example_meshes"


def _files(root: Path) -> dict[str, bytes]:
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def small_study(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "study"
    generate_demo_study(out, n_per_group=2, level=2, n_volumes=1, voxel_mm=1.0, rng=3)
    return out


def test_generator_is_deterministic_and_valid(small_study, tmp_path):
    again = tmp_path / "again"
    generate_demo_study(again, n_per_group=2, level=2, n_volumes=1, voxel_mm=1.0, rng=3)
    assert _files(again) == _files(small_study)
    m = read_manifest(small_study / "manifest.tsv")
    assert len(m.items) == 8 and {it.structure for it in m.items} == {"arc", "bean"}
    assert sum(it.kind == "volume" for it in m.items) == 2   # 1 subject x 2 labels
    truth = json.loads((small_study / "ground_truth.json").read_text())
    groups = {dict(it.extra)["group"] for it in m.items}
    assert groups == {"A", "B"} and sorted(truth["groups"]["A"] + truth["groups"]["B"]) == sorted(
        {it.subject for it in m.items})
    with pytest.raises(FileExistsError):
        generate_demo_study(small_study, n_per_group=2, level=2)


def test_surfaces_are_closed_genus_zero(small_study):
    # trimesh's watertightness and Euler number (independent mesh code): a closed
    # genus-0 surface has Euler characteristic 2
    for p in sorted((small_study / "surfaces").glob("*.surf.gii")):
        g = nib.load(str(p))
        mesh = trimesh.Trimesh(g.darrays[0].data, g.darrays[1].data, process=False)
        assert mesh.is_watertight and mesh.euler_number == 2, p.name
        assert mesh.volume > 0      # outward orientation


def test_label_volume_matches_the_mesh_it_was_made_from():
    # Voxelise one generated structure and compare the labelled volume with trimesh's
    # mesh volume (divergence theorem, independent code). Tolerance 4 %: voxel centres
    # inside/outside the true boundary mostly cancel; what is left is of the order of
    # (area x voxel / 10) / volume ~ 3 % at 0.5-1 mm voxels on this 9 mm-thick shape.
    rng = np.random.default_rng(0)
    u, faces = demo_study._icosphere(2)
    verts, _ = demo_study._structure("arc", u, rng, size=1.0, dent=False)
    data, affine = demo_study._label_volume({"arc": verts}, faces, 1.0)
    assert np.allclose(np.diag(affine)[:3], 1.0)
    mesh = trimesh.Trimesh(verts, faces, process=False)
    labelled = (data == DEMO_STRUCTURES["arc"]).sum() * 1.0 ** 3
    assert labelled == pytest.approx(mesh.volume, rel=0.04)


def test_dent_has_the_documented_depth_and_support():
    # The group-B dent is depth * cos^2(pi d / 2r) along the inward normal: same draws
    # with and without it differ by exactly that profile before bending (closed form).
    u, faces = demo_study._icosphere(4)
    a, _ = demo_study._structure("arc", u, np.random.default_rng(1), size=1.0, dent=False)
    b, _ = demo_study._structure("arc", u, np.random.default_rng(1), size=1.0, dent=True)
    shift = np.linalg.norm(a - b, axis=1)
    # Lower bound 2 % below the nominal 1.5 mm: the level-4 vertex spacing (~0.9 mm)
    # puts the nearest vertex up to ~0.5 mm from the centre. Upper bound: bending
    # stretches lengths along the arc by at most (R + b) / R (outer side, b = 4.5 mm,
    # R = 22 mm), so the 3-D shift may exceed the depth by that factor at most.
    assert 0.98 * 1.5 <= shift.max() <= 1.5 * (1 + 4.5 / 22)
    template = demo_study._bend(demo_study._ellipsoid(u, demo_study._ARC_AXES)[0],
                                demo_study._ARC_BEND_RADIUS)
    centre = np.array(json.loads((COMMITTED / "ground_truth.json").read_text())
                      ["effect"]["centre_template_mm"])
    d = np.linalg.norm(template - centre, axis=1)
    assert np.all(shift[d >= 6.0] < 1e-9) and np.all(shift[d < 5.0] > 0)


def test_committed_study_is_complete_and_small():
    m = read_manifest(COMMITTED / "manifest.tsv")
    assert len(m.items) == 60 and len({it.subject for it in m.items}) == 30
    truth = json.loads((COMMITTED / "ground_truth.json").read_text())
    assert truth["effect"]["depth_mm"] == 1.5 and truth["effect"]["structure"] == "arc"
    with open(COMMITTED / "manifest.tsv", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    group = {r["subject"]: r["group"] for r in rows}
    assert sorted(s for s, g in group.items() if g == "B") == truth["groups"]["B"]
    assert sum(p.stat().st_size for p in COMMITTED.rglob("*") if p.is_file()) < 4e6
    from shapedesc.cli.demo import bundled_study

    assert bundled_study() is not None


@pytest.mark.slow
def test_demo_command_runs_end_to_end(tmp_path, full, monkeypatch, capsys):
    import shapedesc.cli.main as cli_main
    from shapedesc.cli import demo
    from shapedesc.cli.main import COMMANDS, main

    if "demo" not in COMMANDS:
        pytest.skip("demo is not registered in cli/main.py COMMANDS")
    if not full:
        # reduced: 4 subjects per group (the fewest that fit group + 4 covariates), coarse meshes,
        # and few permutations, instead of the bundled 60-structure study
        study = tmp_path / "small"
        generate_demo_study(study, n_per_group=4, level=2, n_volumes=1, voxel_mm=1.0, rng=4)
        monkeypatch.setattr(demo, "bundled_study", lambda: study)
        opts = list(demo.COMPARE_OPTIONS)
        for flag, value in (("--permutations", "99"), ("--bootstrap", "50"),
                            ("--classification-permutations", "9")):
            opts[opts.index(flag) + 1] = value
        monkeypatch.setattr(demo, "COMPARE_OPTIONS", opts)
        # the report (its own tests cover it) only at full size: it renders many figures
        monkeypatch.setattr(cli_main, "COMMANDS", tuple(c for c in COMMANDS if c != "report"))
    out = tmp_path / "demo"
    status = main(["-q", "demo", "-o", str(out), "--jobs", "2"])
    assert status == 0, capsys.readouterr()
    spectra = (out / "describe" / "spectra.tsv").read_text().splitlines()
    assert len(spectra) == 1 + (60 if full else 16)
    for name in ("compare", "report.html"):
        assert (out / name).exists() == (name.split(".")[0] in cli_main.COMMANDS), name
    assert (out / "study" / "ground_truth.json").is_file()
    # a rerun reuses everything and writes the same tables (describe step only)
    monkeypatch.setattr(cli_main, "COMMANDS", tuple(c for c in COMMANDS
                                                    if c not in ("compare", "report")))
    before = (out / "describe" / "spectra.tsv").read_bytes()
    capsys.readouterr()
    assert main(["-q", "demo", "-o", str(out)]) == 0
    n = len(spectra) - 1
    assert f"describe: {n} of {n} structures described ({n} from the cache)" in capsys.readouterr().out
    assert (out / "describe" / "spectra.tsv").read_bytes() == before
