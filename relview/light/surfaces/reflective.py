"""Reflective colours: the Mallett & Yuksel reflectance basis, co-moving lamps, textures,
and the colours lit by the scene's lamps (Lambert and the glossy lobe)."""

from __future__ import annotations

import math
from collections.abc import Hashable
from pathlib import Path

import numpy as np

from relview.light import colour_data, spectrum
from relview.light.spectrum import cached_table, effect_factors
from relview.light.surfaces.base import (
    DEFAULT_LAMP_K,
    MAX_TEMPERATURE,
    MIN_LAMP_TEMPERATURE,
    NAMED_LAMPS,
    Surface,
    _as_doppler,
    _effect_switches,
    _positive_number,
    read_reflectances,
)

#: exponent of the glossy lobe of a ``color`` that gives ``gloss`` but no exponent (a
#: highlight about 20 degrees wide at half maximum; common practice for a satin finish)
DEFAULT_GLOSS_EXPONENT = 50.0
#: sharpest glossy lobe a scene file may ask for (about 1.3 degrees wide at half maximum)
MAX_GLOSS_EXPONENT = 1e4


#: Mallett & Yuksel (2019) sRGB basis spectra from colour-science (380-780 nm, 5 nm),
#: through the cached extract in relview.light.colour_data.
BASIS_WAVELENGTHS_NM, BASIS_VALUES = colour_data.sampled("basis")


def reflectance_basis(wavelength_nm) -> np.ndarray:
    """(..., 3) reflectance of the red, green and blue basis spectra at any wavelength.

    Mallett, I. & Yuksel, C. (2019), "Spectral Primary Decomposition for Rendering with sRGB
    Reflectance", EGSR: a linear sRGB colour (r, g, b) in [0, 1] has the reflectance
    r B_r + g B_g + b B_b, which stays in [0, 1] and renders back to (r, g, b) under D65.
    Linear interpolation inside 380-780 nm; outside, each basis is held constant at its
    end value (our declared extension rule: the colour-science default for this data).
    At both ends the three bases are nearly equal (about 1/3 each), so any colour becomes
    a neutral grey of reflectance ~ (r + g + b) / 3 in the ultraviolet and infrared.
    """
    w = np.asarray(wavelength_nm, dtype=float)
    out = np.empty(w.shape + (3,))
    for c in range(3):
        out[..., c] = np.interp(w, BASIS_WAVELENGTHS_NM, BASIS_VALUES[:, c])
    return out


def lamp_spectrum(lamp: float | str):
    """(key, relative spectral power function of wavelength_nm) for a lamp spec."""
    if isinstance(lamp, str):
        if lamp.strip().upper() == "D65":
            return "D65", spectrum.cie_d65_relative_spd
        raise ValueError(f'lamp must be a temperature in K or "D65", got {lamp!r}')
    t = _positive_number(lamp, "lamp temperature (K)")
    return t, lambda w: spectrum.planck_spectral_radiance(w, t)


def _rest_white_luminance(lamp_spd) -> float:
    """Luminance (cd/m^2) of a perfect white reflector under ``lamp_spd`` per unit of it,
    at rest (D = 1): K_m * integral(S ybar)."""
    w = spectrum.CMF_WAVELENGTHS_NM
    return float(spectrum.K_M_LM_PER_W * np.trapezoid(lamp_spd(w) * spectrum.CMF_VALUES[:, 1], w))


class Reflective(Surface):
    """A diffuse colour lit in the body's rest frame by a co-moving lamp.

    ``rgb``: linear sRGB reflectance in [0, 1]; turned into a reflectance spectrum with the
    Mallett & Yuksel (2019) basis (see :func:`reflectance_basis`). ``lamp``: a blackbody
    temperature in K or "D65" (CIE illuminant D65, extended outside its table as in
    :func:`relview.light.spectrum.cie_d65_relative_spd`). ``luminance``: cd/m^2 of a perfect white
    reflector at rest; the reflected spectral radiance is
    rho(lambda) * S(lambda) * luminance / (K_m * integral(S ybar dlambda)).
    ``texture``: an image file (read with pillow, sRGB-encoded pixels decoded to linear);
    where uv is given the colour comes from the image (uv wrap around, bilinear; v = 0 is
    the bottom row), and ``rgb`` is used where uv is None.

    The method is linear in rgb, so one table per basis colour (three per lamp) serves
    every reflective surface and every texel.
    """

    def __init__(
        self,
        rgb=(1.0, 1.0, 1.0),
        lamp: float | str = "D65",
        luminance: float = 100.0,
        texture: str | Path | None = None,
    ):
        try:
            values = tuple(float(v) for v in rgb)
        except (TypeError, ValueError):
            raise ValueError(f"colour must be three numbers (linear sRGB), got {rgb!r}") from None
        if len(values) != 3:
            raise ValueError(f"colour must be three numbers (linear sRGB), got {rgb!r}")
        if not all(math.isfinite(v) and 0.0 <= v <= 1.0 for v in values):
            raise ValueError(f"colour components must lie in [0, 1] (reflectance), got {rgb!r}")
        self.rgb = values
        self.lamp_key, self._lamp_spd = lamp_spectrum(lamp)
        self.lamp = lamp
        self.luminance = _positive_number(luminance, "luminance (cd/m2)")
        self.texture = None if texture is None else Path(texture)
        self.uses_position = False
        self.uses_uv = texture is not None
        self._texels = None if texture is None else load_texture(self.texture)
        #: lit by the scene's lamps (when it has any) instead of the co-moving lamp: set
        #: by from_table for a ``color`` that names neither ``lamp`` nor ``luminance``
        self.scene_lit = False
        #: fraction of the reflection of the scene's lamps in a glossy lobe (0: Lambert
        #: only), and the lobe's exponent (relview.light.lamps.glossy_lobe)
        self.gloss = 0.0
        self.gloss_exponent = DEFAULT_GLOSS_EXPONENT

    @classmethod
    def from_table(cls, table) -> Reflective:
        """``color = [r, g, b]`` (linear sRGB reflectance), optional ``lamp`` (K or a named
        lamp, default a 5800 K blackbody), ``luminance`` (cd/m^2) and ``texture`` (image)."""
        rgb = read_reflectances(table, "color")
        lamp: float | str = DEFAULT_LAMP_K
        if table.has("lamp"):
            if isinstance(table.data["lamp"], str):
                lamp = table.string("lamp", choices=NAMED_LAMPS)
            else:
                lamp = table.number(
                    "lamp", low=MIN_LAMP_TEMPERATURE, high=MAX_TEMPERATURE, unit="K"
                )
        texture = None
        if table.has("texture"):
            texture = table.path_value("texture", what="texture image")
            _check_image(table, texture)
        surface = cls(
            rgb=tuple(float(c) for c in rgb),
            lamp=lamp,
            luminance=table.number("luminance", 100.0, positive=True, unit="cd/m2"),
            texture=texture,
        )
        surface.scene_lit = not (table.has("lamp") or table.has("luminance"))
        for key in ("gloss", "gloss_exponent"):
            if table.has(key) and not surface.scene_lit:
                raise table.error(
                    key,
                    f"{key} = {table.show(table.data[key])}: a glossy lobe needs the scene's "
                    "lamps, and this color names its own lamp or luminance",
                    table.data[key],
                )
        surface.gloss = table.number("gloss", 0.0, low=0.0, high=1.0)
        surface.gloss_exponent = table.number(
            "gloss_exponent", DEFAULT_GLOSS_EXPONENT, low=1.0, high=MAX_GLOSS_EXPONENT
        )
        return surface

    def key(self):
        tex = None
        if self.texture is not None:
            tex = (str(self.texture), hash(self._texels.tobytes()))
        lit = ("scene-lit",) if self.scene_lit else ()  # lit by the scene's lamps instead
        if self.gloss:
            lit += ("gloss", self.gloss, self.gloss_exponent)
        return ("reflective", self.rgb, self.lamp_key, self.luminance, tex) + lit

    def basis_tables(self) -> list[spectrum.DopplerTable]:
        """Doppler tables of the three basis reflectances under this lamp, normalised to a
        rest-frame white luminance of 1 cd/m^2."""
        tables = []
        spd = self._lamp_spd
        norm_key = ("lamp-white", self.lamp_key)
        norm = _LAMP_NORMS.get(norm_key)
        if norm is None:
            norm = _LAMP_NORMS[norm_key] = 1.0 / _rest_white_luminance(spd)
        for c in range(3):

            def radiance(w, c=c):
                return norm * spd(w) * reflectance_basis(w)[..., c]

            tables.append(cached_table(("reflective-basis", self.lamp_key, c), radiance, None))
        return tables

    def spectral_radiance(self, wavelength_nm, rgb=None) -> np.ndarray:
        """Rest-frame reflected spectral radiance, W/(sr m^2 nm), for ``rgb`` (default own)."""
        rgb = np.asarray(self.rgb if rgb is None else rgb, dtype=float)
        norm = 1.0 / _rest_white_luminance(self._lamp_spd)
        return (
            self.luminance
            * norm
            * self._lamp_spd(wavelength_nm)
            * (reflectance_basis(wavelength_nm) @ rgb)
        )

    def colour_at(self, uv, n: int) -> np.ndarray:
        """(n, 3) linear sRGB reflectance per hit: from the texture at uv, else ``rgb``."""
        if self._texels is None or uv is None:
            return np.broadcast_to(np.asarray(self.rgb), (n, 3))
        return sample_texture(self._texels, np.asarray(uv, dtype=float).reshape(n, 2))

    def observed_xyz(self, doppler, rest_position=None, uv=None, effects=None) -> np.ndarray:
        d = _as_doppler(doppler)
        doppler_on, beaming_on = _effect_switches(effects)
        dc, brightness = effect_factors(d, doppler_on, beaming_on)
        rgb = self.colour_at(uv, d.size)
        xyz = np.zeros((d.size, 3))
        for c, table in enumerate(self.basis_tables()):
            weight = rgb[:, c]
            if np.any(weight):
                xyz += weight[:, None] * table.lookup(dc)
        return xyz * (self.luminance * brightness)[:, None]

    def lit_xyz(self, doppler, rest_position, uv, effects, incident) -> np.ndarray:
        """Lambert reflection of the scene's lamps (relview.light.lamps): linear in rgb
        over the basis colours, like the co-moving lamp."""
        if not self.scene_lit:
            return self.observed_xyz(doppler, rest_position, uv, effects)
        d = _as_doppler(doppler)
        rgb = self.colour_at(uv, d.size)
        return incident.reflected_xyz(d, effects, rgb, self.gloss, self.gloss_exponent)

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position=None, uv=None, effects=None, incident=None
    ) -> np.ndarray:
        d = _as_doppler(doppler)
        rgb = self.colour_at(uv, d.size)
        if self.scene_lit and incident is not None:
            return incident.spectrum_seen(
                wavelength_nm, d, effects, rgb, self.gloss, self.gloss_exponent
            )
        # the co-moving lamp: spd x reflectance x luminance / white, seen with D
        norm = _LAMP_NORMS.get(("lamp-white", self.lamp_key))
        if norm is None:
            norm = _LAMP_NORMS[("lamp-white", self.lamp_key)] = 1.0 / _rest_white_luminance(
                self._lamp_spd
            )
        dc, bright = effect_factors(d, *_effect_switches(effects))
        w = dc[:, None] * np.asarray(wavelength_nm, float)[None, :]
        rho = np.einsum("nlc,nc->nl", reflectance_basis(w), rgb)
        return self.luminance * norm * self._lamp_spd(w) * rho * (dc**5 * bright)[:, None]

    def __repr__(self):
        return (
            f"Reflective(rgb={self.rgb!r}, lamp={self.lamp!r}, luminance={self.luminance!r}, "
            f"texture={None if self.texture is None else str(self.texture)!r})"
        )


_LAMP_NORMS: dict[Hashable, float] = {}


def load_texture(path: Path) -> np.ndarray:
    """(H, W, 3) linear sRGB in [0, 1] from an image file (sRGB-encoded, read with pillow)."""
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(path) as img:
            pixels = np.asarray(img.convert("RGB"), dtype=float) / 255.0
    except FileNotFoundError:
        raise ValueError(f"{path}: texture file not found") from None
    except (UnidentifiedImageError, OSError) as exc:
        raise ValueError(f"{path}: cannot read texture image ({exc})") from None
    return spectrum.decode_srgb(pixels)


def _check_image(table, path: Path) -> None:
    """A scene file's ``texture`` must be an image pillow can read (checked while the
    scene is read, so the message names the scene key)."""
    from PIL import Image, UnidentifiedImageError  # imported here: pillow is slow to load

    try:
        with Image.open(path) as im:
            im.verify()
    except (UnidentifiedImageError, OSError, SyntaxError, ValueError) as exc:
        raise table.error(
            "texture",
            f"texture = {table.show(table.data['texture'])} is not a readable image ({exc})",
            table.data["texture"],
        ) from exc


def sample_texture(texels: np.ndarray, uv: np.ndarray) -> np.ndarray:
    """Bilinear sample of (H, W, 3) texels at (N, 2) uv, wrapping around in both directions.

    u runs left to right, v bottom to top (the OBJ / OpenGL convention); texel centres sit
    at ((i + 0.5) / W, 1 - (j + 0.5) / H) for column i and row j.
    """
    h, w = texels.shape[:2]
    x = np.mod(uv[:, 0], 1.0) * w - 0.5
    y = (1.0 - np.mod(uv[:, 1], 1.0)) * h - 0.5
    x0 = np.floor(x)
    y0 = np.floor(y)
    fx = (x - x0)[:, None]
    fy = (y - y0)[:, None]
    i0 = x0.astype(np.int64) % w
    j0 = y0.astype(np.int64) % h
    i1 = (i0 + 1) % w
    j1 = (j0 + 1) % h
    top = (1.0 - fx) * texels[j0, i0] + fx * texels[j0, i1]
    bottom = (1.0 - fx) * texels[j1, i0] + fx * texels[j1, i1]
    return (1.0 - fy) * top + fy * bottom
