"""Emitting surfaces: blackbodies, emission lines, tabulated spectra (rest frame)."""

from __future__ import annotations

import csv
import math
import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from relview.light import spectrum
from relview.light.spectrum import cached_table
from relview.light.surfaces.base import (
    MAX_TEMPERATURE,
    SpectralSurface,
    _positive_number,
    shifted_bins,
)

# FWHM -> standard deviation of a Gaussian: FWHM = 2 sqrt(2 ln 2) sigma.
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))


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
