"""The HTML report: content, escaping, self-containment, and a real browser.

The report is built from a small synthetic study made here (invented numbers in the
formats ``describe`` and ``compare`` write), or from the demo's output when the demo
command is available.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from shapedesc import CAUTION

NASTY = "<script>alert('x')</script> & \"quoted\""


# ---------------------------------------------------------------------------- fixture


def _identity_pose(semi_axes):
    from shapedesc.align import Pose

    return Pose(translation_mm=np.zeros(3), object_rotation=np.eye(3),
                parameter_rotation=np.eye(3), scale_method="none", scale_mm=1.0,
                ellipsoid_semi_axes_mm=np.asarray(semi_axes, float), unstable=False,
                warnings=())


def _gifti(path: Path, arrays) -> None:
    import nibabel as nib

    img = nib.gifti.GiftiImage()
    for name, data, intent in arrays:
        img.add_gifti_data_array(nib.gifti.GiftiDataArray(
            np.asarray(data, np.float32), intent=intent, datatype="NIFTI_TYPE_FLOAT32",
            meta=nib.gifti.GiftiMetaData({"Name": name})))
    nib.save(img, str(path))


def _gifti_surface(path: Path, v, f) -> None:
    import nibabel as nib

    img = nib.gifti.GiftiImage()
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        np.asarray(v, np.float32), intent="NIFTI_INTENT_POINTSET", datatype="NIFTI_TYPE_FLOAT32"))
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(
        np.asarray(f, np.int32), intent="NIFTI_INTENT_TRIANGLE", datatype="NIFTI_TYPE_INT32"))
    nib.save(img, str(path))


def _make_study(root: Path) -> tuple[Path, Path]:
    """A describe OUTDIR and a compare STATSDIR with invented, format-true contents."""
    from shapedesc.descriptors import COEFFICIENT_FORMAT, write_coefficient_file
    from shapedesc.io.surfaces import write_surface
    from shapedesc.reconstruct import reconstruct_values
    from shapedesc.surface import Surface

    rng = np.random.default_rng(11)
    lmax = 4
    y00, y1 = 1 / math.sqrt(4 * math.pi), math.sqrt(3 / (4 * math.pi))  # DLMF 14.30.1
    outdir, statsdir, inputs = root / "out", root / "stats", root / "inputs"
    for d in (outdir / "coefficients", statsdir, inputs):
        d.mkdir(parents=True)
    spectra, spectra_mm2, shape, qc = [], [], [], []
    structures = {"hippocampus_L": (20.0, 8.0, 6.0, (-25.0, -20.0, -10.0)),
                  "caudate_R": (18.0, 6.0, 5.0, (14.0, 10.0, 12.0))}
    for structure, (a, b, c, centre) in structures.items():
        for i in range(8):
            group = "control" if i < 4 else "patient"
            subject = f"sub-{i + 1:02d}"
            k = 1.0 + 0.04 * rng.normal() + (0.06 if group == "patient" else 0.0)
            vals = np.zeros(((lmax + 1) ** 2, 3))
            vals[0] = np.asarray(centre) / y00
            vals[3, 0], vals[1, 1], vals[2, 2] = a * k / y1, b / y1, c / y1
            vals[4:] = rng.normal(0, 0.25, vals[4:].shape)
            canon = vals.copy()
            canon[0] = 0
            write_coefficient_file(
                outdir / "coefficients" / f"{subject}_{structure}.npz", native_values=vals,
                canonical_values=canon,
                metadata={"format": COEFFICIENT_FORMAT, "degree": lmax,
                          "pose": _identity_pose((a * k, b, c)).to_dict()})
            v, f = reconstruct_values(vals, lmax, level=3)
            write_surface(Surface(v + rng.normal(0, 0.15, v.shape), f),
                          inputs / f"{subject}_{structure}.ply")
            energy = np.array([np.sum(canon[l * l:(l + 1) ** 2] ** 2) for l in range(1, lmax + 1)])
            meta = {"subject": subject, "structure": structure, "group": group,
                    "age": 60 + i, "sex": "F" if i % 2 else "M", "site": "A"}
            spectra.append({**meta, **{f"l{l}": e / energy.sum() for l, e in enumerate(energy, 1)}})
            spectra_mm2.append({**meta, **{f"l{l}": e for l, e in enumerate(energy, 1)}})
            shape.append({**meta, "volume_mm3": 4 / 3 * math.pi * a * k * b * c,
                          "sphericity": 0.8 + 0.01 * i})
            qc.append({"subject": subject, "structure": structure,
                       "input": f"inputs/{subject}_{structure}.ply", "area_log_sd": 0.2 + 0.01 * i,
                       "angle_distortion_mean_deg": 3.0 + 0.1 * i, "n_flipped": int(i == 3),
                       "fit_rms_mm": 0.1 + 0.02 * i, "fit_max_mm": 0.6 + 0.05 * i,
                       "pose_warning": "axes 2 and 3 nearly equal" if i == 5 else "",
                       "repairs": ""})
    for name, rows in (("spectra", spectra), ("spectra_mm2", spectra_mm2), ("shape", shape),
                       ("qc", qc)):
        pd.DataFrame(rows).to_csv(outdir / f"{name}.tsv", sep="\t", index=False)
    pd.DataFrame([{"subject": "sub-09", "structure": "caudate_R",
                   "input": "inputs/sub-09_caudate_R.ply", "stage": "read",
                   "error": NASTY}]).to_csv(outdir / "failures.tsv", sep="\t", index=False)
    (outdir / "run.json").write_text(json.dumps({
        "command": "describe", "complete": True, "parameters": {"degree": lmax, "scale": "none"},
        "shapedesc_version": "test", "items": 17, "failed": 1}))

    dt = []
    for structure in structures:
        for l in range(1, lmax + 1):
            g = float(rng.normal(0.5, 0.5))
            p = 0.01 if l == 1 else 0.3
            dt.append({"structure": structure, "degree": l, "t": 2 * g, "p_parametric": p,
                       "p_perm": p, "p_fwer": p * 2 if l > 1 else 0.02, "q_fdr": p,
                       "hedges_g": g, "g_ci_low": g - 0.6, "g_ci_high": g + 0.6})
    pd.DataFrame(dt).to_csv(statsdir / "degree_tests.tsv", sep="\t", index=False)
    pd.DataFrame([{"structure": s, "test": "Pillai", "statistic": 0.4, "p_perm": 0.03}
                  for s in structures]).to_csv(statsdir / "global_test.tsv", sep="\t", index=False)
    pd.DataFrame([{"structure": s, "auc": 0.7, "p_perm": 0.04} for s in structures]).to_csv(
        statsdir / "classification.tsv", sep="\t", index=False)
    (statsdir / "compare.json").write_text(json.dumps({
        "command": "shapedesc compare", "permutations": 99, "seed": 1,
        "model": {"formula": "l ~ group + age", "group": "group",
                  "levels": ["control", "patient"], "test": "t"},
        "fwer": "maximum statistic across the tested degrees, per structure",
        "fdr": "Benjamini-Hochberg across the tested degrees on p_perm, per structure",
        "structures": {s: {"n_subjects": 8, "group_sizes": {"control": 4, "patient": 4},
                           "pointwise": "642 vertices"} for s in structures},
        "versions": {"numpy": np.__version__}}))
    ell = np.zeros((25, 3))
    ell[3, 0], ell[1, 1], ell[2, 2] = 20 / y1, 8 / y1, 6 / y1
    mv, mf = reconstruct_values(ell, lmax, level=3)
    (statsdir / "pca").mkdir()
    var_rows = []
    for structure in structures:
        t = mv[:, 0] / 5.0
        p = np.where(t > 2.5, 0.01, 0.5)
        # the layout `compare` writes: named arrays in vertex_tests_<structure>.gii
        _gifti(statsdir / f"vertex_tests_{structure}.gii",
               [("t", t, "NIFTI_INTENT_TTEST"), ("p_parametric", p, "NIFTI_INTENT_PVAL"),
                ("p_perm", p, "NIFTI_INTENT_PVAL"), ("p_fwer", p, "NIFTI_INTENT_PVAL"),
                ("mean_displacement_mm[control]", -0.1 * t, "NIFTI_INTENT_SHAPE"),
                ("mean_displacement_mm[patient]", 0.1 * t, "NIFTI_INTENT_SHAPE")])
        _gifti_surface(statsdir / f"mean_surface_{structure}.surf.gii", mv, mf)
        for lv, k in (("control", 0.97), ("patient", 1.03)):
            _gifti_surface(statsdir / f"mean_surface_{structure}_{lv}.surf.gii", mv * k, mf)
        for k, ratio in ((1, 0.6), (2, 0.25)):
            var_rows.append({"structure": structure, "input": "coefficients", "mode": k,
                             "variance": ratio * 10, "variance_ratio": ratio,
                             "cumulative_ratio": 0.6 if k == 1 else 0.85})
            bend = np.zeros_like(mv)
            bend[:, 2] = (0.002 if k == 1 else -0.003) * mv[:, 0] ** 2
            for tag, sgn in (("minus2sd", -1), ("mean", 0), ("plus2sd", 1)):
                _gifti_surface(statsdir / "pca" / f"{structure}_mode{k}_{tag}.surf.gii",
                               mv + sgn * bend, mf)
    pd.DataFrame(var_rows).to_csv(statsdir / "pca" / "variance_explained.tsv", sep="\t",
                                  index=False)
    return outdir, statsdir


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    root = tmp_path_factory.mktemp("study")
    return (root, *_make_study(root))


@pytest.fixture(scope="module")
def report(study):
    from shapedesc.report import write_report

    root, outdir, statsdir = study
    path = write_report(outdir, statsdir, root / "report.html", input_root=root, max_thumbnails=4)
    return path, path.read_text(encoding="utf-8")


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.imgs, self.urls, self.scripts, self.links, self.text = [], [], 0, 0, []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        for k in ("src", "href"):
            if k in a and not a[k].startswith(("data:", "#")):
                self.urls.append(a[k])
        self.scripts += tag == "script"
        self.links += tag == "link"

    def handle_data(self, data):
        self.text.append(data)


class _Tables(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tables, self.row, self.cell = [], None, None

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.row = []
        elif tag in ("td", "th"):
            self.cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self.cell is not None:
            self.row.append("".join(self.cell))
            self.cell = None
        elif tag == "tr" and self.row is not None:
            self.tables[-1].append(self.row)
            self.row = None

    def handle_data(self, data):
        if self.cell is not None:
            self.cell.append(data)


def _tables(text: str) -> list[pd.DataFrame]:
    p = _Tables()
    p.feed(text)
    return [pd.DataFrame(t[1:], columns=t[0]) for t in p.tables if t]


# ---------------------------------------------------------------------------- content


def test_report_is_self_contained(report):
    _, text = report
    # Parsed with the standard library's HTML parser (independent of how it was written).
    p = _Collect()
    p.feed(text)
    assert p.urls == [] and p.scripts == 0 and p.links == 0  # nothing fetched, no JS/CSS files
    assert not re.search(r"https?://", text)
    assert len(p.imgs) >= 6  # gallery x2, spectra x2, effect sizes, vertex maps
    for src in p.imgs:
        assert src.startswith("data:image/png;base64,")
        with Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1]))) as im:
            im.load()  # Pillow decodes the whole PNG stream
            assert im.width > 100 and im.height > 100


def test_report_escapes_table_text_and_ends_with_the_caution(report):
    _, text = report
    assert NASTY not in text and "<script>" not in text
    assert html.escape(NASTY, quote=True) in text
    p = _Collect()
    p.feed(text)
    joined = " ".join(p.text)
    assert NASTY in joined  # the browser shows the message exactly as written
    footer = text[text.rindex("<footer>"):]
    assert html.escape(CAUTION) in footer


def test_report_tables_carry_the_result_values(report, study):
    from shapedesc.report import read_table

    _, text = report
    _, outdir, statsdir = study
    tables = _tables(text)  # read back with the standard library's HTML parser
    dt = read_table(statsdir / "degree_tests.tsv")
    shown = next(t for t in tables if "hedges_g" in t.columns)
    np.testing.assert_allclose(shown["hedges_g"].to_numpy(float), dt["hedges_g"], rtol=1e-3)
    # 4 significant digits are printed: rtol 1e-3 covers the rounding
    qc = next(t for t in tables if "fit_rms_mm" in t.columns)
    assert len(qc) == 16
    for section in ("Study summary", "Quality control", "Shape spectra", "Group tests",
                    "Surface maps", "Parameters and versions"):
        assert f">{section}</h2>" in text


def test_report_refuses_to_overwrite(report, study):
    from shapedesc.report import write_report

    path, _ = report
    _, outdir, _ = study
    with pytest.raises(FileExistsError, match="force"):
        write_report(outdir, None, path)


def test_report_refuses_bad_folders(tmp_path):
    from shapedesc.report import build_report

    with pytest.raises(ValueError, match="no spectra.tsv"):
        build_report(tmp_path)
    with pytest.raises(ValueError, match="no such folder"):
        build_report(tmp_path / "missing")


# ---------------------------------------------------------------------------- browser


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        exe = shutil.which(name)
        if exe:
            return exe
    return None


class _DevTools:
    """A minimal Chrome DevTools Protocol client over a WebSocket (RFC 6455), stdlib only."""

    def __init__(self, ws_url: str, timeout: float = 60.0):
        import socket
        import urllib.parse

        u = urllib.parse.urlparse(ws_url)
        self.sock = socket.create_connection((u.hostname, u.port), timeout=timeout)
        key = base64.b64encode(np.random.default_rng().bytes(16)).decode()
        self.sock.sendall((f"GET {u.path} HTTP/1.1\r\nHost: {u.hostname}:{u.port}\r\n"
                           "Upgrade: websocket\r\nConnection: Upgrade\r\n"
                           f"Sec-WebSocket-Key: {key}\r\nSec-WebSocket-Version: 13\r\n\r\n"
                           ).encode())
        head = b""
        while b"\r\n\r\n" not in head:
            chunk = self.sock.recv(1)
            if not chunk:
                raise ConnectionError("DevTools closed the connection during the handshake")
            head += chunk
        if b" 101 " not in head.split(b"\r\n", 1)[0]:
            raise ConnectionError(f"DevTools refused the WebSocket: {head[:200]!r}")
        self.next_id = 0
        self.events: list[dict] = []

    def _exact(self, n: int) -> bytes:
        buf = b""
        while len(buf) < n:
            chunk = self.sock.recv(n - len(buf))
            if not chunk:
                raise ConnectionError("DevTools connection closed")
            buf += chunk
        return buf

    def _send(self, text: str) -> None:
        data = text.encode()
        mask = np.random.default_rng().bytes(4)
        n = len(data)
        head = bytes([0x81])  # FIN + text frame
        if n < 126:
            head += bytes([0x80 | n])
        elif n < 1 << 16:
            head += bytes([0x80 | 126]) + n.to_bytes(2, "big")
        else:
            head += bytes([0x80 | 127]) + n.to_bytes(8, "big")
        masked = bytes(b ^ mask[i % 4] for i, b in enumerate(data))
        self.sock.sendall(head + mask + masked)

    def _recv(self) -> str:
        parts = []
        while True:
            b0, b1 = self._exact(2)
            n = b1 & 0x7F
            if n == 126:
                n = int.from_bytes(self._exact(2), "big")
            elif n == 127:
                n = int.from_bytes(self._exact(8), "big")
            payload = self._exact(n)  # server frames are not masked
            opcode = b0 & 0x0F
            if opcode == 8:
                raise ConnectionError("DevTools closed the WebSocket")
            if opcode == 9:  # ping -> pong is not needed by Chromium; ignore
                continue
            parts.append(payload)
            if b0 & 0x80:
                return b"".join(parts).decode()

    def call(self, method: str, **params):
        self.next_id += 1
        my_id = self.next_id
        self._send(json.dumps({"id": my_id, "method": method, "params": params}))
        while True:
            msg = json.loads(self._recv())
            if msg.get("id") == my_id:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            self.events.append(msg)

    def wait_for(self, method: str):
        while True:
            msg = json.loads(self._recv())
            self.events.append(msg)
            if msg.get("method") == method:
                return msg


def _start_chromium(exe: str, profile: Path):
    """Start headless Chromium with a DevTools port; return (process, port or None).

    Chromium writes the port it chose to ``<profile>/DevToolsActivePort``.
    """
    import time

    profile.mkdir(parents=True, exist_ok=True)
    proc = subprocess.Popen(
        [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-extensions", "--no-first-run", "--no-default-browser-check",
         "--remote-debugging-port=0", f"--user-data-dir={profile}", "--window-size=1280,2000",
         "about:blank"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    port_file = profile / "DevToolsActivePort"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        try:
            return proc, int(port_file.read_text().split()[0])
        except (OSError, ValueError, IndexError):
            time.sleep(0.1)
    return proc, None


def _browser_check(path: Path, tmp_path: Path, *, min_images: int) -> None:
    """Load ``path`` in headless Chromium: no console errors, every image decodes, no
    request leaves the file, and the screenshot is not blank."""
    import urllib.request

    exe = _chromium()
    if exe is None:
        pytest.skip("no Chromium on PATH: install the Debian package `chromium` "
                    "(.ci/run does) to run the browser test")
    proc, port = _start_chromium(exe, tmp_path / "profile")
    try:
        if port is None:
            pytest.skip(f"Chromium at {exe} did not start a DevTools endpoint "
                        "(no usable headless mode here)")
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=30) as r:
            pages = [t for t in json.load(r) if t.get("type") == "page"]
        cdp = _DevTools(pages[0]["webSocketDebuggerUrl"])
        for domain in ("Runtime", "Log", "Page", "Network"):
            cdp.call(f"{domain}.enable")
        cdp.call("Page.navigate", url=path.resolve().as_uri())
        cdp.wait_for("Page.loadEventFired")
        result = cdp.call(
            "Runtime.evaluate", awaitPromise=True, returnByValue=True,
            expression="Promise.all([...document.images].map(i => i.decode().then("
                       "() => [i.naturalWidth, i.naturalHeight], () => [0, 0])))")
        sizes = result["result"]["value"]
        shot = cdp.call("Page.captureScreenshot", format="png")
        cdp.sock.close()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    errors = [e for e in cdp.events
              if (e.get("method") == "Runtime.consoleAPICalled"
                  and e["params"]["type"] in ("error", "assert"))
              or e.get("method") == "Runtime.exceptionThrown"
              or (e.get("method") == "Log.entryAdded"
                  and e["params"]["entry"]["level"] == "error")]
    assert errors == []
    requests = [e["params"]["request"]["url"] for e in cdp.events
                if e.get("method") == "Network.requestWillBeSent"]
    assert all(u.startswith(("file:", "data:")) for u in requests), requests
    assert len(sizes) >= min_images and all(w > 0 and h > 0 for w, h in sizes)
    with Image.open(io.BytesIO(base64.b64decode(shot["data"]))) as im:
        px = np.asarray(im.convert("L"), dtype=float)
    # Not blank: a page of text, tables and figures has many grey levels and ink on a
    # few per cent of the pixels at least (a blank page has one level and no ink).
    assert px.shape[0] > 500 and px.shape[1] > 500
    assert len(np.unique(px)) > 32
    assert np.mean(px < 200) > 0.01


def test_report_renders_in_headless_chromium(report, tmp_path):
    path, _ = report
    _browser_check(path, tmp_path, min_images=6)


@pytest.mark.slow
def test_demo_report_renders_in_headless_chromium(tmp_path, full, monkeypatch):
    """The report ``shapedesc demo`` writes, in the browser (reduced study by default)."""
    from shapedesc.cli.main import COMMANDS, main

    if "demo" not in COMMANDS:
        pytest.skip("demo is not registered in cli/main.py COMMANDS yet")
    if _chromium() is None:
        pytest.skip("no Chromium on PATH: install the Debian package `chromium`")
    from shapedesc.cli import demo
    from shapedesc.demo_study import generate_demo_study

    if not full:  # reduced: a small generated study instead of the bundled one
        # 4 per group: the demo's model has 6 columns, so compare needs 8 subjects;
        # level 3 (642 vertices) keeps the degree-15 fit determined.
        small = tmp_path / "small" / "study"
        generate_demo_study(small, n_per_group=4, level=3, n_volumes=0, voxel_mm=1.0, rng=3)
        monkeypatch.setattr(demo, "bundled_study", lambda: small)
    out = tmp_path / "demo"
    main(["-q", "demo", "-o", str(out), "--jobs", "1"])
    report = out / "report.html"
    if not report.is_file():
        pytest.skip("the demo wrote no report.html (describe/compare not complete yet)")
    text = report.read_text(encoding="utf-8")
    assert "degree_tests.tsv" in text  # the compare step reached the report
    # galleries and spectra (2 structures), effect sizes, maps and modes
    _browser_check(report, tmp_path, min_images=8)


def test_report_command_in_process(study, tmp_path, capsys):
    from shapedesc.cli.main import COMMANDS, main

    if "report" not in COMMANDS:
        pytest.skip("report is not registered in cli/main.py COMMANDS yet")
    root, outdir, statsdir = study
    out = tmp_path / "r.html"
    args = ["-q", "report", str(outdir), "--stats", str(statsdir), "-o", str(out),
            "--inputs", str(root), "--thumbnails", "1", "--dpi", "40"]
    assert main(args) == 0
    text = out.read_text(encoding="utf-8")
    assert "Group tests" in text and text.rstrip().endswith("</html>")
    assert main(args) == 1  # exists: refused without --force
    assert "--force" in capsys.readouterr().err
    # without STATSDIR: describe results only, and the page says how to add tests;
    # --figures also writes each figure as PNG (300 dpi), SVG and PDF
    figs = tmp_path / "figs"
    assert main(["-q", "report", str(outdir), "-o", str(out), "--thumbnails", "1",
                 "--dpi", "40", "--force", "--figures", str(figs)]) == 0
    assert "No STATSDIR given" in out.read_text(encoding="utf-8")
    names = sorted(p.name for p in figs.iterdir())
    assert "spectra.png" in names and "spectra.svg" in names and "spectra.pdf" in names
    assert "qc_gallery_caudate_R.png" in names
    with Image.open(figs / "spectra.png") as im:
        assert im.info["dpi"] == pytest.approx((300, 300), abs=0.01)  # Pillow reads pHYs
    assert main(["-q", "report", str(outdir), "-o", str(tmp_path / "r2.html"),
                 "--figures", str(figs)]) == 1  # figures folder not empty: refused
    assert main(["-q", "report", str(outdir), str(statsdir), "--stats", str(tmp_path),
                 "-o", str(out), "--force"]) == 1  # two different STATSDIRs
    assert main(["-q", "report", str(outdir), "-o", str(tmp_path / "r.txt")]) == 1


def test_report_is_deterministic(study):
    # Same inputs -> the same bytes (fixed PNG metadata, sorted tables, no timestamps).
    from shapedesc.report import build_report

    root, outdir, _ = study
    a = build_report(outdir, None, input_root=root, dpi=30, max_thumbnails=1)
    b = build_report(outdir, None, input_root=root, dpi=30, max_thumbnails=1)
    assert a == b


def test_thumbnails_say_why_the_input_is_not_overlaid(study):
    from dataclasses import replace

    from shapedesc.report import _thumbnails, load_describe

    root, outdir, _ = study
    desc = load_describe(outdir)
    qc = desc.qc[desc.qc.structure == "caudate_R"].head(3).copy()
    qc["input"] = ["inputs/sub-01_caudate_R.ply", "seg/sub-02.nii.gz#label=50",
                   "gone/sub-03.ply"]
    thumbs, notes, total = _thumbnails(replace(desc, qc=qc), "caudate_R", [root], 10, level=1)
    by_subject = {t.subject: t for t in thumbs}
    assert total == 3 and not notes
    assert by_subject["sub-01"].input_surface is not None
    assert "label volume" in by_subject["sub-02"].caption
    assert by_subject["sub-02"].input_surface is None
    assert "input not found" in by_subject["sub-03"].caption
