"""Surfaces: what a body emits or reflects in its rest frame, and how it looks with D.

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

Each surface kind also carries its scene-file schema: a ``from_table`` classmethod reading
its keys through the table it is handed (the scene reader's validated table, duck-typed:
this module sits below relview.scene and does not import it), and a line in
:data:`SURFACE_KINDS`. A new surface kind is one class plus one :func:`register_surface`.
"""

from __future__ import annotations

import contextvars
import csv
import math
import os
from collections.abc import Callable, Hashable, Mapping
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

from relview.errors import SceneError, UserError
from relview.light import colour_data, spectrum
from relview.light.spectrum import apply_effects, cached_table, effect_factors

# FWHM -> standard deviation of a Gaussian: FWHM = 2 sqrt(2 ln 2) sigma.
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))

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
#: deepest nesting of ``pattern`` surfaces in a scene file
MAX_PATTERN_DEPTH = 4
#: exponent of the glossy lobe of a ``color`` that gives ``gloss`` but no exponent (a
#: highlight about 20 degrees wide at half maximum; common practice for a satin finish)
DEFAULT_GLOSS_EXPONENT = 50.0
#: sharpest glossy lobe a scene file may ask for (about 1.3 degrees wide at half maximum)
MAX_GLOSS_EXPONENT = 1e4


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
        """(N, L) spectral radiance (W/(sr m^2 nm)) the camera records at the 1-nm grid
        ``wavelength_nm`` (L,): the spectrum whose CIE 1931 integral lit_xyz (with
        ``incident``) or observed_xyz gives. What a tinted mirror shows is filtered per
        wavelength (relview.illumination.mirror_spectra)."""
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


# --------------------------------------------------------------------------------------
# Emitters
# --------------------------------------------------------------------------------------


class Blackbody(SpectralSurface):
    """Thermal emitter at ``temperature_k`` (K): Planck's law times ``scale``.

    ``scale`` is an emissivity / brightness factor (1 = an ideal blackbody). Seen with a
    Doppler factor D it is a blackbody at D * T (physics.md). Bodies with the same
    temperature share one table whatever their scale.
    """

    def __init__(self, temperature_k: float, scale: float = 1.0):
        self.temperature_k = _positive_number(temperature_k, "blackbody temperature (K)")
        scale = float(scale)
        if not (math.isfinite(scale) and scale >= 0.0):
            raise ValueError(f"blackbody scale must be finite and >= 0, got {scale!r}")
        self.scale = scale

    @classmethod
    def from_table(cls, table) -> Blackbody:
        """``blackbody = T`` (K), with an optional ``scale``."""
        return cls(
            temperature_k=table.number("blackbody", positive=True, high=MAX_TEMPERATURE, unit="K"),
            scale=table.number("scale", 1.0, positive=True),
        )

    def key(self):
        return ("blackbody", self.temperature_k, self.scale)

    def spectral_radiance(self, wavelength_nm):
        return self.scale * spectrum.planck_spectral_radiance(wavelength_nm, self.temperature_k)

    def table(self):
        t = self.temperature_k
        return cached_table(
            ("blackbody", t), lambda w: spectrum.planck_spectral_radiance(w, t), None
        )

    def observed_xyz(self, doppler, rest_position=None, uv=None, effects=None):
        return self.scale * super().observed_xyz(doppler, rest_position, uv, effects)

    def __repr__(self):
        return f"Blackbody({self.temperature_k!r}, scale={self.scale!r})"


class EmissionLines(SpectralSurface):
    """Gaussian emission lines on a zero continuum.

    ``lines``: (centre_nm, fwhm_nm, radiance) triples, ``radiance`` in W/(sr m^2) integrated
    over the line. Profile: radiance * exp(-(l - c)^2 / (2 s^2)) / (s sqrt(2 pi)),
    s = fwhm / (2 sqrt(2 ln 2)).
    """

    def __init__(self, lines: list[tuple[float, float, float]]):
        parsed = []
        try:
            items = list(lines)
        except TypeError:
            raise ValueError(
                f"emission lines must be a list of (nm, fwhm_nm, radiance), got {lines!r}"
            ) from None
        if not items:
            raise ValueError("emission lines: at least one line is needed")
        for n, line in enumerate(items):
            try:
                centre, fwhm, radiance = (float(v) for v in line)
            except (TypeError, ValueError):
                raise ValueError(
                    f"emission line {n}: expected (centre_nm, fwhm_nm, radiance), got {line!r}"
                ) from None
            _positive_number(centre, f"emission line {n}: centre (nm)")
            _positive_number(fwhm, f"emission line {n}: fwhm (nm)")
            if not (math.isfinite(radiance) and radiance >= 0.0):
                raise ValueError(
                    f"emission line {n}: radiance (W/(sr m2)) must be finite and >= 0, got {radiance!r}"
                )
            parsed.append((centre, fwhm, radiance))
        self.lines = tuple(parsed)
        arr = np.array(self.lines)
        self._centre = arr[:, 0]
        self._sigma = arr[:, 1] / _FWHM_PER_SIGMA
        self._radiance = arr[:, 2]

    @classmethod
    def from_table(cls, table) -> EmissionLines:
        """``line = { nm, width_nm, radiance }`` or ``lines = [ {...}, ... ]``."""
        if table.has("line"):
            return cls(lines=[_line_from_table(table.table("line"))])
        value = table.data["lines"]
        if not isinstance(value, (list, tuple)) or not value:
            raise table.error(
                "lines",
                f"expected a non-empty list of tables {{ nm, width_nm, radiance }}, got {table.show(value)}",
                value,
            )
        lines = []
        for i, item in enumerate(value):
            if not isinstance(item, Mapping):
                raise table.error(
                    "lines",
                    f"entry {i + 1} is {table.type_name(item)}, not a table: {table.show(item)}",
                    value,
                )
            # the entry as a table of its own, named lines[i] in messages (1-based)
            entry = type(table)(
                item,
                table.doc,
                table.path + ("lines", i),
                table.section,
                f"{table.prefix}lines[{i + 1}].",
                table.context,
            )
            lines.append(_line_from_table(entry))
        return cls(lines=lines)

    def key(self):
        return ("lines", self.lines)

    def spectral_radiance(self, wavelength_nm):
        w = np.asarray(wavelength_nm, dtype=float)[..., None]
        z = (w - self._centre) / self._sigma
        peak = self._radiance / (self._sigma * math.sqrt(2.0 * math.pi))
        return np.sum(peak * np.exp(-0.5 * z * z), axis=-1)

    def cumulative_radiance(self, wavelength_nm):
        """W/(sr m^2) emitted below ``wavelength_nm``: each line's radiance times the
        Gaussian's cumulative distribution, (1 + erf(z / sqrt 2)) / 2."""
        from scipy.special import erf  # scipy loads only for tinted mirrors

        w = np.asarray(wavelength_nm, dtype=float)[..., None]
        z = (w - self._centre) / (self._sigma * math.sqrt(2.0))
        return np.sum(self._radiance * 0.5 * (1.0 + erf(z)), axis=-1)

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position=None, uv=None, effects=None, incident=None
    ) -> np.ndarray:
        # lines narrower than the grid keep their energy: averaged over each bin
        return shifted_bins(self.cumulative_radiance, wavelength_nm, doppler, effects)

    def knots_nm(self):
        # +-8 sigma in 0.1-sigma steps: the profile is resolved whatever D compresses it to.
        offsets = np.linspace(-8.0, 8.0, 161)
        return (self._centre[:, None] + self._sigma[:, None] * offsets).ravel()

    def __repr__(self):
        return f"EmissionLines({list(self.lines)!r})"


def _line_from_table(table) -> tuple[float, float, float]:
    """One emission line: centre ``nm``, ``width_nm`` (FWHM), ``radiance`` W/(sr m^2)."""
    table.check_keys(("nm", "width_nm", "radiance"))
    return (
        table.number("nm", positive=True, unit="nm"),
        table.number("width_nm", positive=True, unit="nm"),
        table.number("radiance", nonnegative=True, unit="W/(sr m2)"),
    )


class TabulatedSpectrum(SpectralSurface):
    """Spectral radiance from a table: wavelength (nm) and W/(sr m^2 nm).

    Linear between table points and **zero outside the table** (the table declares the
    whole spectrum: a source tabulated only in the visible emits nothing a Doppler shift
    could bring in from beyond it).
    """

    def __init__(self, wavelength_nm, radiance, name: str):
        w = np.asarray(wavelength_nm, dtype=float).reshape(-1)
        r = np.asarray(radiance, dtype=float).reshape(-1)
        if w.shape != r.shape:
            raise ValueError(f"spectrum {name!r}: {w.size} wavelengths but {r.size} radiances")
        if w.size < 2:
            raise ValueError(f"spectrum {name!r}: needs at least 2 rows, got {w.size}")
        if not (np.all(np.isfinite(w)) and np.all(np.isfinite(r))):
            raise ValueError(f"spectrum {name!r}: values must be finite numbers")
        if np.any(w <= 0.0):
            raise ValueError(f"spectrum {name!r}: wavelengths must be > 0 nm")
        if np.any(np.diff(w) <= 0.0):
            i = int(np.nonzero(np.diff(w) <= 0.0)[0][0])
            raise ValueError(
                f"spectrum {name!r}: wavelengths must increase, row {i + 2} ({w[i + 1]} nm) "
                f"follows {w[i]} nm"
            )
        if np.any(r < 0.0):
            i = int(np.nonzero(r < 0.0)[0][0])
            raise ValueError(f"spectrum {name!r}: negative radiance {r[i]} at {w[i]} nm")
        self.name = str(name)
        self.wavelength_nm = w
        self.radiance = r
        self._key = ("tabulated", self.name, w.tobytes(), r.tobytes())

    @classmethod
    def from_csv(cls, path: str | os.PathLike) -> TabulatedSpectrum:
        """Read two columns, wavelength (nm) and W/(sr m^2 nm), from a text file.

        Columns separated by a comma, semicolon, tab or spaces; a header line (the first
        non-blank line, if it is not numeric) and lines starting with '#' are skipped.
        A bad row raises ValueError naming the file and line.
        """
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8-sig")
        except OSError as exc:
            raise ValueError(f"{path}: cannot read spectrum file ({exc.strerror or exc})") from None
        except UnicodeDecodeError:
            raise ValueError(
                f"{path}: not a text file (expected two columns nm, W/(sr m2 nm))"
            ) from None
        waves, values = [], []
        seen_first = False
        for lineno, raw in enumerate(text.splitlines(), start=1):
            line = raw.strip()
            if not line or line.startswith("#"):
                continue
            fields = _split_fields(line)
            first_row = not seen_first
            seen_first = True
            try:
                numbers = [float(f) for f in fields]
            except ValueError:
                if first_row:
                    continue  # header line
                # the line itself is not quoted: the file may not be a spectrum at all,
                # and its text is nobody's business in an error message
                raise ValueError(
                    f"{path}, line {lineno}: expected two numbers (nm, W/(sr m2 nm)) separated "
                    f"by a comma, semicolon, tab or spaces; is this a spectrum file?"
                ) from None
            if len(numbers) != 2:
                raise ValueError(
                    f"{path}, line {lineno}: expected 2 columns (nm, W/(sr m2 nm)), got {len(numbers)}"
                )
            if not all(math.isfinite(v) for v in numbers):
                raise ValueError(
                    f"{path}, line {lineno}: values must be finite, got {numbers[0]!r}, {numbers[1]!r}"
                )
            if numbers[0] <= 0.0:
                raise ValueError(
                    f"{path}, line {lineno}: wavelength must be > 0 nm, got {numbers[0]}"
                )
            if numbers[1] < 0.0:
                raise ValueError(f"{path}, line {lineno}: radiance must be >= 0, got {numbers[1]}")
            if waves and numbers[0] <= waves[-1][0]:
                raise ValueError(
                    f"{path}, line {lineno}: wavelengths must increase, {numbers[0]} nm follows "
                    f"{waves[-1][0]} nm (line {waves[-1][1]})"
                )
            waves.append((numbers[0], lineno))
            values.append(numbers[1])
        if len(waves) < 2:
            raise ValueError(
                f"{path}: needs at least 2 data rows (nm, W/(sr m2 nm)), found {len(waves)}"
            )
        return cls([w for w, _ in waves], values, name=str(path))

    @classmethod
    def from_table(cls, table) -> TabulatedSpectrum:
        """``spectrum = "file.csv"``, relative to the scene file (see :meth:`from_csv`)."""
        return cls.from_csv(table.path_value("spectrum", what="spectrum file"))

    def key(self):
        return self._key

    def spectral_radiance(self, wavelength_nm):
        w = np.asarray(wavelength_nm, dtype=float)
        # zero outside the table; a relative slack of 5e-10 lets a table end mapped to
        # lambda/D and back (rounding) still count as inside (knots_nm marks 1e-9 outside)
        lo, hi = self.wavelength_nm[0], self.wavelength_nm[-1]
        inside = (w >= lo * (1.0 - 5e-10)) & (w <= hi * (1.0 + 5e-10))
        return np.where(inside, np.interp(w, self.wavelength_nm, self.radiance), 0.0)

    def knots_nm(self):
        # The table's points, plus points just outside its ends, where the radiance drops to
        # zero: without them the trapezoid rule would ramp down to the next grid point.
        w = self.wavelength_nm
        return np.concatenate([[w[0] * (1.0 - 1e-9)], w, [w[-1] * (1.0 + 1e-9)]])

    def __repr__(self):
        return f"TabulatedSpectrum(<{self.wavelength_nm.size} rows>, name={self.name!r})"


def _split_fields(line: str) -> list[str]:
    for sep in (",", ";", "\t"):
        if sep in line:
            return next(csv.reader([line], delimiter=sep))
    return line.split()


# --------------------------------------------------------------------------------------
# Reflective surfaces
# --------------------------------------------------------------------------------------


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
        rgb = table.vector("color", 3)
        if np.any(rgb < 0) or np.any(rgb > 1):
            raise table.error(
                "color",
                f"reflectances must lie in 0..1, got color = {table.show(table.data['color'])}",
                table.data["color"],
            )
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


# --------------------------------------------------------------------------------------
# Patterns
# --------------------------------------------------------------------------------------


class Pattern(Surface):
    """Two surfaces laid out by a rest-frame lattice of cubic cells of size ``period`` (m).

    The lattice: cell n along axis i covers (n - 1/2) period <= p_i < (n + 1/2) period, so
    the body origin sits at a cell centre (and faces of boxes whose half-size is a multiple
    of ``period`` lie at cell centres rather than on boundaries). Only the coordinates
    listed in ``axes`` (0 = x, 1 = y, 2 = z of the body's rest frame) take part.

    * ``kind = "checks"``: a 3-D checkerboard; the cell with even sum of indices shows
      ``first``, odd shows ``second``.
    * ``kind = "grid"``: lines of width ``line_width`` (m) centred on the cell boundaries,
      in ``second``, on a ``first`` background.

    Defaults: ``first`` a light grey and ``second`` a dark grey Reflective under D65.
    """

    KINDS = ("checks", "grid")

    def __init__(
        self,
        kind: str = "checks",
        period: float = 0.1,
        line_width: float = 0.01,
        first: Surface | None = None,
        second: Surface | None = None,
        axes=(0, 1, 2),
    ):
        if kind not in self.KINDS:
            raise ValueError(f"pattern kind must be one of {', '.join(self.KINDS)}, got {kind!r}")
        self.kind = kind
        self.period = _positive_number(period, "pattern period (m)")
        self.line_width = _positive_number(line_width, "pattern line width (m)")
        if kind == "grid" and self.line_width >= self.period:
            raise ValueError(
                f"pattern line width ({self.line_width} m) must be smaller than the period "
                f"({self.period} m)"
            )
        self.first = Reflective((0.8, 0.8, 0.8)) if first is None else first
        self.second = Reflective((0.05, 0.05, 0.05)) if second is None else second
        self.uses_uv = bool(
            getattr(self.first, "uses_uv", True) or getattr(self.second, "uses_uv", True)
        )
        for name, s in (("first", self.first), ("second", self.second)):
            if not hasattr(s, "observed_xyz") or not hasattr(s, "key"):
                raise ValueError(f"pattern {name} must be a surface, got {s!r}")
        try:
            axes_t = tuple(int(a) for a in axes)
        except (TypeError, ValueError):
            raise ValueError(f"pattern axes must be a list of 0, 1, 2, got {axes!r}") from None
        if not axes_t or any(a not in (0, 1, 2) for a in axes_t) or len(set(axes_t)) != len(axes_t):
            raise ValueError(f"pattern axes must be distinct values from 0, 1, 2, got {axes!r}")
        self.axes = axes_t

    @classmethod
    def from_table(cls, table) -> Pattern:
        """``pattern = { kind, period, line_width, axes, first, second }``; ``first`` and
        ``second`` are surface tables read through :data:`SURFACE_KINDS`, patterns
        included, nested at most :data:`MAX_PATTERN_DEPTH` deep."""
        pat = table.table("pattern")
        pat.check_keys(("kind", "period", "line_width", "axes", "first", "second"))
        depth = _PATTERN_DEPTH.get()
        if depth >= MAX_PATTERN_DEPTH:
            raise pat.error(None, f"patterns nest at most {MAX_PATTERN_DEPTH} deep")
        kind = pat.string("kind", choices=cls.KINDS)
        period = pat.number("period", 0.1, positive=True, unit="m")
        line_width = pat.number("line_width", period / 10.0, positive=True, unit="m")
        if line_width >= period:
            raise pat.error(
                "line_width",
                f"line_width = {pat.show(line_width)} must be smaller than period = {pat.show(period)}",
                line_width,
            )
        axes = (0, 1, 2)
        if pat.has("axes"):
            raw = pat.data["axes"]
            if not isinstance(raw, (list, tuple)) or not 1 <= len(raw) <= 3:
                raise pat.error(
                    "axes",
                    f"expected a list of 1 to 3 axis numbers (0 = x, 1 = y, 2 = z), got axes = "
                    f"{pat.show(raw)}",
                    raw,
                )
            axes = pat.int_vector("axes", len(raw), low=0)
            if max(axes) > 2 or len(set(axes)) != len(axes):
                raise pat.error(
                    "axes", f"axes = {pat.show(raw)} must be distinct values from 0, 1, 2", raw
                )
        token = _PATTERN_DEPTH.set(depth + 1)
        try:
            first = _read_kind(pat.table("first"))
            second = _read_kind(pat.table("second"))
        finally:
            _PATTERN_DEPTH.reset(token)
        return cls(
            kind=kind, period=period, line_width=line_width, first=first, second=second, axes=axes
        )

    def key(self):
        return (
            "pattern",
            self.kind,
            self.period,
            self.line_width,
            self.first.key(),
            self.second.key(),
            self.axes,
        )

    def second_mask(self, rest_position) -> np.ndarray:
        """(N,) True where the hit shows ``second``."""
        p = np.asarray(rest_position, dtype=float).reshape(-1, 3)[:, list(self.axes)]
        scaled = p / self.period
        if self.kind == "checks":
            cells = np.floor(scaled + 0.5).astype(np.int64)
            return (cells.sum(axis=1) % 2) == 1
        # grid: distance (in periods) to the nearest boundary at half-integers
        frac = scaled + 0.5 - np.floor(scaled + 0.5)  # in [0, 1): 0 on a boundary
        dist = np.minimum(frac, 1.0 - frac) * self.period
        return np.any(dist < 0.5 * self.line_width, axis=1)

    def observed_xyz(self, doppler, rest_position, uv=None, effects=None) -> np.ndarray:
        return self.lit_xyz(doppler, rest_position, uv, effects, None)

    def lit_xyz(self, doppler, rest_position, uv, effects, incident) -> np.ndarray:
        """Each cell's surface, lit by ``incident`` (relview.light.lamps.Incident) or,
        when it is None, by its own light only."""
        d = _as_doppler(doppler)
        mask = self.second_mask(rest_position)
        if mask.shape[0] != d.size:
            raise ValueError(f"pattern: {d.size} Doppler factors but {mask.shape[0]} positions")
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        uv_arr = None if uv is None else np.asarray(uv, dtype=float).reshape(-1, 2)
        out = np.zeros((d.size, 3))
        for surface, sel in ((self.first, ~mask), (self.second, mask)):
            if np.any(sel):
                args = (d[sel], pos[sel], None if uv_arr is None else uv_arr[sel], effects)
                out[sel] = (
                    surface.observed_xyz(*args)
                    if incident is None
                    else surface.lit_xyz(*args, incident.subset(sel))
                )
        return out

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position, uv=None, effects=None, incident=None
    ) -> np.ndarray:
        d = _as_doppler(doppler)
        mask = self.second_mask(rest_position)
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        uv_arr = None if uv is None else np.asarray(uv, dtype=float).reshape(-1, 2)
        parts = ((self.first, ~mask), (self.second, mask))
        return _split_spectra(parts, wavelength_nm, d, pos, uv_arr, effects, incident)

    def __repr__(self):
        return (
            f"Pattern(kind={self.kind!r}, period={self.period!r}, line_width={self.line_width!r}, "
            f"first={self.first!r}, second={self.second!r}, axes={self.axes!r})"
        )


# --------------------------------------------------------------------------------------
# Clock faces
# --------------------------------------------------------------------------------------

#: lit segments of the seven-segment digits 0-9 (segments a-g: top, upper right, lower
#: right, bottom, lower left, upper left, middle; common practice for numeric displays)
_SEGMENTS = np.array(
    [
        [1, 1, 1, 1, 1, 1, 0],
        [0, 1, 1, 0, 0, 0, 0],
        [1, 1, 0, 1, 1, 0, 1],
        [1, 1, 1, 1, 0, 0, 1],
        [0, 1, 1, 0, 0, 1, 1],
        [1, 0, 1, 1, 0, 1, 1],
        [1, 0, 1, 1, 1, 1, 1],
        [1, 1, 1, 0, 0, 0, 0],
        [1, 1, 1, 1, 1, 1, 1],
        [1, 1, 1, 1, 0, 1, 1],
    ],
    bool,
)


def _segment_masks(x: np.ndarray, y: np.ndarray, stroke: float) -> np.ndarray:
    """(N, 7) which of the seven segments a point (x, y) of a digit cell [0,1] x [0,2]
    (y up) falls on, strokes ``stroke`` wide."""
    inside = (x >= 0) & (x <= 1) & (y >= 0) & (y <= 2)
    left, right = x <= stroke, x >= 1 - stroke
    upper, lower = y >= 1, y <= 1
    return np.stack(
        [
            inside & (y >= 2 - stroke),
            inside & right & upper,
            inside & right & lower,
            inside & (y <= stroke),
            inside & left & lower,
            inside & left & upper,
            inside & (np.abs(y - 1) <= stroke / 2),
        ],
        axis=1,
    )


class ClockFace(Surface):
    """A clock dial showing the body's clock reading carried by each point's light
    (relview.kinematics.clocks): drawn in the body's rest-frame coordinates, so it is
    aberrated, shifted and beamed like every surface, and each point shows the reading
    its own light left with.

    The dial lies in the plane of body axes ``axes`` = (i, j), centred at ``center`` (m,
    body axes; only components i and j count), of radius ``radius`` (m): a rim, twelve
    marks, and one hand that turns once per ``period`` s of the reading, clockwise from
    axis j towards axis i, pointing along j at reading ``phase`` s. Below the hub a
    seven-segment reading shows the whole number of ``unit`` s (the last ``digits``
    digits, a bar in front when negative) in a window the hand passes under. The dial's marks are drawn with ``ink``,
    everything else with ``face``.
    """

    uses_uv = False
    uses_position = True
    #: the renderer passes observed_xyz / lit_xyz the clock reading (s) of each hit
    uses_proper_time = True

    def __init__(
        self,
        period: float = 1e-8,
        phase: float = 0.0,
        center=(0.0, 0.0, 0.0),
        radius: float = 0.5,
        axes=(0, 2),
        unit: float = 1e-9,
        digits: int = 3,
        face: Surface | None = None,
        ink: Surface | None = None,
    ):
        self.period = _positive_number(period, "clock period (s)")
        self.phase = float(phase)
        self.center = np.asarray(center, float).reshape(3)
        self.radius = _positive_number(radius, "clock radius (m)")
        self.axes = tuple(int(a) for a in axes)
        if len(self.axes) != 2 or len(set(self.axes)) != 2 or not set(self.axes) <= {0, 1, 2}:
            raise ValueError(f"clock axes must be two distinct values from 0, 1, 2, got {axes!r}")
        self.unit = _positive_number(unit, "clock digit unit (s)")
        self.digits = int(digits)
        self.first = Reflective((0.85, 0.85, 0.8)) if face is None else face
        self.second = Reflective((0.03, 0.03, 0.03)) if ink is None else ink

    @classmethod
    def from_table(cls, table) -> ClockFace:
        """``clock_face = { period, phase, center, radius, axes, unit, digits, face, ink }``;
        ``face`` and ``ink`` are surface tables read through :data:`SURFACE_KINDS`."""
        t = table.table("clock_face")
        t.check_keys(
            ("period", "phase", "center", "radius", "axes", "unit", "digits", "face", "ink")
        )
        axes = (0, 2)
        if t.has("axes"):
            axes = t.int_vector("axes", 2, low=0)
            if max(axes) > 2 or axes[0] == axes[1]:
                raise t.error(
                    "axes",
                    f"axes = {t.show(t.data['axes'])} must be two distinct "
                    "values from 0, 1, 2 (0 = x, 1 = y, 2 = z)",
                    t.data["axes"],
                )
        face = _read_kind(t.table("face")) if t.has("face") else None
        ink = _read_kind(t.table("ink")) if t.has("ink") else None
        return cls(
            period=t.number("period", 1e-8, positive=True, unit="s"),
            phase=t.number("phase", 0.0, unit="s"),
            center=t.vector("center", 3, (0.0, 0.0, 0.0), unit="m"),
            radius=t.number("radius", 0.5, positive=True, unit="m"),
            axes=axes,
            unit=t.number("unit", 1e-9, positive=True, unit="s"),
            digits=t.integer("digits", 3, low=1, high=9),
            face=face,
            ink=ink,
        )

    def key(self):
        return (
            "clock_face",
            self.period,
            self.phase,
            tuple(self.center),
            self.radius,
            self.axes,
            self.unit,
            self.digits,
            self.first.key(),
            self.second.key(),
        )

    def ink_mask(self, rest_position, proper_time) -> np.ndarray:
        """(N,) True where the hit shows ink: rim, marks, hand, hub and digits."""
        p = np.asarray(rest_position, float).reshape(-1, 3)
        reading = np.asarray(proper_time, float).reshape(-1)
        i, j = self.axes
        a = (p[:, i] - self.center[i]) / self.radius  # dial coordinates: radius 1
        b = (p[:, j] - self.center[j]) / self.radius
        r = np.hypot(a, b)
        angle = np.arctan2(a, b)  # clockwise from axis j towards axis i
        rim = (r >= 0.93) & (r <= 1.0)
        nearest = np.round(angle / (np.pi / 6)) * (np.pi / 6)
        marks = (r >= 0.8) & (r < 0.93) & (np.abs(angle - nearest) * r <= 0.03)
        with np.errstate(invalid="ignore"):
            turn = 2.0 * np.pi * ((reading - self.phase) / self.period)
        along = a * np.sin(turn) + b * np.cos(turn)
        across = np.abs(a * np.cos(turn) - b * np.sin(turn))
        hand = (along >= -0.08) & (along <= 0.75) & (across <= 0.035)
        hub = r <= 0.07
        digits, window = self._digit_mask(a, b, reading)
        return rim | marks | (hand & ~window) | hub | digits

    def _digit_mask(self, a, b, reading) -> tuple[np.ndarray, np.ndarray]:
        """(ink, window): the seven-segment reading below the hub, cells 0.16 wide and
        0.32 high, 0.21 apart, centred on the dial's j axis between b = -0.62 and -0.30,
        and the window around them that the hand passes under."""
        n = self.digits + 1  # a sign cell, then the digits
        pitch, width = 0.21, 0.16
        left = -0.5 * (n * pitch - (pitch - width))
        cell = np.floor((a - left) / pitch)
        x = ((a - left) - cell * pitch) / width
        y = (b + 0.62) / 0.16
        with np.errstate(invalid="ignore"):
            count = np.floor(reading / self.unit)
        negative = count < 0
        shown = np.where(np.isfinite(count), np.abs(count), 0.0)
        place = (n - 1 - cell).clip(0, self.digits - 1)  # 0: the last digit
        digit = (np.floor(shown / 10.0**place) % 10).astype(np.int64).clip(0, 9)
        seg = _segment_masks(x, y, 0.18)
        ink = np.any(seg & _SEGMENTS[digit], axis=1) & (cell >= 1) & (cell < n)
        sign = (cell == 0) & negative & seg[:, 6]
        window = (np.abs(a) <= -left + 0.04) & (b >= -0.66) & (b <= -0.26)
        return (ink | sign) & np.isfinite(count), window

    def observed_xyz(
        self, doppler, rest_position, uv=None, effects=None, proper_time=None
    ) -> np.ndarray:
        return self.lit_xyz(doppler, rest_position, uv, effects, None, proper_time)

    def lit_xyz(
        self, doppler, rest_position, uv, effects, incident, proper_time=None
    ) -> np.ndarray:
        """Face and ink, lit by ``incident`` or, when it is None, by their own light."""
        d = _as_doppler(doppler)
        if proper_time is None:  # no clock data (e.g. a caller without clocks): a blank dial
            proper_time = np.full(d.size, np.nan)
        mask = self.ink_mask(rest_position, proper_time)
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        out = np.zeros((d.size, 3))
        for surface, sel in ((self.first, ~mask), (self.second, mask)):
            if np.any(sel):
                args = (d[sel], pos[sel], None, effects)
                out[sel] = (
                    surface.observed_xyz(*args)
                    if incident is None
                    else surface.lit_xyz(*args, incident.subset(sel))
                )
        return out

    def spectrum_seen(
        self,
        wavelength_nm,
        doppler,
        rest_position,
        uv=None,
        effects=None,
        incident=None,
        proper_time=None,
    ) -> np.ndarray:
        d = _as_doppler(doppler)
        if proper_time is None:
            proper_time = np.full(d.size, np.nan)
        mask = self.ink_mask(rest_position, proper_time)
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        parts = ((self.first, ~mask), (self.second, mask))
        return _split_spectra(parts, wavelength_nm, d, pos, None, effects, incident)


#: patterns enclosing the surface table being read (a context variable, so the limit
#: holds whichever reader nests: readers keep the one-argument signature)
_PATTERN_DEPTH: contextvars.ContextVar[int] = contextvars.ContextVar("pattern_depth", default=0)


# --------------------------------------------------------------------------------------
# Mirrors
# --------------------------------------------------------------------------------------

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
            tint = table.vector("tint", 3)
            if np.any(tint < 0) or np.any(tint > 1):
                raise table.error(
                    "tint",
                    f"reflectances must lie in 0..1, got tint = {table.show(table.data['tint'])}",
                    table.data["tint"],
                )
        return cls(r, bounces, None if tint is None else tuple(float(c) for c in tint))

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


# --------------------------------------------------------------------------------------
# Scene-file surface kinds
# --------------------------------------------------------------------------------------

#: reader(table) -> surface; ``table`` is a relview.scene.table.Table (duck-typed)
SurfaceReader = Callable[[Any], Surface]


class SurfaceKind(NamedTuple):
    """How a scene file's surface table of one kind is read."""

    #: builds the surface from the table (reads the kind key and its extras)
    reader: SurfaceReader
    #: keys allowed beside the kind key (all other kinds' extras are refused by name)
    extras: tuple[str, ...] = ()


#: kind key of a ``[body.surface]`` table (exactly one is given) -> its reader and extras
SURFACE_KINDS: dict[str, SurfaceKind] = {
    "blackbody": SurfaceKind(Blackbody.from_table, ("scale",)),
    "line": SurfaceKind(EmissionLines.from_table),
    "lines": SurfaceKind(EmissionLines.from_table),
    "spectrum": SurfaceKind(TabulatedSpectrum.from_table),
    "color": SurfaceKind(
        Reflective.from_table, ("lamp", "luminance", "texture", "gloss", "gloss_exponent")
    ),
    "pattern": SurfaceKind(Pattern.from_table),
    "clock_face": SurfaceKind(ClockFace.from_table),
    "mirror": SurfaceKind(Mirror.from_table, ("bounces", "tint")),
}


def register_surface(kind: str, reader: SurfaceReader, extras: tuple[str, ...] = ()) -> None:
    """Make ``[body.surface] <kind> = ...`` build its surface with ``reader(table)``;
    ``extras``: the other keys that may accompany ``kind``."""
    SURFACE_KINDS[kind] = SurfaceKind(reader, tuple(extras))


def _kind_of(table) -> str:
    """The one kind key of a surface table, after checking its keys."""
    kinds_named = list(SURFACE_KINDS)
    extras: dict[str, str] = {}  # extra key -> the first kind that allows it
    for name, entry in SURFACE_KINDS.items():
        for key in entry.extras:
            extras.setdefault(key, name)
    table.check_keys(kinds_named + sorted(extras))
    kinds = [k for k in kinds_named if table.has(k)]
    if not kinds:
        raise table.error(
            None, f"no surface kind given; give exactly one of: {', '.join(kinds_named)}"
        )
    if len(kinds) > 1:
        raise table.error(
            kinds[1],
            f"gives {' and '.join(kinds)} "
            f"({', '.join(f'{k} = {table.show(table.data[k])}' for k in kinds)}); "
            f"a surface has exactly one kind: {', '.join(kinds_named)}",
            {k: table.data[k] for k in kinds},
        )
    kind = kinds[0]
    for key in table.given_keys():
        if key not in SURFACE_KINDS and key not in SURFACE_KINDS[kind].extras:
            raise table.error(
                key,
                f"{key} = {table.show(table.data[key])} applies only to {extras[key]} surfaces, "
                f"not {kind}",
                table.data[key],
            )
    return kind


def _read_kind(table) -> Surface:
    return SURFACE_KINDS[_kind_of(table)].reader(table)


def read_surface(table) -> Surface:
    """The surface a scene file's surface table describes.

    The table's own errors (SceneError) name the key they concern; a constructor's
    ValueError / OSError, or another UserError, from anywhere in the surface (a nested
    pattern's spectrum file too) is reported at this table's kind key.
    """
    kind = _kind_of(table)
    value = table.data[kind]
    try:
        return SURFACE_KINDS[kind].reader(table)
    except SceneError:
        raise
    except UserError as exc:  # keep its message (it names e.g. its own file and line)
        raise table.error(kind, f"{exc}", value, cls=type(exc)) from exc
    except (ValueError, OSError) as exc:
        raise table.error(kind, f"{kind} = {table.show(value)}: {exc}", value) from exc
