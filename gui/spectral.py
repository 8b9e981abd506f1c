"""Wavelength -> an on-screen colour for rays, and the fade of any ray colour with flux.

Pure numpy; no Qt.  The spectral colours are a piecewise-linear approximation (common practice:
the usual six-segment ramp violet-blue-cyan-green-yellow-red over 380-780 nm, dimmed towards
both ends of vision); outside that range rays are grey.  Colours are then darkened so none is
lighter than the orange ray colour, because yellow and cyan would vanish on the light drawing.
"""
from __future__ import annotations

import numpy as np

VISIBLE_NM = (380.0, 780.0)
OUTSIDE_GREY = (128, 128, 128)
BACKGROUND = (250, 250, 246)
# Lightest allowed luminance of a full-strength ray colour (that of the orange ray colour).
MAX_LUMINANCE = 132.0
# Share of the full contrast that even the faintest leg keeps: faded further, a ghost inside a
# tinted part is lighter than the tint and reads as a void in the glass instead of a faint ray.
FADE_FLOOR = 0.25

# (nm, r, g, b) breakpoints of the ramp, each channel linear in between.
_RAMP = np.array([
    (380.0, 0.5, 0.0, 1.0),   # violet
    (440.0, 0.0, 0.0, 1.0),   # blue
    (490.0, 0.0, 1.0, 1.0),   # cyan
    (510.0, 0.0, 1.0, 0.0),   # green
    (580.0, 1.0, 1.0, 0.0),   # yellow
    (645.0, 1.0, 0.0, 0.0),   # red
    (780.0, 1.0, 0.0, 0.0),
])


def luminance(rgb) -> float:
    """Relative luminance weights of sRGB primaries (published: ITU-R BT.709), on 0-255 values."""
    r, g, b = rgb
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def spectral_rgb(nm: float) -> tuple[int, int, int]:
    """An opaque (r, g, b) 0-255 for a wavelength in nm; grey outside 380-780 nm."""
    if not np.isfinite(nm) or nm < VISIBLE_NM[0] or nm > VISIBLE_NM[1]:
        return OUTSIDE_GREY
    rgb = np.array([np.interp(nm, _RAMP[:, 0], _RAMP[:, k]) for k in (1, 2, 3)])
    # vision fades at both ends: dim the first 40 nm and the last 80 nm
    edge = np.interp(nm, (380.0, 420.0, 700.0, 780.0), (0.45, 1.0, 1.0, 0.45))
    rgb = 255.0 * rgb * edge
    lum = luminance(rgb)
    if lum > MAX_LUMINANCE:
        rgb *= MAX_LUMINANCE / lum
    return tuple(int(round(v)) for v in rgb)


def wavelength_bin(nm: np.ndarray, step: float = 5.0) -> np.ndarray:
    """Wavelengths rounded to `step` nm, so a continuous spectrum makes a few dozen colours."""
    return np.round(np.asarray(nm, dtype=float) / step) * step


def faded_rgb(rgb, strength: float, reference=(222, 118, 0)) -> tuple[int, int, int]:
    """An opaque colour between the background and `rgb` whose contrast with the background is
    `strength` (0..1) times the contrast of the full `reference` colour, so that a leg of a given
    flux looks equally heavy whatever its hue (a saturated pink at the same mix as orange reads
    much darker).  Strength 0 still keeps FADE_FLOOR of the contrast."""
    bg_l = luminance(BACKGROUND)
    want = (FADE_FLOOR + (1.0 - FADE_FLOOR) * strength) * (bg_l - luminance(reference))
    have = bg_l - luminance(rgb)
    share = 1.0 if have <= 1e-9 else min(1.0, want / have)
    return tuple(int(round(b + share * (c - b))) for b, c in zip(BACKGROUND, rgb))
