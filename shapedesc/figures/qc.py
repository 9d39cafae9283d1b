"""Quality-control gallery: one thumbnail per subject × structure, failures listed.

Each thumbnail shows the input surface (shaded grey) with the silhouette of its
reconstruction from the coefficients drawn over it (vermillion line), both in the
input's coordinates, and a caption with the distortion and fit numbers of ``qc.tsv``.
Where the input cannot be shown (a label volume, or a file no longer where the table
says), the reconstruction alone is drawn and the caption says so.  Thumbnails are
ordered worst fit first, so the eye lands on what needs checking.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from shapedesc.defaults import SPHERE_SHEARED_SHARE_WARN
from shapedesc.figures import style
from shapedesc.figures.surfaces import View, _check_mesh, _draw, _project, view_by_name

#: qc.tsv columns shown in captions, in order: (column, format, unit).
CAPTION_FIELDS: tuple[tuple[str, str, str], ...] = (
    ("fit_rms_mm", "RMS {:.2f}", " mm"),
    ("fit_max_mm", "max {:.2f}", " mm"),
    ("area_log_sd", "area log-SD {:.2f}", ""),
    ("angle_distortion_mean_deg", "angle {:.1f}", "°"),
    ("n_flipped", "flips {:.0f}", ""),
    ("sheared_area_share", "sheared {:.1%}", ""),
)


@dataclass(frozen=True)
class QCThumbnail:
    """What one gallery thumbnail shows.

    Attributes
    ----------
    subject, structure : str
    reconstruction : tuple (vertices (V, 3) mm, faces (F, 3))
        The surface rebuilt from the coefficients (native pose: input coordinates).
    input_surface : tuple (vertices, faces), optional
        The input surface in the same coordinates, if it can be shown.
    caption : str
        Text under the thumbnail (see :func:`qc_caption`).
    warn : bool
        Draw the caption in the warning colour (pose warning, flips, strong shear).
    fit_rms_mm : float
        Fit error used to order the gallery, worst first (NaN sorts last).
    """

    subject: str
    structure: str
    reconstruction: tuple
    input_surface: tuple | None = None
    caption: str = ""
    warn: bool = False
    fit_rms_mm: float = float("nan")


def qc_caption(row: Mapping, *, note: str = "") -> tuple[str, bool]:
    """Caption text and warning flag from one ``qc.tsv`` row.

    Numbers are printed from the row as they are (formatted, not recomputed).  The flag
    is set when the row has a non-empty ``pose_warning``, a positive ``n_flipped``,
    ``pose_unstable`` true, or a ``sheared_area_share`` above
    ``defaults.SPHERE_SHEARED_SHARE_WARN`` (the map is not unique there).

    Parameters
    ----------
    row : mapping
        Column name -> value.
    note : str
        Appended as its own line (e.g. why the input is not shown).

    Returns
    -------
    (str, bool)
    """
    parts = []
    for col, fmt, unit in CAPTION_FIELDS:
        val = row.get(col)
        try:
            x = float(val)
        except (TypeError, ValueError):
            continue
        if math.isfinite(x):
            parts.append(fmt.format(x) + unit)
    warn = False
    pose = row.get("pose_warning")
    if isinstance(pose, str) and pose.strip().lower() not in ("", "nan", "n/a", "none"):
        parts.append("pose warning")
        warn = True
    if str(row.get("pose_unstable", "")).strip().lower() in ("true", "1"):
        warn = True
    try:
        warn |= float(row.get("n_flipped", 0) or 0) > 0
    except (TypeError, ValueError):
        pass
    try:  # NaN compares False
        warn |= float(row.get("sheared_area_share", 0) or 0) > SPHERE_SHEARED_SHARE_WARN
    except (TypeError, ValueError):
        pass
    lines = [", ".join(parts[i:i + 2]) for i in range(0, len(parts), 2)]
    if note:
        lines.append(note)
    return "\n".join(line for line in lines if line), warn


def plot_qc_gallery(thumbnails: Sequence[QCThumbnail], *, failures=None,
                    view: View | None = None, columns: int = 6, thumb_in: float = 1.25,
                    title: str | None = None, total: int | None = None):
    """A gallery of QC thumbnails, with a list of the failed items below.

    Parameters
    ----------
    thumbnails : sequence of QCThumbnail
        Drawn in order of decreasing ``fit_rms_mm`` (worst fit first).
    failures : DataFrame, optional
        ``failures.tsv``: ``subject``, ``structure``, ``stage``, ``error``.
    view : View, optional
        Camera for every thumbnail; default the lateral view of a left structure.
    columns : int
        Thumbnails per row.
    thumb_in : float
        Thumbnail width in inches.
    title : str, optional
    total : int, optional
        Number of items in the study when ``thumbnails`` is a selection (printed).

    Returns
    -------
    matplotlib.figure.Figure
    """
    thumbs = sorted(thumbnails, key=_worst_first)
    view = view_by_name("lateral") if view is None else view
    fail_rows = [] if failures is None else list(failures.itertuples(index=False))
    if not thumbs and not fail_rows:
        raise ValueError("nothing to show: no thumbnails and no failures")
    ncol = max(1, min(int(columns), len(thumbs) or 1))
    nrow = math.ceil(len(thumbs) / ncol) if thumbs else 0
    n_lines = max([1 + th.caption.count("\n") + 1 for th in thumbs] or [1])
    cell_h = thumb_in + 0.1 + 0.085 * n_lines
    n_fail_lines = min(len(fail_rows), 40) + (1 if len(fail_rows) > 40 else 0)
    fail_h = 0.25 + 0.14 * n_fail_lines if fail_rows else 0.0
    head = 0.35
    height = head + nrow * cell_h + fail_h + 0.05
    with style.figure_style():
        fig = style.new_figure(max(ncol * thumb_in, 4.0), height)
        for k, th in enumerate(thumbs):
            r, c = divmod(k, ncol)
            left = c * thumb_in / fig.get_figwidth()
            bottom = (height - head - r * cell_h - thumb_in) / height
            ax = fig.add_axes((left, bottom, thumb_in / fig.get_figwidth(),
                               thumb_in / height))
            rv, rf = _check_mesh(*th.reconstruction, what=f"{th.subject}/{th.structure} "
                                                          "reconstruction")
            if th.input_surface is not None:
                iv, i_f = _check_mesh(*th.input_surface, what=f"{th.subject}/{th.structure} input")
                allv = np.concatenate([iv, rv])
                centre = allv.mean(axis=0)
                radius = 1.05 * float(np.max(np.abs(_project(allv - centre, view)[0])))
                _draw(ax, iv, i_f, view, None, None, None, None, "outline",
                      style.NEUTRAL_GREY, (rv, rf), "#D55E00", centre, radius)
            else:
                _draw(ax, rv, rf, view, None, None, None, None, "outline", (0.95, 0.80, 0.65),
                      None, "", None, None)
            ax.text(0.5, -0.02, f"{th.subject} / {th.structure}\n{th.caption}",
                    transform=ax.transAxes, ha="center", va="top", fontsize=5,
                    color="#B00000" if th.warn else "black", linespacing=1.15)
        if fail_rows:
            y = (fail_h - 0.1) / height
            lines = [f"{row.subject} / {row.structure}: failed at {row.stage}: "
                     f"{_short(str(row.error))}" for row in fail_rows[:40]]
            if len(fail_rows) > 40:
                lines.append(f"... and {len(fail_rows) - 40} more (see failures.tsv)")
            fig.text(0.01, y, f"Failed ({len(fail_rows)}):\n" + "\n".join(lines), ha="left",
                     va="top", fontsize=6, color="#B00000", linespacing=1.3)
        shown = f"{len(thumbs)}" + (f" of {total}" if total and total > len(thumbs) else "")
        fig.suptitle(title or f"Quality control: input (grey) and reconstruction outline "
                     f"(orange), {shown} shown, worst fit first; view {view.name}",
                     y=1.0 - 0.06 / height, va="top", fontsize=8)
    return fig


def _worst_first(th: QCThumbnail) -> tuple[int, float]:
    x = float(th.fit_rms_mm)
    return (0, -x) if math.isfinite(x) else (1, 0.0)


def _short(text: str, n: int = 110) -> str:
    text = " ".join(text.split())
    return text if len(text) <= n else text[: n - 1] + "…"
