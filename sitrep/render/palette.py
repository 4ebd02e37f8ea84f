"""Every colour and fill pattern sitrep draws with, and the checks behind them.

This is the one module that names colours. Maps and charts take their fills
from the style tables below; templates take text colours from
:data:`TEXT_COLOURS`. The schemes are sitrep's own:

* **ILI% terciles** (sequential): ``sand`` -> ``amber`` -> ``plum``. Lightness
  (CIELAB L*) falls from about 91 to 69 to 25, so the order reads the same
  in every colour-vision type and in greyscale print.
* **Week-over-week change** (diverging): ``sea`` (decrease, with horizontal
  stripes) / ``linen`` (similar) / ``rust`` (increase); ``not assessable`` is
  white with grey diagonal hatching, the same "missing" look as no data.
* **Local Moran's I clusters**: high-high ``plum``, low-low ``pine``,
  high-low ``apricot`` with rust back-slash hatching and a rust outline,
  low-high ``mist`` with dotted hatching, not significant ``fog`` grey,
  no neighbours white with a dotted outline, no data white with diagonal
  hatching, not assessable white with cross-hatching.

No class relies on colour alone (WCAG 2.1 SC 1.4.1): within each scheme,
two classes drawn with the same pattern (hatch and outline style) differ in
lightness by at least :data:`MIN_LIGHTNESS_STEP` L* units, which survives
greyscale printing and every colour-vision type; all others differ by pattern.
Legends name every class in words (see ``sitrep.render.maps.LEGEND_LABELS``).

How the colours were checked (tests/test_maps.py runs the same checks):
colours are simulated for protanopia, deuteranopia and tritanopia with the
Machado, Oliveira & Fernandes (2009) severity-1.0 matrices applied in linear
RGB, and compared with the CIEDE2000 colour difference (Sharma, Wu & Dalal
2005). Each pair of fills in a scheme differs by at least
:data:`MIN_DELTA_E` under normal vision and every simulation, unless the pair
differs by pattern. Text colours reach the WCAG 2.1 SC 1.4.3 contrast of
4.5:1 on white, line colours the SC 1.4.11 non-text contrast of 3:1.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Literal

from sitrep.model import ChangeClass, ClusterLabel

__all__ = [
    "CHANGE_STYLES",
    "CLUSTER_STYLES",
    "COLOURS",
    "CVD_KINDS",
    "LINE_COLOURS",
    "MIN_DELTA_E",
    "MIN_LIGHTNESS_STEP",
    "NO_DATA_STYLE",
    "RAMP",
    "TERCILE_STYLES",
    "TEXT_COLOURS",
    "FillStyle",
    "cielab",
    "contrast_ratio",
    "delta_e_2000",
    "relative_luminance",
    "simulate_cvd",
]

COLOURS: dict[str, str] = {
    # fills
    "sand": "#F3E4C2",
    "amber": "#DB9A2E",
    "plum": "#5B2558",
    "sea": "#3E9A90",
    "sea_dark": "#1F5E57",
    "linen": "#EEEBE3",
    "rust": "#B5531A",
    "pine": "#2E7F62",
    "apricot": "#F4C08A",
    "mist": "#A9D8CC",
    "fog": "#E1E1E1",
    "white": "#FFFFFF",
    # lines, hatching and text
    "ink": "#222222",
    "slate": "#555555",
    "graphite": "#6B6B6B",
    "hatch_grey": "#7A7A7A",
    "border": "#8C8C8C",
    "past_1": "#6B6B6B",
    "past_2": "#8A8A8A",
    "ochre_dark": "#8A5A00",
    "rust_dark": "#9C4313",
    "berry": "#8E2F5E",
    "bar": "#7C5A8A",
}
"""Every colour sitrep uses, by the name the code refers to it with."""

TEXT_COLOURS: dict[str, str] = {
    "body": COLOURS["ink"],
    "secondary": COLOURS["slate"],
    "baseline_label": COLOURS["graphite"],
    "threshold_1": COLOURS["ochre_dark"],
    "threshold_2": COLOURS["rust_dark"],
    "threshold_3": COLOURS["berry"],
    "threshold_4": COLOURS["plum"],
    "current_season": COLOURS["plum"],
}
"""Colours used for text on white; each has contrast >= 4.5:1 (WCAG 2.1 SC 1.4.3)."""

LINE_COLOURS: dict[str, str] = {
    "current_season": COLOURS["plum"],
    "past_season_1": COLOURS["past_1"],
    "past_season_2": COLOURS["past_2"],
    "baseline": COLOURS["graphite"],
    "threshold_1": COLOURS["ochre_dark"],
    "threshold_2": COLOURS["rust_dark"],
    "threshold_3": COLOURS["berry"],
    "threshold_4": COLOURS["plum"],
    "whisker": COLOURS["ink"],
    "bar_edge": COLOURS["plum"],
    "district_border": COLOURS["border"],
}
"""Colours of lines and marks on white; each has contrast >= 3:1 (WCAG 2.1 SC 1.4.11)."""

RAMP: tuple[str, str, str] = (COLOURS["sand"], COLOURS["amber"], COLOURS["plum"])
"""The sequential ramp, light to dark (terciles; continuous scale of the comparison map)."""

MIN_DELTA_E = 10.0
"""Smallest CIEDE2000 difference allowed between two same-pattern fills of a scheme.

A difference of about 1 is just noticeable side by side; 10 is chosen as a
clear margin for small, separated map areas (a project choice, not a standard).
"""

MIN_LIGHTNESS_STEP = 15.0
"""Smallest L* difference between two fills of a scheme that share a pattern (project choice)."""

EdgeStyle = Literal["solid", "dotted", "dashed"]


@dataclasses.dataclass(frozen=True)
class FillStyle:
    """How one class of districts is filled and outlined on a map.

    ``hatch`` is a matplotlib hatch pattern ('' for none), drawn in
    ``hatch_colour``; ``edge`` and ``edge_style`` are the outline's colour
    and line style, ``edge_width`` its width in points (None: the map's
    default border width).
    """

    face: str
    edge: str = COLOURS["border"]
    hatch: str = ""
    hatch_colour: str = COLOURS["hatch_grey"]
    edge_style: EdgeStyle = "solid"
    edge_width: float | None = None

    @property
    def pattern(self) -> tuple[str, EdgeStyle]:
        """What tells this fill apart without colour: hatch and outline style."""
        return (self.hatch, self.edge_style)


NO_DATA_STYLE = FillStyle(face=COLOURS["white"], hatch="////", hatch_colour=COLOURS["hatch_grey"])
"""No data or suppressed: white with grey diagonal hatching (on every map)."""

TERCILE_STYLES: dict[int, FillStyle] = {
    0: NO_DATA_STYLE,
    1: FillStyle(face=COLOURS["sand"]),
    2: FillStyle(face=COLOURS["amber"]),
    3: FillStyle(face=COLOURS["plum"]),
}
"""Fill per tercile rank: 0 no data / suppressed, 1 lowest third ... 3 highest third."""

CHANGE_STYLES: dict[str, FillStyle] = {
    ChangeClass.DECREASE.value: FillStyle(
        face=COLOURS["sea"], hatch="---", hatch_colour=COLOURS["sea_dark"]
    ),
    ChangeClass.SIMILAR.value: FillStyle(face=COLOURS["linen"]),
    ChangeClass.INCREASE.value: FillStyle(face=COLOURS["rust"]),
    ChangeClass.NOT_ASSESSABLE.value: NO_DATA_STYLE,
}
"""Fill per week-over-week change class (keys: :class:`~sitrep.model.ChangeClass` values)."""

CLUSTER_STYLES: dict[str, FillStyle] = {
    ClusterLabel.HIGH_HIGH.value: FillStyle(face=COLOURS["plum"]),
    ClusterLabel.LOW_LOW.value: FillStyle(face=COLOURS["pine"]),
    ClusterLabel.HIGH_LOW.value: FillStyle(
        face=COLOURS["apricot"],
        edge=COLOURS["rust"],
        hatch="\\\\\\",
        hatch_colour=COLOURS["rust"],
        edge_width=1.0,
    ),
    ClusterLabel.LOW_HIGH.value: FillStyle(
        face=COLOURS["mist"], hatch="...", hatch_colour=COLOURS["sea_dark"]
    ),
    ClusterLabel.NOT_SIGNIFICANT.value: FillStyle(face=COLOURS["fog"]),
    ClusterLabel.NO_NEIGHBOURS.value: FillStyle(
        face=COLOURS["white"], edge=COLOURS["ink"], edge_style="dotted", edge_width=0.9
    ),
    ClusterLabel.NO_DATA.value: NO_DATA_STYLE,
    ClusterLabel.NOT_ASSESSABLE.value: FillStyle(
        face=COLOURS["white"], hatch="xxx", hatch_colour=COLOURS["hatch_grey"]
    ),
}
"""Fill per Local Moran's I label (keys: :class:`~sitrep.model.ClusterLabel` values)."""


# --------------------------------------------------------------------------- colour maths

CVD_KINDS = ("protanopia", "deuteranopia", "tritanopia")

_MACHADO_2009: Mapping[str, tuple[tuple[float, float, float], ...]] = {
    # Machado, Oliveira & Fernandes (2009), "A physiologically-based model for
    # simulation of color vision deficiency", IEEE TVCG 15(6), severity 1.0.
    "protanopia": (
        (0.152286, 1.052583, -0.204868),
        (0.114503, 0.786281, 0.099216),
        (-0.003882, -0.048116, 1.051998),
    ),
    "deuteranopia": (
        (0.367322, 0.860646, -0.227968),
        (0.280085, 0.672501, 0.047413),
        (-0.011820, 0.042940, 0.968881),
    ),
    "tritanopia": (
        (1.255528, -0.076749, -0.178779),
        (-0.078411, 0.930809, 0.147602),
        (0.004733, 0.691367, 0.303900),
    ),
}


def _rgb(hex_colour: str) -> tuple[float, float, float]:
    """'#RRGGBB' as three sRGB channels in 0..1."""
    text = hex_colour.strip()
    if len(text) != 7 or text[0] != "#":
        raise ValueError(f"expected a colour like '#1A2B3C', got {hex_colour!r}")
    try:
        r, g, b = (int(text[i : i + 2], 16) / 255 for i in (1, 3, 5))
    except ValueError as exc:
        raise ValueError(f"expected a colour like '#1A2B3C', got {hex_colour!r}") from exc
    return r, g, b


def _linear(channel: float) -> float:
    """sRGB channel to linear light (IEC 61966-2-1; WCAG 2.1 uses the 0.04045 knee)."""
    if channel <= 0.04045:
        return channel / 12.92
    return ((channel + 0.055) / 1.055) ** 2.4


def _encode(value: float) -> float:
    """Linear light to an sRGB channel, clipped to 0..1."""
    value = min(1.0, max(0.0, value))
    if value <= 0.0031308:
        return 12.92 * value
    return 1.055 * value ** (1 / 2.4) - 0.055


def relative_luminance(hex_colour: str) -> float:
    """WCAG 2.1 relative luminance, 0 (black) to 1 (white).

    L = 0.2126 R + 0.7152 G + 0.0722 B on linearised sRGB channels
    (WCAG 2.1, definition of "relative luminance").

    Raises
    ------
    ValueError
        If the colour is not written ``#RRGGBB``.
    """
    r, g, b = (_linear(c) for c in _rgb(hex_colour))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast_ratio(hex1: str, hex2: str) -> float:
    """WCAG 2.1 contrast ratio of two colours, from 1 (same) to 21 (black on white).

    (L1 + 0.05) / (L2 + 0.05) with L1 the lighter colour's relative
    luminance (WCAG 2.1, definition of "contrast ratio"). SC 1.4.3 asks for
    4.5 for body text, SC 1.4.11 for 3 for graphical objects.

    Parameters
    ----------
    hex1, hex2 : str
        Colours written ``#RRGGBB`` (order does not matter).

    Returns
    -------
    float

    Raises
    ------
    ValueError
        If a colour is not written ``#RRGGBB``.
    """
    lighter, darker = sorted((relative_luminance(hex1), relative_luminance(hex2)), reverse=True)
    return (lighter + 0.05) / (darker + 0.05)


def simulate_cvd(hex_colour: str, kind: str) -> str:
    """How a colour looks with a full dichromacy, as ``#RRGGBB``.

    The Machado et al. (2009) severity-1.0 matrix for ``kind`` is applied to
    linearised sRGB; the result is clipped to 0..1 and re-encoded. Greys are
    unchanged (each matrix row sums to 1 within 1e-6).

    Parameters
    ----------
    hex_colour : str
    kind : {'protanopia', 'deuteranopia', 'tritanopia'}

    Raises
    ------
    ValueError
        If ``kind`` is not one of :data:`CVD_KINDS` or the colour is malformed.
    """
    if kind not in _MACHADO_2009:
        raise ValueError(f"kind must be one of {', '.join(CVD_KINDS)}, got {kind!r}")
    lin = [_linear(c) for c in _rgb(hex_colour)]
    out = [sum(m * v for m, v in zip(row, lin, strict=True)) for row in _MACHADO_2009[kind]]
    return "#" + "".join(f"{round(_encode(v) * 255):02X}" for v in out)


def cielab(hex_colour: str) -> tuple[float, float, float]:
    """CIELAB (L*, a*, b*) of an sRGB colour, D65 white.

    Linear sRGB -> XYZ with the IEC 61966-2-1 matrix, then CIE 1976 L*a*b*
    with reference white X=0.95047, Y=1, Z=1.08883.
    """
    r, g, b = (_linear(c) for c in _rgb(hex_colour))
    x = (0.4124564 * r + 0.3575761 * g + 0.1804375 * b) / 0.95047
    y = 0.2126729 * r + 0.7151522 * g + 0.0721750 * b
    z = (0.0193339 * r + 0.1191920 * g + 0.9503041 * b) / 1.08883

    def f(t: float) -> float:
        delta = 6 / 29
        return t ** (1 / 3) if t > delta**3 else t / (3 * delta**2) + 4 / 29

    fx, fy, fz = f(x), f(y), f(z)
    return 116 * fy - 16, 500 * (fx - fy), 200 * (fy - fz)


def delta_e_2000(lab1: tuple[float, float, float], lab2: tuple[float, float, float]) -> float:
    """CIEDE2000 colour difference of two CIELAB colours (kL = kC = kH = 1).

    Implements equations (1)-(21) of Sharma, Wu & Dalal (2005), "The CIEDE2000
    color-difference formula: implementation notes, supplementary test data,
    and mathematical observations", Color Res. Appl. 30(1).
    """
    l1, a1, b1 = lab1
    l2, a2, b2 = lab2
    c_bar = (math.hypot(a1, b1) + math.hypot(a2, b2)) / 2
    g = 0.5 * (1 - math.sqrt(c_bar**7 / (c_bar**7 + 25.0**7)))
    a1p, a2p = (1 + g) * a1, (1 + g) * a2
    c1p, c2p = math.hypot(a1p, b1), math.hypot(a2p, b2)
    h1p = math.degrees(math.atan2(b1, a1p)) % 360 if c1p else 0.0
    h2p = math.degrees(math.atan2(b2, a2p)) % 360 if c2p else 0.0

    dl = l2 - l1
    dc = c2p - c1p
    if c1p * c2p == 0:
        dh = 0.0
    elif abs(h2p - h1p) <= 180:
        dh = h2p - h1p
    elif h2p - h1p > 180:
        dh = h2p - h1p - 360
    else:
        dh = h2p - h1p + 360
    d_h = 2 * math.sqrt(c1p * c2p) * math.sin(math.radians(dh / 2))

    l_bar = (l1 + l2) / 2
    cp_bar = (c1p + c2p) / 2
    if c1p * c2p == 0:
        hp_bar = h1p + h2p
    elif abs(h1p - h2p) <= 180:
        hp_bar = (h1p + h2p) / 2
    elif h1p + h2p < 360:
        hp_bar = (h1p + h2p + 360) / 2
    else:
        hp_bar = (h1p + h2p - 360) / 2
    t = (
        1
        - 0.17 * math.cos(math.radians(hp_bar - 30))
        + 0.24 * math.cos(math.radians(2 * hp_bar))
        + 0.32 * math.cos(math.radians(3 * hp_bar + 6))
        - 0.20 * math.cos(math.radians(4 * hp_bar - 63))
    )
    d_theta = 30 * math.exp(-(((hp_bar - 275) / 25) ** 2))
    r_c = 2 * math.sqrt(cp_bar**7 / (cp_bar**7 + 25.0**7))
    s_l = 1 + 0.015 * (l_bar - 50) ** 2 / math.sqrt(20 + (l_bar - 50) ** 2)
    s_c = 1 + 0.045 * cp_bar
    s_h = 1 + 0.015 * cp_bar * t
    r_t = -math.sin(math.radians(2 * d_theta)) * r_c
    return math.sqrt(
        (dl / s_l) ** 2 + (dc / s_c) ** 2 + (d_h / s_h) ** 2 + r_t * (dc / s_c) * (d_h / s_h)
    )
