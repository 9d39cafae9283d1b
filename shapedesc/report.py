"""The study report: one self-contained HTML file from the describe (and compare) outputs.

Everything the report shows is read from the result folders — ``spectra.tsv``,
``qc.tsv``, ``failures.tsv``, ``coefficients/``, ``run.json`` of ``describe``, and
``degree_tests.tsv``, ``global_test.tsv``, ``classification.tsv``, ``vertex_tests.gii``,
``pca/``, ``compare.json`` of ``compare`` — and the figures are drawn from those tables
(:mod:`shapedesc.figures`), so the report cannot disagree with them.  Images are PNG
embedded as base64 ``data:`` URIs; there is no script, no external style sheet, and no
network address anywhere in the page, so it opens offline and can be archived or mailed
as one file.  Every piece of table text is HTML-escaped.
"""

from __future__ import annotations

import base64
import html
import json
import logging
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from shapedesc import CAUTION, __version__
from shapedesc.defaults import DEFAULT_ALPHA, PCA_MODE_SD, REPORT_DPI

log = logging.getLogger(__name__)

#: Columns read as text whatever they hold (ids such as "001" must stay as written).
_TEXT_COLUMNS = ("subject", "structure", "group", "sex", "site", "input", "stage", "error",
                 "pose_warning", "repairs", "contrast", "test", "term")

#: Most thumbnails per structure in the QC gallery (worst fit first); the QC table
#: always lists every item.
MAX_THUMBNAILS = 48

#: Most rows printed per table (the TSV files hold all of them).
MAX_TABLE_ROWS = 2000


# ============================================================================ inputs


def read_table(path: str | Path) -> pd.DataFrame:
    """Read one result TSV, keeping id-like columns as text.

    Parameters
    ----------
    path : path-like
        A tab-separated table written by ``describe`` or ``compare``.

    Returns
    -------
    DataFrame
    """
    path = Path(path)
    try:
        head = pd.read_csv(path, sep="\t", nrows=0)
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise ValueError(f"{path}: cannot be read as a tab-separated table ({exc}); "
                         "re-run the command that wrote it") from exc
    dtype = {c: str for c in head.columns if c in _TEXT_COLUMNS}
    table = pd.read_csv(path, sep="\t", dtype=dtype, keep_default_na=False,
                        na_values=["", "nan", "NaN", "NA"])
    for c in dtype:
        table[c] = table[c].fillna("")
    return table


def _read_json(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return {}
    except (OSError, ValueError) as exc:
        raise ValueError(f"{path}: not readable JSON ({exc}); re-run the command that "
                         "wrote it") from exc


@dataclass(frozen=True)
class DescribeResults:
    """The tables of a ``describe`` OUTDIR (missing tables are None)."""

    outdir: Path
    run: dict
    spectra: pd.DataFrame | None
    spectra_mm2: pd.DataFrame | None
    shape: pd.DataFrame | None
    qc: pd.DataFrame | None
    failures: pd.DataFrame | None


@dataclass(frozen=True)
class CompareResults:
    """The outputs of a ``compare`` STATSDIR (missing parts are None or empty)."""

    statsdir: Path
    info: dict
    degree_tests: pd.DataFrame | None
    global_test: pd.DataFrame | None
    classification: pd.DataFrame | None
    other_tables: dict = field(default_factory=dict)
    vertex_files: tuple = ()
    pca_files: tuple = ()


def load_describe(outdir: str | Path) -> DescribeResults:
    """Read a ``describe`` OUTDIR.

    Raises
    ------
    ValueError
        If the folder holds neither ``spectra.tsv`` nor ``failures.tsv``.
    """
    outdir = Path(outdir)
    if not outdir.is_dir():
        raise ValueError(f"{outdir}: no such folder; give the OUTDIR of `shapedesc describe`")

    def opt(name):
        p = outdir / name
        return read_table(p) if p.is_file() else None

    spectra, failures = opt("spectra.tsv"), opt("failures.tsv")
    if spectra is None and failures is None:
        raise ValueError(f"{outdir}: holds no spectra.tsv or failures.tsv; give the OUTDIR "
                         "written by `shapedesc describe`")
    return DescribeResults(outdir, _read_json(outdir / "run.json"), spectra,
                           opt("spectra_mm2.tsv"), opt("shape.tsv"), opt("qc.tsv"), failures)


def load_compare(statsdir: str | Path) -> CompareResults:
    """Read a ``compare`` STATSDIR (every TSV in it; GIFTI maps and ``pca/`` listed)."""
    statsdir = Path(statsdir)
    if not statsdir.is_dir():
        raise ValueError(f"{statsdir}: no such folder; give the STATSDIR of `shapedesc compare`")
    known = {"degree_tests.tsv", "global_test.tsv", "classification.tsv",
             "spectra_harmonised.tsv"}
    tables = {p.name: read_table(p) for p in sorted(statsdir.glob("*.tsv"))}
    if not tables and not (statsdir / "compare.json").is_file():
        raise ValueError(f"{statsdir}: holds no result tables or compare.json; give the "
                         "STATSDIR written by `shapedesc compare`")
    return CompareResults(
        statsdir, _read_json(statsdir / "compare.json"),
        tables.get("degree_tests.tsv"), tables.get("global_test.tsv"),
        tables.get("classification.tsv"),
        {k: v for k, v in tables.items() if k not in known},
        tuple(sorted(statsdir.rglob("*.gii"))),
        tuple(sorted((statsdir / "pca").glob("*"))) if (statsdir / "pca").is_dir() else (),
    )


# ============================================================================ HTML pieces


def _esc(value) -> str:
    return html.escape(_fmt(value), quote=True)


def _fmt(value) -> str:
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        x = float(value)
        if math.isnan(x):
            return ""
        if x != 0 and (abs(x) < 1e-3 or abs(x) >= 1e5):
            return f"{x:.3e}"
        return f"{x:.4g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_fmt(v) for v in value)
    if isinstance(value, dict):
        return json.dumps(value, sort_keys=True, default=str)
    return str(value)


def html_table(table: pd.DataFrame, *, caption: str = "", max_rows: int = MAX_TABLE_ROWS,
               highlight=None) -> str:
    """An escaped HTML table of ``table`` (at most ``max_rows`` rows, the rest counted).

    Parameters
    ----------
    table : DataFrame
    caption : str
    max_rows : int
    highlight : array_like of bool, optional
        Rows to mark (class ``sig``), e.g. corrected-significant tests.
    """
    rows = table.head(max_rows)
    # The caption is a paragraph above the table, not <caption>: a <caption> is only as
    # wide as its table and wraps into a narrow column over small tables.
    out = [f'<p class="tcap">{html.escape(caption)}</p>' if caption else "",
           '<div class="tablewrap"><table>']
    out.append("<thead><tr>" + "".join(f"<th>{_esc(c)}</th>" for c in rows.columns)
               + "</tr></thead><tbody>")
    marks = (np.zeros(len(rows), bool) if highlight is None
             else np.asarray(highlight, bool)[: len(rows)])
    for mark, rec in zip(marks, rows.itertuples(index=False, name=None)):
        cls = ' class="sig"' if mark else ""
        out.append(f"<tr{cls}>" + "".join(f"<td>{_esc(v)}</td>" for v in rec) + "</tr>")
    out.append("</tbody></table></div>")
    if len(table) > max_rows:
        out.append(f'<p class="note">First {max_rows} of {len(table)} rows shown; the TSV '
                   "file holds all of them.</p>")
    return "".join(out)


def _kv_table(pairs, caption: str = "") -> str:
    return html_table(pd.DataFrame(list(pairs), columns=["item", "value"]), caption=caption)


@dataclass
class _Output:
    """How figures leave the report builder: embedded at ``dpi``, and optionally also
    written as files (PNG at ``FIGURE_DPI``, SVG, PDF) into ``figures_dir``."""

    dpi: int
    figures_dir: Path | None = None
    overwrite: bool = False
    written: list = field(default_factory=list)
    stems: set = field(default_factory=set)

    def save(self, fig, name: str) -> None:
        if self.figures_dir is None:
            return
        from shapedesc.figures.style import save_figure

        base = re.sub(r"[^A-Za-z0-9._+-]+", "_", name).strip("_")[:80] or "figure"
        stem, k = base, 1
        while stem in self.stems:
            k += 1
            stem = f"{base}_{k}"
        self.stems.add(stem)
        self.written += save_figure(fig, self.figures_dir / f"{stem}.png",
                                    also=(".svg", ".pdf"), overwrite=self.overwrite)


def _img(fig, alt: str, out: _Output, name: str) -> str:
    from shapedesc.figures.style import figure_png_bytes

    out.save(fig, name)
    data = base64.b64encode(figure_png_bytes(fig, dpi=out.dpi)).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{html.escape(alt)}">'
            f"<figcaption>{html.escape(alt)}</figcaption></figure>")


def _note(text: str) -> str:
    return f'<p class="note">{html.escape(text)}</p>'


def _figure_or_note(make, alt: str, out: _Output, name: str = "") -> str:
    """Draw a figure; a figure that cannot be drawn becomes a visible note, not a crash."""
    try:
        fig = make()
    except (ValueError, KeyError, OSError, RuntimeError, ImportError) as exc:
        log.warning("report: %s not drawn: %s", alt, exc)
        return _note(f"{alt}: not drawn ({exc}).")
    return _img(fig, alt, out, name or alt[:40])


_CSS = """
body{font-family:DejaVu Sans,Helvetica,Arial,sans-serif;margin:1.5em auto;max-width:70em;
color:#111;line-height:1.4;padding:0 1em}
h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:1px solid #999;margin-top:1.8em}
h3{margin-top:1.2em}
.tablewrap{overflow-x:auto;margin:.6em 0}
table{border-collapse:collapse;font-size:.82em}

th,td{border:1px solid #bbb;padding:.15em .45em;text-align:left;vertical-align:top;
max-width:32em}
table{width:max-content;max-width:none}
th{background:#eee}tr.sig td{font-weight:bold;background:#fdf1e6}
.tcap{font-weight:bold;margin:.8em 0 .2em 0;font-size:.9em}
figure{margin:1em 0}img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{font-size:.85em;color:#333}
.note{color:#444;font-size:.9em}
.caution{border:2px solid #B00000;padding:.6em;margin-top:2em;font-weight:bold}
nav a{margin-right:.8em}
"""


# ============================================================================ sections


def _structures(desc: DescribeResults) -> list[str]:
    names = set()
    for t in (desc.spectra, desc.qc, desc.failures):
        if t is not None and "structure" in t.columns:
            names |= set(t["structure"].astype(str))
    return sorted(names)


def _summary(desc: DescribeResults, comp: CompareResults | None) -> str:
    structures = _structures(desc)
    rows = []
    for s in structures:
        n_ok = 0 if desc.spectra is None else int((desc.spectra["structure"] == s).sum())
        n_fail = 0 if desc.failures is None else int((desc.failures["structure"] == s).sum())
        rows.append({"structure": s, "described": n_ok, "failed": n_fail})
    subjects = set()
    for t in (desc.spectra, desc.failures):
        if t is not None and "subject" in t.columns:
            subjects |= set(t["subject"])
    out = [f"<p>{len(subjects)} subjects, {len(structures)} structures, "
           f"{sum(r['described'] for r in rows)} structures described, "
           f"{sum(r['failed'] for r in rows)} failed.</p>"]
    if rows:
        out.append(html_table(pd.DataFrame(rows), caption="Items per structure"))
    sp = desc.spectra
    if sp is not None and "group" in sp.columns:
        counts = (sp.groupby(["structure", "group"]).size().rename("subjects").reset_index())
        out.append(html_table(counts, caption="Subjects per group and structure"))
    run = desc.run
    if run:
        out.append(_kv_table([("command", run.get("command")),
                              ("complete", run.get("complete")),
                              ("shapedesc version of the run", run.get("shapedesc_version")),
                              ("items", run.get("items")), ("failed", run.get("failed"))],
                             caption="describe run (run.json)"))
    if comp is not None and comp.info:
        info = comp.info
        model = info.get("model") if isinstance(info.get("model"), dict) else {}
        pairs = [("command", info.get("command")), ("formula", model.get("formula")),
                 ("group column", model.get("group")), ("levels", model.get("levels")),
                 ("covariates", model.get("covariates")), ("contrasts", model.get("contrasts")),
                 ("test", model.get("test")), ("response", model.get("response")),
                 ("degrees tested", info.get("degrees")),
                 ("permutations", info.get("permutations")), ("seed", info.get("seed"))]
        pairs = [(k, v) for k, v in pairs if v not in (None, "", [])]
        if pairs:
            out.append(_kv_table(pairs, caption="compare run (compare.json)"))
        per = info.get("structures")
        if isinstance(per, dict) and per:
            rows = [{"structure": k, **{c: v.get(c) for c in ("n_subjects", "group_sizes",
                                                             "pointwise", "global_test")}}
                    for k, v in sorted(per.items()) if isinstance(v, dict)]
            out.append(html_table(pd.DataFrame(rows), caption="compare: per structure"))
    return "".join(out)


def _hemisphere(structure: str) -> str:
    """'right' when the structure name says so (``_R``, ``right``, ``rh``), else 'left'."""
    s = structure.lower()
    if re.search(r"(^|[_\-.])(r|right|rh)([_\-.]|$)", s) or s.startswith(("right", "rh_", "r_")):
        return "right"
    return "left"


def _resolve_input(text: str, roots: list[Path]) -> Path | None:
    p = Path(text)
    if p.is_absolute():
        return p if p.is_file() else None
    for root in roots:
        q = root / p
        if q.is_file():
            return q
    return None


def _thumbnails(desc: DescribeResults, structure: str, roots: list[Path], max_n: int,
                level: int):
    from shapedesc.descriptors import read_coefficients
    from shapedesc.figures.qc import QCThumbnail, qc_caption
    from shapedesc.reconstruct import reconstruct

    qc = desc.qc[desc.qc["structure"] == structure].copy()
    if "fit_rms_mm" in qc.columns:
        qc["_order"] = pd.to_numeric(qc["fit_rms_mm"], errors="coerce").fillna(-1.0)
        qc = qc.sort_values(["_order", "subject"], ascending=[False, True])
    thumbs, notes = [], []
    for row in qc.head(max_n).to_dict("records"):
        subject = str(row["subject"])
        coef = desc.outdir / "coefficients" / f"{subject}_{structure}.npz"
        try:
            record = read_coefficients(coef)
            rv, rf = reconstruct(record, level=level, pose="native")
        except (OSError, ValueError) as exc:
            notes.append(f"{subject} / {structure}: no reconstruction ({exc})")
            continue
        surface, note = None, ""
        text = str(row.get("input", "") or "")
        src = _resolve_input(text, roots) if text else None
        if re.search(r"\.(nii(\.gz)?|mgz|mgh)(#|$)", text.lower()):
            note = "input is a label volume: reconstruction only"
        elif src is None:
            note = "input not found: reconstruction only"
        else:
            try:
                from shapedesc.io.surfaces import read_surface

                s = read_surface(src)
                surface = (s.vertices, s.faces)
            except (OSError, ValueError) as exc:
                note = f"input not readable ({type(exc).__name__})"
        caption, warn = qc_caption(row, note=note)
        rms = pd.to_numeric(pd.Series([row.get("fit_rms_mm")]), errors="coerce").iloc[0]
        thumbs.append(QCThumbnail(subject, structure, (rv, rf), surface, caption, warn,
                                  float(rms)))
    return thumbs, notes, len(qc)


def _qc_section(desc: DescribeResults, roots: list[Path], dpi: _Output, max_thumbs: int) -> str:
    from shapedesc.figures.qc import plot_qc_gallery
    from shapedesc.figures.surfaces import view_by_name

    out = []
    if desc.qc is not None and len(desc.qc):
        out.append(html_table(desc.qc, caption="Per-item quality control (qc.tsv): sphere-map "
                              "distortion, fit error (mm), pose warnings and repairs"))
    else:
        out.append(_note("No qc.tsv rows: nothing was described."))
    failures = desc.failures if desc.failures is not None and len(desc.failures) else None
    if failures is not None:
        out.append("<h3>Failed items</h3>")
        out.append(html_table(failures, caption="failures.tsv: the stage each item failed "
                                                "at and why"))
    for structure in _structures(desc):
        has_qc = desc.qc is not None and (desc.qc["structure"] == structure).any()
        fails = None if failures is None else failures[failures["structure"] == structure]
        if not has_qc and (fails is None or not len(fails)):
            continue
        out.append(f"<h3>Gallery: {html.escape(structure)}</h3>")
        thumbs, notes, total = ([], [], 0)
        if has_qc:
            thumbs, notes, total = _thumbnails(desc, structure, roots, max_thumbs, level=3)
        for n in notes:
            out.append(_note(n))
        if not thumbs and (fails is None or not len(fails)):
            continue
        hemi = _hemisphere(structure)
        out.append(_figure_or_note(
            lambda: plot_qc_gallery(thumbs, failures=fails if fails is not None and len(fails)
                                    else None, view=view_by_name("lateral", hemi),
                                    total=total, title=f"{structure}: input (grey) and "
                                    f"reconstruction outline (orange), worst fit first"),
            f"QC gallery of {structure}: {len(thumbs)} of {total} described items "
            f"(lateral view of a {hemi} structure, input coordinates)", dpi,
            f"qc_gallery_{structure}"))
    return "".join(out)


def _spectra_section(desc: DescribeResults, dpi: _Output) -> str:
    from shapedesc.figures.spectra import plot_group_spectra

    sp = desc.spectra
    if sp is None or not len(sp):
        return _note("No spectra: nothing was described.")
    grouped = "group" in sp.columns and sp["group"].astype(str).str.len().gt(0).all()
    table = sp if grouped else sp.assign(group="all subjects")
    out = [_figure_or_note(lambda: plot_group_spectra(table),
                           "Mean log10 normalised energy per degree, by group, with 95 % "
                           "confidence bands of the mean (spectra.tsv)", dpi, "spectra")]
    mm2 = desc.spectra_mm2
    if mm2 is not None and len(mm2):
        t2 = mm2 if grouped and "group" in mm2.columns else mm2.assign(group="all subjects")
        out.append(_figure_or_note(lambda: plot_group_spectra(t2, units="mm²",
                                                              title="Shape spectra by group (mm²)"),
                                   "Mean log10 energy per degree in mm² (spectra_mm2.tsv)", dpi,
                                   "spectra_mm2"))
    if desc.shape is not None and len(desc.shape):
        sh = desc.shape
        num = [c for c in sh.columns if c not in ("subject", "structure", "group", "age", "sex",
                                                   "site") and pd.api.types.is_numeric_dtype(sh[c])]
        keys = ["structure"] + (["group"] if "group" in sh.columns else [])
        if num:
            agg = sh.groupby(keys)[num].agg(["mean", "std"])
            agg.columns = [f"{a} ({b})" for a, b in agg.columns]
            out.append(html_table(agg.reset_index(), caption="Shape indices (shape.tsv): mean "
                                  "and standard deviation by structure and group"))
    return "".join(out)


def _correction_text(comp: CompareResults) -> str:
    """How compare corrected, in its own words (compare.json), for the tests section."""
    info = comp.info
    labels = (("permutation_method", "permutations"), ("fwer", "p_fwer"), ("fdr", "q_fdr"),
              ("effect_size", "effect size"), ("global_test", "global test"))
    parts = [f"{name}: {_fmt(info[k])}" for k, name in labels if info.get(k)]
    if info.get("permutations"):
        parts.append(f"number of permutations: {_fmt(info['permutations'])}")
    return "; ".join(parts)


def _stats_section(comp: CompareResults | None, dpi: _Output) -> str:
    from shapedesc.figures.spectra import plot_effect_sizes

    if comp is None:
        return _note("No STATSDIR given: run `shapedesc compare` and pass its folder to add "
                     "group tests.")
    out = [f"<p>Degree-wise tests: one test per degree and structure. Columns: "
           f"<code>p_parametric</code> (model-based), <code>p_perm</code> (permutation), "
           f"<code>p_fwer</code> (family-wise error rate controlled across the degrees), "
           f"<code>q_fdr</code> (false discovery rate). Bold rows: p_fwer ≤ "
           f"{DEFAULT_ALPHA:g}.</p>"]
    how = _correction_text(comp)
    if how:
        out.append(f'<p class="note">{html.escape(how)}.</p>')
    dt = comp.degree_tests
    if dt is not None and len(dt):
        sig = (pd.to_numeric(dt["p_fwer"], errors="coerce") <= DEFAULT_ALPHA).to_numpy() \
            if "p_fwer" in dt.columns else None
        out.append(html_table(dt, caption="degree_tests.tsv", highlight=sig))
        if {"hedges_g", "g_ci_low", "g_ci_high"} <= set(dt.columns):
            corr = "p_fwer" if "p_fwer" in dt.columns else "q_fdr"
            out.append(_figure_or_note(
                lambda: plot_effect_sizes(dt, correction=corr, alpha=DEFAULT_ALPHA),
                f"Hedges' g by degree with its interval (g_ci_low … g_ci_high; raw group "
                f"difference, covariates ignored — hedges_g_adjusted in the table is the "
                f"covariate-adjusted one); filled "
                f"markers and * : {corr} ≤ {DEFAULT_ALPHA:g} (degree_tests.tsv)", dpi,
                "effect_sizes"))
    else:
        out.append(_note("degree_tests.tsv: not present."))
    if comp.global_test is not None and len(comp.global_test):
        out.append("<h3>Global test</h3>")
        out.append(html_table(comp.global_test, caption="global_test.tsv: all degrees at once"))
    if comp.classification is not None and len(comp.classification):
        out.append("<h3>Group separability</h3>")
        out.append(html_table(comp.classification, caption="classification.tsv: cross-"
                              "validated separability of the groups in these descriptors; "
                              "a measure of group difference, not a diagnostic"))
    for name, t in comp.other_tables.items():
        out.append(f"<h3>{html.escape(name)}</h3>")
        out.append(html_table(t, caption=name))
    return "".join(out)


def _read_gifti_arrays(path: Path) -> dict:
    import nibabel as nib

    img = nib.load(str(path))
    out = {}
    for i, da in enumerate(img.darrays):
        name = da.meta.get("Name") if da.meta is not None else None
        out[name or f"array{i}"] = (np.asarray(da.data), da.intent)
    return out


def _gifti_surface(path: Path):
    """(vertices, faces) of a GIFTI surface file, or None if it holds none."""
    import nibabel as nib

    arrays = _read_gifti_arrays(path)
    pset = nib.nifti1.intent_codes["NIFTI_INTENT_POINTSET"]
    tris = nib.nifti1.intent_codes["NIFTI_INTENT_TRIANGLE"]
    pts = next((a for a, intent in arrays.values() if intent == pset), None)
    tri = next((a for a, intent in arrays.values() if intent == tris), None)
    if pts is None or tri is None:
        return None
    return np.asarray(pts, float), np.asarray(tri, np.int64)


def _map_structure(map_path: Path, comp: CompareResults) -> str:
    """Structure of ``vertex_tests[_<structure>].gii`` (the one structure when unsuffixed)."""
    stem = map_path.name[: -len(".gii")]
    if stem != "vertex_tests":
        return stem[len("vertex_tests_"):]
    per = comp.info.get("structures")
    if isinstance(per, dict) and len(per) == 1:
        return next(iter(per))
    if comp.degree_tests is not None and "structure" in comp.degree_tests.columns:
        names = sorted(set(comp.degree_tests["structure"].astype(str)))
        if len(names) == 1:
            return names[0]
    return ""


def _vertex_maps(comp: CompareResults | None, dpi: _Output) -> str:
    from shapedesc.figures.surfaces import SurfaceRow, axis_views, plot_surface_grid

    if comp is None:
        return _note("No STATSDIR given.")
    maps = [p for p in comp.vertex_files if p.parent == comp.statsdir
            and re.fullmatch(r"vertex_tests(_.+)?\.gii", p.name)]
    if not maps:
        per = comp.info.get("structures")
        why = ""
        if isinstance(per, dict):
            why = "; ".join(f"{k}: {v.get('pointwise')}" for k, v in sorted(per.items())
                            if isinstance(v, dict) and v.get("pointwise"))
        return _note("No per-vertex maps (vertex_tests*.gii) in the STATSDIR"
                     + (f" ({why})" if why else "") + ".")
    out = []
    for mp in maps:
        suffix = mp.name[len("vertex_tests"):-len(".gii")]
        structure = _map_structure(mp, comp)
        label = structure or mp.name
        try:
            arrays = _read_gifti_arrays(mp)
            surf = _gifti_surface(comp.statsdir / f"mean_surface{suffix}.surf.gii")
        except (OSError, ValueError, KeyError) as exc:
            out.append(_note(f"{mp.name}: not drawn ({exc})."))
            continue
        if surf is None:
            out.append(_note(f"{mp.name}: no mean_surface{suffix}.surf.gii beside it; not drawn."))
            continue
        v, f = surf
        out.append(f"<h3>{html.escape(label)}</h3>")
        stat_name = next((k for k in ("t", "F") if k in arrays), None)
        sig = None
        if "p_fwer" in arrays:
            sig = arrays["p_fwer"][0].astype(float) <= DEFAULT_ALPHA
        n_sig = 0 if sig is None else int(sig.sum())
        if stat_name is not None:
            stat = arrays[stat_name][0].astype(float)
            out.append(_figure_or_note(
                lambda: plot_surface_grid(
                    [SurfaceRow(stat_name, v, f, stat, sig)], views=axis_views(),
                    scalar_label=f"{stat_name} statistic", units="unitless",
                    title=f"{label}: {stat_name} on the mean surface; outlined: p_fwer ≤ "
                          f"{DEFAULT_ALPHA:g}"),
                f"{label}: per-vertex {stat_name} statistic of the normal displacement on the "
                f"overall mean surface (canonical pose: axes of the first-order ellipsoid, "
                f"longest along x). Outlined: family-wise corrected p ≤ {DEFAULT_ALPHA:g} "
                f"({n_sig} of {len(stat)} vertices).", dpi, f"vertex_{stat_name}_{label}"))
        disp = [(k[len("mean_displacement_mm"):].strip("[]") or k, a.astype(float))
                for k, (a, _) in arrays.items() if k.startswith("mean_displacement_mm")]
        rows = []
        for level, d in disp:
            gs = comp.statsdir / f"mean_surface{suffix}_{_safe_name(level)}.surf.gii"
            g_surf = _gifti_surface(gs) if gs.is_file() else None
            gv, gf = g_surf if g_surf is not None and g_surf[0].shape == v.shape else (v, f)
            rows.append(SurfaceRow(level, gv, gf, d, sig))
        if rows:
            out.append(_figure_or_note(
                lambda: plot_surface_grid(rows, views=axis_views(), scalar_label="mean normal "
                                          "displacement", units="mm",
                                          title=f"{label}: group mean shapes, coloured by mean "
                                                f"displacement from the overall mean"),
                f"{label}: each group's mean surface (rows), coloured by the group's mean "
                f"displacement along the outward normal of the overall mean surface (mm; "
                f"positive = outward). Outlined: p_fwer ≤ {DEFAULT_ALPHA:g}.", dpi,
                f"group_means_{label}"))
    return "".join(out)


def _safe_name(text: str) -> str:
    # compare names group-mean files with characters outside [A-Za-z0-9._+-] as "-"
    return re.sub(r"[^A-Za-z0-9._+-]", "-", str(text))


def _modes_section(comp: CompareResults | None, dpi: _Output) -> str:
    from shapedesc.figures.modes import ModeSurfaces, plot_shape_modes

    if comp is None:
        return _note("No STATSDIR given.")
    var_path = comp.statsdir / "pca" / "variance_explained.tsv"
    if not var_path.is_file():
        return _note("No pca/variance_explained.tsv in the STATSDIR.")
    var = read_table(var_path)
    out = [html_table(var, caption="pca/variance_explained.tsv: variance along each mode")]
    for structure in sorted(set(var["structure"].astype(str))):
        sub = var[var["structure"] == structure].sort_values("mode")
        minus, plus, ratios, mean = [], [], [], None
        for rec in sub.itertuples(index=False):
            k = int(rec.mode)
            base = comp.statsdir / "pca" / f"{structure}_mode{k}"
            files = [Path(f"{base}_{t}.surf.gii") for t in ("minus2sd", "mean", "plus2sd")]
            if not all(p.is_file() for p in files):
                break
            lo, mid, hi = (_gifti_surface(p) for p in files)
            mean = mid if mean is None else mean
            minus.append(lo[0])
            plus.append(hi[0])
            ratios.append(float(rec.variance_ratio))
        if not minus:
            inp = sub["input"].iloc[0] if "input" in sub.columns and len(sub) else ""
            out.append(_note(f"{structure}: no mode surfaces in pca/ (PCA input: {inp}; "
                             "surfaces are written when coefficients are available)."))
            continue
        modes = ModeSurfaces(mean[0], mean[1], np.stack(minus), np.stack(plus),
                             np.asarray(ratios), PCA_MODE_SD)
        out.append(_figure_or_note(
            lambda: plot_shape_modes(modes, title=f"{structure}: shape modes "
                                     f"(mean ± {PCA_MODE_SD:g} SD)"),
            f"{structure}: mean ± {PCA_MODE_SD:g} SD along the first {len(minus)} shape modes "
            "(pca/*.surf.gii, canonical pose), coloured by displacement from the mean along "
            "its normal (mm); row labels give the variance explained "
            "(pca/variance_explained.tsv).", dpi, f"shape_modes_{structure}"))
    return "".join(out)


def _parameters(desc: DescribeResults, comp: CompareResults | None) -> str:
    from shapedesc.pipeline.outputs import dependency_versions

    out = []
    params = desc.run.get("parameters") if desc.run else None
    if params:
        out.append(_kv_table(sorted(params.items()), caption="describe parameters (run.json)"))
    deps = desc.run.get("dependencies") if desc.run else None
    if deps:
        out.append(_kv_table(sorted(deps.items()), caption="library versions of the describe "
                                                           "run (run.json)"))
    if comp is not None and comp.info:
        flat = [(k, v) for k, v in sorted(comp.info.items())
                if k not in ("versions", "structures", "files", "caution")]
        out.append(_kv_table(flat, caption="compare parameters (compare.json)"))
        if isinstance(comp.info.get("versions"), dict):
            out.append(_kv_table(sorted(comp.info["versions"].items()),
                                 caption="library versions of the compare run (compare.json)"))
    here = [("shapedesc", __version__)] + sorted(dependency_versions().items())
    out.append(_kv_table(here, caption="versions used to make this report"))
    return "".join(out)


# ============================================================================ public


def build_report(outdir: str | Path, statsdir: str | Path | None = None, *,
                 input_root: str | Path | None = None, dpi: int = REPORT_DPI,
                 max_thumbnails: int = MAX_THUMBNAILS, figures_dir: str | Path | None = None,
                 overwrite_figures: bool = False) -> str:
    """The report as one HTML string.

    Parameters
    ----------
    outdir : path-like
        OUTDIR of ``shapedesc describe``.
    statsdir : path-like, optional
        STATSDIR of ``shapedesc compare``.
    input_root : path-like, optional
        Folder the ``input`` paths of ``qc.tsv`` are relative to (the manifest's folder).
        Tried after it: the current folder, OUTDIR's parent, OUTDIR, and the folders
        beside OUTDIR.
    dpi : int
        Resolution of the embedded images.
    max_thumbnails : int
        Most QC thumbnails per structure (worst fit first).
    figures_dir : path-like, optional
        Also write every figure there for papers: PNG at
        :data:`shapedesc.defaults.FIGURE_DPI`, SVG and PDF.
    overwrite_figures : bool
        Replace existing files in ``figures_dir``.

    Returns
    -------
    str
    """
    out = _Output(int(dpi), None if figures_dir is None else Path(figures_dir),
                  bool(overwrite_figures))
    if out.figures_dir is not None and not overwrite_figures and out.figures_dir.is_dir() \
            and any(out.figures_dir.iterdir()):
        raise FileExistsError(f"{out.figures_dir}: holds files already; choose an empty "
                              "folder for the figures or pass --force")
    desc = load_describe(outdir)
    comp = load_compare(statsdir) if statsdir is not None else None
    roots = [Path(input_root)] if input_root is not None else []
    roots += [Path.cwd(), desc.outdir.parent, desc.outdir]
    # the manifest often sits in a sibling folder of OUTDIR (study/ beside describe/)
    roots += sorted(p for p in desc.outdir.parent.iterdir()
                    if p.is_dir() and p != desc.outdir and not p.name.startswith("."))
    sections = [
        ("summary", "Study summary", _summary(desc, comp)),
        ("qc", "Quality control", _qc_section(desc, roots, out, max_thumbnails)),
        ("spectra", "Shape spectra", _spectra_section(desc, out)),
        ("tests", "Group tests", _stats_section(comp, out)),
        ("maps", "Surface maps", _vertex_maps(comp, out)),
        ("modes", "Shape modes", _modes_section(comp, out)),
        ("parameters", "Parameters and versions", _parameters(desc, comp)),
    ]
    title = f"shapedesc report: {desc.outdir.name}"
    nav = "".join(f'<a href="#{sid}">{html.escape(name)}</a>' for sid, name, _ in sections)
    body = "".join(f'<section id="{sid}"><h2>{html.escape(name)}</h2>{content}</section>'
                   for sid, name, content in sections)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body>"
        f"<header><h1>{html.escape(title)}</h1><p class=\"note\">Made by shapedesc "
        f"{html.escape(__version__)} from {html.escape(str(desc.outdir.name))}"
        + (f" and {html.escape(Path(statsdir).name)}" if statsdir is not None else "")
        + f".</p><nav>{nav}</nav></header><main>{body}</main>"
        f"<footer><p class=\"caution\">{html.escape(CAUTION)}</p></footer></body></html>\n"
    )


def write_report(outdir: str | Path, statsdir: str | Path | None = None,
                 path: str | Path = "report.html", *, force: bool = False,
                 **kwargs) -> Path:
    """Write the self-contained HTML report (atomically).

    Parameters
    ----------
    outdir : path-like
        OUTDIR of ``shapedesc describe``.
    statsdir : path-like, optional
        STATSDIR of ``shapedesc compare``.
    path : path-like
        The ``.html`` file to write.
    force : bool
        Replace an existing file.
    **kwargs
        Passed to :func:`build_report` (``input_root``, ``dpi``, ``max_thumbnails``,
        ``figures_dir``, ``overwrite_figures``).

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    FileExistsError
        If ``path`` exists and ``force`` is false.
    """
    from shapedesc.io.atomic import write_text_atomic

    path = Path(path)
    if path.exists() and not force:
        raise FileExistsError(f"{path}: exists already; choose another name or pass --force")
    kwargs.setdefault("overwrite_figures", force)
    text = build_report(outdir, statsdir, **kwargs)
    write_text_atomic(path, text)
    return path
