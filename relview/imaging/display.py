"""Display: linear sRGB (any range) -> display-referred sRGB in [0, 1] and 8/16-bit integers.

Second half of the colour pipeline (docs/colour.md), after relview.imaging.exposure::

    linear sRGB (Frame.image, not clipped)
      -- display: gamut rule, optional tone curve, clip to [0, 1]
      -- sRGB encoding (IEC 61966-2-1 transfer function, relview.light.spectrum)
      -- 8 or 16 bit integers (-> PNG, relview.imaging.png)

Out-of-gamut colours (:func:`gamut_map`)
    Light from a Doppler-shifted spectrum can be more saturated than any sRGB
    colour, so the matrix gives negative channels. Rule: such a pixel is
    desaturated towards the grey of the same luminance, just far enough that its
    lowest channel becomes 0. The luminance Y (and the hue angle) are kept; a
    pixel whose luminance is not positive becomes black. (Common practice for
    gamut mapping by desaturation; the straight line towards the achromatic
    point is our own choice.)

Tone (:func:`apply_tone`)
    ``"none"`` (default, honest): clip each channel to [0, 1] after exposure.
    ``"reinhard"``: the extended global operator of Reinhard, Stark, Shirley &
    Ferwerda, "Photographic Tone Reproduction for Digital Images", SIGGRAPH
    2002, eq. 4, applied to luminance with the hue kept.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from relview.imaging.exposure import check_white

__all__ = [
    "LUMINANCE_WEIGHTS",
    "REINHARD_L_WHITE",
    "TONE_CURVES",
    "apply_tone",
    "gamut_map",
    "to_8bit",
    "to_16bit",
    "to_display",
]

#: Luminance of linear sRGB: the Y row of the sRGB -> XYZ matrix, IEC 61966-2-1:1999
#: eq. (the weights sum to 1, so a grey (Y, Y, Y) has luminance Y).
LUMINANCE_WEIGHTS = np.array([0.2126, 0.7152, 0.0722])

#: Names accepted by :func:`apply_tone` / :func:`to_display`.
TONE_CURVES = ("none", "reinhard")

#: Relative luminance (1 = exposure white) that the "reinhard" curve maps to display
#: white (L_white of Reinhard et al. 2002, eq. 4). Our choice: up to 4x the exposure
#: white keeps some gradation before burning out.
REINHARD_L_WHITE = 4.0

# Linear values beyond this are all display white (or black) anyway; bounding them
# keeps products like L * L in the tone curve finite.
_DISPLAY_BOUND = 1e30


def gamut_map(linear: Any) -> np.ndarray:
    """Bring negative (out-of-gamut) linear sRGB channels to 0, keeping luminance.

    A pixel with a negative channel and luminance Y > 0 is mixed with the grey
    (Y, Y, Y): rgb' = Y + t (rgb - Y) with t = Y / (Y - min(rgb)), the largest t
    that makes every channel >= 0. Y is unchanged because the luminance weights
    sum to 1. Pixels with Y <= 0 become black. Other pixels are unchanged.
    Returns float64 (..., 3); values above 1 are left alone.
    """
    rgb = np.array(linear, dtype=np.float64)  # a copy
    if rgb.ndim < 1 or rgb.shape[-1] != 3:
        raise ValueError(f"linear sRGB must have shape (..., 3), got {rgb.shape}")
    lum = rgb @ LUMINANCE_WEIGHTS
    low = rgb.min(axis=-1)
    out_of_gamut = low < 0.0
    desaturate = out_of_gamut & (lum > 0.0)
    y = lum[desaturate][:, None]
    t = y / (y - low[desaturate][:, None])
    rgb[desaturate] = y + t * (rgb[desaturate] - y)
    rgb[out_of_gamut & ~(lum > 0.0)] = 0.0
    np.maximum(rgb, 0.0, out=rgb)  # rounding residue of order 1e-17
    return rgb


def apply_tone(linear: Any, tone: str = "none", l_white: float = REINHARD_L_WHITE) -> np.ndarray:
    """Apply a tone curve to non-negative linear sRGB (float64 (..., 3), not clipped).

    ``"none"``: unchanged. ``"reinhard"``: relative luminance L (= Y, 1 at the
    exposure white) becomes L_d = L (1 + L / l_white^2) / (1 + L) (Reinhard et al.
    2002, eq. 4) and each pixel's channels are scaled by L_d / L, keeping the hue.
    Channels can still exceed 1 for saturated bright colours; the caller clips.
    """
    if tone not in TONE_CURVES:
        raise ValueError(f"tone must be one of {TONE_CURVES}, got {tone!r}")
    rgb = np.asarray(linear, dtype=np.float64)
    if tone == "none":
        return rgb
    l_white = check_white(l_white, "reinhard l_white")
    lum = rgb @ LUMINANCE_WEIGHTS
    with np.errstate(divide="ignore", invalid="ignore"):
        mapped = lum * (1.0 + lum / (l_white * l_white)) / (1.0 + lum)
        scale = np.where(lum > 0.0, mapped / lum, 0.0)
    return rgb * scale[..., None]


def to_display(linear: Any, tone: str = "none") -> np.ndarray:
    """Linear sRGB (any range) -> display-referred linear sRGB in [0, 1], float64.

    Order: NaN -> 0 (black), +-inf bounded; :func:`gamut_map`; :func:`apply_tone`;
    clip each channel to [0, 1].
    """
    rgb = np.nan_to_num(
        np.asarray(linear, dtype=np.float64), nan=0.0, posinf=_DISPLAY_BOUND, neginf=-_DISPLAY_BOUND
    )
    np.clip(rgb, -_DISPLAY_BOUND, _DISPLAY_BOUND, out=rgb)
    rgb = apply_tone(gamut_map(rgb), tone)
    return np.clip(rgb, 0.0, 1.0)


def _quantise(linear: Any, tone: str, levels: int, dtype) -> np.ndarray:
    # imported here, not at the top: relview.light.spectrum compiles numba kernels
    from relview.light.spectrum import encode_srgb

    encoded = np.asarray(encode_srgb(to_display(linear, tone)), dtype=np.float64)
    return np.rint(np.clip(encoded, 0.0, 1.0) * levels).astype(dtype)


def to_8bit(linear: Any, tone: str = "none") -> np.ndarray:
    """Linear sRGB -> uint8 encoded sRGB (IEC 61966-2-1), via :func:`to_display`."""
    return _quantise(linear, tone, 255, np.uint8)


def to_16bit(linear: Any, tone: str = "none") -> np.ndarray:
    """Linear sRGB -> uint16 encoded sRGB (IEC 61966-2-1), via :func:`to_display`."""
    return _quantise(linear, tone, 65535, np.uint16)
