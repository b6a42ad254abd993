"""Exposure: the white luminance (cd/m2) of a frame, and absolute XYZ -> linear sRGB.

First step of the colour pipeline (docs/colour.md; the display steps follow in
relview.imaging.display)::

    absolute CIE 1931 XYZ (Y in cd/m2)
      -- exposure: divide by the white luminance W (cd/m2)  -> relative XYZ, W -> Y = 1
      -- XYZ -> linear sRGB (IEC 61966-2-1 matrix, relview.light.spectrum)   = Frame.image

``exposure_white`` gives the luminance W (cd/m2) that maps to white, either fixed (a
number) or metered automatically (see :func:`auto_white`): the log-average luminance of
the metered pixels is placed at middle grey (key 0.18, Reinhard et al. 2002), unless
that would clip more than 1 % of them. Lamps (self-luminous surfaces, given as a mask)
are left out of the metering and may clip, as may a few beamed highlights.
``clipped_fraction`` counts the clipped pixels for the provenance. ``ExposureLock``
holds one W across the frames of an animation.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "FALLBACK_WHITE_CD_M2",
    "HIGHLIGHT_PERCENTILE",
    "METERING_KEY",
    "ExposureLock",
    "auto_white",
    "check_white",
    "clipped_fraction",
    "expose",
    "exposure_white",
    "metered_pixels",
]

#: Relative luminance (white = 1) at which automatic exposure places the log-average
#: luminance of the metered pixels: the "key" a = 0.18 of Reinhard, Stark, Shirley and
#: Ferwerda, "Photographic Tone Reproduction for Digital Images", SIGGRAPH 2002, eqs. 1
#: and 2 (L = a Lw / Lavg with Lavg = exp(mean(log Lw))), the middle grey of photography
#: (an 18 % grey card: the reflected-light meter calibration of ISO 2720, common practice).
METERING_KEY = 0.18

#: Highlight guard: the white is raised, if need be, so that no more than
#: 100 - HIGHLIGHT_PERCENTILE = 1 % of the metered pixels clip in any sRGB channel.
#: Without it a scene of dark paint with a few bright parts (a white grid on black)
#: would burn out the bright parts entirely. The 1 % is our choice (common practice:
#: highlight-weighted metering); lamps are never metered, so they may clip.
HIGHLIGHT_PERCENTILE = 99.0

#: A channel counts as clipped above 1 + CLIP_TOLERANCE (linear), so that a pixel
#: exposed exactly to white by the guard is not counted for a rounding error.
CLIP_TOLERANCE = 1e-9

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


def metered_pixels(mask: Any, lamps: Any = None) -> tuple[Any, str]:
    """The pixels automatic exposure meters, and what they are ("non-lamp" or "lamp").

    ``mask`` (H, W) bool: the lit pixels of the metering region (None: every pixel).
    ``lamps`` (H, W) bool: pixels of self-luminous surfaces (None: no lamps). The
    lamps are left out; when nothing else is in the region, the lamps are metered
    after all (a scene of lamps only still gets a usable exposure).
    """
    if lamps is None:
        return mask, "non-lamp"
    lamps = np.asarray(lamps, dtype=bool)
    region = np.ones(lamps.shape, bool) if mask is None else np.asarray(mask, dtype=bool)
    if region.shape != lamps.shape:
        raise ValueError(f"lamp mask shape {lamps.shape} does not match the mask {region.shape}")
    others = region & ~lamps
    if np.any(others):
        return others, "non-lamp"
    return region, "lamp"


def _metered(xyz_image: Any, mask: Any) -> tuple[np.ndarray, np.ndarray]:
    """(Y, peak) of the masked pixels as 1-d float64 arrays: the luminance Y (cd/m2) and
    the largest linear sRGB channel at white = 1 cd/m2 (what clips first)."""
    xyz = _check_xyz(xyz_image)
    if mask is not None:
        mask = np.asarray(mask)
        if mask.shape != xyz.shape[:-1]:
            raise ValueError(f"mask shape {mask.shape} does not match the image {xyz.shape[:-1]}")
    else:
        mask = np.ones(xyz.shape[:-1], bool)
    # imported here: the compiled passes load numba (see expose). One pass gathers the
    # masked pixels' Y and largest channel of xyz_to_linear_srgb(xyz), in pixel order.
    from relview.imaging.exposure_passes import metered_values

    return metered_values(xyz, mask)


def auto_white(luminance: Any, peak: Any = None) -> float:
    """Automatic white (cd/m2) from the luminances Y (cd/m2) of the metered pixels.

    W = max(Lavg / METERING_KEY, P99(peak)) over the pixels with 0 < Y < inf:

    * Lavg = exp(mean(ln Y)), the log-average luminance, is placed at middle grey
      :data:`METERING_KEY` = 0.18 (Reinhard et al. 2002, eqs. 1-2). A geometric mean
      is dominated neither by a few beamed highlights (brightness goes as D^4) nor by
      deep shadows, and scaling every Y by k scales W by k.
    * The highlight guard: W is at least the :data:`HIGHLIGHT_PERCENTILE` (99th)
      percentile of ``peak``, each pixel's largest linear sRGB channel at white = 1
      (its luminance when ``peak`` is None, i.e. a grey pixel), taken as the order
      statistic at or above that rank; so at most 1 % of the metered pixels clip.
    * Pixels with Y = 0 saw a surface that sends no visible light; counting them
      would make the exposure depend on how much of the frame is black, so they are
      left out, as are NaN and infinite values.
    * With no positive luminance at all the result is :data:`FALLBACK_WHITE_CD_M2`.
    """
    y = np.asarray(luminance, dtype=np.float64).ravel()
    p = y if peak is None else np.asarray(peak, dtype=np.float64).ravel()
    if p.shape != y.shape:
        raise ValueError(f"peak has {p.size} values but luminance has {y.size}")
    keep = np.isfinite(y) & (y > 0.0)
    y, p = y[keep], p[keep]
    if y.size == 0:
        return FALLBACK_WHITE_CD_M2
    key_white = math.exp(float(np.mean(np.log(y)))) / METERING_KEY
    p = p[np.isfinite(p) & (p > 0.0)]
    if p.size == 0:
        return key_white
    # an order statistic itself, the next one up from the percentile's position
    # (numpy's "higher"; Hyndman & Fan 1996 order statistics): no interpolation, so at
    # most 1 % of the pixels lie above it whatever their spread
    guard = float(np.percentile(p, HIGHLIGHT_PERCENTILE, method="higher"))
    return max(key_white, guard)


def exposure_white(
    xyz_image: Any, mask: Any = None, setting: float | str = "auto", lamps: Any = None
) -> float:
    """The luminance in cd/m2 that maps to white.

    Parameters
    ----------
    xyz_image:
        (H, W, 3) absolute CIE 1931 XYZ, Y in cd/m2.
    mask:
        (H, W) bool, True for the pixels to meter (the lit pixels of the metering
        region: the caller decides whether background light counts). None: every pixel.
    setting:
        A number (cd/m2): returned as it is (validated). ``"auto"``: see
        :func:`auto_white`.
    lamps:
        (H, W) bool, True for pixels of self-luminous surfaces, left out of the
        metering unless nothing else is metered (:func:`metered_pixels`). None: none.
    """
    setting = _check_setting(setting)
    if setting != "auto":
        _check_xyz(xyz_image)
        return float(setting)
    pixels, _ = metered_pixels(mask, lamps)
    return auto_white(*_metered(xyz_image, pixels))


def clipped_fraction(image: Any, mask: Any = None) -> float:
    """Fraction of the masked pixels of an exposed linear sRGB image (H, W, 3) with a
    channel above 1 (beyond :data:`CLIP_TOLERANCE`); 0.0 when the mask is empty."""
    rgb = np.asarray(image)
    if rgb.ndim < 1 or rgb.shape[-1] != 3:
        raise ValueError(f"image must have shape (..., 3), got {rgb.shape}")
    if mask is not None and np.shape(mask) != rgb.shape[:-1]:
        over = np.any(rgb > 1.0 + CLIP_TOLERANCE, axis=-1)  # numpy's error for the shapes
        return float(over[np.asarray(mask, dtype=bool)].mean())
    # imported here: the compiled passes load numba (see expose); one pass, no temporaries
    from relview.imaging.exposure_passes import clipped_counts

    chosen, over = clipped_counts(rgb, mask, 1.0 + CLIP_TOLERANCE)
    return over / chosen if chosen else 0.0


def expose(xyz_image: Any, white: float) -> np.ndarray:
    """(H, W, 3) absolute XYZ (cd/m2) -> (H, W, 3) float64 linear sRGB, not clipped.

    ``white`` (cd/m2) maps to Y = 1: a D65-white pixel of that luminance gives
    (1, 1, 1). Computed in float64 so that luminances 20 orders of magnitude
    apart neither overflow nor underflow.
    """
    white = check_white(white)
    xyz = _check_xyz(xyz_image).astype(np.float64, copy=False)
    # imported here, not at the top: the compiled passes load numba, and importing this
    # module (for ExposureLock, check_white) must stay light. The numbers of
    # xyz_to_linear_srgb(xyz / white) (relview.light.spectrum), in one pass.
    from relview.imaging.exposure_passes import expose_rows

    return expose_rows(xyz, white)


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

    def lock_from(
        self,
        xyz_images: Iterable[Any],
        masks: Iterable[Any] | None = None,
        lamps: Iterable[Any] | None = None,
    ) -> float:
        """Lock from probe frames: the automatic statistic over all their metered pixels
        pooled.

        For a fixed setting this keeps the fixed white. ``masks`` is one (H, W)
        bool mask per frame (the pixels to meter), or None for every pixel; ``lamps``
        one (H, W) lamp mask per frame, or None. Lamps are left out of the pool unless
        no probe frame has anything else to meter (as :func:`metered_pixels`).
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
        lamp_list = [None] * len(images) if lamps is None else list(lamps)
        if len(lamp_list) != len(images):
            raise ValueError(
                f"exposure lock: {len(images)} probe frames but {len(lamp_list)} lamp masks"
            )
        chosen = [metered_pixels(m, lamp) for m, lamp in zip(mask_list, lamp_list)]
        if any(what == "non-lamp" for _, what in chosen):
            # meter the other surfaces wherever a frame has any; lamps only in none
            chosen = [
                (m if what == "non-lamp" else np.zeros(np.shape(im)[:-1], bool), what)
                for im, (m, what) in zip(images, chosen)
            ]
        parts = [_metered(im, m) for im, (m, _) in zip(images, chosen)]
        pooled_y = np.concatenate([y for y, _ in parts])
        pooled_peak = np.concatenate([p for _, p in parts])
        return self.set(
            auto_white(pooled_y, pooled_peak), f"auto over {len(images)} probe frame(s)"
        )

    def white_for(self, xyz_image: Any, mask: Any = None, lamps: Any = None) -> float:
        """The locked white (cd/m2); locks it from this frame if nothing did before."""
        if self.white is None:
            return self.set(exposure_white(xyz_image, mask, "auto", lamps), "auto from first frame")
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
