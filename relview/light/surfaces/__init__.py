"""Surfaces: what a body emits or reflects in its rest frame, and how it looks with D.

One module per surface kind (emitters, reflective colours, patterns, clock faces,
mirrors), the interface and shared helpers in ``base``, and the scene file's kinds in
``registry`` (SURFACE_KINDS, register_surface, read_surface). Every public name is
importable from this package (and, as before the split, from relview.light.materials).
"""

from __future__ import annotations

from relview.light.surfaces.base import (
    DEFAULT_LAMP_K,
    MAX_TEMPERATURE,
    MIN_LAMP_TEMPERATURE,
    NAMED_LAMPS,
    SpectralSurface,
    Surface,
    shifted_bins,
    shifted_spectrum,
)
from relview.light.surfaces.clock_face import (
    ClockFace,
)
from relview.light.surfaces.emitters import (
    Blackbody,
    EmissionLines,
    TabulatedSpectrum,
)
from relview.light.surfaces.mirror import (
    DEFAULT_BOUNCES,
    MAX_BOUNCES,
    Mirror,
)
from relview.light.surfaces.pattern import (
    MAX_PATTERN_DEPTH,
    Pattern,
)
from relview.light.surfaces.reflective import (
    BASIS_VALUES,
    BASIS_WAVELENGTHS_NM,
    DEFAULT_GLOSS_EXPONENT,
    MAX_GLOSS_EXPONENT,
    Reflective,
    lamp_spectrum,
    load_texture,
    reflectance_basis,
    sample_texture,
)
from relview.light.surfaces.registry import (
    SURFACE_KINDS,
    SurfaceKind,
    SurfaceReader,
    read_surface,
    register_surface,
)

__all__ = [
    "MAX_TEMPERATURE",
    "MIN_LAMP_TEMPERATURE",
    "NAMED_LAMPS",
    "DEFAULT_LAMP_K",
    "shifted_spectrum",
    "shifted_bins",
    "Surface",
    "SpectralSurface",
    "Blackbody",
    "EmissionLines",
    "TabulatedSpectrum",
    "DEFAULT_GLOSS_EXPONENT",
    "MAX_GLOSS_EXPONENT",
    "BASIS_WAVELENGTHS_NM",
    "BASIS_VALUES",
    "reflectance_basis",
    "lamp_spectrum",
    "Reflective",
    "load_texture",
    "sample_texture",
    "MAX_PATTERN_DEPTH",
    "Pattern",
    "ClockFace",
    "DEFAULT_BOUNCES",
    "MAX_BOUNCES",
    "Mirror",
    "SurfaceReader",
    "SurfaceKind",
    "SURFACE_KINDS",
    "register_surface",
    "read_surface",
]
