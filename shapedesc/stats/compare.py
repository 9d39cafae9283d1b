"""Study-level group comparison of shape spectra: what ``shapedesc compare`` runs.

For each structure of a spectra table (``spectra.tsv`` of ``shapedesc describe``: one
row per subject x structure, the manifest's columns, ``l1 .. lL`` normalised energies):

1. the design of :func:`shapedesc.stats.design.build_design` (group, covariates, checks);
2. responses: the natural log of the normalised energy of each tested degree;
3. optionally ComBat across sites (:mod:`~shapedesc.stats.harmonise`), protecting the
   group and covariates; permutations then stay within sites (exchangeability blocks);
4. per degree: OLS t (two levels) or F (more), Freedman–Lane permutation p, max-statistic
   FWER across the tested degrees, Benjamini–Hochberg q across them (on ``p_perm``), and
   for two levels Hedges' g of the (harmonised) log energies with a bootstrap interval
   (``hedges_g``: the raw two-group difference over the pooled SD, covariates ignored)
   and the covariate-adjusted ``hedges_g_adjusted`` (the model's group estimate over the
   residual SD of the full model, with Hedges' factor for the error degrees of freedom);
   the two agree when there are no covariates;
5. a global test across the tested degrees (Hotelling's T² / Pillai's trace, permutation p);
6. cross-validated separability of the groups from the log energies (ROC AUC, permutation
   p) and a PCA shape space (of aligned coefficients when given, else of log energies).

Randomness: one seed; every structure and every task draws from its own child stream
(``numpy.random.Generator.spawn``), so results do not depend on which tasks run.

Research use only: group statistics, not a diagnostic device.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from shapedesc import defaults
from shapedesc.errors import StatsInputError
from shapedesc.stats.design import Design, build_design, row_labels
from shapedesc.stats.effect import hedges_g_interval
from shapedesc.stats.harmonise import combat
from shapedesc.stats.multiple import benjamini_hochberg
from shapedesc.stats.multivariate import multivariate_test
from shapedesc.stats.permutation import freedman_lane
from shapedesc.stats.shapespace import ShapeSpace, classify_groups, shape_pca

__all__ = [
    "StructureComparison",
    "Comparison",
    "parse_degrees",
    "degree_columns",
    "log_energies",
    "compare_spectra",
    "adjusted_effect_size",
    "pointwise_comparison",
]

log = logging.getLogger(__name__)

_DEGREE_COLUMN = re.compile(r"^l(\d+)$")


@dataclass(frozen=True)
class StructureComparison:
    """Everything computed for one structure.

    Attributes
    ----------
    structure : str
    design : Design
    degrees : tuple of int
    degree_tests : pandas.DataFrame
        One row per degree (columns as in ``degree_tests.tsv``).
    global_test : dict
        One row of ``global_test.tsv`` (``skipped`` says why when it could not run).
    classification : dict
        One row of ``classification.tsv``.
    pca : ShapeSpace
    pca_input : str
        ``"coefficients"`` or ``"log_energy"``.
    harmonised : pandas.DataFrame or None
        With a site column: the used rows of the input table, the tested degrees'
        columns replaced by their harmonised energies (ComBat on the log scale, written
        back as energies) and the untested degree columns left out.
    blocks : ndarray or None, shape (n,)
        Exchangeability blocks (site codes) used by the permutations.
    """

    structure: str
    design: Design
    degrees: tuple[int, ...]
    degree_tests: pd.DataFrame
    global_test: dict
    classification: dict
    pca: ShapeSpace
    pca_input: str
    harmonised: pd.DataFrame | None
    blocks: np.ndarray | None


@dataclass(frozen=True)
class Comparison:
    """Results for every structure plus the settings that made them."""

    structures: tuple[StructureComparison, ...]
    settings: dict = field(default_factory=dict)

    def degree_tests(self) -> pd.DataFrame:
        return pd.concat([s.degree_tests for s in self.structures], ignore_index=True)

    def global_tests(self) -> pd.DataFrame:
        return pd.DataFrame([s.global_test for s in self.structures])

    def classification(self) -> pd.DataFrame:
        return pd.DataFrame([s.classification for s in self.structures])


def parse_degrees(text: str | None, available: Sequence[int]) -> tuple[int, ...]:
    """Degrees from ``"2-15"``, ``"2,3,5"`` or ``"2-5,8"``; default 2 .. max available.

    Raises
    ------
    StatsInputError
        Unparseable text, degree < 1, or a degree without its ``l<k>`` column.
    """
    avail = sorted(int(a) for a in available)
    if not avail:
        raise StatsInputError("the table has no degree columns l1 .. lL")
    if text is None or not str(text).strip():
        first = defaults.DEFAULT_FIRST_TEST_DEGREE
        out = tuple(d for d in avail if d >= first)
        if not out:
            raise StatsInputError(f"the table has degrees {avail} only; none >= {first} to test")
        return out
    out: list[int] = []
    for part in str(text).split(","):
        part = part.strip()
        m = re.fullmatch(r"(\d+)(?:\s*-\s*(\d+))?", part)
        if not m:
            raise StatsInputError(
                f"degrees {text!r}: cannot read {part!r}; write e.g. 2-15 or 2,3,5")
        lo = int(m.group(1))
        hi = int(m.group(2)) if m.group(2) else lo
        if hi < lo:
            raise StatsInputError(f"degrees {text!r}: range {part!r} runs backwards")
        out.extend(range(lo, hi + 1))
    out = sorted(set(out))
    if out[0] < 1:
        raise StatsInputError(
            f"degrees {text!r}: degree 0 is position and carries no shape; start at 1 or 2")
    missing = [d for d in out if d not in avail]
    if missing:
        raise StatsInputError(
            f"degrees {missing} requested but the table has l{avail[0]} .. l{avail[-1]}; "
            "choose degrees within that range (or rerun describe with a larger --degree)")
    return tuple(out)


def degree_columns(table: pd.DataFrame) -> dict[int, str]:
    """Map degree -> column name for the ``l<k>`` columns of a spectra table."""
    out = {}
    for c in table.columns:
        m = _DEGREE_COLUMN.match(str(c))
        if m:
            out[int(m.group(1))] = str(c)
    return dict(sorted(out.items()))


def log_energies(table: pd.DataFrame, degrees: Sequence[int], *, source: str = "<table>") -> np.ndarray:
    """Natural log of the energy columns ``l<k>`` for ``degrees``, shape (n, len(degrees)).

    Raises
    ------
    StatsInputError
        A missing, non-positive or non-finite energy (rows and degree named).
    """
    cols = degree_columns(table)
    labels = row_labels(table)
    out = np.empty((len(table), len(degrees)))
    for j, d in enumerate(degrees):
        if d not in cols:
            raise StatsInputError(f"{source}: no column l{d}")
        v = pd.to_numeric(table[cols[d]], errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(~(np.isfinite(v) & (v > 0)))
        if bad.size:
            shown = ", ".join(labels[i] for i in bad[:10])
            raise StatsInputError(
                f"{source}: column l{d} has {bad.size} missing, non-positive or non-finite "
                f"value(s) (rows {shown}); energies must be positive to take logs. Check "
                "failures.tsv of describe, or drop those subjects.")
        out[:, j] = np.log(v)
    return out


def _fmt_degrees(degrees: Sequence[int]) -> str:
    d = list(degrees)
    if d == list(range(d[0], d[-1] + 1)):
        return f"{d[0]}-{d[-1]}" if len(d) > 1 else str(d[0])
    return ",".join(map(str, d))


def adjusted_effect_size(estimate, residual_ss, df_error: int) -> np.ndarray:
    """Covariate-adjusted standardised group difference, per response.

    ``g_adj = J · b / s``, with ``b`` the group estimate of the linear model (adjusted for
    the covariates), ``s = sqrt(RSS / df_error)`` the residual SD of the full model and
    Hedges' factor ``J = 1 - 3 / (4 df_error - 1)``. With a group-only model
    ``s`` is the pooled within-group SD and ``df_error = n1 + n2 - 2``, so this is
    exactly Hedges' g (Hedges 1981, eq. 6e).

    Parameters
    ----------
    estimate, residual_ss : array_like, shape (m,)
        Group contrast estimate and residual sum of squares per response.
    df_error : int
        Residual degrees of freedom (> 1).

    Returns
    -------
    ndarray, shape (m,)

    References
    ----------
    Hedges LV (1981). *J Educ Stat* 6(2), 107–128. doi:10.3102/10769986006002107
    """
    j = 1.0 - 3.0 / (4.0 * df_error - 1.0)
    return j * np.asarray(estimate, float) / np.sqrt(np.asarray(residual_ss, float) / df_error)


def compare_spectra(
    table: pd.DataFrame,
    *,
    group: str,
    levels: Sequence[str] | None = None,
    covariates: Sequence[str] = (),
    categorical: Sequence[str] = (),
    degrees: str | Sequence[int] | None = None,
    structures: Sequence[str] | None = None,
    site: str | None = None,
    n_permutations: int = defaults.DEFAULT_PERMUTATIONS,
    n_bootstrap: int = defaults.DEFAULT_BOOTSTRAP,
    classification_permutations: int = defaults.DEFAULT_CLASSIFICATION_PERMUTATIONS,
    n_modes: int = defaults.DEFAULT_PCA_MODES,
    coefficients: Mapping[tuple[str, str], np.ndarray] | None = None,
    rng: np.random.Generator | int | None = None,
    source: str = "<table>",
) -> Comparison:
    """Compare groups degree by degree, globally and in shape space, per structure.

    Parameters
    ----------
    table : pandas.DataFrame
        Spectra table: ``subject``, ``structure``, manifest columns, ``l1 .. lL``.
    group, levels, covariates, categorical
        See :func:`shapedesc.stats.design.build_design`.
    degrees : str or sequence of int, optional
        Degrees to test (``"2-15"``); default 2 .. L.
    structures : sequence of str, optional
        Structures to analyse (default: all, sorted).
    site : str, optional
        Column of the acquisition site: harmonise with ComBat before testing and
        permute within sites.
    n_permutations : int
        Freedman–Lane permutations for the degree and global tests.
    n_bootstrap : int
        Bootstrap resamples of Hedges' g.
    classification_permutations : int
        Label permutations for the separability p-value.
    n_modes : int
        PCA modes kept.
    coefficients : mapping (subject, structure) -> ndarray ((L+1)^2, 3), optional
        Canonical-pose coefficients; when given for every used subject, the PCA shape
        space is built from them (see :func:`shapedesc.stats.shapespace.coefficient_features`).
    rng : numpy.random.Generator, int or None
    source : str
        Name of the table for messages.

    Returns
    -------
    Comparison
    """
    for col in ("subject", "structure"):
        if col not in table.columns:
            raise StatsInputError(
                f"{source}: no {col!r} column; give the spectra.tsv written by `shapedesc describe`")
    dup = table.duplicated(["subject", "structure"])
    if dup.any():
        rows = table.loc[dup, ["subject", "structure"]].astype(str).agg("/".join, axis=1)
        raise StatsInputError(
            f"{source}: subject x structure repeated in {int(dup.sum())} row(s) "
            f"({', '.join(rows.iloc[:10])}); each subject needs one row per structure")
    present = sorted(table["structure"].astype(str).unique())
    if structures:
        absent = [s for s in structures if s not in present]
        if absent:
            raise StatsInputError(
                f"{source}: structure(s) {absent} not found; the table has {present}")
        chosen = list(structures)
    else:
        chosen = present
    cols = degree_columns(table)
    if isinstance(degrees, str) or degrees is None:
        degs = parse_degrees(degrees, list(cols))
    else:
        degs = parse_degrees(",".join(map(str, degrees)), list(cols))
    if site is not None and site not in table.columns:
        raise StatsInputError(f"{source}: site column {site!r} not found")
    if site is not None and (site == group or site in covariates):
        raise StatsInputError(
            f"{source}: {site!r} is given as --site and as group/covariate; ComBat removes "
            "site effects, so give it once")
    base = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    streams = base.spawn(len(chosen))
    results = []
    for name, gen in zip(chosen, streams):
        sub = table[table["structure"].astype(str) == name].reset_index(drop=True)
        results.append(_compare_structure(
            sub, name, gen, group=group, levels=levels, covariates=covariates,
            categorical=categorical, degrees=degs, site=site, n_permutations=n_permutations,
            n_bootstrap=n_bootstrap, classification_permutations=classification_permutations,
            n_modes=n_modes, coefficients=coefficients, source=source))
    settings = {
        "group": group, "levels": list(results[0].design.levels) if results else None,
        "covariates": list(covariates), "categorical": list(categorical),
        "degrees": list(degs), "structures": chosen, "site": site,
        "n_permutations": int(n_permutations), "n_bootstrap": int(n_bootstrap),
        "classification_permutations": int(classification_permutations),
    }
    return Comparison(structures=tuple(results), settings=settings)


def _compare_structure(sub, name, gen, *, group, levels, covariates, categorical, degrees,
                       site, n_permutations, n_bootstrap, classification_permutations,
                       n_modes, coefficients, source) -> StructureComparison:
    where = f"{source} (structure {name})"
    design = build_design(sub, group=group, levels=levels, covariates=covariates,
                          categorical=categorical, source=where)
    used = sub.iloc[design.rows].reset_index(drop=True)
    y = log_energies(used, degrees, source=where)
    g_perm, g_boot, g_mv, g_clf = gen.spawn(4)
    blocks = None
    harmonised = None
    if site is not None:
        sites = used[site]
        bad = np.flatnonzero(sites.isna().to_numpy())
        if bad.size:
            raise StatsInputError(
                f"{where}: site column {site!r} has missing values in rows "
                f"{', '.join(design.labels[i] for i in bad[:10])}; fill them in")
        site_str = sites.astype(str).to_numpy()
        h = combat(y, site_str, design.matrix[:, 1:])
        y = h.data
        blocks = np.unique(site_str, return_inverse=True)[1]
        harmonised = used.copy()
        for j, d in enumerate(degrees):
            harmonised[f"l{d}"] = np.exp(y[:, j])
        keep = [c for c in harmonised.columns
                if not (_DEGREE_COLUMN.match(str(c)) and int(str(c)[1:]) not in degrees)]
        harmonised = harmonised[keep]
    perm = freedman_lane(y, design.matrix, design.contrast, n_permutations=n_permutations,
                         rng=g_perm, blocks=blocks)
    q = benjamini_hochberg(perm.p_perm)
    rows = {
        "structure": name, "degree": list(degrees), "column": [f"l{d}" for d in degrees],
        perm.kind: perm.statistic, "df1": perm.df1, "df2": perm.df2,
        "p_parametric": perm.p_parametric, "p_perm": perm.p_perm, "p_fwer": perm.p_fwer,
        "q_fdr": q,
    }
    from shapedesc.stats.glm import fit_contrast

    fit = fit_contrast(y, design.matrix, design.contrast)
    if perm.kind == "t":
        rows["estimate_log"] = fit.estimate[0]
        rows["se_log"] = fit.standard_error
        rows["energy_ratio"] = np.exp(fit.estimate[0])
        es = hedges_g_interval(y[design.group_codes == 0], y[design.group_codes == 1],
                               n_bootstrap=n_bootstrap, rng=g_boot)
        rows["hedges_g"] = es.g
        rows["g_ci_low"] = es.ci_low
        rows["g_ci_high"] = es.ci_high
        rows["hedges_g_adjusted"] = adjusted_effect_size(fit.estimate[0], fit.residual_ss,
                                                         fit.df2)
    f_equiv = perm.statistic**2 if perm.kind == "t" else perm.statistic
    rows["partial_eta2"] = f_equiv * perm.df1 / (f_equiv * perm.df1 + perm.df2)
    for i, lv in enumerate(design.levels):
        rows[f"n[{lv}]"] = int(np.sum(design.group_codes == i))
        rows[f"mean_log[{lv}]"] = y[design.group_codes == i].mean(0)
    degree_tests = pd.DataFrame(rows)

    glob = {"structure": name, "degrees": _fmt_degrees(degrees), "n_subjects": design.n_subjects}
    if len(degrees) < design.df_error:
        mv = multivariate_test(y, design.matrix, design.contrast, n_permutations=n_permutations,
                               rng=g_mv, blocks=blocks)
        glob.update(statistic_name=mv.statistic_name, statistic=mv.statistic, F=mv.f_value,
                    df1=mv.df1, df2=mv.df2, p_parametric=mv.p_parametric, p_perm=mv.p_perm,
                    n_permutations=mv.n_permutations,
                    hotelling_lawley_trace=mv.hotelling_lawley_trace,
                    pillai_trace=mv.pillai_trace, skipped=None)
    else:
        glob["skipped"] = (f"{len(degrees)} degrees but {design.df_error} error degrees of "
                           "freedom; select fewer degrees")
        log.warning("%s: global test skipped: %s", where, glob["skipped"])

    clf = classify_groups(y, design.group_codes, n_permutations=classification_permutations,
                          rng=g_clf)
    classification = {
        "structure": name, "features": f"log energy, degrees {_fmt_degrees(degrees)}",
        "n_features": len(degrees), "levels": ",".join(design.levels), "auc": clf.auc,
        "auc_sd_folds": float(np.std(clf.fold_auc, ddof=1)) if clf.fold_auc.size > 1 else None,
        "p_perm": clf.p_value, "n_permutations": clf.n_permutations, "n_splits": clf.n_splits,
        "chance_auc": 0.5, "classifier": clf.classifier, "note": clf.note,
    }

    pca_input = "log_energy"
    feats = y
    if coefficients is not None:
        keys = [(str(s), name) for s in used["subject"]]
        if all(k in coefficients for k in keys):
            from shapedesc.stats.shapespace import coefficient_features

            feats = coefficient_features([coefficients[k] for k in keys])
            pca_input = "coefficients"
        else:
            missing = [k[0] for k in keys if k not in coefficients]
            log.warning("%s: no coefficients for %d subject(s) (%s); PCA of log energies "
                        "instead", where, len(missing), ", ".join(missing[:5]))
    pca = shape_pca(feats, n_modes=n_modes)
    return StructureComparison(structure=name, design=design, degrees=tuple(degrees),
                               degree_tests=degree_tests, global_test=glob,
                               classification=classification, pca=pca, pca_input=pca_input,
                               harmonised=harmonised, blocks=blocks)


def pointwise_comparison(
    coefficient_values: Sequence[np.ndarray],
    design: Design,
    *,
    degree: int | None = None,
    smoothing: float = 0.0,
    level: int | None = None,
    n_permutations: int = defaults.DEFAULT_PERMUTATIONS,
    rng: np.random.Generator | int | None = None,
    blocks: np.ndarray | None = None,
):
    """Per-vertex test of the subjects' reconstructions on the correspondence icosphere.

    Parameters
    ----------
    coefficient_values : sequence of ndarray, each ((L+1)^2, 3), mm
        Canonical-pose coefficients of the design's subjects, in design row order.
    design : Design
    degree, smoothing, level
        Passed to :func:`shapedesc.reconstruct.reconstruct_values` (truncation degree,
        heat-kernel bandwidth, icosphere level; ``level=None`` is its default).
    n_permutations : int
    rng : numpy.random.Generator, int or None
    blocks : ndarray, shape (n,), optional

    Returns
    -------
    shapedesc.stats.vertexwise.VertexTests
    """
    from shapedesc.reconstruct import reconstruct_values
    from shapedesc.stats.vertexwise import vertex_tests

    if len(coefficient_values) != design.n_subjects:
        raise StatsInputError(
            f"{len(coefficient_values)} coefficient sets for {design.n_subjects} subjects")
    kw = {} if level is None else {"level": int(level)}
    arrays = [np.asarray(v, dtype=float) for v in coefficient_values]
    sizes = {a.shape for a in arrays}
    if len(sizes) != 1 or arrays[0].ndim != 2 or arrays[0].shape[1] != 3:
        raise StatsInputError(
            f"coefficient arrays must all have the same shape ((L+1)^2, 3); found {sorted(sizes)}."
            " Rerun describe with one --degree for the whole study")
    lmax = int(round(np.sqrt(arrays[0].shape[0]))) - 1
    # Synthesis is linear in the coefficients: all subjects' x, y, z as columns of one
    # ((L+1)^2, 3 n) array cost one basis evaluation instead of n.
    stacked = np.concatenate(arrays, axis=1)
    x, faces = reconstruct_values(stacked, lmax, degree=degree, smoothing=smoothing, **kw)
    verts = x.reshape(x.shape[0], len(arrays), 3).transpose(1, 0, 2)
    return vertex_tests(verts, faces, design.matrix, design.contrast,
                        design.group_codes, design.levels, n_permutations=n_permutations,
                        rng=rng, blocks=blocks)
