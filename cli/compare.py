"""``shapedesc compare``: group comparison of shape spectra (and point-wise shape).

INPUT is the OUTDIR of ``shapedesc describe`` (its ``spectra.tsv`` and, when present,
``coefficients/``) or a spectra table directly.  Per structure: a GLM of the log
normalised energy of each tested degree on the group and covariates, Freedman–Lane
permutation p-values, max-statistic FWER and Benjamini–Hochberg q across degrees,
Hedges' g with bootstrap intervals, a global multivariate test, cross-validated
separability (ROC AUC; separability, not diagnosis), a PCA shape space and, when
coefficients are available, per-vertex tests of normal displacement on the
correspondence icosphere.

Outputs in STATSDIR: degree_tests.tsv, global_test.tsv, classification.tsv,
pca/variance_explained.tsv, pca/mode_scores.tsv (+ pca/*.surf.gii mode surfaces),
vertex_tests.gii and mean_surface*.surf.gii (one structure; ``_<structure>`` suffixes for
several), spectra_harmonised.tsv with --site, compare.json.  Research use only.
"""

from __future__ import annotations

import argparse
import hashlib
import logging
import re
from pathlib import Path

import numpy as np

from shapedesc import CAUTION, __version__, defaults
from shapedesc.errors import OutputExistsError, StatsInputError

log = logging.getLogger("shapedesc.cli.compare")

HELP = "compare groups: per-degree and global tests, effect sizes, shape space, point-wise maps"

OUTPUTS = ("degree_tests.tsv", "global_test.tsv", "classification.tsv", "compare.json",
           "spectra_harmonised.tsv", "pca", "vertex_tests.gii", "mean_surface.surf.gii")


def _csv(text: str | None) -> list[str]:
    return [t.strip() for t in text.split(",") if t.strip()] if text else []


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "compare", help=HELP, description=HELP + ". " + __doc__.split("\n\n", 1)[1],
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("input", metavar="OUTDIR_or_spectra.tsv",
                   help="OUTDIR of `shapedesc describe`, or its spectra.tsv")
    p.add_argument("-o", "--outdir", required=True, metavar="STATSDIR", help="output folder")
    p.add_argument("--group", required=True, metavar="COLUMN", help="column holding the group")
    p.add_argument("--levels", metavar="A,B", default=None,
                   help="levels to compare, reference first (two: t test of B - A; more: F)")
    p.add_argument("--covariates", metavar="a,b", default=None,
                   help="covariate columns (numeric ones centred, text ones treatment coded)")
    p.add_argument("--categorical", metavar="a,b", default=None,
                   help="numeric covariates to treat as categorical (e.g. a scanner code)")
    p.add_argument("--structure", metavar="NAME", action="append", dest="structures",
                   help="structure to analyse (repeat for several; default: all)")
    p.add_argument("--degrees", metavar="2-15", default=None,
                   help=f"degrees to test (default {defaults.DEFAULT_FIRST_TEST_DEGREE} to the largest)")
    p.add_argument("--permutations", type=int, default=defaults.DEFAULT_PERMUTATIONS, metavar="N",
                   help=f"Freedman-Lane permutations (default {defaults.DEFAULT_PERMUTATIONS})")
    p.add_argument("--bootstrap", type=int, default=defaults.DEFAULT_BOOTSTRAP, metavar="N",
                   help=f"bootstrap resamples for Hedges' g intervals (default {defaults.DEFAULT_BOOTSTRAP})")
    p.add_argument("--classification-permutations", type=int, metavar="N",
                   default=defaults.DEFAULT_CLASSIFICATION_PERMUTATIONS,
                   help="label permutations for the separability p-value "
                        f"(default {defaults.DEFAULT_CLASSIFICATION_PERMUTATIONS})")
    p.add_argument("--seed", type=int, default=defaults.DEFAULT_SEED, metavar="S",
                   help=f"random seed (default {defaults.DEFAULT_SEED}); same seed, same outputs")
    p.add_argument("--site", metavar="COLUMN", default=None,
                   help="harmonise across sites with ComBat first; permute within sites")
    p.add_argument("--modes", type=int, default=defaults.DEFAULT_PCA_MODES, metavar="K",
                   help=f"PCA modes to report (default {defaults.DEFAULT_PCA_MODES})")
    p.add_argument("--no-pointwise", action="store_true",
                   help="skip the per-vertex tests even when coefficients are available")
    p.add_argument("--smoothing", type=float, default=0.0, metavar="S",
                   help="heat-kernel bandwidth of the reconstructions for point-wise tests")
    p.add_argument("--force", action="store_true", help="replace outputs in STATSDIR")
    return p


def _resolve_input(path: Path) -> tuple[Path, Path | None]:
    if path.is_dir():
        spectra = path / "spectra.tsv"
        if not spectra.is_file():
            raise StatsInputError(
                f"{path}: no spectra.tsv in this folder; give the OUTDIR of `shapedesc "
                "describe` or a spectra.tsv file")
        root = path
    elif path.is_file():
        spectra, root = path, path.parent
    else:
        raise StatsInputError(f"{path}: no such file or folder")
    coef = root / "coefficients"
    return spectra, (coef if coef.is_dir() else None)


def _check_outdir(outdir: Path, force: bool) -> None:
    if outdir.exists() and not outdir.is_dir():
        raise OutputExistsError(f"{outdir}: exists and is not a folder; choose another STATSDIR")
    if outdir.is_dir() and any(outdir.iterdir()) and not force:
        raise OutputExistsError(
            f"{outdir}: folder is not empty; pass --force to replace its results or choose "
            "another STATSDIR")


def _read_table(spectra: Path):
    import pandas as pd

    try:
        return pd.read_csv(spectra, sep="\t", dtype={"subject": str, "structure": str})
    except (pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
        raise StatsInputError(f"{spectra}: cannot be read as a tab-separated table ({exc})") from exc


def _load_coefficients(coef_dir: Path | None, table, structures) -> dict:
    """(subject, structure) -> record for every coefficient file found (lazy import)."""
    if coef_dir is None:
        return {}
    try:
        from shapedesc.descriptors import read_coefficients
    except ImportError:  # pragma: no cover - the reader ships with the package
        log.warning("coefficient reader unavailable; PCA of log energies, no point-wise tests")
        return {}
    out = {}
    for subj, struct in table[["subject", "structure"]].astype(str).itertuples(index=False):
        if structures and struct not in structures:
            continue
        f = coef_dir / f"{subj}_{struct}.npz"
        if f.is_file():
            out[(subj, struct)] = read_coefficients(f)
    return out


def _rows(df) -> tuple[list[str], list[dict]]:
    return [str(c) for c in df.columns], df.to_dict("records")


def run(args: argparse.Namespace) -> int:
    import pandas as pd

    from shapedesc.pipeline.outputs import dependency_versions, write_json, write_tsv
    from shapedesc.stats.compare import compare_spectra, pointwise_comparison
    from shapedesc.stats.shapespace import features_to_coefficients

    spectra, coef_dir = _resolve_input(Path(args.input))
    outdir = Path(args.outdir)
    _check_outdir(outdir, args.force)
    table = _read_table(spectra)
    records = _load_coefficients(coef_dir, table, args.structures)
    coefficients = {k: r.values for k, r in records.items()} or None
    seed = int(args.seed)
    base = np.random.default_rng(seed)
    g_spectra, g_points = base.spawn(2)
    log.info("compare: %s, group %s, %d permutations, seed %d", spectra, args.group,
             args.permutations, seed)
    result = compare_spectra(
        table, group=args.group, levels=_csv(args.levels) or None,
        covariates=_csv(args.covariates), categorical=_csv(args.categorical),
        degrees=args.degrees, structures=args.structures, site=args.site,
        n_permutations=args.permutations, n_bootstrap=args.bootstrap,
        classification_permutations=args.classification_permutations, n_modes=args.modes,
        coefficients=coefficients, rng=g_spectra, source=str(spectra))
    outdir.mkdir(parents=True, exist_ok=True)
    files: list[str] = []

    def tsv(name, df):
        write_tsv(outdir / name, *_rows(df))
        files.append(name)

    tsv("degree_tests.tsv", result.degree_tests())
    tsv("global_test.tsv", result.global_tests())
    tsv("classification.tsv", result.classification())
    harmonised = [s.harmonised for s in result.structures if s.harmonised is not None]
    if harmonised:
        tsv("spectra_harmonised.tsv", pd.concat(harmonised, ignore_index=True))

    # PCA tables (+ mode surfaces when built from coefficients)
    var_rows, score_rows = [], []
    single = len(result.structures) == 1
    try:
        from shapedesc.reconstruct import reconstruct_values
    except ImportError:  # pragma: no cover - ships with the package
        reconstruct_values = None
    from shapedesc.stats.vertexwise import write_surface_gifti, write_vertex_gifti

    pointwise_notes = {}
    streams = g_points.spawn(len(result.structures))
    for sc, gen in zip(result.structures, streams):
        pca = sc.pca
        cum = np.cumsum(pca.explained_variance_ratio)
        for k in range(pca.n_modes):
            var_rows.append({"structure": sc.structure, "input": sc.pca_input, "mode": k + 1,
                             "variance": pca.explained_variance[k],
                             "variance_ratio": pca.explained_variance_ratio[k],
                             "cumulative_ratio": cum[k]})
        for i, label in enumerate(sc.design.labels):
            row = {"subject": label, "structure": sc.structure,
                   args.group: sc.design.levels[sc.design.group_codes[i]]}
            row.update({f"mode{k + 1}": pca.scores[i, k] for k in range(pca.n_modes)})
            score_rows.append(row)
        if sc.pca_input == "coefficients" and reconstruct_values is not None:
            degree = int(round(np.sqrt(pca.mean.size / 3 + 1))) - 1
            for k in range(min(pca.n_modes, 3)):
                for tag, sd in (("minus2sd", -defaults.PCA_MODE_SD), ("mean", 0.0),
                                ("plus2sd", defaults.PCA_MODE_SD)):
                    vals = features_to_coefficients(pca.mode_point(k, sd), degree)
                    v, f = reconstruct_values(vals, degree)
                    name = f"pca/{sc.structure}_mode{k + 1}_{tag}.surf.gii"
                    write_surface_gifti(outdir / name, v, f, overwrite=True)
                    files.append(name)
        # point-wise tests
        keys = [(lab, sc.structure) for lab in
                table[table["structure"].astype(str) == sc.structure]["subject"].astype(str)
                .to_numpy()[sc.design.rows]]
        if args.no_pointwise:
            pointwise_notes[sc.structure] = "skipped: --no-pointwise"
        elif reconstruct_values is None or not records:
            pointwise_notes[sc.structure] = "skipped: no coefficients/ beside the spectra table"
        elif not all(k in records for k in keys):
            miss = [k[0] for k in keys if k not in records]
            pointwise_notes[sc.structure] = (f"skipped: no coefficient file for {len(miss)} "
                                             f"subject(s) ({', '.join(miss[:5])})")
        else:
            vt = pointwise_comparison([records[k].values for k in keys], sc.design,
                                      smoothing=args.smoothing,
                                      n_permutations=args.permutations, rng=gen,
                                      blocks=sc.blocks)
            suffix = "" if single else f"_{sc.structure}"
            write_vertex_gifti(outdir / f"vertex_tests{suffix}.gii", vt, overwrite=True)
            write_surface_gifti(outdir / f"mean_surface{suffix}.surf.gii", vt.mean_vertices,
                                vt.faces, overwrite=True)
            files += [f"vertex_tests{suffix}.gii", f"mean_surface{suffix}.surf.gii"]
            for lv, verts in vt.group_mean_vertices.items():
                name = f"mean_surface{suffix}_{_safe(lv)}.surf.gii"
                write_surface_gifti(outdir / name, verts, vt.faces, overwrite=True)
                files.append(name)
            n_sig = int(np.sum(vt.test.p_fwer <= defaults.DEFAULT_ALPHA))
            pointwise_notes[sc.structure] = (f"{vt.mean_vertices.shape[0]} vertices, "
                                             f"{n_sig} with p_fwer <= {defaults.DEFAULT_ALPHA}")
        log.info("%s: %s", sc.structure, pointwise_notes[sc.structure])
    tsv("pca/variance_explained.tsv", pd.DataFrame(var_rows))
    tsv("pca/mode_scores.tsv", pd.DataFrame(score_rows))

    meta = _metadata(args, spectra, result, pointwise_notes, files, dependency_versions())
    write_json(outdir / "compare.json", meta)
    for sc in result.structures:
        dt = sc.degree_tests
        hits = dt.loc[dt["p_fwer"] <= defaults.DEFAULT_ALPHA, "degree"].tolist()
        log.info("%s: %d subjects; degrees with p_fwer <= %g: %s", sc.structure,
                 sc.design.n_subjects, defaults.DEFAULT_ALPHA, hits or "none")
    log.info("wrote %s", outdir)
    return 0


def _safe(text: str) -> str:
    """A group level as a file-name part (characters outside [A-Za-z0-9._+-] become -)."""
    return re.sub(r"[^A-Za-z0-9._+-]", "-", str(text))


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _metadata(args, spectra: Path, result, pointwise_notes, files, versions) -> dict:
    structures = {}
    for sc in result.structures:
        d = sc.design
        structures[sc.structure] = {
            "n_subjects": d.n_subjects, "group_sizes": d.group_sizes(),
            "design_columns": list(d.columns),
            "contrast": {"names": list(d.contrast_names), "matrix": d.contrast.T.tolist(),
                         "test": d.kind},
            "pca_input": sc.pca_input,
            "pointwise": pointwise_notes.get(sc.structure),
            "global_test": sc.global_test.get("statistic_name") or sc.global_test.get("skipped"),
        }
    first = result.structures[0].design
    return {
        "command": "shapedesc compare",
        "shapedesc_version": __version__,
        "versions": versions,
        "caution": CAUTION,
        "input": {"spectra": spectra.name, "sha256": _sha256(spectra)},
        "model": {
            "response": "natural log of the normalised per-degree energy (column l<k>)",
            "formula": first.formula,
            "group": args.group, "levels": list(first.levels), "reference_level": first.levels[0],
            "covariates": list(first.covariates), "categorical": list(first.categorical),
            "numeric_covariates": "mean-centred", "categorical_coding": "treatment (first sorted value as reference)",
            "contrasts": list(first.contrast_names), "test": first.kind,
        },
        "degrees": list(result.settings["degrees"]),
        "permutations": int(args.permutations),
        "permutation_method": "Freedman-Lane (Winkler et al. 2014, doi:10.1016/j.neuroimage.2014.01.060)"
                              + (", within site blocks" if args.site else ""),
        "fwer": "maximum statistic across the tested degrees, per structure",
        "fdr": "Benjamini-Hochberg across the tested degrees on p_perm, per structure",
        "effect_size": ("Hedges' g (J = 1 - 3/(4(n1+n2)-9)) of the log energies, "
                        f"{args.bootstrap} percentile-bootstrap resamples within groups, "
                        f"{int(defaults.DEFAULT_CONFIDENCE * 100)} % interval; not "
                        "covariate-adjusted" if first.kind == "t" else "partial eta squared"),
        "global_test": "Hotelling's T2 (one-column contrast) or Pillai's trace, Freedman-Lane permutations",
        "harmonisation": ({"method": "ComBat, empirical Bayes (Johnson et al. 2007; Fortin et al. 2018)",
                           "site": args.site, "scale": "log energy",
                           "protected": list(first.columns[1:])} if args.site else None),
        "classification": {"features": "log energies of the tested degrees",
                           "permutations": int(args.classification_permutations),
                           "note": "separability of the groups, not a diagnostic"},
        "seed": int(args.seed),
        "structures": structures,
        "files": sorted(set(files)),
    }
