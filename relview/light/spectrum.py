"""Spectra and colorimetry: Planck's law, CIE 1931 XYZ, Doppler tables, sRGB.

The colour pipeline (docs/colour.md, "Colour pipeline"):

    rest-frame spectral radiance L_lambda (W/(sr m^2 nm))
      -> Doppler shift  L_obs(lambda) = D^5 L_emit(D lambda)
      -> absolute CIE 1931 2-degree XYZ, Y in cd/m^2
      -> linear sRGB (IEC 61966-2-1), after exposure divides by a white luminance
      -> encoded sRGB.

The observed XYZ of one material depends on the Doppler factor D alone, so it is
tabulated once per material over log D (:class:`DopplerTable`) and looked up per pixel.

Everything here is plain numpy and vectorised over pixels.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Hashable

import numpy as np
import scipy.constants as sc
from llvmlite import ir
from numba import njit, prange, types
from numba.extending import intrinsic

from relview.light import colour_data

# --------------------------------------------------------------------------------------
# Constants
# --------------------------------------------------------------------------------------

#: Maximum luminous efficacy for photopic vision, lm/W. CIE 15 (Colorimetry) and the SI
#: definition of the candela (K_cd = 683 lm/W at 540e12 Hz) give 683 lm/W; CIE also quotes
#: 683.002 lm/W at the peak of V(lambda) (from memory), a 3e-6 relative difference that is
#: far below every tolerance here. We use 683 lm/W.
K_M_LM_PER_W = 683.0

#: Second radiation constant hc/k in m K (CODATA via scipy.constants).
C2_M_K = sc.h * sc.c / sc.k

#: Wavelength range over which the CIE 1931 colour-matching functions are tabulated, nm.
VISIBLE_MIN_NM = 360.0
VISIBLE_MAX_NM = 830.0


#: (M,) nm and (M, 3) xbar, ybar, zbar of the CIE 1931 2-degree standard observer, from
#: colour-science (360-830 nm, 1 nm) through the cached extract in relview.light.colour_data.
CMF_WAVELENGTHS_NM, CMF_VALUES = colour_data.sampled("cmf")


def cmf_at(wavelength_nm) -> np.ndarray:
    """CIE 1931 xbar, ybar, zbar at arbitrary wavelengths (linear interpolation, 0 outside)."""
    w = np.asarray(wavelength_nm, dtype=float)
    out = np.empty(w.shape + (3,))
    for c in range(3):
        out[..., c] = np.interp(w, CMF_WAVELENGTHS_NM, CMF_VALUES[:, c], left=0.0, right=0.0)
    return out


# --------------------------------------------------------------------------------------
# Planck's law and lamp spectra
# --------------------------------------------------------------------------------------


def planck_spectral_radiance(wavelength_nm, temperature_k) -> np.ndarray:
    """Blackbody spectral radiance B_lambda(lambda, T) in W/(sr m^2 nm).

    Planck's law, B_lambda = 2 h c^2 / lambda^5 / (exp(h c / (lambda k T)) - 1), with h, c, k
    from scipy.constants (exact SI values). Defined for every wavelength > 0 (it underflows
    to 0 far on the Wien side, which is the correct limit). Broadcasts its arguments.
    """
    lam_m = np.asarray(wavelength_nm, dtype=float) * 1e-9
    t = np.asarray(temperature_k, dtype=float)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        x = C2_M_K / (lam_m * t)
        per_metre = 2.0 * sc.h * sc.c**2 / lam_m**5 / np.expm1(x)
    per_metre = np.where(np.isfinite(per_metre), per_metre, 0.0)
    return per_metre * 1e-9  # per metre of wavelength -> per nm


#: Correlated colour temperature of CIE illuminant D65 in K (CIE 15: 6500 K scaled by
#: 1.4388/1.4380 for the revised c2), used only to extend D65 outside its table.
D65_CCT_K = 6504.0


#: CIE illuminant D65 relative spectral power from colour-science (cached extract).
D65_WAVELENGTHS_NM, D65_VALUES = colour_data.sampled("d65")


def cie_d65_relative_spd(wavelength_nm) -> np.ndarray:
    """Relative spectral power of CIE illuminant D65 (100 at 560 nm), at all wavelengths.

    Inside colour-science's table (CIE 15 values, 300-780 nm as shipped by colour-science
    at 5 nm steps) the table is interpolated linearly. Outside it the spectrum continues as
    a Planckian radiator at D65's correlated colour temperature (6504 K), scaled to meet
    the table at its nearest end. This extension is our own declared rule (CIE tabulates
    D65 from 300 to 830 nm, from memory), chosen because it is continuous, positive, falls off in
    the ultraviolet and follows a thermal shape into the infrared, which Doppler shifts
    bring into view.
    """
    w = np.asarray(wavelength_nm, dtype=float)
    lo, hi = D65_WAVELENGTHS_NM[0], D65_WAVELENGTHS_NM[-1]
    inside = np.interp(w, D65_WAVELENGTHS_NM, D65_VALUES)
    planck = planck_spectral_radiance(w, D65_CCT_K)
    scale_lo = D65_VALUES[0] / planck_spectral_radiance(lo, D65_CCT_K)
    scale_hi = D65_VALUES[-1] / planck_spectral_radiance(hi, D65_CCT_K)
    out = np.where(w < lo, planck * scale_lo, inside)
    return np.where(w > hi, planck * scale_hi, out)


# --------------------------------------------------------------------------------------
# Spectrum -> XYZ
# --------------------------------------------------------------------------------------


def spectrum_to_xyz(wavelength_nm, radiance) -> np.ndarray:
    """Absolute CIE 1931 XYZ (Y in cd/m^2) of a sampled spectral radiance (W/(sr m^2 nm)).

    X = K_m * integral(L_lambda xbar dlambda) etc. (CIE 15), K_m = 683 lm/W. The spectrum is
    taken as piecewise linear between its samples and zero outside them; the integral is the
    trapezoid rule on the union of the sample grid and the 1 nm CMF grid (360-830 nm), so
    narrow features in the samples and in the CMFs are both resolved.

    ``radiance`` may carry leading batch axes: shape (..., M) for M wavelengths -> (..., 3).
    """
    w = np.asarray(wavelength_nm, dtype=float)
    r = np.asarray(radiance, dtype=float)
    if w.ndim != 1 or r.shape[-1] != w.shape[0]:
        raise ValueError(
            f"spectrum_to_xyz: wavelength (M,) and radiance (..., M) must match, got "
            f"{w.shape} and {r.shape}"
        )
    if w.size > 1 and np.any(np.diff(w) <= 0):
        raise ValueError("spectrum_to_xyz: wavelengths must increase strictly")
    # the samples, and points just outside their ends (the spectrum steps to zero there)
    edges = [w[0] * (1.0 - 1e-9), w[-1] * (1.0 + 1e-9)]
    pts = np.concatenate([w, edges])
    inside = pts[(pts > VISIBLE_MIN_NM) & (pts < VISIBLE_MAX_NM)]
    grid = np.union1d(CMF_WAVELENGTHS_NM, inside)
    flat = r.reshape(-1, w.shape[0])
    samples = np.stack([np.interp(grid, w, row, left=0.0, right=0.0) for row in flat])  # (B, G)
    cmf = cmf_at(grid)  # (G, 3)
    xyz = K_M_LM_PER_W * np.trapezoid(samples[:, :, None] * cmf[None, :, :], grid, axis=1)
    return xyz.reshape(r.shape[:-1] + (3,))


def doppler_shifted_radiance(radiance: Callable[[np.ndarray], np.ndarray], wavelength_nm, doppler):
    """Observed spectral radiance L_lambda,obs(lambda) = D^5 L_lambda,emit(D lambda).

    From the invariance of L_nu / nu^3 (Rybicki & Lightman, Radiative Processes in
    Astrophysics, ch. 4): L_nu,obs(nu) = D^3 L_nu,emit(nu / D); per unit wavelength
    (L_lambda = L_nu c / lambda^2, lambda_emit = D lambda_obs) this is D^5 L_lambda(D lambda).
    ``radiance`` is the rest-frame spectral radiance (W/(sr m^2 nm)); broadcasts.
    """
    d = np.asarray(doppler, dtype=float)
    return d**5 * np.asarray(radiance(d * np.asarray(wavelength_nm, dtype=float)), dtype=float)


def observed_xyz_direct(
    radiance: Callable[[np.ndarray], np.ndarray],
    doppler,
    knots_nm: np.ndarray | None = None,
) -> np.ndarray:
    """Absolute XYZ seen with Doppler factor(s) D, by direct integration. (N,) -> (N, 3).

    ``radiance(lambda_nm)`` is the rest-frame spectral radiance in W/(sr m^2 nm), defined at
    every wavelength > 0. The observed spectrum is L_obs(lambda) = D^5 L_emit(D lambda)
    (L_nu/nu^3 invariant; Rybicki & Lightman, Radiative Processes in Astrophysics, ch. 4).
    ``knots_nm`` are rest-frame wavelengths where the spectrum has structure (line centres
    and widths, table points); they are mapped to lambda/D and added to the integration grid.

    One D at a time (a Python loop over D): meant for building tables, not per pixel.
    """
    d = np.atleast_1d(np.asarray(doppler, dtype=float))
    _check_doppler(d)
    out = np.empty(d.shape + (3,))
    cmf_grid = CMF_WAVELENGTHS_NM
    cmf_vals = CMF_VALUES
    for i, dv in enumerate(d.flat):
        if knots_nm is not None and len(knots_nm):
            mapped = np.asarray(knots_nm, dtype=float) / dv
            mapped = mapped[(mapped > VISIBLE_MIN_NM) & (mapped < VISIBLE_MAX_NM)]
        else:
            mapped = np.empty(0)
        if mapped.size:
            grid = np.union1d(cmf_grid, mapped)
            cmf = cmf_at(grid)
        else:
            grid, cmf = cmf_grid, cmf_vals
        obs = doppler_shifted_radiance(radiance, grid, dv)
        out.reshape(-1, 3)[i] = K_M_LM_PER_W * np.trapezoid(obs[:, None] * cmf, grid, axis=0)
    return out


def _check_doppler(d: np.ndarray) -> None:
    if d.size and not (np.all(np.isfinite(d)) and np.all(d > 0.0)):
        bad = d[~(np.isfinite(d) & (d > 0.0))].flat[0]
        raise ValueError(f"Doppler factor must be finite and > 0, got {bad!r}")


def xyz_to_xy(xyz) -> np.ndarray:
    """CIE 1931 chromaticity (x, y) = (X, Y) / (X + Y + Z). (..., 3) -> (..., 2)."""
    xyz = np.asarray(xyz, dtype=float)
    s = xyz.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return xyz[..., :2] / s


# --------------------------------------------------------------------------------------
# sRGB (IEC 61966-2-1)
# --------------------------------------------------------------------------------------

#: sRGB primaries and white, CIE 1931 xy (IEC 61966-2-1; ITU-R BT.709 primaries, D65 white).
SRGB_PRIMARIES_XY = np.array([[0.64, 0.33], [0.30, 0.60], [0.15, 0.06]])
SRGB_WHITE_XY = np.array([0.3127, 0.3290])


def _rgb_to_xyz_matrix(primaries_xy: np.ndarray, white_xy: np.ndarray) -> np.ndarray:
    """Normalised primary matrix from chromaticities (SMPTE RP 177 derivation): RGB (1,1,1)
    maps to the white point with Y = 1."""

    def xyz_of(xy):
        x, y = xy
        return np.array([x / y, 1.0, (1.0 - x - y) / y])

    p = np.stack([xyz_of(xy) for xy in primaries_xy], axis=1)  # columns: R, G, B
    s = np.linalg.solve(p, xyz_of(white_xy))
    return p * s[None, :]


#: Linear sRGB -> XYZ, derived from the primaries and white in full precision. The 4-digit
#: matrices printed in IEC 61966-2-1 agree to 1e-4 (RGB->XYZ) and 3.7e-4 (XYZ->RGB, rounded
#: there from a slightly different derivation); see tests/test_spectrum.py.
LINEAR_SRGB_TO_XYZ = _rgb_to_xyz_matrix(SRGB_PRIMARIES_XY, SRGB_WHITE_XY)
#: XYZ -> linear sRGB, the exact inverse (so round trips are exact).
XYZ_TO_LINEAR_SRGB = np.linalg.inv(LINEAR_SRGB_TO_XYZ)


def xyz_to_linear_srgb(xyz) -> np.ndarray:
    """(..., 3) XYZ -> (..., 3) linear sRGB. The D65 white with Y = 1 gives (1, 1, 1).

    Absolute XYZ must first be divided by the luminance (cd/m^2) that should map to 1
    (relview.imaging.exposure). Out-of-gamut colours give values outside [0, 1].
    """
    return np.asarray(xyz, dtype=float) @ XYZ_TO_LINEAR_SRGB.T


@intrinsic
def _fma(typingctx, a, b, c):
    """a * b + c rounded once (IEEE 754 fusedMultiplyAdd), for compiled code."""
    sig = types.float64(types.float64, types.float64, types.float64)

    def codegen(context, builder, signature, args):
        d = ir.DoubleType()
        f = builder.module.declare_intrinsic("llvm.fma", [d], ir.FunctionType(d, [d, d, d]))
        return builder.call(f, args)

    return sig, codegen


@njit(cache=True, inline="always")
def linear_srgb_at(x, y, z, m):
    """One pixel's linear sRGB from its XYZ (x, y, z) with the (3, 3) matrix ``m``
    (XYZ_TO_LINEAR_SRGB), for compiled per-pixel passes. Each channel is rounded as
    numpy's matrix product rounds ``xyz @ m.T`` here (its BLAS accumulates the three
    products with fused multiply-adds in index order; checked bit for bit in
    tests/test_spectrum.py), so compiled and numpy pictures agree to the last bit."""
    return (
        _fma(z, m[0, 2], _fma(y, m[0, 1], x * m[0, 0])),
        _fma(z, m[1, 2], _fma(y, m[1, 1], x * m[1, 0])),
        _fma(z, m[2, 2], _fma(y, m[2, 1], x * m[2, 0])),
    )


def linear_srgb_to_xyz(rgb) -> np.ndarray:
    """(..., 3) linear sRGB -> (..., 3) XYZ (relative: (1, 1, 1) is D65 white with Y = 1)."""
    return np.asarray(rgb, dtype=float) @ LINEAR_SRGB_TO_XYZ.T


def encode_srgb(linear) -> np.ndarray:
    """sRGB transfer function (IEC 61966-2-1): linear -> encoded, piecewise.

    V = 12.92 L for L <= 0.0031308, else 1.055 L^(1/2.4) - 0.055. Values above 1 follow the
    power law; negative values are mirrored (V(-L) = -V(L)), the extended-range form of the
    standard's sYCC amendment (from memory). Clipping to [0, 1] is the caller's job.
    """
    x = np.asarray(linear, dtype=float)
    a = np.abs(x)
    with np.errstate(invalid="ignore"):
        v = np.where(a <= 0.0031308, 12.92 * a, 1.055 * np.power(a, 1.0 / 2.4) - 0.055)
    return np.copysign(v, x)


def decode_srgb(encoded) -> np.ndarray:
    """Inverse sRGB transfer function (IEC 61966-2-1): encoded -> linear.

    L = V / 12.92 for V <= 0.04045, else ((V + 0.055) / 1.055)^2.4; mirrored for V < 0.
    """
    v = np.asarray(encoded, dtype=float)
    a = np.abs(v)
    lin = np.where(a <= 0.04045, a / 12.92, np.power((a + 0.055) / 1.055, 2.4))
    return np.copysign(lin, v)


# --------------------------------------------------------------------------------------
# Doppler tables
# --------------------------------------------------------------------------------------

#: Default table range and base density: 200 nodes per decade of D (a step of 0.0115 in
#: ln D), refined where needed (measured lookup accuracy in docs/colour.md).
TABLE_D_MIN = 1e-3
TABLE_D_MAX = 1e3
TABLE_POINTS_PER_DECADE = 200
#: Refinement target at interval midpoints (relative, per channel; see DopplerTable).
TABLE_REFINE_TOLERANCE = 1e-3
TABLE_MAX_DEPTH = 14


class DopplerTable:
    """Observed absolute XYZ of one rest-frame spectrum, tabulated over ln D.

    Built once per material (see :func:`cached_table`); ``lookup(D)`` is vectorised.

    Grid: nodes uniform in ln D from ``d_min`` to ``d_max`` with ``points_per_decade``, then
    refined adaptively: every interval is also integrated at its midpoint, and an interval
    whose midpoint the interpolation misses by more than ``refine_tolerance`` (relative, per
    channel, floored at 1e-6 of the largest Y on the initial range) is split in two, up to
    ``max_depth`` times. Smooth spectra (blackbodies) need no refinement; narrow emission
    lines, whose XYZ(D) follows the fine structure of the colour-matching functions, are
    refined where they cross the visible band.

    Interpolation between two nodes is linear in ln D, and either linear in ln XYZ (the
    default: XYZ spans many orders of magnitude and a blackbody's XYZ is locally close to a
    power law in D) or linear in XYZ. The choice is made per interval and channel from the
    midpoint: linear wins where a channel falls to zero (zbar is exactly 0 beyond 650 nm, so
    a narrow line's Z drops to 0). ``midpoint_error`` keeps, per interval, the error of the
    chosen rule at the midpoint: an a-posteriori error estimate.

    Outside the range the table grows itself (uniform nodes, refined the same way) to cover
    the requested D, so a lookup is never clamped; a D that is not finite and > 0 is an
    error.
    """

    def __init__(
        self,
        radiance: Callable[[np.ndarray], np.ndarray],
        knots_nm: np.ndarray | None = None,
        d_min: float = TABLE_D_MIN,
        d_max: float = TABLE_D_MAX,
        points_per_decade: int = TABLE_POINTS_PER_DECADE,
        refine_tolerance: float = TABLE_REFINE_TOLERANCE,
        max_depth: int = TABLE_MAX_DEPTH,
    ):
        if not (0.0 < d_min < 1.0 < d_max):
            raise ValueError(f"DopplerTable range must bracket D = 1, got [{d_min}, {d_max}]")
        self.radiance = radiance
        self.knots_nm = None if knots_nm is None else np.asarray(knots_nm, dtype=float)
        self.step = math.log(10.0) / points_per_decade  # base node spacing in ln D
        self.refine_tolerance = refine_tolerance
        self.max_depth = max_depth
        # Base nodes sit at integer multiples of the step, so D = 1 is a node and the grid
        # can grow at either end without moving the others.
        log_d = (
            np.arange(
                math.floor(math.log(d_min) / self.step), math.ceil(math.log(d_max) / self.step) + 1
            )
            * self.step
        )
        log_d = self._with_feature_nodes(log_d)
        xyz = self._integrate(log_d)
        # Values below this count as zero when judging the interpolation (docs/colour.md).
        self.floor = 1e-6 * max(float(xyz[:, 1].max()), np.finfo(float).tiny)
        self.log_d, self.xyz, self.mid_xyz = self._refined(log_d, xyz)
        self._choose_rules()

    def _with_feature_nodes(self, log_d: np.ndarray) -> np.ndarray:
        """Add nodes where a knot crosses an end of the CMF range (D = knot / 360 nm and
        knot / 830 nm), strictly inside ``log_d``'s span. There XYZ(D) can change over a
        span narrower than the base step (a narrow line leaving the visible, a table's
        end), which midpoint checks alone could miss."""
        if self.knots_nm is None or self.knots_nm.size == 0 or log_d.size < 2:
            return log_d
        k = np.log(self.knots_nm[self.knots_nm > 0])
        feats = np.concatenate([k - math.log(VISIBLE_MIN_NM), k - math.log(VISIBLE_MAX_NM)])
        feats = feats[(feats > log_d[0]) & (feats < log_d[-1])]
        if feats.size == 0:
            return log_d
        # Dense knots map to nearly equal ln D: keep the two ends of each cluster (features
        # closer than step/4) and, inside long clusters, one node every step/4.
        feats = np.unique(feats)
        gap = np.diff(feats) > self.step / 4.0
        ends = np.concatenate([[True], gap]) | np.concatenate([gap, [True]])
        thinned = np.unique(np.floor(feats / (self.step / 4.0)), return_index=True)[1]
        chosen = np.union1d(feats[ends], feats[thinned])
        return np.union1d(log_d, chosen)

    def _integrate(self, log_d: np.ndarray) -> np.ndarray:
        return observed_xyz_direct(self.radiance, np.exp(log_d), self.knots_nm)

    @property
    def d_range(self) -> tuple[float, float]:
        return float(np.exp(self.log_d[0])), float(np.exp(self.log_d[-1]))

    def _midpoint_errors(self, a, b, m) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Errors of log- and linear interpolation at interval midpoints, and positivity."""
        positive = (a > 0.0) & (b > 0.0)
        with np.errstate(invalid="ignore"):
            log_mid = np.where(positive, np.sqrt(a * b), np.inf)  # exp of the mean log
        denom = np.maximum(np.abs(m), self.floor)
        err_log = np.abs(log_mid - m) / denom
        err_lin = np.abs(0.5 * (a + b) - m) / denom
        return err_log, err_lin, positive

    def _refined(self, log_d: np.ndarray, xyz: np.ndarray):
        """Split intervals whose midpoint is missed; returns nodes, values, midpoint values."""
        mid = self._integrate(0.5 * (log_d[:-1] + log_d[1:]))
        for _ in range(self.max_depth):
            err_log, err_lin, _ = self._midpoint_errors(xyz[:-1], xyz[1:], mid)
            worst = np.minimum(err_log, err_lin).max(axis=1)
            bad = np.nonzero(worst > self.refine_tolerance)[0]
            if bad.size == 0:
                break
            centre = 0.5 * (log_d[bad] + log_d[bad + 1])
            left_mid = self._integrate(0.5 * (log_d[bad] + centre))
            right_mid = self._integrate(0.5 * (centre + log_d[bad + 1]))
            new_mid = mid.copy()
            new_mid[bad] = left_mid  # the left half keeps the interval's slot
            log_d = np.insert(log_d, bad + 1, centre)
            xyz = np.insert(xyz, bad + 1, mid[bad], axis=0)
            # interval bad[k] -> halves at (bad[k] + k) and (bad[k] + k + 1) after insertion
            mid = np.insert(new_mid, bad + 1, right_mid, axis=0)
        return log_d, xyz, mid

    def _choose_rules(self) -> None:
        err_log, err_lin, positive = self._midpoint_errors(
            self.xyz[:-1], self.xyz[1:], self.mid_xyz
        )
        self.use_log = positive & (err_log <= err_lin)
        self.midpoint_error = np.where(self.use_log, err_log, err_lin)
        with np.errstate(divide="ignore"):
            self._log_xyz = np.log(self.xyz)

    def _grow(self, log_lo: float, log_hi: float) -> None:
        start, end = self.log_d[0], self.log_d[-1]
        if log_lo < start:
            ld = start - np.arange(math.ceil((start - log_lo) / self.step), -1, -1) * self.step
            ld = self._with_feature_nodes(ld)
            nodes, vals, mids = self._refined(
                ld, np.concatenate([self._integrate(ld[:-1]), self.xyz[:1]])
            )
            self.log_d = np.concatenate([nodes[:-1], self.log_d])
            self.xyz = np.concatenate([vals[:-1], self.xyz])
            self.mid_xyz = np.concatenate([mids, self.mid_xyz])
        if log_hi > end:
            ld = end + np.arange(0, math.ceil((log_hi - end) / self.step) + 1) * self.step
            ld = self._with_feature_nodes(ld)
            nodes, vals, mids = self._refined(
                ld, np.concatenate([self.xyz[-1:], self._integrate(ld[1:])])
            )
            self.log_d = np.concatenate([self.log_d, nodes[1:]])
            self.xyz = np.concatenate([self.xyz, vals[1:]])
            self.mid_xyz = np.concatenate([self.mid_xyz, mids])
        self._choose_rules()

    def lookup(self, doppler) -> np.ndarray:
        """Observed absolute XYZ (cd/m^2 in Y) for Doppler factors D: (N,) -> (N, 3)."""
        d = np.asarray(doppler, dtype=float)
        _check_doppler(d)
        if d.size == 0:
            return np.zeros(d.shape + (3,))
        ld = np.log(d)
        if ld.min() < self.log_d[0] or ld.max() > self.log_d[-1]:
            self._grow(float(ld.min()), float(ld.max()))
        flat = _interpolate_table(
            np.ascontiguousarray(ld.ravel()),
            self.log_d,
            self.xyz,
            self._log_xyz,
            np.ascontiguousarray(self.use_log),
        )
        return flat.reshape(ld.shape + (3,))

    def direct(self, doppler) -> np.ndarray:
        """The same quantity by direct integration (slow; for checks)."""
        return observed_xyz_direct(self.radiance, doppler, self.knots_nm)


@njit(cache=True, inline="always")
def _interpolate_at(x, log_d, xyz, log_xyz, use_log):
    """XYZ of one table at ln D = x: bracket x by bisection, then interpolate each channel
    linearly in (ln D, ln XYZ) where the interval allows it (use_log), else linearly in
    XYZ. The one source of a table lookup (whole tables and packed ones)."""
    m = log_d.shape[0]
    lo = 0
    hi = m - 1
    while hi - lo > 1:  # log_d[lo] <= x < log_d[hi] (clamped to the end intervals)
        mid = (lo + hi) >> 1
        if log_d[mid] <= x:
            lo = mid
        else:
            hi = mid
    t = (x - log_d[lo]) / (log_d[lo + 1] - log_d[lo])
    if use_log[lo, 0]:
        v0 = np.exp((1.0 - t) * log_xyz[lo, 0] + t * log_xyz[lo + 1, 0])
    else:
        v0 = (1.0 - t) * xyz[lo, 0] + t * xyz[lo + 1, 0]
    if use_log[lo, 1]:
        v1 = np.exp((1.0 - t) * log_xyz[lo, 1] + t * log_xyz[lo + 1, 1])
    else:
        v1 = (1.0 - t) * xyz[lo, 1] + t * xyz[lo + 1, 1]
    if use_log[lo, 2]:
        v2 = np.exp((1.0 - t) * log_xyz[lo, 2] + t * log_xyz[lo + 1, 2])
    else:
        v2 = (1.0 - t) * xyz[lo, 2] + t * xyz[lo + 1, 2]
    return v0, v1, v2


@njit(parallel=True, cache=True)
def _interpolate_table(ld, log_d, xyz, log_xyz, use_log):
    """:func:`_interpolate_at` for every value of ld (N,): (N, 3)."""
    n = ld.shape[0]
    out = np.empty((n, 3))
    for j in prange(n):
        out[j, 0], out[j, 1], out[j, 2] = _interpolate_at(ld[j], log_d, xyz, log_xyz, use_log)
    return out


class TablePack:
    """Several Doppler tables in flat arrays, for compiled code that shades hits of
    different surfaces in one pass (:func:`shade_by_table`): table k has the nodes
    ``start[k] : start[k] + count[k]`` of ``log_d``, ``xyz`` and ``log_xyz`` and the
    intervals ``start[k] - k : start[k] - k + count[k] - 1`` of ``use_log``.

    A snapshot: it holds the tables' arrays as they were (``sizes`` tells whether a table
    has grown since, :func:`packed_tables`)."""

    def __init__(self, tables):
        self.tables = list(tables)
        self.sizes = tuple(t.log_d.size for t in self.tables)
        counts = np.array(self.sizes, np.int64)
        self.count = counts
        self.start = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
        self.log_d = np.concatenate([t.log_d for t in self.tables])
        self.xyz = np.ascontiguousarray(np.concatenate([t.xyz for t in self.tables]))
        self.log_xyz = np.ascontiguousarray(np.concatenate([t._log_xyz for t in self.tables]))
        self.use_log = np.ascontiguousarray(np.concatenate([t.use_log for t in self.tables]))


_PACK_CACHE: dict[tuple, TablePack] = {}
#: packs kept per process (each holds its tables alive, so ids in the key stay unique)
PACK_CACHE_SIZE = 16


def packed_tables(tables) -> TablePack:
    """The :class:`TablePack` of ``tables`` (a sequence of DopplerTable), kept per process
    and made again when one of them has grown."""
    key = tuple((id(t), t.log_d.size) for t in tables)
    pack = _PACK_CACHE.get(key)
    if pack is None:
        pack = TablePack(tables)
        if len(_PACK_CACHE) >= PACK_CACHE_SIZE:
            _PACK_CACHE.pop(next(iter(_PACK_CACHE)))
        _PACK_CACHE[key] = pack
    return pack


@njit(parallel=True, cache=True)
def _shade_by_table(
    body, ld, bright, body_table, body_scale, start, count, log_d, xyz, log_xyz, use_log, out
):
    """out[i] = scale * (XYZ_table(ld[i]) * bright[i]) for every row whose body (body[i] >=
    0) has a table (body_table >= 0); 0 for the other rows. ``bright`` empty: no
    brightness factor. Returns (rows left to the caller: bodies without a table, rows
    whose ln D lies outside their table or is not finite)."""
    n = body.shape[0]
    has_bright = bright.shape[0] > 0
    others = 0
    outside = 0
    for i in prange(n):
        b = body[i]
        k = -1
        if b >= 0:
            k = body_table[b]
            if k < 0:
                others += 1
        if k < 0:
            out[i, 0] = 0.0
            out[i, 1] = 0.0
            out[i, 2] = 0.0
            continue
        s = start[k]
        m = count[k]
        x = ld[i]
        if not (x >= log_d[s] and x <= log_d[s + m - 1]):  # NaN included
            outside += 1
            out[i, 0] = 0.0
            out[i, 1] = 0.0
            out[i, 2] = 0.0
            continue
        v0, v1, v2 = _interpolate_at(
            x,
            log_d[s : s + m],
            xyz[s : s + m],
            log_xyz[s : s + m],
            use_log[s - k : s - k + m - 1],
        )
        if has_bright:
            v0 = v0 * bright[i]
            v1 = v1 * bright[i]
            v2 = v2 * bright[i]
        c = body_scale[b]
        out[i, 0] = c * v0
        out[i, 1] = c * v1
        out[i, 2] = c * v2
    return others, outside


def shade_by_table(
    body: np.ndarray,
    doppler: np.ndarray,
    body_table: np.ndarray,
    body_scale: np.ndarray,
    pack: TablePack,
    doppler_on: bool,
    beaming_on: bool,
    out: np.ndarray,
) -> tuple[int, int]:
    """Observed XYZ of every hit whose body is shaded by one Doppler table, in one pass:
    row i of ``out`` (N, 3) becomes ``body_scale[b] * apply_effects(table, D_i)`` with b =
    ``body[i]`` and the table ``pack.tables[body_table[b]]`` (the same numbers as
    :func:`apply_effects` times the scale), 0 on misses and rows of bodies without a
    table (``body_table`` -1). Returns (rows of bodies without a table, rows whose D lies
    outside their table's range or is not finite > 0): those are left at 0 for the
    caller, which shades them through :func:`apply_effects` (that grows a table or
    raises the error for a bad D).

    ln D and the brightness are computed with numpy exactly as :func:`apply_effects`
    does, so the colours are the same to the last bit."""
    d = np.asarray(doppler, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        if doppler_on == beaming_on:  # (Db / Dc)^4 = 1 for every valid D: no factor
            dc = d if doppler_on else np.ones_like(d)
            bright = np.empty(0)
        else:
            dc, bright = effect_factors(d, doppler_on, beaming_on)
        ld = np.log(dc)
    others, outside = _shade_by_table(
        np.ascontiguousarray(body, dtype=np.int64),
        np.ascontiguousarray(ld),
        np.ascontiguousarray(bright),
        np.ascontiguousarray(body_table, dtype=np.int64),
        np.ascontiguousarray(body_scale, dtype=np.float64),
        pack.start,
        pack.count,
        pack.log_d,
        pack.xyz,
        pack.log_xyz,
        pack.use_log,
        out,
    )
    return int(others), int(outside)


_TABLE_CACHE: dict[Hashable, DopplerTable] = {}


def cached_table(
    key: Hashable,
    radiance: Callable[[np.ndarray], np.ndarray],
    knots_nm: np.ndarray | None = None,
) -> DopplerTable:
    """The DopplerTable for a spectrum identified by ``key``, built on first use only.

    Many bodies with the same surface therefore share one table.
    """
    table = _TABLE_CACHE.get(key)
    if table is None:
        table = DopplerTable(radiance, knots_nm)
        _TABLE_CACHE[key] = table
    return table


def effect_factors(doppler, doppler_on: bool, beaming_on: bool) -> tuple[np.ndarray, np.ndarray]:
    """(Dc, brightness) for the effect switches: look up the table at Dc, multiply by
    brightness = (Db / Dc)^4, with Dc = D if doppler else 1 and Db = D if beaming else 1."""
    d = np.asarray(doppler, dtype=float)
    one = np.ones_like(d)
    dc = d if doppler_on else one
    db = d if beaming_on else one
    return dc, (db / dc) ** 4


def apply_effects(table: DopplerTable, doppler, doppler_on: bool, beaming_on: bool) -> np.ndarray:
    """Observed XYZ with the effect switches: XYZ_table(Dc) * (Db / Dc)^4. (N,) -> (N, 3).

    Dc = D if ``doppler_on`` else 1 and Db = D if ``beaming_on`` else 1. So:
    both on: the full observed XYZ(D); beaming off: the shifted colour without the D^4
    bolometric brightening (XYZ(D)/D^4); doppler off: the rest-frame colour brightened by
    D^4 (XYZ(1) D^4); both off: the rest-frame XYZ(1).
    """
    dc, brightness = effect_factors(doppler, doppler_on, beaming_on)
    return table.lookup(dc) * brightness[..., None]
