"""``shapedesc compare`` end to end on synthetic studies with a known effect.

The synthetic spectra are invented here (not the demo study): two groups whose log
normalised energy differs at one degree by a known standardised amount, covariates with
effects of their own, degrees correlated with each other.  The checks: the effect is
found at its degree (max-statistic FWER) and nowhere else, the true standardised effect
lies inside the reported bootstrap interval, ComBat with --site, outputs, determinism,
overwrite refusal and the input errors.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from shapedesc.cli.main import main

SIGMA = 0.2  # SD of the log energy around its mean (dimensionless)
DELTA = 0.24  # patient - control difference of the log energy at EFFECT_DEGREE
EFFECT_DEGREE = 5
TRUE_D = DELTA / SIGMA  # population standardised difference (1.2)


def _spectra(n=80, lmax=12, seed=0, site_offsets=False, structures=("hippocampus", "caudate")):
    rng = np.random.default_rng(seed)
    rows = []
    subjects = [f"sub-{i:03d}" for i in range(n)]
    group = np.where(np.arange(n) % 2 == 0, "control", "patient")
    age = rng.normal(65, 7, n)
    sex = rng.choice(["F", "M"], n)
    head = rng.normal(1.45e6, 1.2e5, n)
    site = np.array(["siteA", "siteB", "siteC"])[np.arange(n) % 3]
    rho = 0.5
    deg = np.arange(1, lmax + 1)
    cov = SIGMA**2 * rho ** np.abs(np.subtract.outer(deg, deg))
    chol = np.linalg.cholesky(cov)
    for s_i, struct in enumerate(structures):
        base = -1.0 - 2.2 * np.log(deg) - 0.3 * s_i
        e = rng.normal(size=(n, lmax)) @ chol.T
        loge = base + e + 0.004 * (age[:, None] - 65) + 0.05 * (sex == "M")[:, None] \
            + 0.1 * ((head[:, None] - 1.45e6) / 1.2e5)
        if struct == "hippocampus":
            loge[group == "patient", EFFECT_DEGREE - 1] += DELTA
        if site_offsets:
            off = {"siteA": -0.3, "siteB": 0.0, "siteC": 0.35}
            loge += np.array([off[s] for s in site])[:, None] * (1 + 0.1 * deg)
        for i in range(n):
            row = {"subject": subjects[i], "structure": struct, "group": group[i],
                   "age": age[i], "sex": sex[i], "site": site[i], "head_size_mm3": head[i]}
            row.update({f"l{k}": float(np.exp(loge[i, k - 1])) for k in deg})
            rows.append(row)
    return pd.DataFrame(rows)


def _write(df, folder):
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "spectra.tsv"
    df.to_csv(path, sep="\t", index=False)
    return path


FAST = ["--permutations", "1000", "--bootstrap", "1000", "--classification-permutations", "19"]


def test_known_effect_found_at_its_degree(tmp_path):
    spectra = _write(_spectra(), tmp_path / "describe")
    out = tmp_path / "stats"
    argv = ["-q", "compare", str(spectra.parent), "-o", str(out), "--group", "group",
            "--levels", "control,patient", "--covariates", "age,sex,head_size_mm3",
            "--degrees", "2-12", "--seed", "7", *FAST]
    assert main(argv) == 0
    dt = pd.read_csv(out / "degree_tests.tsv", sep="\t")
    assert list(dt.columns[:4]) == ["structure", "degree", "column", "t"]
    hip = dt[dt.structure == "hippocampus"].set_index("degree")
    cau = dt[dt.structure == "caudate"].set_index("degree")
    # effect d = 1.2 with 40 per group: t ~ 1.2 * sqrt(20) ~ 5.4, far above the max-t
    # threshold (~3 for 11 correlated degrees): found at its degree...
    assert hip.loc[EFFECT_DEGREE, "p_fwer"] < 0.01
    assert hip.loc[EFFECT_DEGREE, "t"] > 0  # patient - control, positive by construction
    # ...and nowhere else (FWER 5 % per structure; fixed seed)
    assert (hip.drop(index=EFFECT_DEGREE)["p_fwer"] > 0.05).all()
    assert (cau["p_fwer"] > 0.05).all()
    # the true standardised effect lies inside the reported 95 % bootstrap interval
    lo, hi = hip.loc[EFFECT_DEGREE, ["g_ci_low", "g_ci_high"]]
    assert lo < TRUE_D < hi
    # the covariate-adjusted estimate of the log-energy difference is near DELTA: its
    # standard error is ~SIGMA * sqrt(2/40) = 0.045; allow 3 SE
    assert abs(hip.loc[EFFECT_DEGREE, "estimate_log"] - DELTA) < 3 * 0.045
    # q-values are BH of p_perm within the structure (scipy.stats.false_discovery_control)
    from scipy import stats

    np.testing.assert_allclose(hip["q_fdr"], stats.false_discovery_control(hip["p_perm"]),
                               rtol=1e-10)  # 12 significant digits in the table
    g = pd.read_csv(out / "global_test.tsv", sep="\t").set_index("structure")
    assert g.loc["hippocampus", "statistic_name"] == "hotelling_t2"
    assert g.loc["hippocampus", "p_perm"] < 0.01
    assert g.loc["caudate", "p_perm"] > 0.05
    clf = pd.read_csv(out / "classification.tsv", sep="\t").set_index("structure")
    assert clf.loc["hippocampus", "auc"] > 0.7 and "not a diagnostic" in clf.loc["hippocampus", "note"]
    var = pd.read_csv(out / "pca" / "variance_explained.tsv", sep="\t")
    assert set(var["input"]) == {"log_energy"}  # no coefficients beside this table
    scores = pd.read_csv(out / "pca" / "mode_scores.tsv", sep="\t")
    assert len(scores) == 160 and "mode1" in scores.columns
    meta = json.loads((out / "compare.json").read_text())
    assert meta["model"]["formula"] == "y ~ 1 + group + age + C(sex) + head_size_mm3"
    assert meta["model"]["contrasts"] == ["patient - control"]
    assert meta["permutations"] == 1000 and meta["seed"] == 7
    assert meta["structures"]["hippocampus"]["pointwise"].startswith("skipped")
    assert "numpy" in meta["versions"] and meta["input"]["sha256"]

    # same seed, same bytes; without --force the folder is refused
    assert main(argv) == 1
    out2 = tmp_path / "stats2"
    assert main([a if a != str(out) else str(out2) for a in argv]) == 0
    for name in ("degree_tests.tsv", "global_test.tsv", "classification.tsv", "compare.json"):
        assert (out / name).read_bytes() == (out2 / name).read_bytes()
    assert main(argv + ["--force"]) == 0


def test_site_harmonisation(tmp_path):
    df = _spectra(n=90, site_offsets=True, structures=("hippocampus",))
    spectra = _write(df, tmp_path / "d")
    out = tmp_path / "s"
    assert main(["-q", "compare", str(spectra), "-o", str(out), "--group", "group",
                 "--covariates", "age,sex,head_size_mm3", "--site", "site", *FAST]) == 0
    h = pd.read_csv(out / "spectra_harmonised.tsv", sep="\t")
    assert len(h) == 90 and "l1" not in h.columns and "l12" in h.columns
    # site offsets up to 0.35 * (1 + 0.1 l) in log energy are gone: site means of the
    # harmonised log energy differ by < 0.1 (SE of a 30-subject site mean is ~0.04)
    loge = np.log(h[[f"l{k}" for k in range(2, 13)]])
    site_means = loge.groupby(h["site"]).mean()
    assert (site_means.max() - site_means.min()).max() < 0.1
    dt = pd.read_csv(out / "degree_tests.tsv", sep="\t").set_index("degree")
    assert dt.loc[EFFECT_DEGREE, "p_fwer"] < 0.01
    meta = json.loads((out / "compare.json").read_text())
    assert meta["harmonisation"]["site"] == "site"
    assert "within site blocks" in meta["permutation_method"]


def test_input_errors(tmp_path, capsys):
    df = _spectra(n=30, structures=("hippocampus",))
    small = df.copy()
    small["group"] = ["control"] * 27 + ["patient"] * 3
    spectra = _write(small, tmp_path / "a")
    # three subjects are enough (MIN_GROUP_SIZE)...
    assert main(["-q", "compare", str(spectra), "-o", str(tmp_path / "o1"), "--group", "group",
                 "--permutations", "10", "--classification-permutations", "2"]) == 0
    # ...two are not, and the message names the group and its size
    small["group"] = ["control"] * 28 + ["patient"] * 2
    spectra = _write(small, tmp_path / "b")
    assert main(["-q", "compare", str(spectra), "-o", str(tmp_path / "o2"), "--group", "group",
                 "--permutations", "10"]) == 1
    assert "'patient' has 2 subject(s)" in capsys.readouterr().err
    miss = df.copy()
    miss.loc[[4, 9], "age"] = np.nan
    spectra = _write(miss, tmp_path / "c")
    assert main(["-q", "compare", str(spectra), "-o", str(tmp_path / "o3"), "--group", "group",
                 "--covariates", "age", "--permutations", "10"]) == 1
    assert "sub-004, sub-009" in capsys.readouterr().err
    spectra = _write(df, tmp_path / "e")
    assert main(["-q", "compare", str(spectra), "-o", str(tmp_path / "o4"), "--group", "group",
                 "--degrees", "2-40", "--permutations", "10"]) == 1
    assert "degrees" in capsys.readouterr().err
    assert main(["-q", "compare", str(tmp_path / "nowhere"), "-o", str(tmp_path / "o5"),
                 "--group", "group"]) == 1


def _coefficient_study(folder, n=16, lmax=4, seed=3):
    """Ellipsoid-like shapes with a degree-3 bump in the patients, as coefficient files."""
    from shapedesc.align import Pose
    from shapedesc.descriptors import COEFFICIENT_FORMAT, write_coefficient_file

    rng = np.random.default_rng(seed)
    k = (lmax + 1) ** 2
    c1 = np.sqrt(4 * np.pi / 3)  # real Y_1m = sqrt(3/(4 pi)) * (y, z, x) at index 1, 2, 3
    rows = []
    (folder / "coefficients").mkdir(parents=True)
    for i in range(n):
        grp = "patient" if i % 2 else "control"
        v = rng.normal(0, 0.05, size=(k, 3))
        v[0] = 0.0
        v[3, 0] += 12.0 * c1
        v[1, 1] += 8.0 * c1
        v[2, 2] += 6.0 * c1
        if grp == "patient":
            v[3 * 3 + 3 + 0, 2] += 0.8  # (l=3, m=0) in z
        pose = Pose(translation_mm=np.zeros(3), object_rotation=np.eye(3),
                    parameter_rotation=np.eye(3), scale_method="none", scale_mm=1.0,
                    ellipsoid_semi_axes_mm=np.array([12.0, 8.0, 6.0]))
        meta = {"format": COEFFICIENT_FORMAT, "degree": lmax, "pose": pose.to_dict()}
        subj = f"sub-{i:02d}"
        write_coefficient_file(folder / "coefficients" / f"{subj}_thalamus.npz",
                               native_values=v, canonical_values=v, metadata=meta)
        e = np.array([np.sum(v[l * l:(l + 1) ** 2] ** 2) for l in range(1, lmax + 1)])
        row = {"subject": subj, "structure": "thalamus", "group": grp}
        row.update({f"l{l}": e[l - 1] / e[0] for l in range(1, lmax + 1)})
        rows.append(row)
    _write(pd.DataFrame(rows), folder)


def test_pointwise_maps_and_mode_surfaces(tmp_path):
    nib = pytest.importorskip("nibabel")
    _coefficient_study(tmp_path / "d")
    out = tmp_path / "s"
    assert main(["-q", "compare", str(tmp_path / "d"), "-o", str(out), "--group", "group",
                 "--permutations", "200", "--bootstrap", "200",
                 "--classification-permutations", "5", "--modes", "2"]) == 0
    img = nib.load(out / "vertex_tests.gii")
    names = [da.meta["Name"] for da in img.darrays]
    assert names[:4] == ["t", "p_parametric", "p_perm", "p_fwer"]
    surf = nib.load(out / "mean_surface.surf.gii")
    assert surf.darrays[0].data.shape[0] == img.darrays[0].data.shape[0]
    # a 0.8 mm-coefficient bump against 0.05 noise, 8 per group: found somewhere
    assert img.darrays[3].data.min() < 0.05
    assert (out / "mean_surface_patient.surf.gii").is_file()
    assert (out / "pca" / "thalamus_mode1_plus2sd.surf.gii").is_file()
    var = pd.read_csv(out / "pca" / "variance_explained.tsv", sep="\t")
    assert set(var["input"]) == {"coefficients"}
