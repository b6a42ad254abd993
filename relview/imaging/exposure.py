"""Exposure: the white luminance (cd/m2) of a frame, and absolute XYZ -> linear sRGB.

First step of the colour pipeline (docs/colour.md; the display steps follow in
relview.imaging.display)::

    absolute CIE 1931 XYZ (Y in cd/m2)
      -- exposure: divide by the white luminance W (cd/m2)  -> relative XYZ, W -> Y = 1
      -- XYZ -> linear sRGB (IEC 61966-2-1 matrix, relview.light.spectrum)   = Frame.image

``exposure_white`` gives the luminance W (cd/m2) that maps to white, either fixed (a
number) or automatic: the 99th percentile of the luminance of the lit pixels, taken on
a logarithmic scale (see :func:`auto_white`). ``ExposureLock`` holds one W across the
frames of an animation.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "AUTO_WHITE_PERCENTILE",
    "FALLBACK_WHITE_CD_M2",
    "ExposureLock",
    "auto_white",
    "check_white",
    "expose",
    "exposure_white",
]

#: Percentile (of lit pixels' luminance, on a log scale) that automatic exposure maps
#: to white. 99 rather than the maximum so that a few strongly beamed pixels (brightness
#: goes as D^4) do not darken the whole frame; the top 1 % of lit pixels burn out.
#: Common practice in automatic exposure; the value 99 is our choice.
AUTO_WHITE_PERCENTILE = 99.0

#: White luminance (cd/m2) used by automatic exposure when no lit pixel has any light:
#: the frame is then black (or shows only unlit background light at this fixed scale).
FALLBACK_WHITE_CD_M2 = 1.0


def check_white(white: Any, what: str = "exposure white") -> float:
    """Validate a white luminance in cd/m2: a finite number > 0. Returns it as float."""
    if isinstance(white, bool) or not isinstance(white, numbers.Real):
        raise ValueError(f"{what} must be a luminance in cd/m2 (a number > 0), got {white!r}")
    value = float(white)
    if not math.isfinite(value) or value <= 0.0:
        raise ValueError(f"{what} must be a finite luminance in cd/m2 > 0, got {white!r}")
    return value


def _is_auto(setting: Any) -> bool:
    return isinstance(setting, str) and setting.strip().lower() == "auto"


def _check_setting(setting: Any) -> float | str:
    """``"auto"`` or a valid white luminance (cd/m2)."""
    if _is_auto(setting):
        return "auto"
    if isinstance(setting, str):
        raise ValueError(
            f'exposure must be "auto" or a luminance in cd/m2 that maps to white, got {setting!r}'
        )
    return check_white(setting, "exposure")


def _check_xyz(xyz_image: Any, name: str = "xyz image") -> np.ndarray:
    xyz = np.asarray(xyz_image)
    if xyz.ndim < 1 or xyz.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3) (X, Y, Z), got {xyz.shape}")
    if not np.issubdtype(xyz.dtype, np.number):
        raise ValueError(f"{name} must be numeric, got dtype {xyz.dtype}")
    return xyz


def _lit_luminance(xyz_image: Any, mask: Any) -> np.ndarray:
    """1-d float64 array of the luminance Y (cd/m2) of the masked pixels."""
    xyz = _check_xyz(xyz_image)
    y = xyz[..., 1]
    if mask is None:
        return np.asarray(y, dtype=np.float64).ravel()
    mask = np.asarray(mask)
    if mask.shape != y.shape:
        raise ValueError(f"mask shape {mask.shape} does not match the image {y.shape}")
    return np.asarray(y[mask.astype(bool)], dtype=np.float64)


def auto_white(luminance: Any) -> float:
    """Automatic white (cd/m2) from the luminances Y (cd/m2) of the lit pixels.

    Statistic: the :data:`AUTO_WHITE_PERCENTILE` (99th) percentile of log10(Y)
    over the pixels with 0 < Y < inf, returned as 10**percentile.

    * Pixels with Y = 0 saw a surface that sends no visible light; counting them
      would make the exposure depend on how much of the frame is black, so they
      are left out. NaN and infinite values are left out too.
    * The percentile is taken of log10(Y) because Y can span 20 orders of
      magnitude: interpolating between two neighbouring order statistics on a
      linear scale would be dominated by the larger one; on a log scale it stays
      between them geometrically.
    * With no positive luminance at all the result is :data:`FALLBACK_WHITE_CD_M2`.
    """
    y = np.asarray(luminance, dtype=np.float64).ravel()
    y = y[np.isfinite(y) & (y > 0.0)]
    if y.size == 0:
        return FALLBACK_WHITE_CD_M2
    return float(10.0 ** np.percentile(np.log10(y), AUTO_WHITE_PERCENTILE))


def exposure_white(xyz_image: Any, mask: Any = None, setting: float | str = "auto") -> float:
    """The luminance in cd/m2 that maps to white.

    Parameters
    ----------
    xyz_image:
        (H, W, 3) absolute CIE 1931 XYZ, Y in cd/m2.
    mask:
        (H, W) bool, True for pixels that saw something (a body; the caller
        decides whether background light counts). None: every pixel.
    setting:
        A number (cd/m2): returned as it is (validated). ``"auto"``: see
        :func:`auto_white`.
    """
    setting = _check_setting(setting)
    if setting != "auto":
        _check_xyz(xyz_image)
        return float(setting)
    return auto_white(_lit_luminance(xyz_image, mask))


def expose(xyz_image: Any, white: float) -> np.ndarray:
    """(H, W, 3) absolute XYZ (cd/m2) -> (H, W, 3) float64 linear sRGB, not clipped.

    ``white`` (cd/m2) maps to Y = 1: a D65-white pixel of that luminance gives
    (1, 1, 1). Computed in float64 so that luminances 20 orders of magnitude
    apart neither overflow nor underflow.
    """
    white = check_white(white)
    xyz = _check_xyz(xyz_image).astype(np.float64, copy=False)
    # imported here, not at the top: relview.light.spectrum compiles numba kernels, and
    # importing this module (for ExposureLock, check_white) must stay light
    from relview.light.spectrum import xyz_to_linear_srgb

    return np.asarray(xyz_to_linear_srgb(xyz / white), dtype=np.float64)


@dataclass
class ExposureLock:
    """One white level (cd/m2) held across the frames of an animation.

    ``setting`` is a number (fixed: locked at once) or ``"auto"``: the white is
    then computed by :meth:`lock_from` (pooled over a set of probe frames) or, if
    nothing locked it before, by the first call of :meth:`white_for` (from that
    first frame). :meth:`set` fixes it by hand. :meth:`to_dict` /
    :meth:`from_dict` store it as a small JSON-friendly dict, e.g. to resume an
    animation with the same exposure.
    """

    setting: float | str = "auto"
    white: float | None = None  # cd/m2, once locked
    source: str = ""  # how the white was found, for logs and metadata

    def __post_init__(self) -> None:
        self.setting = _check_setting(self.setting)
        if self.white is not None:
            self.white = check_white(self.white, "exposure lock white")
        elif self.setting != "auto":
            self.white = float(self.setting)
            self.source = self.source or "fixed"

    @property
    def locked(self) -> bool:
        return self.white is not None

    def set(self, white: float, source: str = "set") -> float:
        """Lock to a given white (cd/m2)."""
        self.white = check_white(white, "exposure lock white")
        self.source = source
        return self.white

    def lock_from(self, xyz_images: Iterable[Any], masks: Iterable[Any] | None = None) -> float:
        """Lock from probe frames: the automatic statistic over all their lit pixels pooled.

        For a fixed setting this keeps the fixed white. ``masks`` is one (H, W)
        bool mask per frame, or None for every pixel.
        """
        if self.setting != "auto":
            return self.set(float(self.setting), "fixed")
        images = list(xyz_images)
        if not images:
            raise ValueError("exposure lock: no probe frames given")
        mask_list = [None] * len(images) if masks is None else list(masks)
        if len(mask_list) != len(images):
            raise ValueError(
                f"exposure lock: {len(images)} probe frames but {len(mask_list)} masks"
            )
        pooled = np.concatenate([_lit_luminance(im, m) for im, m in zip(images, mask_list)])
        return self.set(auto_white(pooled), f"auto over {len(images)} probe frame(s)")

    def white_for(self, xyz_image: Any, mask: Any = None) -> float:
        """The locked white (cd/m2); locks it from this frame if nothing did before."""
        if self.white is None:
            return self.set(exposure_white(xyz_image, mask, "auto"), "auto from first frame")
        return self.white

    def to_dict(self) -> dict[str, Any]:
        return {"setting": self.setting, "white_cd_m2": self.white, "source": self.source}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ExposureLock:
        if not isinstance(data, Mapping):
            raise ValueError(f"exposure lock: expected a dict, got {type(data).__name__}")
        known = {"setting", "white_cd_m2", "source"}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ValueError(f"exposure lock: unknown key(s) {unknown}; expected {sorted(known)}")
        source = data.get("source", "")
        if not isinstance(source, str):
            raise ValueError(f"exposure lock: source must be text, got {source!r}")
        return cls(
            setting=data.get("setting", "auto"), white=data.get("white_cd_m2"), source=source
        )
