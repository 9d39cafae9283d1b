"""Design matrices for group comparisons: a group column, numeric and categorical covariates.

The model of every test in :mod:`shapedesc.stats` is the general linear model
``y = X beta + e`` with ``X`` built here from a table (one row per subject): an intercept,
treatment-coded group indicators (the first level is the reference), mean-centred numeric
covariates and treatment-coded categorical covariates.  The contrast selects the group
indicators: a t contrast (second level minus first) for two levels, an F contrast (all
group indicators jointly) for more.

Checks happen here, before any arithmetic, and raise :class:`~shapedesc.errors.StatsInputError`
naming the column, the rows and what to do: a missing column, missing values, a group
with fewer than :data:`~shapedesc.defaults.MIN_GROUP_SIZE` subjects, a constant column,
collinear columns.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from shapedesc import defaults
from shapedesc.errors import StatsInputError

__all__ = ["Design", "build_design", "row_labels"]


@dataclass(frozen=True)
class Design:
    """A design matrix with its contrast and the table rows it was built from.

    Attributes
    ----------
    matrix : ndarray, shape (n, p), float64
        Columns: ``intercept``, the group indicators, the covariate columns.
    columns : tuple of str, length p
        Column names (``group[T.B]``, ``age``, ``sex[T.M]``, ...).
    contrast : ndarray, shape (p, s), float64
        Each column is one contrast vector; ``s == 1`` is a t test, ``s > 1`` an F test.
    contrast_names : tuple of str, length s
        ``"B - A"`` for each group indicator against the reference level.
    group : str
        Name of the group column.
    levels : tuple of str
        Group levels in model order; ``levels[0]`` is the reference.
    group_codes : ndarray, shape (n,), int64
        Index into ``levels`` of each row.
    covariates : tuple of str
        Covariate column names as given.
    categorical : tuple of str
        Which of the covariates were treatment coded.
    rows : ndarray, shape (n,), int64
        Positions (``iloc``) in the input table of the rows used (rows of other group
        levels are left out when ``levels`` selects some).
    labels : tuple of str
        A label for each used row (the ``subject`` column when present).
    formula : str
        The model in words, e.g. ``"y ~ 1 + group + age + C(sex)"``.
    """

    matrix: np.ndarray
    columns: tuple[str, ...]
    contrast: np.ndarray
    contrast_names: tuple[str, ...]
    group: str
    levels: tuple[str, ...]
    group_codes: np.ndarray
    covariates: tuple[str, ...]
    categorical: tuple[str, ...]
    rows: np.ndarray
    labels: tuple[str, ...]
    formula: str

    @property
    def n_subjects(self) -> int:
        return int(self.matrix.shape[0])

    @property
    def kind(self) -> str:
        """``"t"`` for a one-column contrast, ``"F"`` otherwise."""
        return "t" if self.contrast.shape[1] == 1 else "F"

    @property
    def df_error(self) -> int:
        """Residual degrees of freedom ``n - p`` (the design has full column rank)."""
        return int(self.matrix.shape[0] - self.matrix.shape[1])

    def group_sizes(self) -> dict[str, int]:
        counts = np.bincount(self.group_codes, minlength=len(self.levels))
        return {lv: int(c) for lv, c in zip(self.levels, counts)}


def row_labels(table: pd.DataFrame) -> list[str]:
    """Labels naming each row in messages: the ``subject`` column if any, else the row number."""
    if "subject" in table.columns:
        return [str(s) for s in table["subject"].to_numpy()]
    return [f"row {i + 1}" for i in range(len(table))]


def _is_categorical(series: pd.Series) -> bool:
    return not (pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series))


def _listing(items: Sequence[str], limit: int = 10) -> str:
    items = list(items)
    shown = ", ".join(items[:limit])
    return shown + (f", ... ({len(items) - limit} more)" if len(items) > limit else "")


def build_design(
    table: pd.DataFrame,
    *,
    group: str,
    levels: Sequence[str] | None = None,
    covariates: Sequence[str] = (),
    categorical: Sequence[str] = (),
    source: str = "<table>",
) -> Design:
    """Build the design matrix and group contrast of a comparison from a table.

    Parameters
    ----------
    table : pandas.DataFrame, n_rows rows
        One row per subject (of one structure).
    group : str
        Column holding the group of each subject (values are compared as strings).
    levels : sequence of str, optional
        Levels to compare, in order; ``levels[0]`` is the reference, so for two levels
        the t contrast is ``levels[1] - levels[0]``.  Rows of other levels are left out.
        Default: every level present, sorted.
    covariates : sequence of str
        Covariate columns. Numeric columns are mean-centred; non-numeric (and boolean)
        columns, and those named in ``categorical``, are treatment coded with their first
        sorted value as reference.
    categorical : sequence of str
        Covariates to treat as categorical even if numeric (a site coded 1, 2, 3).
    source : str
        Name of the table for messages (its file path).

    Returns
    -------
    Design

    Raises
    ------
    StatsInputError
        A column is missing; the group or a covariate has missing values (the rows are
        named); fewer than two levels; a level with fewer than ``MIN_GROUP_SIZE``
        subjects; a constant covariate; collinear columns (named).
    """
    covariates = tuple(covariates)
    categorical = tuple(categorical)
    missing = [c for c in (group, *covariates) if c not in table.columns]
    if missing:
        raise StatsInputError(
            f"{source}: column(s) {', '.join(map(repr, missing))} not found; the table has "
            f"{_listing(map(str, table.columns), 40)}. Check the spelling of --group/--covariates."
        )
    if group in covariates:
        raise StatsInputError(f"{source}: {group!r} is both the group and a covariate; give it once.")
    unknown_cat = [c for c in categorical if c not in covariates]
    if unknown_cat:
        raise StatsInputError(
            f"{source}: categorical column(s) {', '.join(map(repr, unknown_cat))} are not "
            "among the covariates; add them to the covariates or drop them."
        )
    labels_all = row_labels(table)
    gcol = table[group]
    bad = np.flatnonzero(gcol.isna().to_numpy())
    if bad.size:
        raise StatsInputError(
            f"{source}: group column {group!r} has missing values in {bad.size} row(s): "
            f"{_listing([labels_all[i] for i in bad])}. Fill them in or remove those rows."
        )
    gstr = gcol.astype(str).to_numpy()
    present = sorted(set(gstr))
    if levels is None:
        use_levels = tuple(present)
    else:
        use_levels = tuple(str(lv) for lv in levels)
        if len(set(use_levels)) != len(use_levels):
            raise StatsInputError(f"{source}: levels {list(use_levels)} repeat a level; give each once.")
        absent = [lv for lv in use_levels if lv not in present]
        if absent:
            raise StatsInputError(
                f"{source}: level(s) {', '.join(map(repr, absent))} of {group!r} not found; "
                f"the column holds {_listing(present, 40)}."
            )
    if len(use_levels) < 2:
        raise StatsInputError(
            f"{source}: group column {group!r} has {len(use_levels)} level(s) "
            f"({_listing(use_levels)}); a comparison needs at least two."
        )
    rows = np.flatnonzero(np.isin(gstr, use_levels))
    sub = table.iloc[rows]
    labels = [labels_all[i] for i in rows]
    codes = np.array([use_levels.index(v) for v in gstr[rows]], dtype=np.int64)
    sizes = np.bincount(codes, minlength=len(use_levels))
    small = [f"{lv!r} has {n}" for lv, n in zip(use_levels, sizes) if n < defaults.MIN_GROUP_SIZE]
    if small:
        raise StatsInputError(
            f"{source}: group {', '.join(small)} subject(s); each group needs at least "
            f"{defaults.MIN_GROUP_SIZE}. Merge or drop the level (--levels)."
        )

    columns: list[str] = ["intercept"]
    blocks: list[np.ndarray] = [np.ones((len(rows), 1))]
    for k, lv in enumerate(use_levels[1:], start=1):
        columns.append(f"{group}[T.{lv}]")
        blocks.append((codes == k).astype(float)[:, None])
    is_cat: list[str] = []
    for cov in covariates:
        col = sub[cov]
        bad = np.flatnonzero(col.isna().to_numpy())
        if bad.size:
            raise StatsInputError(
                f"{source}: covariate {cov!r} has missing values in {bad.size} row(s): "
                f"{_listing([labels[i] for i in bad])}. Fill them in, or remove those "
                "subjects from the manifest."
            )
        if cov in categorical or _is_categorical(col):
            is_cat.append(cov)
            vals = col.astype(str).to_numpy()
            cats = sorted(set(vals))
            if len(cats) < 2:
                raise StatsInputError(
                    f"{source}: covariate {cov!r} takes one value ({cats[0]!r}) in all "
                    f"{len(vals)} rows; a constant column carries no information, drop it."
                )
            for c in cats[1:]:
                columns.append(f"{cov}[T.{c}]")
                blocks.append((vals == c).astype(float)[:, None])
        else:
            x = col.to_numpy(dtype=float)
            if not np.all(np.isfinite(x)):
                bad = np.flatnonzero(~np.isfinite(x))
                raise StatsInputError(
                    f"{source}: covariate {cov!r} has non-finite values in row(s) "
                    f"{_listing([labels[i] for i in bad])}; fix them."
                )
            if np.ptp(x) == 0:
                raise StatsInputError(
                    f"{source}: covariate {cov!r} takes one value ({x[0]!r}) in all "
                    f"{len(x)} rows; a constant column carries no information, drop it."
                )
            columns.append(cov)
            blocks.append((x - x.mean())[:, None])
    matrix = np.hstack(blocks)
    _check_rank(matrix, columns, source)
    p = matrix.shape[1]
    n_int = len(use_levels) - 1
    contrast = np.zeros((p, n_int))
    contrast[1:1 + n_int, :] = np.eye(n_int)
    names = tuple(f"{lv} - {use_levels[0]}" for lv in use_levels[1:])
    terms = ["1", group] + [f"C({c})" if c in is_cat else c for c in covariates]
    return Design(
        matrix=matrix, columns=tuple(columns), contrast=contrast, contrast_names=names,
        group=group, levels=use_levels, group_codes=codes, covariates=covariates,
        categorical=tuple(is_cat), rows=rows.astype(np.int64), labels=tuple(labels),
        formula="y ~ " + " + ".join(terms),
    )


def _check_rank(matrix: np.ndarray, columns: Sequence[str], source: str) -> None:
    """Raise naming the first column that is (numerically) a combination of earlier ones."""
    n, p = matrix.shape
    if n <= p:
        raise StatsInputError(
            f"{source}: {n} subjects for {p} model columns ({', '.join(columns)}); the "
            "model needs more subjects than columns. Use fewer covariates."
        )
    scaled = matrix / np.linalg.norm(matrix, axis=0)
    s = np.linalg.svd(scaled, compute_uv=False)
    if s[-1] > defaults.COLLINEARITY_TOLERANCE * s[0]:
        return
    for j in range(1, p):
        sj = np.linalg.svd(scaled[:, : j + 1], compute_uv=False)
        if sj[-1] <= defaults.COLLINEARITY_TOLERANCE * sj[0]:
            coef, *_ = np.linalg.lstsq(scaled[:, :j], scaled[:, j], rcond=None)
            partners = [columns[k] for k in np.flatnonzero(np.abs(coef) > 1e-6)]
            raise StatsInputError(
                f"{source}: covariates are collinear: column {columns[j]!r} is a linear "
                f"combination of {', '.join(map(repr, partners)) or 'earlier columns'}. "
                "Drop one of them."
            )
    raise StatsInputError(f"{source}: the design matrix is rank deficient; drop a covariate.")
