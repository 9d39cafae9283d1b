"""Colour maps, fonts and figure output of shapedesc.figures.style."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import matplotlib
import numpy as np
import pytest
from PIL import Image
from skimage.color import deltaE_ciede2000, rgb2lab

from shapedesc.defaults import FIGURE_DPI
from shapedesc.figures import style


def _lab(cmap, n):
    return rgb2lab(np.asarray(cmap(np.linspace(0.0, 1.0, n)))[None, :, :3])[0]


def test_diverging_map_lightness_is_symmetric_and_peaks_at_zero():
    # Source: CIELAB lightness from scikit-image's sRGB -> CIELAB conversion (CIE 15:2004).
    lab = _lab(style.DIVERGING_CMAP, style.DIVERGING_CMAP.N)  # one sample per entry (256)
    L = lab[:, 0]
    # 1 L* unit: the just-noticeable lightness difference is about 1 (common practice);
    # clipping to the sRGB gamut moves L* by well under that.
    assert np.max(np.abs(L - L[::-1])) < 1.0
    assert np.all(np.diff(L[:128]) > 0) and np.all(np.diff(L[128:]) < 0)
    assert L[127] > 90 and L[128] > 90 and L[0] < 35 and L[-1] < 35  # light centre, dark ends
    # opposite hue at the two ends: b* (blue-yellow axis) of opposite sign
    assert lab[0, 2] < -15 and lab[-1, 2] > 10


def test_diverging_map_steps_are_perceptually_even():
    # Source: CIEDE2000 colour difference (Sharma et al. 2005) as implemented by
    # scikit-image. Equal steps of value should give near-equal colour steps.
    lab = _lab(style.DIVERGING_CMAP, 21)
    de = deltaE_ciede2000(lab[:-1], lab[1:])
    # Lightness is linear in value; the chroma ramp near zero leaves the largest step
    # about 1.6x the smallest (measured 4.3 .. 6.7); RdBu measures 9.7 .. 18.5 here.
    assert de.max() / de.min() < 1.7
    rdbu = _lab(matplotlib.colormaps["RdBu_r"], 21)
    de_rdbu = deltaE_ciede2000(rdbu[:-1], rdbu[1:])
    assert de.max() / de.min() < de_rdbu.max() / de_rdbu.min()


def test_sequential_map_lightness_is_monotone():
    # Source: scikit-image CIELAB; cividis is designed with monotone lightness
    # (Nunez et al. 2018, doi:10.1371/journal.pone.0199239), so greyscale keeps order.
    L = _lab(matplotlib.colormaps[style.SEQUENTIAL_CMAP], 64)[:, 0]
    assert np.all(np.diff(L) > 0)


def test_group_styles_differ_without_colour():
    # Greyscale readers need a second cue: consecutive groups differ in line style and marker.
    a, b = style.group_style(0), style.group_style(1)
    assert a["linestyle"] != b["linestyle"] and a["marker"] != b["marker"]


def test_symmetric_limits():
    assert style.symmetric_limits(np.array([-0.5, 2.0, np.nan])) == (-2.0, 2.0)
    lo, hi = style.symmetric_limits(np.zeros(3))
    assert lo == -hi and hi > 0


def _small_figure():
    with style.figure_style():
        fig = style.new_figure(2.0, 1.5)
        ax = fig.add_subplot()
        ax.plot([0, 1], [0, 1])
        ax.set_xlabel("x (mm)")
    return fig


def test_save_figure_png_svg_pdf(tmp_path):
    written = style.save_figure(_small_figure(), tmp_path / "f.png", also=(".svg", "pdf"))
    assert [p.suffix for p in written] == [".png", ".svg", ".pdf"]
    # Source: PNG pHYs chunk read back by Pillow; 300 dpi is the default resolution.
    with Image.open(written[0]) as im:
        dpi = im.info["dpi"]
    assert dpi == pytest.approx((FIGURE_DPI, FIGURE_DPI), abs=0.01)  # pHYs stores px/m
    root = ET.parse(written[1]).getroot()  # SVG is well-formed XML (stdlib parser)
    assert root.tag.endswith("svg")
    assert "x (mm)" in written[1].read_text()  # text kept as text (svg.fonttype none)
    assert written[2].read_bytes().startswith(b"%PDF")


def test_save_figure_is_deterministic_and_refuses_overwrite(tmp_path):
    a = style.save_figure(_small_figure(), tmp_path / "a.svg")[0].read_bytes()
    b = style.save_figure(_small_figure(), tmp_path / "b.svg")[0].read_bytes()
    assert a == b
    with pytest.raises(FileExistsError, match="force"):
        style.save_figure(_small_figure(), tmp_path / "a.svg", overwrite=False)
    with pytest.raises(ValueError, match="format"):
        style.save_figure(_small_figure(), tmp_path / "a.jpg")


def test_lab_to_srgb_matches_scikit_image():
    # Source: scikit-image's lab2rgb (D65), independent of the package's own formulas.
    from skimage.color import lab2rgb

    lab = style._diverging_lab(33)
    ref = np.clip(lab2rgb(lab[None])[0], 0, 1)
    # 1e-4 of full scale: both implement the same CIE/sRGB formulas in float64; the
    # residue is the rounding of the sRGB matrix constants (4th-7th decimal).
    np.testing.assert_allclose(style._lab_to_srgb(lab), ref, atol=1e-4)
