"""Spectrum figures: group mean log energy by degree, and effect size by degree.

Both take the result tables as they are written (``spectra.tsv`` of ``describe`` and
``degree_tests.tsv`` of ``compare``); they summarise, never re-estimate: the effect-size
figure plots the table's own ``hedges_g`` and interval columns and marks the degrees
whose corrected p value in the table is below the level.

References
----------
Hedges, L. V. (1981). Distribution theory for Glass's estimator of effect size and
related estimators. Journal of Educational Statistics 6(2), 107–128.
doi:10.3102/10769986006002107
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from shapedesc.defaults import DEFAULT_ALPHA
from shapedesc.figures import style

_DEGREE_COLUMN = re.compile(r"^l(\d+)$")


def degree_columns(table: pd.DataFrame) -> list[tuple[int, str]]:
    """The ``(degree, column)`` pairs of a spectra table (columns ``l1`` … ``lL``), sorted."""
    found = [(int(m.group(1)), c) for c in table.columns
             if isinstance(c, str) and (m := _DEGREE_COLUMN.match(c))]
    return sorted(found)


@dataclass(frozen=True)
class GroupSpectrum:
    """The plotted summary of one group's spectra (what the figure shows, as numbers).

    Attributes
    ----------
    structure, group : str
    degrees : ndarray of int, shape (L,)
    mean : ndarray, shape (L,)
        Mean over subjects of log10 energy.
    low, high : ndarray, shape (L,)
        95 % confidence interval of that mean: mean ± t(0.975, n−1)·SD/√n.
    n : int
        Number of subjects.
    """

    structure: str
    group: str
    degrees: np.ndarray
    mean: np.ndarray
    low: np.ndarray
    high: np.ndarray
    n: int


def summarise_spectra(spectra: pd.DataFrame, *, group_column: str = "group",
                      level: float = 0.95) -> list[GroupSpectrum]:
    """Per structure and group, the mean log10 energy by degree with its confidence band.

    Parameters
    ----------
    spectra : DataFrame
        ``spectra.tsv``: columns ``structure``, ``group_column`` and ``l1`` … ``lL``
        (positive energies; normalised energies are dimensionless, ``spectra_mm2.tsv``
        holds mm²).
    group_column : str
    level : float
        Confidence level of the band (Student t interval of the mean).

    Returns
    -------
    list of GroupSpectrum
        Sorted by structure, then group.
    """
    cols = degree_columns(spectra)
    if not cols:
        raise ValueError("spectra table has no degree columns l1 ... lL; pass the "
                         "spectra.tsv written by `shapedesc describe`")
    for need in ("structure", group_column):
        if need not in spectra.columns:
            raise ValueError(f"spectra table has no column {need!r} (columns: "
                             f"{list(spectra.columns)[:12]})")
    values = spectra[[c for _, c in cols]].to_numpy(dtype=float)
    bad = ~(values > 0) | ~np.isfinite(values)
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise ValueError(f"spectra table row {r} column {cols[c][1]!r} holds "
                         f"{values[r, c]!r}: log energy needs positive finite energies; "
                         "drop the row or check the describe run")
    logs = np.log10(values)
    degrees = np.array([d for d, _ in cols])
    out = []
    keys = spectra[["structure", group_column]].astype(str)
    for (structure, group), idx in keys.groupby(["structure", group_column], sort=True).groups.items():
        x = logs[spectra.index.get_indexer(idx)]
        n = x.shape[0]
        mean = x.mean(axis=0)
        if n > 1:
            half = stats.t.ppf(0.5 + level / 2, n - 1) * x.std(axis=0, ddof=1) / np.sqrt(n)
        else:
            half = np.full_like(mean, np.nan)
        out.append(GroupSpectrum(structure, group, degrees, mean, mean - half, mean + half, n))
    return out


def _panel_grid(n: int, width_in: float = 2.6, height_in: float = 2.2):
    ncol = min(n, 3)
    nrow = int(np.ceil(n / ncol))
    fig = style.new_figure(width_in * ncol + 0.3, height_in * nrow + 0.3)
    axes = [fig.add_subplot(nrow, ncol, i + 1) for i in range(n)]
    return fig, axes


def plot_group_spectra(spectra: pd.DataFrame, *, group_column: str = "group",
                       units: str = "dimensionless", title: str | None = None):
    """Per-group mean log10 energy by degree with 95 % bands, one panel per structure.

    Parameters
    ----------
    spectra : DataFrame
        ``spectra.tsv`` (or ``spectra_mm2.tsv`` with ``units="mm²"``).
    group_column : str
    units : str
        Unit of the energies, printed in the y label.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Each group's mean is one Line2D labelled with the group name.
    """
    summary = summarise_spectra(spectra, group_column=group_column)
    structures = sorted({s.structure for s in summary})
    groups = sorted({s.group for s in summary})
    with style.figure_style():
        fig, axes = _panel_grid(len(structures))
        for ax, structure in zip(axes, structures):
            for s in (s for s in summary if s.structure == structure):
                st = style.group_style(groups.index(s.group))
                ax.fill_between(s.degrees, s.low, s.high, color=st["color"], alpha=0.22,
                                linewidth=0)
                ax.plot(s.degrees, s.mean, color=st["color"], linestyle=st["linestyle"],
                        marker=st["marker"], markersize=3, label=f"{s.group} (n={s.n})")
            ax.set_title(structure)
            ax.set_xlabel("degree l")
            ax.set_ylabel("mean log₁₀ energy (unitless)" if units == "dimensionless"
                          else f"mean log₁₀ energy (log₁₀ {units})")
            ax.xaxis.get_major_locator().set_params(integer=True)
            ax.legend(frameon=False, title="group, 95 % CI band")
        fig.suptitle(title or "Shape spectra by group")
        fig.tight_layout()
    return fig


def _significance_column(table: pd.DataFrame, correction: str) -> str:
    if correction not in table.columns:
        raise ValueError(f"degree-test table has no column {correction!r}; it has "
                         f"{list(table.columns)}")
    return correction


def plot_effect_sizes(degree_tests: pd.DataFrame, *, correction: str = "p_fwer",
                      alpha: float = DEFAULT_ALPHA, title: str | None = None):
    """Effect size (Hedges' g) by degree with its interval; corrected-significant degrees marked.

    Parameters
    ----------
    degree_tests : DataFrame
        ``degree_tests.tsv`` of ``compare``: columns ``structure``, ``degree``,
        ``hedges_g``, ``g_ci_low``, ``g_ci_high`` and the ``correction`` column.  With a
        ``contrast`` column, each contrast is its own series.
    correction : str
        Column of corrected p (or q) values used to mark degrees (``"p_fwer"`` or
        ``"q_fdr"``).
    alpha : float
        A degree is marked when its ``correction`` value is at most ``alpha`` (the rule
        ``compare`` uses in its log).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Per series, the effect sizes are a Line2D labelled with the series name; the
        marked degrees are a Line2D with ``gid="significant"``.
    """
    need = ["structure", "degree", "hedges_g", "g_ci_low", "g_ci_high"]
    missing = [c for c in need if c not in degree_tests.columns]
    if missing:
        raise ValueError(f"degree-test table lacks columns {missing}; pass the "
                         "degree_tests.tsv written by `shapedesc compare`")
    pcol = _significance_column(degree_tests, correction)
    t = degree_tests.copy()
    t["structure"] = t["structure"].astype(str)
    series_col = "contrast" if "contrast" in t.columns else None
    structures = sorted(t["structure"].unique())
    label = {"p_fwer": "p (FWER)", "q_fdr": "q (FDR)"}.get(pcol, pcol)
    with style.figure_style():
        fig, axes = _panel_grid(len(structures))
        for ax, structure in zip(axes, structures):
            sub = t[t["structure"] == structure]
            names = sorted(sub[series_col].astype(str).unique()) if series_col else [None]
            width = 0.12 * (len(names) - 1)
            for k, name in enumerate(names):
                part = sub if name is None else sub[sub[series_col].astype(str) == name]
                part = part.sort_values("degree")
                x = part["degree"].to_numpy(float) + (k * 0.24 - width if len(names) > 1 else 0)
                g = part["hedges_g"].to_numpy(float)
                lo = part["g_ci_low"].to_numpy(float)
                hi = part["g_ci_high"].to_numpy(float)
                st = style.group_style(k)
                ax.vlines(x, lo, hi, color=st["color"], linewidth=1.0)
                ax.plot(x, g, color=st["color"], marker=st["marker"], markersize=3.5,
                        linestyle="none", markerfacecolor="white",
                        label=name or "Hedges' g, 95 % CI")
                sig = part[pcol].to_numpy(float) <= alpha
                if sig.any():
                    ax.plot(x[sig], g[sig], color=st["color"], marker=st["marker"],
                            markersize=4.5, linestyle="none", gid="significant",
                            label=f"{label} ≤ {alpha:g}" + (f" ({name})" if name else ""))
                    for xi, hii in zip(x[sig], hi[sig]):
                        ax.annotate("*", (xi, hii), ha="center", va="bottom", fontsize=9)
            ax.axhline(0.0, color="0.5", linewidth=0.7)
            ax.set_title(structure)
            ax.set_xlabel("degree l")
            ax.set_ylabel("Hedges' g (unitless)")
            ax.xaxis.get_major_locator().set_params(integer=True)
            ax.legend(frameon=False, fontsize=6, loc="best")
        fig.suptitle(title or f"Effect size by degree (filled, *: {label} ≤ {alpha:g})")
        fig.tight_layout()
    return fig
