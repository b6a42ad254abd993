"""Surfaces: what a body emits or reflects in its rest frame, and how it looks with D;
the interface every surface kind implements and the helpers they share.

Every surface implements (DEVELOPERS.md, "Interfaces between stages"):

* ``key()`` -> a hashable identity (equal keys mean an identical appearance), and
* ``observed_xyz(doppler (N,), rest_position (N, 3) m, uv (N, 2) or None, effects)``
  -> (N, 3) absolute CIE 1931 XYZ, Y in cd/m^2, where ``effects`` has boolean attributes
  ``doppler`` and ``beaming`` (relview.scene.parts.Effects; ``None`` means both on).

Spectral surfaces define their rest-frame spectral radiance at every wavelength > 0 (a
Doppler factor D brings emitted wavelengths D * (360-830 nm) into view), and are shaded
through cached :class:`relview.light.spectrum.DopplerTable` lookups, so the per-pixel work is
vectorised table interpolation. The rules used outside tabulated data are documented in
docs/colour.md ("Colour pipeline").
"""

from __future__ import annotations

import math
from collections.abc import Hashable

import numpy as np

from relview.light import spectrum
from relview.light.spectrum import apply_effects, cached_table, effect_factors

# Temperatures whose Planck spectrum is representable in float64 over the visible
# band: Planck's law overflows there above ~1e280 K, and a lamp below ~30 K has no
# visible light at all (its white normalisation divides by zero). The limits are kept
# well inside those measured edges.
#: hottest blackbody, star or line temperature a scene file may give, K
MAX_TEMPERATURE = 1e12
#: coolest lamp lighting a reflective surface in a scene file, K
MIN_LAMP_TEMPERATURE = 100.0
#: lamps a scene file may name, besides a blackbody temperature in K
NAMED_LAMPS = ("D65",)
#: lamp of a ``color`` surface that names none, K (a sunlike blackbody)
DEFAULT_LAMP_K = 5800.0


def _effect_switches(effects) -> tuple[bool, bool]:
    if effects is None:
        return True, True
    return bool(effects.doppler), bool(effects.beaming)


def _as_doppler(doppler) -> np.ndarray:
    return np.asarray(doppler, dtype=float).reshape(-1)


def _positive_number(value, what: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what} must be a number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0.0):
        raise ValueError(f"{what} must be finite and > 0, got {value!r}")
    return v


def shifted_spectrum(radiance, wavelength_nm, doppler, effects) -> np.ndarray:
    """(N, L) spectral radiance (W/(sr m^2 nm)) recorded at ``wavelength_nm`` (L,) from a
    rest-frame spectral radiance function ``radiance`` seen with Doppler factors (N,):
    D^5 L(D lambda) (physics.md), with the switches of spectrum.effect_factors:
    Dc^5 L(Dc lambda) (Db / Dc)^4. Point samples: for smooth spectra."""
    dc, bright = effect_factors(_as_doppler(doppler), *_effect_switches(effects))
    lam = np.asarray(wavelength_nm, float)
    return radiance(dc[:, None] * lam[None, :]) * (dc**5 * bright)[:, None]


def shifted_bins(cumulative, wavelength_nm, doppler, effects) -> np.ndarray:
    """As :func:`shifted_spectrum`, averaged over the bins around ``wavelength_nm``
    (edges halfway between them): D^4 (C(D hi) - C(D lo)) / (hi - lo), C(x) the rest-frame
    radiance integrated from 0 to x (the substitution mu = D lambda), so narrow lines keep
    their energy whatever the grid."""
    dc, bright = effect_factors(_as_doppler(doppler), *_effect_switches(effects))
    lam = np.asarray(wavelength_nm, float)
    mid = 0.5 * (lam[1:] + lam[:-1])
    edges = np.concatenate([[lam[0] - (mid[0] - lam[0])], mid, [lam[-1] + (lam[-1] - mid[-1])]])
    c = cumulative(dc[:, None] * edges[None, :])
    return np.diff(c, axis=1) / np.diff(edges)[None, :] * (dc**4 * bright)[:, None]


def _split_xyz(parts, d, pos, uv, effects, incident) -> np.ndarray:
    """(N, 3) XYZ of a surface made of ``parts`` [(surface, rows)] (patterns and dials:
    each part's own colour where its mask selects it), lit by ``incident`` or, when it is
    None, by each part's own light."""
    out = np.zeros((d.size, 3))
    for surface, sel in parts:
        if np.any(sel):
            args = (d[sel], pos[sel], None if uv is None else uv[sel], effects)
            out[sel] = (
                surface.observed_xyz(*args)
                if incident is None
                else surface.lit_xyz(*args, incident.subset(sel))
            )
    return out


def _split_spectra(parts, wavelength_nm, d, pos, uv, effects, incident) -> np.ndarray:
    """(N, L) seen spectra of a surface made of ``parts`` [(surface, rows)] (patterns and
    dials: each part's own spectrum where its mask selects it)."""
    out = np.zeros((d.size, len(wavelength_nm)))
    for surface, sel in parts:
        if np.any(sel):
            out[sel] = surface.spectrum_seen(
                wavelength_nm,
                d[sel],
                pos[sel],
                None if uv is None else uv[sel],
                effects,
                None if incident is None else incident.subset(sel),
            )
    return out


def read_reflectances(table, key: str) -> np.ndarray:
    """``key = [r, g, b]``: three linear-sRGB reflectances, each 0..1 (``color``, a
    mirror's ``tint``), or a scene error naming the key and value."""
    rgb = table.vector(key, 3)
    if np.any(rgb < 0) or np.any(rgb > 1):
        raise table.error(
            key,
            f"reflectances must lie in 0..1, got {key} = {table.show(table.data[key])}",
            table.data[key],
        )
    return rgb


class Surface:
    """Base class of all surfaces (see the module docstring for the interface)."""

    #: whether observed_xyz reads the rest-frame hit points / texture coordinates; the
    #: renderer skips gathering them for surfaces that do not (safe default: both)
    uses_position = True
    uses_uv = True

    def key(self) -> Hashable:  # pragma: no cover - abstract
        raise NotImplementedError

    def observed_xyz(self, doppler, rest_position, uv, effects) -> np.ndarray:  # pragma: no cover
        raise NotImplementedError

    def lit_xyz(self, doppler, rest_position, uv, effects, incident) -> np.ndarray:
        """XYZ when the scene has lamps: ``incident`` is a relview.light.lamps.Incident.
        Emitters and co-moving-lamp surfaces ignore it."""
        return self.observed_xyz(doppler, rest_position, uv, effects)

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position, uv, effects, incident=None, **clock
    ) -> np.ndarray:
        """(N, L) spectral radiance (W/(sr m^2 nm)) the camera records at the wavelengths
        ``wavelength_nm`` (L,), each standing for the bin around it: the spectrum whose
        CIE 1931 integral lit_xyz (with ``incident``) or observed_xyz gives. What a
        tinted mirror shows is filtered per wavelength (illumination.mirror_spectra)."""
        raise NotImplementedError(f"{type(self).__name__} surfaces have no seen spectrum")

    def __eq__(self, other) -> bool:
        return isinstance(other, Surface) and self.key() == other.key()

    def __hash__(self) -> int:
        return hash(self.key())


class SpectralSurface(Surface):
    """A surface with one rest-frame spectral radiance, shaded by one Doppler table."""

    uses_position = False
    uses_uv = False

    def spectral_radiance(self, wavelength_nm) -> np.ndarray:
        """Rest-frame spectral radiance in W/(sr m^2 nm), at any wavelength > 0."""
        raise NotImplementedError

    def knots_nm(self) -> np.ndarray | None:
        """Rest-frame wavelengths where the spectrum has fine structure (or None)."""
        return None

    def table(self) -> spectrum.DopplerTable:
        return cached_table(self.key(), self.spectral_radiance, self.knots_nm())

    def observed_xyz(self, doppler, rest_position=None, uv=None, effects=None) -> np.ndarray:
        doppler_on, beaming_on = _effect_switches(effects)
        return apply_effects(self.table(), _as_doppler(doppler), doppler_on, beaming_on)

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position=None, uv=None, effects=None, incident=None
    ) -> np.ndarray:
        return shifted_spectrum(self.spectral_radiance, wavelength_nm, doppler, effects)
