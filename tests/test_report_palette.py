"""The objective colours stay apart for colour-blind readers and in grey-scale print.

Colour science used here, from outside the project:
- sRGB transfer function and the sRGB -> XYZ (D65) matrix: IEC 61966-2-1.
- CIE 1976 L*a*b* and the colour difference Delta E*ab (CIE 15).
- Simulated dichromacy: the severity-1.0 matrices of Machado, Oliveira and
  Fernandes (2009), "A physiologically-based model for simulation of color
  vision deficiency", applied to linear RGB (values from memory of the paper's
  table; rounded to six decimals there).
- Thresholds: Delta E 76 of about 2.3 is a just-noticeable difference; we ask
  for much more (common practice for categorical palettes, from memory).
"""
import itertools

import numpy as np
import pytest

from optimizer.report import palette

SRGB_TO_XYZ = np.array([[0.4124, 0.3576, 0.1805],
                        [0.2126, 0.7152, 0.0722],
                        [0.0193, 0.1192, 0.9505]])
WHITE_D65 = np.array([0.95047, 1.0, 1.08883])

DICHROMACY = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}

SMALLEST_DIFFERENCE = 15.0      # Delta E*ab between any two objective colours, any vision
SMALLEST_GREY_STEP = 8.0        # L* between any two objective colours (grey-scale print)


def linear_rgb(hex_colour: str) -> np.ndarray:
    c = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def lab(linear: np.ndarray) -> np.ndarray:
    xyz = SRGB_TO_XYZ @ np.clip(linear, 0.0, 1.0) / WHITE_D65
    f = np.where(xyz > (6 / 29) ** 3, np.cbrt(xyz), xyz / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_lab_of_reference_colours():
    # CIE L*a*b* of sRGB white, black and pure red (D65), textbook values.
    assert np.allclose(lab(linear_rgb("#ffffff")), [100, 0, 0], atol=0.1)
    assert np.allclose(lab(linear_rgb("#000000")), [0, 0, 0], atol=0.1)
    assert np.allclose(lab(linear_rgb("#ff0000")), [53.24, 80.09, 67.20], atol=0.3)


@pytest.mark.parametrize("vision", ["normal"] + list(DICHROMACY))
def test_objective_colours_differ_under_every_vision(vision):
    seen = {}
    for name, hex_colour in palette.OBJECTIVE_COLOURS.items():
        rgb = linear_rgb(hex_colour)
        if vision != "normal":
            rgb = DICHROMACY[vision] @ rgb
        seen[name] = lab(rgb)
    for (a, la), (b, lb) in itertools.combinations(seen.items(), 2):
        difference = float(np.linalg.norm(la - lb))
        assert difference >= SMALLEST_DIFFERENCE, f"{a} and {b} under {vision}: Delta E {difference:.1f}"


def test_objective_colours_differ_in_grey():
    lightness = sorted(lab(linear_rgb(c))[0] for c in palette.OBJECTIVE_COLOURS.values())
    assert min(np.diff(lightness)) >= SMALLEST_GREY_STEP, lightness


def test_use_map_darkens_monotonically():
    # A sequential map must order its values by lightness alone (readable in grey, by every reader).
    cmap = palette.use_map()
    values = np.linspace(0.0, 1.0, 64)
    lightness = [lab(linear_rgb("#%02x%02x%02x" % tuple(int(round(255 * x)) for x in cmap(v)[:3])))[0]
                 for v in values]
    assert np.all(np.diff(lightness) < 0.0)


def test_every_objective_has_its_own_marker_and_dash():
    styles = [palette.line_style(o) for o in palette.OBJECTIVE_COLOURS]
    assert len({s["marker"] for s in styles}) == len(styles)
    assert len({str(s["linestyle"]) for s in styles}) == len(styles)
    assert palette.colour("a sweep value") == palette.colour("a sweep value")
    assert len(set(palette.series_colours(len(palette.EXTRA_COLOURS)))) == len(palette.EXTRA_COLOURS)
