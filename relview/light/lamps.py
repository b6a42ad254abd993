"""Lamps as scene objects: their spectra, the light they deliver, and the colour it makes.

A lamp is either

* a **point or sphere lamp** on a worldline (any motion kind): radiant power P (W),
  isotropic in its own rest frame, with a relative spectrum p(lambda) (integral 1); or
* a **distant lamp** (parallel light, like sunlight): a plane wave of irradiance E0
  (W/m^2, on a plate facing it) arriving from a fixed direction in the inertial frame the
  lamp is at rest in.

Light from a lamp reaching a surface point is Doppler-shifted by D_in (frequency in the
surface's rest frame over frequency in the lamp's), reflected in the surface's rest
frame, and shifted again by D_out on its way to the camera. The formulas, with their
sources (docs/physics.md, "Lamps"):

* point lamp, spectral irradiance on a plate in the surface's rest frame R
  (Rybicki & Lightman 1979, ch. 4, I_nu / nu^3 invariant; McKinley 1980, Am. J. Phys. 48,
  612, the D^4 of a moving point source)::

      E_lambda(lambda) = cos(theta') D_in^5 P p(D_in lambda) / (4 pi r'^2)

  with r' the lamp-to-surface distance in R (the time component, in R, of the null
  separation from the lamp event to the surface event) and theta' the angle of
  incidence in R; integrated over lambda this is D_in^4 P cos(theta') / (4 pi r'^2);
* distant lamp: a plane wave's energy flux goes as D^2 (Einstein 1905, section 8), so
  E_lambda(lambda) = cos(theta') D_in^3 E0 p(D_in lambda);
* Lambert reflection in R: L_lambda = rho(lambda) E_lambda / pi, and with ``gloss`` g a
  neutral glossy lobe: (1 - g) rho / pi + g (n + 2)/(2 pi) cos^n alpha (:func:`glossy_lobe`);
* to the camera: L_obs(lambda) = D_out^5 L_lambda(D_out lambda) (physics.md).

So a surface of linear-sRGB reflectance (r, g, b) (Mallett & Yuksel basis, as for the
co-moving-lamp surfaces of relview.light.surfaces) lit by one lamp records

    XYZ = A * sum_c rgb_c Q_c(D_in, D_out),
    Q_c(a, b) = (a b)^5 K_m integral xbar(lambda) B_c(b lambda) p(a b lambda) d lambda,

with A = P cos(theta') / (4 pi^2 r'^2) (point lamp) or E0 cos(theta') / (pi D_in^2)
(distant lamp). :class:`LitTable` tabulates Q over (ln(D_in D_out), ln D_out).

This module sits in the light layer: it knows spectra and formulas, not scenes; the
per-pixel geometry (lamp events, shadow rays) is relview.illumination's.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Hashable

import numpy as np
from numba import njit, prange

from relview.light import spectrum, surfaces
from relview.light.spectrum import K_M_LM_PER_W

#: Wien's displacement constant b = lambda_max T, nm K (CODATA 2018: 2.897771955e-3 m K)
WIEN_NM_K = 2.897771955e6
#: keys that choose a lamp's spectrum (exactly one is given)
SPECTRUM_KEYS = ("blackbody", "line", "lines", "spectrum", "illuminant")
#: standard illuminants a lamp may name
ILLUMINANTS = surfaces.NAMED_LAMPS


class LampSpectrum:
    """A lamp's relative spectral power p(lambda) (1/nm), normalised to integral 1.

    ``power(lambda_nm)``: any non-negative function (W/nm up to a factor) defined at every
    wavelength > 0; ``span_nm``: the range outside which it is negligible (or zero);
    ``knots_nm``: wavelengths with fine structure (line profiles, table points).
    Keeps the cumulative integral C(x) = integral_0^x p on a fine grid, from which the
    energy in any wavelength bin is C(hi) - C(lo): exact for narrow lines too.
    """

    #: geometric step of the cumulative grid (relative), and its knot-free point budget
    STEP = 2e-4

    def __init__(
        self,
        key: Hashable,
        power: Callable[[np.ndarray], np.ndarray],
        span_nm: tuple[float, float],
        knots_nm: np.ndarray | None = None,
        label: str = "",
    ):
        self.key = key
        self.label = label or str(key)
        lo, hi = float(span_nm[0]), float(span_nm[1])
        n = int(math.ceil(math.log(hi / lo) / self.STEP)) + 1
        grid = np.geomspace(lo, hi, n)
        if knots_nm is not None and len(knots_nm):
            k = np.asarray(knots_nm, float)
            grid = np.union1d(grid, k[(k > 0)])
        values = np.maximum(np.asarray(power(grid), float), 0.0)
        cumulative = np.concatenate(
            [[0.0], np.cumsum(0.5 * (values[1:] + values[:-1]) * np.diff(grid))]
        )
        total = cumulative[-1]
        if not (math.isfinite(total) and total > 0.0):
            raise ValueError(f"lamp spectrum {self.label}: no power at any wavelength")
        self._power = power
        self._scale = 1.0 / total
        self.knots_nm = None if knots_nm is None else np.asarray(knots_nm, float)
        self.grid_nm = grid
        self.cumulative = cumulative / total

    def density(self, wavelength_nm) -> np.ndarray:
        """p(lambda) in 1/nm (integral 1 over all wavelengths)."""
        return self._scale * np.maximum(np.asarray(self._power(wavelength_nm), float), 0.0)

    def energy_below(self, wavelength_nm) -> np.ndarray:
        """C(lambda): the fraction of the power at wavelengths below ``lambda``."""
        return np.interp(wavelength_nm, self.grid_nm, self.cumulative, left=0.0, right=1.0)

    def luminous_efficacy(self) -> float:
        """K_m integral p ybar (lm/W) of the lamp at rest (CIE 15 definition)."""
        w = spectrum.CMF_WAVELENGTHS_NM
        return float(K_M_LM_PER_W * np.trapezoid(self.density(w) * spectrum.CMF_VALUES[:, 1], w))

    # -- constructors
    @classmethod
    def blackbody(cls, temperature_k: float) -> LampSpectrum:
        t = float(temperature_k)
        peak = WIEN_NM_K / t
        # beyond [0.05, 1000] x the peak wavelength less than 1e-8 of the power remains
        return cls(
            ("blackbody", t),
            lambda w: spectrum.planck_spectral_radiance(w, t),
            (0.05 * peak, 1000.0 * peak),
            label=f"blackbody {t:g} K",
        )

    @classmethod
    def illuminant(cls, name: str) -> LampSpectrum:
        if name.strip().upper() != "D65":
            raise ValueError(
                f"unknown illuminant {name!r}; choose one of: {', '.join(ILLUMINANTS)}"
            )
        peak = WIEN_NM_K / spectrum.D65_CCT_K  # the table continues as a 6504 K Planckian
        return cls(
            ("illuminant", "D65"),
            spectrum.cie_d65_relative_spd,
            (0.05 * peak, 1000.0 * peak),
            spectrum.D65_WAVELENGTHS_NM,
            label="D65",
        )

    @classmethod
    def from_surface(cls, surface) -> LampSpectrum:
        """The spectrum of an emission-line or tabulated surface of relview.light.surfaces
        (its rest-frame spectral radiance, as relative power)."""
        knots = surface.knots_nm()
        if isinstance(surface, surfaces.EmissionLines):
            width = surface._sigma.max() * 12.0
            span = (max(surface._centre.min() - width, 1e-3), surface._centre.max() + width)
        else:
            span = (knots.min(), knots.max())
        return cls(surface.key(), surface.spectral_radiance, span, knots, label=str(surface))

    @classmethod
    def from_table(cls, table) -> LampSpectrum:
        """Exactly one of ``blackbody`` (K), ``line``, ``lines``, ``spectrum`` (a CSV file,
        as for surfaces) or ``illuminant`` ("D65"); ``table`` is the scene reader's
        validated table (duck-typed: this layer does not import it)."""
        given = [k for k in SPECTRUM_KEYS if table.has(k)]
        if len(given) != 1:
            raise table.error(
                given[1] if given else None,
                f"a lamp needs exactly one spectrum key, one of: "
                f"{', '.join(SPECTRUM_KEYS)} (given: {', '.join(given) or 'none'})",
            )
        kind = given[0]
        value = table.data[kind]
        if kind == "blackbody":
            return cls.blackbody(
                table.number(
                    "blackbody",
                    low=surfaces.MIN_LAMP_TEMPERATURE,
                    high=surfaces.MAX_TEMPERATURE,
                    unit="K",
                )
            )
        if kind == "illuminant":
            return cls.illuminant(table.string("illuminant", choices=ILLUMINANTS))
        try:
            if kind == "spectrum":
                surface = surfaces.TabulatedSpectrum.from_table(table)
            else:
                surface = surfaces.EmissionLines.from_table(table)
            return cls.from_surface(surface)
        except ValueError as exc:
            raise table.error(kind, f"{kind} = {table.show(value)}: {exc}", value) from exc


# --------------------------------------------------------------------------------------
# A sphere lamp as the camera sees it
# --------------------------------------------------------------------------------------


def sphere_radiance(power_w: float, radius_m: float) -> float:
    """Radiance L (W/(sr m^2)) of a uniformly bright (Lambertian) sphere of radius R
    radiating ``power_w``: its surface's exitance is M = pi L (radiance integrated over
    the outward hemisphere with cos theta), so P = 4 pi R^2 M = 4 pi^2 R^2 L (Rybicki &
    Lightman 1979, section 1.3: the flux of an isotropic field through a surface, F = pi
    I, from memory)."""
    return float(power_w) / (4.0 * math.pi**2 * float(radius_m) ** 2)


class SphereGlow(surfaces.SpectralSurface):
    """The surface of a sphere lamp: a self-luminous emitter of the lamp's spectrum whose
    bolometric radiance in its rest frame is ``radiance`` (W/(sr m^2)), spectral radiance
    radiance x p(lambda); seen with the Doppler factor of its points like any body
    (relview.light.spectrum: L_obs(lambda) = D^5 L(D lambda)). Lamps of one spectrum share
    a Doppler table; the radiance scales it."""

    self_luminous = True

    def __init__(self, lamp_spectrum: LampSpectrum, radiance: float):
        self.spectrum = lamp_spectrum
        self.radiance = float(radiance)

    def key(self):
        return ("sphere lamp", self.spectrum.key, self.radiance)

    def spectral_radiance(self, wavelength_nm):
        return self.radiance * self.spectrum.density(wavelength_nm)

    def knots_nm(self):
        return self.spectrum.knots_nm

    def table(self):
        return spectrum.cached_table(
            ("sphere lamp", self.spectrum.key), self.spectrum.density, self.spectrum.knots_nm
        )

    def observed_xyz(self, doppler, rest_position=None, uv=None, effects=None):
        return self.radiance * super().observed_xyz(doppler, rest_position, uv, effects)

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position=None, uv=None, effects=None, incident=None
    ) -> np.ndarray:
        return self.radiance * surfaces.shifted_bins(
            self.spectrum.energy_below, wavelength_nm, doppler, effects
        )

    def __repr__(self):
        return f"SphereGlow({self.spectrum.label}, radiance={self.radiance!r} W/(sr m2))"


# --------------------------------------------------------------------------------------
# Irradiance (bolometric, for checks and layers)
# --------------------------------------------------------------------------------------


def point_irradiance(power_w, d_in, r_rest_m, cos_incidence) -> np.ndarray:
    """W/m^2 on a plate in its rest frame from an isotropic point lamp of ``power_w``:
    D_in^4 P cos(theta') / (4 pi r'^2) (McKinley 1980; Rybicki & Lightman ch. 4); 0 for
    light arriving from behind."""
    return (
        np.asarray(d_in, float) ** 4
        * power_w
        * np.maximum(cos_incidence, 0.0)
        / (4.0 * math.pi * np.asarray(r_rest_m, float) ** 2)
    )


def plane_wave_irradiance(irradiance_w_m2, d_in, cos_incidence) -> np.ndarray:
    """W/m^2 on a plate from a plane wave of ``irradiance_w_m2`` in its own frame:
    D_in^2 E0 cos(theta') (Einstein 1905, section 8: the energy of a light complex
    transforms as D^2, and so does its flux through a plate facing it)."""
    return np.asarray(d_in, float) ** 2 * irradiance_w_m2 * np.maximum(cos_incidence, 0.0)


# --------------------------------------------------------------------------------------
# The reflected colour: a table over (ln D_in D_out, ln D_out)
# --------------------------------------------------------------------------------------

#: the reflectance basis is constant outside its table (380-780 nm), so for
#: D_out lambda outside it over the whole CMF range (360-830 nm) Q no longer depends on
#: D_out except through D_in D_out: the v axis is clamped there, exactly
V_MIN = math.log(surfaces.BASIS_WAVELENGTHS_NM[0] / spectrum.VISIBLE_MAX_NM)
V_MAX = math.log(surfaces.BASIS_WAVELENGTHS_NM[-1] / spectrum.VISIBLE_MIN_NM)
#: node spacings in ln(D_in D_out) and ln D_out (accuracy measured in tests/test_lamps.py)
U_STEP = math.log(10.0) / 400.0
V_STEP = 0.005


class LitTable:
    """Q_c(D_in, D_out) of one lamp spectrum for the three basis reflectances (module
    docstring), tabulated on nodes u = ln(D_in D_out) = k U_STEP and v = ln D_out in
    [V_MIN, V_MAX], and interpolated bilinearly (in ln Q where the four corners are
    positive, else in Q). The u range grows on demand.

    The wavelength integral is a midpoint rule over 1-nm bins of the CIE 1931 colour-
    matching functions (360-830 nm) in which the lamp contributes the exact energy of each
    bin (C(hi) - C(lo) of :class:`LampSpectrum`), so narrow lamp lines are not missed.
    """

    def __init__(self, lamp_spectrum: LampSpectrum):
        self.spectrum = lamp_spectrum
        lam = spectrum.CMF_WAVELENGTHS_NM
        self._lam = lam
        self._edges = np.concatenate([[lam[0] - 0.5], 0.5 * (lam[1:] + lam[:-1]), [lam[-1] + 0.5]])
        nv = int(math.ceil((V_MAX - V_MIN) / V_STEP)) + 1
        self.v0 = V_MIN
        self.v_nodes = V_MIN + np.arange(nv) * V_STEP
        # (L, V*3*3): xbar_k(lambda) B_c(e^v lambda) per node v, basis c, channel k
        basis = surfaces.reflectance_basis(np.exp(self.v_nodes)[:, None] * lam[None, :])
        weights = np.einsum("lk,vlc->lvck", spectrum.CMF_VALUES, basis)
        self._weights = K_M_LM_PER_W * weights.reshape(len(lam), -1)
        self.k_lo = 0
        self.q = np.zeros((0, nv, 3, 3))
        self._log_q = self.q

    def _compute(self, ks: np.ndarray) -> np.ndarray:
        u = ks * U_STEP
        scale = np.exp(u)[:, None]
        e = self._edges[None, :]
        bins = (
            self.spectrum.energy_below(scale * e[:, 1:])
            - self.spectrum.energy_below(scale * e[:, :-1])
        ) / scale  # integral p(e^u l) dl
        q = (bins @ self._weights) * np.exp(5.0 * u)[:, None]
        return q.reshape(len(ks), len(self.v_nodes), 3, 3)

    def _cover(self, u_min: float, u_max: float) -> None:
        lo = int(math.floor(u_min / U_STEP)) - 1
        hi = int(math.ceil(u_max / U_STEP)) + 1
        if self.q.shape[0] == 0:
            self.k_lo = lo
            self.q = self._compute(np.arange(lo, hi + 1))
            self._log_q = _log_table(self.q)
            return
        k_hi = self.k_lo + self.q.shape[0] - 1
        parts = []
        if lo < self.k_lo:
            parts.append(self._compute(np.arange(lo, self.k_lo)))
        parts.append(self.q)
        if hi > k_hi:
            parts.append(self._compute(np.arange(k_hi + 1, hi + 1)))
        if len(parts) > 1:
            self.q = np.concatenate(parts)
            self.k_lo = min(lo, self.k_lo)
            self._log_q = _log_table(self.q)

    def lookup(self, d_in, d_out) -> np.ndarray:
        """(N, 3 basis, 3 XYZ): Q_c(D_in, D_out) per hit."""
        d_in = np.asarray(d_in, float).reshape(-1)
        d_out = np.asarray(d_out, float).reshape(-1)
        if d_in.size == 0:
            return np.zeros((0, 3, 3))
        if not (
            np.all(d_in > 0)
            and np.all(d_out > 0)
            and np.all(np.isfinite(d_in))
            and np.all(np.isfinite(d_out))
        ):
            raise ValueError("Doppler factors must be finite and > 0")
        u = np.log(d_in) + np.log(d_out)
        self._cover(float(u.min()), float(u.max()))
        v = np.clip(np.log(d_out), V_MIN, self.v_nodes[-1])
        return _bilinear(u, v, self.k_lo * U_STEP, self.v0, self.q, self._log_q)

    def add_reflected(self, out, rows, d_in, d_out, weights, scale) -> None:
        """out[rows] += scale sum_c weights_c Q_c(D_in, D_out): the XYZ (N, 3) reflected by
        basis weights (M, 3) at the ``rows`` (M,) (distinct) of ``out``, with the lookup
        and the weighted sum in one compiled pass (:meth:`lookup` holds the rules)."""
        d_in = np.asarray(d_in, float).reshape(-1)
        d_out = np.asarray(d_out, float).reshape(-1)
        if d_in.size == 0:
            return
        if not (np.all(d_in > 0) and np.all(d_out > 0)):
            raise ValueError("Doppler factors must be finite and > 0")
        u = np.log(d_in) + np.log(d_out)
        if not np.all(np.isfinite(u)):
            raise ValueError("Doppler factors must be finite and > 0")
        self._cover(float(u.min()), float(u.max()))
        v = np.clip(np.log(d_out), V_MIN, self.v_nodes[-1])
        _bilinear_add(
            out,
            np.ascontiguousarray(rows, np.int64),
            u,
            v,
            self.k_lo * U_STEP,
            self.v0,
            self.q,
            self._log_q,
            np.ascontiguousarray(weights, np.float64),
            np.ascontiguousarray(scale, np.float64),
        )

    def direct(self, d_in: float, d_out: float) -> np.ndarray:
        """(3, 3) Q by the same bin sum at exactly (D_in, D_out), no table (for checks)."""
        scale = d_in * d_out
        e = self._edges
        bins = (
            self.spectrum.energy_below(scale * e[1:]) - self.spectrum.energy_below(scale * e[:-1])
        ) / scale
        basis = surfaces.reflectance_basis(d_out * self._lam)
        return K_M_LM_PER_W * scale**5 * np.einsum("l,lk,lc->ck", bins, spectrum.CMF_VALUES, basis)


def _log_table(q: np.ndarray) -> np.ndarray:
    """ln Q where Q > 0, -inf elsewhere (the interpolation's corners, logged once)."""
    with np.errstate(divide="ignore"):
        return np.log(np.maximum(q, 0.0))


@njit(cache=True, inline="always")
def _corner(q, lq, a, b, tx, ty, c, k):
    """Q_c,k interpolated between the nodes (a, b) and (a + 1, b + 1) at fractions (tx,
    ty): in ln Q where the four corners are positive, else in Q."""
    l00, l10, l01, l11 = (
        lq[a, b, c, k],
        lq[a + 1, b, c, k],
        lq[a, b + 1, c, k],
        lq[a + 1, b + 1, c, k],
    )
    w00, w10, w01, w11 = (1 - tx) * (1 - ty), tx * (1 - ty), (1 - tx) * ty, tx * ty
    if l00 > -np.inf and l10 > -np.inf and l01 > -np.inf and l11 > -np.inf:
        return np.exp(w00 * l00 + w10 * l10 + w01 * l01 + w11 * l11)
    return (
        w00 * q[a, b, c, k]
        + w10 * q[a + 1, b, c, k]
        + w01 * q[a, b + 1, c, k]
        + w11 * q[a + 1, b + 1, c, k]
    )


@njit(cache=True, inline="always")
def _node(u, v, u0, v0, nu, nv):
    """(a, b, tx, ty): the table cell of (u, v) and the fractions inside it."""
    x = (u - u0) / U_STEP
    y = (v - v0) / V_STEP
    a = min(max(int(np.floor(x)), 0), nu - 2)
    b = min(max(int(np.floor(y)), 0), nv - 2)
    return a, b, x - a, y - b


@njit(parallel=True, cache=True)
def _bilinear(u, v, u0, v0, q, lq):
    n = u.shape[0]
    out = np.empty((n, 3, 3))
    for i in prange(n):
        a, b, tx, ty = _node(u[i], v[i], u0, v0, q.shape[0], q.shape[1])
        for c in range(3):
            for k in range(3):
                out[i, c, k] = _corner(q, lq, a, b, tx, ty, c, k)
    return out


@njit(parallel=True, cache=True)
def _bilinear_add(out, rows, u, v, u0, v0, q, lq, weights, scale):
    """out[rows[i]] += scale[i] sum_c weights[i, c] Q_c at (u[i], v[i]) (as
    :func:`_bilinear`)."""
    for i in prange(u.shape[0]):
        a, b, tx, ty = _node(u[i], v[i], u0, v0, q.shape[0], q.shape[1])
        r = rows[i]
        for c in range(3):
            w = weights[i, c] * scale[i]
            if w != 0.0:
                for k in range(3):
                    out[r, k] += w * _corner(q, lq, a, b, tx, ty, c, k)


_TABLES: dict[Hashable, LitTable] = {}


def lit_table(lamp_spectrum: LampSpectrum) -> LitTable:
    """The (cached) LitTable of a lamp spectrum; lamps with equal spectra share it."""
    table = _TABLES.get(lamp_spectrum.key)
    if table is None:
        table = _TABLES[lamp_spectrum.key] = LitTable(lamp_spectrum)
    return table


def glossy_lobe(cos_alpha, exponent: float) -> np.ndarray:
    """The normalised Phong lobe (1/sr): (n + 2) / (2 pi) cos^n(alpha), alpha the angle
    between the outgoing direction and the mirror direction of the incident light (both in
    the surface's rest frame), 0 beyond 90 degrees. Lafortune & Willems (1994), "Using the
    modified Phong reflectance model for physically based rendering" (KU Leuven, report
    CW 197): its directional albedo is 1 at normal incidence and below 1 elsewhere (part of
    the lobe falls under the horizon), so a surface reflecting (1 - g) rho diffusely plus
    g times this lobe never reflects more than it receives."""
    c = np.maximum(np.asarray(cos_alpha, float), 0.0)
    return (exponent + 2.0) / (2.0 * math.pi) * c**exponent


class Incident:
    """The light of the scene's lamps arriving at N surface points, ready for reflection.

    ``tables``: one LitTable per lamp; ``d_in``: (J, N) incident Doppler factors;
    ``weight``: (J, N) the factor A of the module docstring (cos, distance, power or
    irradiance, unshadowed fraction, 1/pi), already with the beaming switch applied to the
    distant lamps' D^-2; ``cos_alpha``: (J, N) cosine of the angle between the outgoing
    direction and the mirror direction of each lamp's light, in the surface's rest frame
    (for the glossy lobe; None: not computed). Surfaces of relview.light.surfaces call
    :meth:`reflected_xyz` and :meth:`spectrum_seen`.
    """

    def __init__(
        self,
        tables: list[LitTable],
        d_in: np.ndarray,
        weight: np.ndarray,
        cos_alpha: np.ndarray | None = None,
    ):
        self.tables = tables
        self.d_in = np.asarray(d_in, float).reshape(len(tables), -1)
        self.weight = np.asarray(weight, float).reshape(len(tables), -1)
        self.cos_alpha = (
            None if cos_alpha is None else np.asarray(cos_alpha, float).reshape(len(tables), -1)
        )

    def subset(self, sel) -> Incident:
        cos_alpha = None if self.cos_alpha is None else self.cos_alpha[:, sel]
        return Incident(self.tables, self.d_in[:, sel], self.weight[:, sel], cos_alpha)

    def _lit_parts(self, d_out, effects, rgb, gloss: float, exponent: float):
        """Per lamp with light somewhere: (lamp table, rows lit, Dc_in, Dc_out, the factor
        A times the switches' brightness factors, basis weights) over those rows. The
        basis weights are (1 - g) rgb for the Lambert part plus g pi f_lobe on every basis
        colour (the basis spectra sum to 1, so equal weights are a neutral lobe; pi
        because A already holds Lambert's 1/pi). The switches act on both shifts
        (docs/physics.md): ``doppler`` off uses D_in = D_out = 1, ``beaming`` off removes
        the D^4 brightening of each; (Db / Dc)^4 as in spectrum.effect_factors."""
        d_out = np.asarray(d_out, float).reshape(-1)
        doppler_on = True if effects is None else bool(effects.doppler)
        beaming_on = True if effects is None else bool(effects.beaming)
        dc_out, bright_out = spectrum.effect_factors(d_out, doppler_on, beaming_on)
        rgb = np.asarray(rgb, float)
        for j, (table, d_in, w) in enumerate(zip(self.tables, self.d_in, self.weight, strict=True)):
            lit = np.nonzero(w > 0)[0]
            if len(lit) == 0:
                continue
            refl = rgb[lit]
            if gloss and self.cos_alpha is not None:
                lobe = math.pi * glossy_lobe(self.cos_alpha[j, lit], exponent)
                refl = (1.0 - gloss) * refl + gloss * lobe[:, None]
            dc_in, bright_in = spectrum.effect_factors(d_in[lit], doppler_on, beaming_on)
            scale = w[lit] * bright_in * bright_out[lit]
            yield table, lit, dc_in, dc_out[lit], scale, refl

    def reflected_xyz(self, d_out, effects, rgb, gloss: float = 0.0, exponent: float = 1.0):
        """(N, 3) XYZ reflected by surfaces of linear-sRGB reflectance ``rgb`` (N, 3), with
        a fraction ``gloss`` of the reflection in the glossy lobe of ``exponent``
        (:func:`glossy_lobe`), seen with ``d_out`` (switches: :meth:`_lit_parts`)."""
        out = np.zeros((np.size(d_out), 3))
        for table, lit, dc_in, dc_out, scale, refl in self._lit_parts(
            d_out, effects, rgb, gloss, exponent
        ):
            table.add_reflected(out, lit, dc_in, dc_out, refl, scale)
        return out

    def spectrum_seen(
        self, wavelength_nm, d_out, effects, rgb, gloss: float = 0.0, exponent: float = 1.0
    ) -> np.ndarray:
        """(N, L) spectral radiance (W/(sr m^2 nm)) recorded at ``wavelength_nm`` (L,) from
        the surfaces of :meth:`reflected_xyz`: sum over lamps of A (a b)^5 p(a b lambda)
        rho_j(b lambda), a = D_in, b = D_out (the integrand of Q_c in the module
        docstring), rho_j the Lambert reflectance plus the lobe; p averaged over each bin
        from the lamp's cumulative spectrum, as in :class:`LitTable`."""
        lam = np.asarray(wavelength_nm, float)
        out = np.zeros((np.size(d_out), lam.size))
        for table, lit, dc_in, dc_out, scale, refl in self._lit_parts(
            d_out, effects, rgb, gloss, exponent
        ):
            # (a b)^5 p(a b lambda) averaged over each bin: (a b)^4 dC / dlambda
            p = surfaces.shifted_bins(table.spectrum.energy_below, lam, dc_in * dc_out, None)
            rho = surfaces.reflectance_basis(dc_out[:, None] * lam) @ refl[:, :, None]
            out[lit] += p * rho[:, :, 0] * scale[:, None]
        return out
