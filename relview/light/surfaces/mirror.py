"""Mirrors: specular reflectors in their rest frame (the reflected rays are cast by the
renderer, relview.illumination)."""

from __future__ import annotations

import math

import numpy as np

from relview.light.surfaces.base import (
    Surface,
    _as_doppler,
    read_reflectances,
)
from relview.light.surfaces.reflective import reflectance_basis

#: reflections a camera ray may make in a row when a mirror names no ``bounces``
DEFAULT_BOUNCES = 2
#: most reflections in a row a scene file may ask for
MAX_BOUNCES = 8


class Mirror(Surface):
    """A specular mirror of reflectivity ``reflectivity`` (0..1) in the body's rest frame,
    emitting nothing itself; with ``tint`` (linear sRGB, each 0..1) its spectral
    reflectance in the rest frame is reflectivity x (the Mallett & Yuksel (2019)
    reflectance spectrum of ``tint``, :func:`reflectance_basis`), else the same at every
    wavelength (a tint of [1, 1, 1] is that too: the basis sums to 1).

    The renderer (relview.renderer.shade, relview.illumination.mirror_directions) reflects
    each camera ray in the mirror's rest frame and casts it on, backward in time, from the
    mirror's hit event; what it meets is seen with the product of the Doppler factors of
    both legs, times the reflectance at the wavelength the light has in the mirror's frame
    (docs/physics.md, "Mirrors"). A ray already reflected ``bounces`` times, counting this
    mirror, is not reflected again here: it sees black.
    """

    uses_position = False
    uses_uv = False
    #: the renderer reflects rays on this surface
    mirror = True

    def __init__(self, reflectivity: float = 1.0, bounces: int = DEFAULT_BOUNCES, tint=None):
        r = float(reflectivity)
        if not (math.isfinite(r) and 0.0 <= r <= 1.0):
            raise ValueError(f"mirror reflectivity must lie in 0..1, got {reflectivity!r}")
        if int(bounces) != bounces or not 1 <= int(bounces) <= MAX_BOUNCES:
            raise ValueError(f"mirror bounces must be an integer 1..{MAX_BOUNCES}, got {bounces!r}")
        if tint is not None:
            values = tuple(float(v) for v in tint)
            if len(values) != 3 or not all(math.isfinite(v) and 0.0 <= v <= 1.0 for v in values):
                raise ValueError(f"mirror tint must be three reflectances in 0..1, got {tint!r}")
            tint = values
        self.reflectivity = r
        self.bounces = int(bounces)
        #: linear-sRGB colour of the reflectance spectrum in the rest frame (None: neutral)
        self.tint = tint

    @classmethod
    def from_table(cls, table) -> Mirror:
        """``mirror = R`` (reflectivity 0..1 in the rest frame), optional ``bounces`` and
        ``tint`` ([r, g, b], linear sRGB reflectances 0..1)."""
        r = table.number("mirror", low=0.0, high=1.0)
        bounces = DEFAULT_BOUNCES
        if table.has("bounces"):
            bounces = table.integer("bounces", low=1, high=MAX_BOUNCES)
        tint = None
        if table.has("tint"):
            tint = tuple(float(c) for c in read_reflectances(table, "tint"))
        return cls(r, bounces, tint)

    def key(self):
        return ("mirror", self.reflectivity, self.bounces, self.tint)

    def reflectance(self, wavelength_nm) -> np.ndarray:
        """Spectral reflectance at rest-frame wavelengths (any shape, nm)."""
        w = np.asarray(wavelength_nm, float)
        if self.tint is None:
            return np.full(w.shape, self.reflectivity)
        return self.reflectivity * (reflectance_basis(w) @ np.asarray(self.tint))

    def observed_xyz(self, doppler, rest_position=None, uv=None, effects=None) -> np.ndarray:
        # its own light: none (what it reflects is added by the renderer)
        return np.zeros((_as_doppler(doppler).size, 3))

    def __repr__(self):
        return (
            f"Mirror(reflectivity={self.reflectivity!r}, bounces={self.bounces!r}, "
            f"tint={self.tint!r})"
        )
