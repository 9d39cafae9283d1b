"""The ``shapedesc compare`` run: read a describe OUTDIR, compare, write STATSDIR.

This is the study-level layer the command calls: it finds ``spectra.tsv`` and the
coefficient files, runs :func:`shapedesc.stats.compare.compare_spectra` and, when
coefficients and :mod:`shapedesc.reconstruct` are available, the point-wise tests and
the PCA mode surfaces, and writes every output atomically (tables in the stable TSV
format of :mod:`shapedesc.pipeline.outputs`).  STATSDIR layout::

    degree_tests.tsv        one row per structure x degree
    global_test.tsv         one row per structure
    classification.tsv      one row per structure (separability, not diagnosis)
    spectra_harmonised.tsv  with a site column only
    pca/variance_explained.tsv, pca/mode_scores.tsv, pca/<structure>_mode<k>_<tag>.surf.gii
    vertex_tests[_<structure>].gii, mean_surface[_<structure>][_<level>].surf.gii
    compare.json            model, contrasts, permutations, seed, versions, files

(no ``_<structure>`` suffix when one structure is analysed).  Research use only.
"""

from __future__ import annotations

import hashlib
import logging
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from shapedesc import CAUTION, __version__, defaults
from shapedesc.errors import OutputExistsError, StatsInputError

__all__ = ["compare_study", "resolve_input"]

log = logging.getLogger(__name__)


def resolve_input(path: str | Path) -> tuple[Path, Path | None]:
    """``(spectra.tsv, coefficients folder or None)`` for an OUTDIR or a spectra table."""
    path = Path(path)
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
    from shapedesc.descriptors import read_coefficients

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


def compare_study(
    source: str | Path,
    outdir: str | Path,
    *,
    group: str,
    levels: Sequence[str] | None = None,
    covariates: Sequence[str] = (),
    categorical: Sequence[str] = (),
    structures: Sequence[str] | None = None,
    degrees: str | None = None,
    n_permutations: int = defaults.DEFAULT_PERMUTATIONS,
    n_bootstrap: int = defaults.DEFAULT_BOOTSTRAP,
    classification_permutations: int = defaults.DEFAULT_CLASSIFICATION_PERMUTATIONS,
    seed: int = defaults.DEFAULT_SEED,
    site: str | None = None,
    n_modes: int = defaults.DEFAULT_PCA_MODES,
    pointwise: bool = True,
    smoothing: float = 0.0,
    force: bool = False,
) -> dict:
    """Compare groups in a describe OUTDIR (or spectra table) and write STATSDIR.

    Parameters are those of ``shapedesc compare`` (see :mod:`shapedesc.cli.compare` and
    :func:`shapedesc.stats.compare.compare_spectra`); ``seed`` fixes every random draw,
    so the same inputs and seed write the same bytes.

    Returns
    -------
    dict
        The content of ``compare.json``.

    Raises
    ------
    OutputExistsError
        STATSDIR is not empty and ``force`` is False.
    StatsInputError
        Unreadable input or a model that cannot be fitted (the message says why).
    """
    import pandas as pd

    structures = list(structures) if structures else None

    from shapedesc.pipeline.outputs import dependency_versions, write_json, write_tsv
    from shapedesc.stats.compare import compare_spectra, pointwise_comparison
    from shapedesc.stats.shapespace import features_to_coefficients

    spectra, coef_dir = resolve_input(source)
    outdir = Path(outdir)
    _check_outdir(outdir, force)
    table = _read_table(spectra)
    records = _load_coefficients(coef_dir, table, structures)
    coefficients = {k: r.values for k, r in records.items()} or None
    seed = int(seed)
    base = np.random.default_rng(seed)
    g_spectra, g_points = base.spawn(2)
    log.info("compare: %s, group %s, %d permutations, seed %d", spectra, group,
             n_permutations, seed)
    result = compare_spectra(
        table, group=group, levels=levels, covariates=covariates, categorical=categorical,
        degrees=degrees, structures=structures, site=site, n_permutations=n_permutations,
        n_bootstrap=n_bootstrap, classification_permutations=classification_permutations,
        n_modes=n_modes, coefficients=coefficients, rng=g_spectra, source=str(spectra))
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
    from shapedesc.reconstruct import reconstruct_values
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
                   group: sc.design.levels[sc.design.group_codes[i]]}
            row.update({f"mode{k + 1}": pca.scores[i, k] for k in range(pca.n_modes)})
            score_rows.append(row)
        if sc.pca_input == "coefficients":
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
        if not pointwise:
            pointwise_notes[sc.structure] = "skipped: point-wise tests not requested"
        elif not records:
            pointwise_notes[sc.structure] = "skipped: no coefficients/ beside the spectra table"
        elif not all(k in records for k in keys):
            miss = [k[0] for k in keys if k not in records]
            pointwise_notes[sc.structure] = (f"skipped: no coefficient file for {len(miss)} "
                                             f"subject(s) ({', '.join(miss[:5])})")
        else:
            vt = pointwise_comparison([records[k].values for k in keys], sc.design,
                                      smoothing=smoothing,
                                      n_permutations=n_permutations, rng=gen,
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

    options = {"group": group, "site": site, "permutations": int(n_permutations),
               "bootstrap": int(n_bootstrap), "smoothing": float(smoothing),
               "classification_permutations": int(classification_permutations),
               "seed": seed}
    meta = _metadata(options, spectra, result, pointwise_notes, files, dependency_versions())
    write_json(outdir / "compare.json", meta)
    for sc in result.structures:
        dt = sc.degree_tests
        hits = dt.loc[dt["p_fwer"] <= defaults.DEFAULT_ALPHA, "degree"].tolist()
        log.info("%s: %d subjects; degrees with p_fwer <= %g: %s", sc.structure,
                 sc.design.n_subjects, defaults.DEFAULT_ALPHA, hits or "none")
    log.info("wrote %s", outdir)
    return meta



def _safe(text: str) -> str:
    """A group level as a file-name part (characters outside [A-Za-z0-9._+-] become -)."""
    return re.sub(r"[^A-Za-z0-9._+-]", "-", str(text))


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _metadata(opts: dict, spectra: Path, result, pointwise_notes, files, versions) -> dict:
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
            "group": opts["group"], "levels": list(first.levels), "reference_level": first.levels[0],
            "covariates": list(first.covariates), "categorical": list(first.categorical),
            "numeric_covariates": "mean-centred", "categorical_coding": "treatment (first sorted value as reference)",
            "contrasts": list(first.contrast_names), "test": first.kind,
        },
        "degrees": list(result.settings["degrees"]),
        "permutations": opts["permutations"],
        "permutation_method": "Freedman-Lane (Winkler et al. 2014, doi:10.1016/j.neuroimage.2014.01.060)"
                              + (", within site blocks" if opts["site"] else ""),
        "fwer": "maximum statistic across the tested degrees, per structure",
        "fdr": "Benjamini-Hochberg across the tested degrees on p_perm, per structure",
        "effect_size": ("Hedges' g (J = 1 - 3/(4(n1+n2)-9)) of the log energies, "
                        f"{opts['bootstrap']} percentile-bootstrap resamples within groups, "
                        f"{int(defaults.DEFAULT_CONFIDENCE * 100)} % interval; not "
                        "covariate-adjusted" if first.kind == "t" else "partial eta squared"),
        "global_test": "Hotelling's T2 (one-column contrast) or Pillai's trace, Freedman-Lane permutations",
        "harmonisation": ({"method": "ComBat, empirical Bayes (Johnson et al. 2007; Fortin et al. 2018)",
                           "site": opts["site"], "scale": "log energy",
                           "protected": list(first.columns[1:])} if opts["site"] else None),
        "classification": {"features": "log energies of the tested degrees",
                           "permutations": opts["classification_permutations"],
                           "note": "separability of the groups, not a diagnostic"},
        "seed": opts["seed"],
        "pointwise_smoothing": opts["smoothing"],
        "structures": structures,
        "files": sorted(set(files)),
    }
