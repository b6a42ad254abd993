"""Checks of relview.light.spectrum against published values, standards and colour-science."""

from __future__ import annotations

import math

import colour
import numpy as np
import pytest
import scipy.constants as sc
from conftest import xyz_colour_science_blackbody
from scipy import integrate

from relview.light import spectrum
from relview.light.spectrum import (
    DopplerTable,
    apply_effects,
    cached_table,
    decode_srgb,
    doppler_shifted_radiance,
    encode_srgb,
    linear_srgb_to_xyz,
    observed_xyz_direct,
    planck_spectral_radiance,
    spectrum_to_xyz,
    xyz_to_linear_srgb,
    xyz_to_xy,
)

CMFS = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
SHAPE = colour.SpectralShape(360, 830, 1)
C1 = 2 * math.pi * sc.h * sc.c**2  # first radiation constant, W m^2 (SI exact h, c)
C2 = sc.h * sc.c / sc.k  # second radiation constant, m K


def planck(t):
    return lambda w: planck_spectral_radiance(w, t)


# ---------------------------------------------------------------------------------------
# Planck's law
# ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("t", [300.0, 2856.0, 5800.0, 20000.0])
def test_planck_integrates_to_stefan_boltzmann(t):
    # Integral of B_lambda over all wavelengths = sigma T^4 / pi (Stefan-Boltzmann law;
    # sigma from scipy.constants). Integrated in ln(lambda) with scipy's quad.
    peak_nm = 2.897771955e-3 / t * 1e9  # Wien's displacement law (b from CODATA 2018)
    value, _ = integrate.quad(
        lambda u: planck_spectral_radiance(math.exp(u), t) * math.exp(u),
        math.log(peak_nm) - 8,
        math.log(peak_nm) + 12,
        limit=400,
        epsabs=0,
    )
    assert value == pytest.approx(sc.Stefan_Boltzmann * t**4 / math.pi, rel=1e-8)


def test_planck_matches_colour_science():
    # colour-science's planck_law with the exact SI constants agrees to rounding; with its
    # default CIE 15 rounded constants (c2 = 1.4388e-2 m K) to 2e-4 in the visible.
    w = np.arange(360.0, 831.0, 10.0)
    shape = colour.SpectralShape(360, 830, 10)
    ours = planck_spectral_radiance(w, 5800.0)
    np.testing.assert_allclose(
        ours, colour.sd_blackbody(5800.0, shape, c1=C1, c2=C2).values, rtol=1e-12
    )
    np.testing.assert_allclose(ours, colour.sd_blackbody(5800.0, shape).values, rtol=2e-4)


def test_planck_is_defined_far_outside_the_visible():
    # Every material needs a spectrum far outside the visible (physics.md): X-rays to
    # microwaves give finite, non-negative values; deep Wien tail underflows to 0.
    w = np.array([1e-3, 1.0, 1e4, 1e7, 1e9])
    b = planck_spectral_radiance(w, 5800.0)
    assert np.all(np.isfinite(b)) and np.all(b >= 0)
    assert b[0] == 0.0 and b[3] > 0.0
    # Rayleigh-Jeans limit 2 c k T / lambda^4 at long wavelengths (Rybicki & Lightman eq. 1.53)
    lam_m = 1e9 * 1e-9
    rj = 2 * sc.c * sc.k * 5800.0 / lam_m**4 * 1e-9
    assert b[4] == pytest.approx(rj, rel=1e-6)


# ---------------------------------------------------------------------------------------
# Doppler shift of a spectrum
# ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("d", [0.2, 1 / 3, 1.0, 2.0, 3.0, 10.0])
def test_shifted_blackbody_is_blackbody_at_dt(d):
    # physics.md: a blackbody at T is seen as a blackbody at D T, exactly.
    w = np.geomspace(100.0, 1e5, 50)
    shifted = doppler_shifted_radiance(planck(4000.0), w, d)
    np.testing.assert_allclose(shifted, planck_spectral_radiance(w, d * 4000.0), rtol=1e-12)


@pytest.mark.parametrize("d", [0.5, 3.0])
def test_lnu_over_nu_cubed_is_invariant(d):
    # Rybicki & Lightman ch. 4: L_nu / nu^3 is invariant; nu_obs = D nu_emit.
    # L_nu = L_lambda lambda^2 / c (per Hz), with lambda = c / nu.
    emitted = planck(6000.0)
    nu_obs = np.geomspace(1e13, 1e16, 40)  # Hz
    lam_obs_nm = sc.c / nu_obs * 1e9
    l_nu_obs = (
        doppler_shifted_radiance(emitted, lam_obs_nm, d) * 1e9 * (lam_obs_nm * 1e-9) ** 2 / sc.c
    )
    nu_emit = nu_obs / d
    lam_emit_nm = sc.c / nu_emit * 1e9
    l_nu_emit = emitted(lam_emit_nm) * 1e9 * (lam_emit_nm * 1e-9) ** 2 / sc.c
    np.testing.assert_allclose(l_nu_obs / nu_obs**3, l_nu_emit / nu_emit**3, rtol=1e-12)


@pytest.mark.parametrize("d", [0.25, 3.0])
def test_bolometric_radiance_scales_as_d4(d):
    # Rybicki & Lightman ch. 4: total radiance goes as D^4; for a blackbody the total is
    # sigma T^4 / pi (Stefan-Boltzmann, sigma from scipy.constants).
    t = 1500.0
    peak = 2.897771955e-3 / (d * t) * 1e9
    total, _ = integrate.quad(
        lambda u: doppler_shifted_radiance(planck(t), math.exp(u), d) * math.exp(u),
        math.log(peak) - 8,
        math.log(peak) + 12,
        limit=400,
        epsabs=0,
    )
    assert total == pytest.approx(d**4 * sc.Stefan_Boltzmann * t**4 / math.pi, rel=1e-8)


# ---------------------------------------------------------------------------------------
# XYZ
# ---------------------------------------------------------------------------------------


def test_952k_at_d3_is_illuminant_a():
    # physics.md / CIE 15:2004: illuminant A is a Planckian radiator at 2856 K with
    # x = 0.44757, y = 0.40745; colour-science's CCS_ILLUMINANTS gives (0.44758, 0.40745).
    # 952 K approaching head-on at beta = 0.8 has D = 3.
    xy = xyz_to_xy(observed_xyz_direct(planck(952.0), [3.0]))[0]
    np.testing.assert_allclose(xy, [0.44757, 0.40745], atol=1e-4)
    cs = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["A"]
    np.testing.assert_allclose(xy, cs, atol=1e-4)
    # the table lookup gives the same
    xy_table = xyz_to_xy(cached_table(("test-bb", 952.0), planck(952.0)).lookup([3.0]))[0]
    np.testing.assert_allclose(xy_table, xy, atol=2e-5)


@pytest.mark.parametrize("d", [0.6, 1.0, 1.7, 3.0, 6.0])
def test_blackbody_at_dt_against_colour_science(d):
    t = 2000.0
    ours = observed_xyz_direct(planck(t), [d])[0]
    ref = xyz_colour_science_blackbody(d * t)
    # Absolute luminance and chromaticity against colour-science's integration (a plain
    # sum at 1 nm vs our trapezoid: the end terms differ by ~1e-6 of the total).
    assert ours[1] == pytest.approx(ref[1], rel=1e-5)
    np.testing.assert_allclose(xyz_to_xy(ours), xyz_to_xy(ref), atol=1e-6)
    # and against colour-science's Planckian locus (CIE 1960 UCS, from the blackbody
    # spectrum and the CIE 1931 CMFs: CCT_to_uv_Planck1900)
    uv = colour.temperature.CCT_to_uv_Planck1900(d * t, CMFS)
    np.testing.assert_allclose(colour.UCS_uv_to_xy(uv), xyz_to_xy(ours), atol=2e-4)


def test_absolute_luminance_against_independent_integral():
    # Y = K_m * integral(B_lambda ybar dlambda), K_m = 683 lm/W (CIE 15; SI candela),
    # computed with scipy's quad over colour-science's ybar (linear interpolation).
    t, d = 3000.0, 1.5
    ybar = lambda w: np.interp(w, CMFS.wavelengths, CMFS.values[:, 1])
    # one quad per 1 nm segment, since ybar is piecewise linear between its 1 nm nodes
    ref = sum(
        integrate.quad(lambda w: planck_spectral_radiance(w, d * t) * ybar(w), a, a + 1.0)[0]
        for a in range(360, 830)
    )
    ours = observed_xyz_direct(planck(t), [d])[0, 1]
    assert ours == pytest.approx(683.0 * ref, rel=1e-4)


def test_sun_like_blackbody_luminance_order_of_magnitude():
    # Solar disc luminance ~1.6e9 cd/m^2 (common handbook value, from memory); a 5772 K
    # blackbody (IAU 2015 nominal solar effective temperature) gives ~2e9 cd/m^2.
    y = observed_xyz_direct(planck(5772.0), [1.0])[0, 1]
    assert 1.0e9 < y < 3.0e9


@pytest.mark.parametrize("lam0, d", [(1500.0, 3.0), (450.0, 0.75), (656.28, 1.0), (520.0, 1.3)])
def test_emission_line_lands_on_spectral_locus(lam0, d):
    # A narrow line at lam0 seen with factor D appears at lam0 / D; its chromaticity is the
    # CIE 1931 spectral locus there (colour-science XYZ_to_xy of the CMF at that wavelength).
    sigma = 0.002
    line = lambda w: np.exp(-0.5 * ((w - lam0) / sigma) ** 2) / (sigma * math.sqrt(2 * math.pi))
    knots = lam0 + sigma * np.linspace(-8, 8, 161)
    xyz = observed_xyz_direct(line, [d], knots)[0]
    locus = colour.XYZ_to_xy(CMFS[lam0 / d])
    np.testing.assert_allclose(xyz_to_xy(xyz), locus, atol=2e-4)
    # luminance: D^4 * K_m * ybar(lam0/D) for unit integrated radiance (D^4 total scaling)
    assert xyz[1] == pytest.approx(d**4 * 683.0 * CMFS[lam0 / d][1], rel=2e-3)


def test_spectrum_to_xyz_resolves_samples_between_cmf_nodes():
    # A triangle 0.2 nm wide centred between two CMF nodes integrates to its area times
    # ybar there (ybar nearly linear over 0.2 nm; colour-science CMF value).
    w = np.array([554.4, 554.5, 554.6])
    r = np.array([0.0, 10.0, 0.0])  # area = 1 W/(sr m^2)
    xyz = spectrum_to_xyz(w, r)
    assert xyz[1] == pytest.approx(683.0 * CMFS[554.5][1], rel=1e-4)


# ---------------------------------------------------------------------------------------
# sRGB, IEC 61966-2-1
# ---------------------------------------------------------------------------------------


def test_srgb_matrices_match_the_standard():
    # IEC 61966-2-1 prints 4-decimal matrices; colour-science carries them.
    srgb = colour.RGB_COLOURSPACES["sRGB"]
    # The printed XYZ->RGB matrix was rounded from a slightly different derivation and
    # differs from the exact inverse by up to 3.7e-4 (measured here).
    np.testing.assert_allclose(spectrum.XYZ_TO_LINEAR_SRGB, srgb.matrix_XYZ_to_RGB, atol=5e-4)
    np.testing.assert_allclose(spectrum.LINEAR_SRGB_TO_XYZ, srgb.matrix_RGB_to_XYZ, atol=1e-4)
    # IEC 61966-2-1 values (from the standard, as quoted widely):
    np.testing.assert_allclose(
        spectrum.LINEAR_SRGB_TO_XYZ,
        [[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]],
        atol=1e-4,
    )


def test_d65_white_is_linear_one():
    # sRGB white: D65 at x = 0.3127, y = 0.3290 (IEC 61966-2-1) with Y = 1 -> (1, 1, 1)
    xyz = colour.xy_to_XYZ([0.3127, 0.3290])
    np.testing.assert_allclose(xyz_to_linear_srgb(xyz), [1.0, 1.0, 1.0], atol=1e-12)
    np.testing.assert_allclose(linear_srgb_to_xyz([1.0, 1.0, 1.0]), xyz, atol=1e-12)
    # the CIE D65 spectrum itself (CIE 15 table from colour-science) lands within 1e-3
    sd = colour.SDS_ILLUMINANTS["D65"]
    w = np.arange(360.0, 831.0)
    xyz_spd = spectrum_to_xyz(w, spectrum.cie_d65_relative_spd(w))
    np.testing.assert_allclose(xyz_to_linear_srgb(xyz_spd / xyz_spd[1]), 1.0, atol=1e-3)
    assert sd.wavelengths[0] == 300.0


def test_xyz_srgb_against_colour_science():
    rng = np.random.default_rng(3)
    xyz = rng.uniform(0, 1, (50, 3))
    ref = colour.XYZ_to_RGB(xyz, "sRGB", apply_cctf_encoding=False)
    np.testing.assert_allclose(xyz_to_linear_srgb(xyz), ref, atol=5e-4)
    np.testing.assert_allclose(linear_srgb_to_xyz(xyz_to_linear_srgb(xyz)), xyz, atol=1e-12)


def test_srgb_transfer_function_against_iec_61966_2_1():
    # colour-science's eotf_inverse_sRGB / eotf_sRGB implement IEC 61966-2-1.
    lin = np.concatenate([np.linspace(0, 0.01, 101), np.linspace(0.01, 1, 200)])
    np.testing.assert_allclose(encode_srgb(lin), colour.models.eotf_inverse_sRGB(lin), atol=1e-12)
    enc = np.linspace(0, 1, 301)
    np.testing.assert_allclose(decode_srgb(enc), colour.models.eotf_sRGB(enc), atol=1e-12)
    # worked values: 0.5 linear -> 0.7353569830524495 (1.055 * 0.5^(1/2.4) - 0.055)
    assert encode_srgb(0.5) == pytest.approx(1.055 * 0.5 ** (1 / 2.4) - 0.055, rel=1e-15)
    assert encode_srgb(0.002) == pytest.approx(12.92 * 0.002)
    np.testing.assert_allclose(decode_srgb(encode_srgb(lin)), lin, atol=1e-9)


def test_srgb_transfer_outside_unit_range():
    # Values outside [0, 1] pass through (clipping is the caller's job): above 1 the power
    # law continues; negatives are mirrored (extended-range form, see encode_srgb).
    assert encode_srgb(2.0) == pytest.approx(1.055 * 2.0 ** (1 / 2.4) - 0.055)
    assert encode_srgb(-0.25) == pytest.approx(-encode_srgb(0.25))
    np.testing.assert_allclose(decode_srgb(encode_srgb([-0.3, 1.7])), [-0.3, 1.7], rtol=1e-12)


# ---------------------------------------------------------------------------------------
# DopplerTable
# ---------------------------------------------------------------------------------------


def table_error(table, d):
    """Largest relative error per channel of lookup vs direct integration, where Y is above
    1e-6 of its largest value on the table; channel values below that scale count against
    it (docs/colour.md)."""
    got, want = table.lookup(d), table.direct(d)
    ymax = table.xyz[:, 1].max()
    counted = want[:, 1] > 1e-6 * ymax
    err = np.abs(got - want) / np.maximum(np.abs(want), 1e-6 * ymax)
    return float(err[counted].max()), int(counted.sum())


def probe_points(table, n, seed):
    rng = np.random.default_rng(seed)
    d = np.exp(rng.uniform(math.log(1e-3), math.log(1e3), n))
    mids = np.exp(0.5 * (table.log_d[:-1] + table.log_d[1:]))  # worst case: mid-interval
    return np.concatenate([d, mids[::7]])


@pytest.mark.parametrize("t", [30.0, 952.0, 5800.0, 1e5, 1e7])
def test_table_accuracy_blackbody(t):
    table = DopplerTable(planck(t))
    assert table.d_range[0] <= 1e-3 and table.d_range[1] >= 1e3
    err, counted = table_error(table, probe_points(table, 600, 1))
    assert counted > 100
    assert err < 5e-3  # requirement; measured ~2e-4 (docs/colour.md)


@pytest.mark.parametrize("fwhm", [0.01, 1.0, 10.0])
def test_table_accuracy_emission_line(fwhm):
    sigma = fwhm / 2.3548200450309493
    lam0 = 656.28
    line = lambda w: np.exp(-0.5 * ((w - lam0) / sigma) ** 2) / (sigma * math.sqrt(2 * math.pi))
    table = DopplerTable(line, knots_nm=lam0 + sigma * np.linspace(-8, 8, 161))
    # the line is visible for lam0/830 < D < lam0/360: probe there densely
    d = np.exp(np.random.default_rng(2).uniform(math.log(lam0 / 835), math.log(lam0 / 355), 800))
    err, counted = table_error(table, d)
    assert counted > 500
    assert err < 5e-3


def test_table_grows_beyond_its_range():
    table = DopplerTable(planck(5800.0))
    d = np.array([1e-4, 3e4])
    np.testing.assert_allclose(table.lookup(d), table.direct(d), rtol=5e-3)
    assert table.d_range[0] <= 1e-4 and table.d_range[1] >= 3e4
    # growing keeps earlier nodes and the table still answers in range
    np.testing.assert_allclose(table.lookup([2.0]), table.direct([2.0]), rtol=5e-3)


def test_table_rejects_bad_doppler_factors():
    table = cached_table(("test-bb", 952.0), planck(952.0))
    for bad in (0.0, -1.0, np.nan, np.inf):
        with pytest.raises(ValueError, match="Doppler factor"):
            table.lookup([1.0, bad])


def test_cached_table_is_built_once_per_key():
    a = cached_table(("test-bb", 1234.0), planck(1234.0))
    b = cached_table(("test-bb", 1234.0), planck(1234.0))
    assert a is b


def test_apply_effects_switch_rule():
    # Rule (docs/colour.md): XYZ = XYZ_table(Dc) * (Db / Dc)^4, Dc = D if doppler else 1,
    # Db = D if beaming else 1. Checked against direct integration of the spectrum.
    t = 4000.0
    table = cached_table(("test-bb", t), planck(t))
    d = np.array([0.5, 2.0, 3.0])
    full = observed_xyz_direct(planck(t), d)
    rest = observed_xyz_direct(planck(t), [1.0])
    np.testing.assert_allclose(apply_effects(table, d, True, True), full, rtol=2e-3)
    # doppler off: rest-frame colour, D^4 brighter
    got = apply_effects(table, d, False, True)
    np.testing.assert_allclose(got, rest * d[:, None] ** 4, rtol=2e-3)
    np.testing.assert_allclose(xyz_to_xy(got), np.repeat(xyz_to_xy(rest), 3, 0), atol=1e-9)
    # beaming off: shifted colour, without the D^4 bolometric factor
    got = apply_effects(table, d, True, False)
    np.testing.assert_allclose(got, full / d[:, None] ** 4, rtol=2e-3)
    np.testing.assert_allclose(xyz_to_xy(got), xyz_to_xy(full), atol=1e-5)
    # both off: the rest-frame XYZ everywhere
    np.testing.assert_allclose(
        apply_effects(table, d, False, False), np.repeat(rest, 3, 0), rtol=2e-3
    )


def test_beaming_off_keeps_bolometric_radiance_of_a_blackbody():
    # Bolometric check of the rule: the observed blackbody at D T has total radiance
    # sigma (D T)^4 / pi; dividing by D^4 (beaming off) leaves sigma T^4 / pi
    # (Stefan-Boltzmann, scipy.constants). Its luminance differs only through colour.
    t, d = 2000.0, 2.0
    table = cached_table(("test-bb", t), planck(t))
    y_off = apply_effects(table, [d], True, False)[0, 1]
    y_dt = observed_xyz_direct(planck(d * t), [1.0])[0, 1]
    assert y_off == pytest.approx(y_dt / d**4, rel=2e-3)


@pytest.mark.parametrize("switches", [(True, True), (False, True), (True, False), (False, False)])
def test_fused_table_shading_gives_the_numbers_of_apply_effects(switches):
    # shade_by_table must reproduce apply_effects (checked above against direct
    # integration) times each body's scale, bit for bit, for hits of several tables
    # mixed in one pass; misses and bodies without a table get 0 and are counted.
    doppler_on, beaming_on = switches
    tables = [cached_table(("test-bb", t), planck(t)) for t in (952.0, 5800.0)]
    rng = np.random.default_rng(11)
    n = 2000
    body = rng.integers(-1, 4, n)  # body 3 has no table
    d = np.exp(rng.uniform(-3.0, 3.0, n))
    d[body < 0] = np.nan
    body_table = np.array([0, 1, 0, -1])
    body_scale = np.array([1.0, 0.37, 2.5, 1.0])
    out = np.full((n, 3), -1.0)
    others, outside = spectrum.shade_by_table(
        body, d, body_table, body_scale, spectrum.packed_tables(tables), *switches, out
    )
    assert (others, outside) == (int(np.sum(body == 3)), 0)
    for b in range(3):
        sel = body == b
        want = body_scale[b] * apply_effects(tables[body_table[b]], d[sel], doppler_on, beaming_on)
        assert np.array_equal(out[sel], want)
    assert np.all(out[(body < 0) | (body == 3)] == 0.0)


def test_fused_table_shading_leaves_d_outside_a_table_to_the_caller():
    table = cached_table(("test-bb", 4321.0), planck(4321.0))
    lo, hi = table.d_range
    d = np.array([1.0, lo / 10.0, hi * 10.0, np.nan, 0.0, -1.0, np.inf])
    out = np.empty((len(d), 3))
    pack = spectrum.packed_tables([table])
    _, outside = spectrum.shade_by_table(
        np.zeros(len(d), np.int64), d, np.array([0]), np.ones(1), pack, True, True, out
    )
    assert outside == len(d) - 1  # everything but D = 1: beyond the range or not valid
    assert np.array_equal(out[0], apply_effects(table, [1.0], True, True)[0])


def test_compiled_linear_srgb_rounds_as_numpy_matrix_product():
    # The compiled per-pixel colour matrix (exposure passes) must give the numbers of
    # numpy's xyz @ XYZ_TO_LINEAR_SRGB.T (the reference implementation here) to the last
    # bit, so that compiled and numpy pictures agree exactly.
    from numba import njit

    @njit
    def rows(xyz, m):
        out = np.empty_like(xyz)
        for i in range(xyz.shape[0]):
            out[i, 0], out[i, 1], out[i, 2] = spectrum.linear_srgb_at(
                xyz[i, 0], xyz[i, 1], xyz[i, 2], m
            )
        return out

    rng = np.random.default_rng(5)
    xyz = rng.lognormal(0.0, 3.0, (20000, 3)) * rng.choice([-1.0, 1.0], (20000, 3))
    assert np.array_equal(rows(xyz, spectrum.XYZ_TO_LINEAR_SRGB), xyz_to_linear_srgb(xyz))
