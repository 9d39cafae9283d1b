"""Multivariate shape space: PCA of aligned coefficients, cross-validated group separability.

Shape space: each subject's canonical-pose coefficients (degrees 1..L, x, y, z; degree 0
is position and is left out) flattened into one vector; principal component analysis
gives the modes of variation, the variance each explains and each subject's scores; the
coefficients at ``mean ± k SD`` along a mode rebuild a surface to look at.

Separability: a cross-validated classifier (standardised features, L2 logistic
regression, stratified folds) predicts the group from the descriptors; its ROC AUC with a
label-permutation p-value (Ojala & Garriga 2010) measures how separable the groups are
in these descriptors.  It is a measure of separability, not a diagnostic: no clinical
use, no claim about individuals.

References
----------
Jolliffe IT, Cadima J (2016). Principal component analysis: a review and recent
developments. Phil Trans R Soc A 374:20150202. doi:10.1098/rsta.2015.0202
Ojala M, Garriga GC (2010). Permutation tests for studying classifier performance.
J Mach Learn Res 11:1833-1863.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shapedesc import defaults
from shapedesc.errors import StatsInputError

__all__ = [
    "ShapeSpace",
    "Separability",
    "coefficient_features",
    "features_to_coefficients",
    "shape_pca",
    "classify_groups",
]


@dataclass(frozen=True)
class ShapeSpace:
    """Principal modes of shape variation.

    Attributes
    ----------
    mean : ndarray, shape (F,)
        Mean feature vector (coefficients in mm when built from coefficients).
    components : ndarray, shape (k, F)
        Unit-length modes (rows), sign fixed so the largest-magnitude entry is positive.
    explained_variance : ndarray, shape (k,)
        Variance along each mode (feature units squared; ddof=1).
    explained_variance_ratio : ndarray, shape (k,)
        Fraction of the total variance.
    scores : ndarray, shape (n, k)
        Each subject's coordinates along the modes (feature units).
    """

    mean: np.ndarray
    components: np.ndarray
    explained_variance: np.ndarray
    explained_variance_ratio: np.ndarray
    scores: np.ndarray

    @property
    def n_modes(self) -> int:
        return int(self.components.shape[0])

    def mode_point(self, mode: int, sd: float) -> np.ndarray:
        """Features at ``mean + sd * sqrt(variance) * component`` along ``mode`` (0-based), shape (F,)."""
        if not 0 <= mode < self.n_modes:
            raise StatsInputError(f"mode must be in [0, {self.n_modes}), got {mode}")
        return self.mean + sd * np.sqrt(self.explained_variance[mode]) * self.components[mode]


@dataclass(frozen=True)
class Separability:
    """Cross-validated group separability (not a diagnostic).

    Attributes
    ----------
    auc : float
        Mean ROC AUC over folds (one-vs-rest, macro-averaged, for more than two groups).
    fold_auc : ndarray, shape (n_splits,)
    p_value : float
        ``(1 + #{AUC_perm >= AUC}) / (1 + n_permutations)`` with the labels permuted.
    null_auc : ndarray, shape (n_permutations,)
    n_splits : int
    n_permutations : int
    classifier : str
    """

    auc: float
    fold_auc: np.ndarray
    p_value: float
    null_auc: np.ndarray
    n_splits: int
    n_permutations: int
    classifier: str
    note: str = "separability of the groups in these descriptors, not a diagnostic"


def coefficient_features(values: Sequence[np.ndarray], *, degree: int | None = None) -> np.ndarray:
    """Flatten canonical-pose coefficients of degrees 1..degree into feature vectors.

    Parameters
    ----------
    values : sequence of ndarray, each shape ((L+1)^2, 3)
        Real orthonormal coefficients (mm), flat index l^2 + l + m; same L for all (or
        at least ``degree``).
    degree : int, optional
        Highest degree kept (default: the smallest L among the inputs).

    Returns
    -------
    ndarray, shape (n, 3 ((degree+1)^2 - 1)), mm
        Rows: subjects; columns: coefficient index 1.. (degree+1)^2 - 1, then x, y, z.
    """
    arrs = [np.asarray(v, dtype=float) for v in values]
    if not arrs:
        raise StatsInputError("no coefficient arrays given")
    lmaxes = []
    for a in arrs:
        root = int(round(np.sqrt(a.shape[0]))) if a.ndim == 2 else -1
        if a.ndim != 2 or a.shape[1] != 3 or root * root != a.shape[0]:
            raise StatsInputError(f"coefficients must have shape ((L+1)^2, 3), got {a.shape}")
        lmaxes.append(root - 1)
    deg = min(lmaxes) if degree is None else int(degree)
    if not 1 <= deg <= min(lmaxes):
        raise StatsInputError(f"degree must be in [1, {min(lmaxes)}], got {deg}")
    k = (deg + 1) ** 2
    return np.stack([a[1:k].reshape(-1) for a in arrs])


def features_to_coefficients(features: np.ndarray, degree: int) -> np.ndarray:
    """Inverse of :func:`coefficient_features` for one vector: ((degree+1)^2, 3), degree 0 zero."""
    f = np.asarray(features, dtype=float)
    k = (degree + 1) ** 2
    if f.shape != (3 * (k - 1),):
        raise StatsInputError(f"features have shape {f.shape}; degree {degree} needs ({3 * (k - 1)},)")
    out = np.zeros((k, 3))
    out[1:] = f.reshape(k - 1, 3)
    return out


def shape_pca(features: np.ndarray, *, n_modes: int = defaults.DEFAULT_PCA_MODES) -> ShapeSpace:
    """Principal component analysis of feature vectors (one row per subject).

    Parameters
    ----------
    features : ndarray, shape (n, F)
    n_modes : int
        Modes kept (at most ``min(n - 1, F)``).

    Returns
    -------
    ShapeSpace
    """
    x = np.asarray(features, dtype=float)
    if x.ndim != 2 or x.shape[0] < 3:
        raise StatsInputError(f"PCA needs a (n >= 3, F) array, got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise StatsInputError("PCA features contain NaN or infinite values")
    k = min(int(n_modes), x.shape[0] - 1, x.shape[1])
    if k < 1:
        raise StatsInputError(f"n_modes must be >= 1, got {n_modes}")
    mean = x.mean(0)
    xc = x - mean
    _, s, vt = np.linalg.svd(xc, full_matrices=False)
    comp = vt[:k]
    # deterministic sign: largest-magnitude loading positive
    idx = np.argmax(np.abs(comp), axis=1)
    comp = comp * np.sign(comp[np.arange(k), idx])[:, None]
    var = s**2 / (x.shape[0] - 1)
    total = var.sum()
    return ShapeSpace(mean=mean, components=comp, explained_variance=var[:k],
                      explained_variance_ratio=var[:k] / total if total > 0 else np.zeros(k),
                      scores=xc @ comp.T)


def _auc_binary(score: np.ndarray, positive: np.ndarray) -> float:
    """ROC AUC by the Mann-Whitney rank formula (ties count one half)."""
    from scipy.stats import rankdata

    n1 = int(positive.sum())
    n0 = positive.size - n1
    r = rankdata(score)
    return float((r[positive].sum() - n1 * (n1 + 1) / 2.0) / (n1 * n0))


def _auc(proba: np.ndarray, y: np.ndarray, n_classes: int) -> float:
    """Binary AUC of the positive-class score, or macro one-vs-rest AUC for more classes."""
    if n_classes == 2:
        return _auc_binary(proba[:, 1], y == 1)
    return float(np.mean([_auc_binary(proba[:, k], y == k) for k in range(n_classes)]))


def _cv_auc(x, y, n_classes, splits, seed_cv):
    """Mean over stratified folds of the test-fold AUC (standardise + logistic regression)."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import StratifiedKFold

    cv = StratifiedKFold(n_splits=splits, shuffle=True, random_state=seed_cv)
    out = []
    for train, test in cv.split(x, y):
        mu = x[train].mean(0)
        sd = x[train].std(0)
        sd[sd == 0] = 1.0
        model = LogisticRegression(C=defaults.CLASSIFIER_C, solver="newton-cholesky",
                                   max_iter=1_000)
        model.fit((x[train] - mu) / sd, y[train])
        proba = model.predict_proba((x[test] - mu) / sd)
        out.append(_auc(proba, y[test], n_classes))
    return np.asarray(out)


def classify_groups(
    features: np.ndarray,
    group_codes: np.ndarray,
    *,
    n_splits: int = defaults.DEFAULT_CV_FOLDS,
    n_permutations: int = defaults.DEFAULT_CLASSIFICATION_PERMUTATIONS,
    rng: np.random.Generator | int | None = None,
) -> Separability:
    """Cross-validated ROC AUC of predicting the group from the features, with a permutation p.

    Each fold standardises the features with its training subjects, fits an L2 logistic
    regression (scikit-learn) and scores the held-out subjects; the AUC (Mann–Whitney
    form; macro one-vs-rest for more than two groups) is averaged over folds.  The null
    distribution repeats the whole cross-validation with permuted labels (test 1 of
    Ojala & Garriga 2010), folds re-stratified on the permuted labels.

    Parameters
    ----------
    features : ndarray, shape (n, F)
    group_codes : ndarray, shape (n,), int
        Group of each subject, codes 0 .. k-1 (two or more groups).
    n_splits : int
        Stratified folds (reduced to the smallest group's size if larger).
    n_permutations : int
        Label permutations for the p-value (each is a full cross-validation).
    rng : numpy.random.Generator, int or None
        Seeds the fold shuffling and the permutations.

    Returns
    -------
    Separability
    """
    from threadpoolctl import threadpool_limits  # a scikit-learn dependency

    x = np.asarray(features, dtype=float)
    y = np.asarray(group_codes)
    if x.ndim != 2 or y.shape != (x.shape[0],):
        raise StatsInputError(f"features {x.shape} and group codes {y.shape} do not match")
    if not np.all(np.isfinite(x)):
        raise StatsInputError("classification features contain NaN or infinite values")
    classes, y, counts = np.unique(y, return_inverse=True, return_counts=True)
    if classes.size < 2:
        raise StatsInputError("classification needs at least two groups")
    splits = int(min(n_splits, counts.min()))
    if splits < 2:
        raise StatsInputError(
            f"the smallest group has {counts.min()} subject(s); stratified cross-validation "
            "needs at least 2 per group"
        )
    if n_permutations < 1:
        raise StatsInputError(f"n_permutations must be >= 1, got {n_permutations}")
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    seed_cv = int(gen.integers(0, 2**31 - 1))
    k = classes.size
    # Thousands of small fits: one BLAS thread each is faster than a contended pool.
    with threadpool_limits(limits=1):
        folds = _cv_auc(x, y, k, splits, seed_cv)
        null = np.array([_cv_auc(x, gen.permutation(y), k, splits, seed_cv).mean()
                         for _ in range(int(n_permutations))])
    auc = float(folds.mean())
    p = float((1 + np.sum(null >= auc - defaults.PERMUTATION_TIE_RTOL * abs(auc)))
              / (1 + null.size))
    scoring = "ROC AUC" if k == 2 else "macro one-vs-rest ROC AUC"
    return Separability(auc=auc, fold_auc=folds, p_value=p, null_auc=null, n_splits=splits,
                        n_permutations=int(n_permutations),
                        classifier=f"standardise + L2 logistic regression (C={defaults.CLASSIFIER_C}, "
                                   "Newton-Cholesky), "
                                   f"{splits}-fold stratified CV, {scoring}")
