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

from shapedesc import defaults

HELP = "compare groups: per-degree and global tests, effect sizes, shape space, point-wise maps"


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


def run(args: argparse.Namespace) -> int:
    from shapedesc.stats.study import compare_study

    compare_study(
        args.input, args.outdir, group=args.group, levels=_csv(args.levels) or None,
        covariates=_csv(args.covariates), categorical=_csv(args.categorical),
        structures=args.structures, degrees=args.degrees, n_permutations=args.permutations,
        n_bootstrap=args.bootstrap, classification_permutations=args.classification_permutations,
        seed=args.seed, site=args.site, n_modes=args.modes, pointwise=not args.no_pointwise,
        smoothing=args.smoothing, force=args.force)
    return 0
