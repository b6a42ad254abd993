"""Checks of relview.light.materials against published values, standards and colour-science."""

from __future__ import annotations

import math

import colour
import numpy as np
import pytest
from PIL import Image

from relview.light import spectrum
from relview.light.materials import (
    Blackbody,
    EmissionLines,
    Pattern,
    Reflective,
    TabulatedSpectrum,
    reflectance_basis,
    sample_texture,
)
from relview.light.spectrum import (
    observed_xyz_direct,
    planck_spectral_radiance,
    xyz_to_linear_srgb,
    xyz_to_xy,
)
from relview.scene.parts import Effects

CMFS = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
ALL_ON = Effects()


def shade(surface, d, pos=None, uv=None, effects=ALL_ON):
    d = np.atleast_1d(np.asarray(d, dtype=float))
    pos = np.zeros((d.size, 3)) if pos is None else np.asarray(pos, dtype=float)
    return surface.observed_xyz(d, pos, uv, effects)


# ---------------------------------------------------------------------------------------
# Blackbody
# ---------------------------------------------------------------------------------------


def test_blackbody_952k_head_on_at_beta_08_is_illuminant_a():
    # physics.md: beta = 0.8 head-on gives D = 3; 952 K * 3 = 2856 K, CIE illuminant A,
    # x = 0.44757, y = 0.40745 (CIE 15:2004) and colour-science's CCS_ILLUMINANTS value.
    xy = xyz_to_xy(shade(Blackbody(952.0), [3.0]))[0]
    np.testing.assert_allclose(xy, [0.44757, 0.40745], atol=1e-4)
    np.testing.assert_allclose(
        xy, colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["A"], atol=1e-4
    )


@pytest.mark.parametrize("d", [1 / 3, 0.5, 1.0, 2.0, 3.0])
def test_blackbody_surface_is_blackbody_at_dt(d):
    # colour-science: sd_blackbody(D T) integrated with the CIE 1931 CMFs, k = 683 lm/W.
    # (sd_to_XYZ returns its "Range100" scale, the plain sum / 100; and the exact SI
    # radiation constants are passed instead of its CIE 15 rounded defaults.)
    import scipy.constants as sc

    t, scale = 3000.0, 0.4
    shape = colour.SpectralShape(360, 830, 1)
    sd = colour.sd_blackbody(d * t, shape, c1=2 * math.pi * sc.h * sc.c**2, c2=sc.h * sc.c / sc.k)
    ref = 100.0 * colour.sd_to_XYZ(sd, CMFS, colour.sd_ones(shape), k=683.0, method="Integration")
    got = shade(Blackbody(t, scale=scale), [d])[0]
    np.testing.assert_allclose(got, scale * ref, rtol=5e-4)  # table accuracy + trapezoid ends


def test_blackbody_tables_are_shared_across_scales_and_bodies():
    a, b = Blackbody(4321.0), Blackbody(4321.0, scale=0.5)
    assert a.table() is b.table()
    np.testing.assert_allclose(shade(b, [1.5]), 0.5 * shade(a, [1.5]), rtol=1e-12)
    assert a == Blackbody(4321.0) and hash(a) == hash(Blackbody(4321.0)) and a != b


def test_blackbody_rejects_bad_input():
    with pytest.raises(ValueError, match="temperature"):
        Blackbody(-5.0)
    with pytest.raises(ValueError, match="scale"):
        Blackbody(5000.0, scale=float("nan"))


def test_effects_none_means_all_on_and_switches_follow_the_rule():
    # Rule (docs/colour.md): XYZ_table(Dc) * (Db / Dc)^4.
    bb = Blackbody(5000.0)
    d = np.array([0.5, 2.0])
    full = shade(bb, d)
    np.testing.assert_allclose(bb.observed_xyz(d, np.zeros((2, 3)), None, None), full)
    rest = shade(bb, [1.0])
    off = Effects(doppler=False, beaming=False)
    np.testing.assert_allclose(shade(bb, d, effects=off), np.repeat(rest, 2, 0), rtol=1e-9)
    colour_only = Effects(beaming=False)
    np.testing.assert_allclose(shade(bb, d, effects=colour_only), full / d[:, None] ** 4, rtol=1e-9)


# ---------------------------------------------------------------------------------------
# Emission lines
# ---------------------------------------------------------------------------------------


def test_emission_line_profile_integrates_to_its_radiance():
    lines = EmissionLines([(656.28, 2.0, 3.0), (486.13, 0.5, 1.5)])
    w = np.linspace(400, 750, 350001)
    total = np.trapezoid(lines.spectral_radiance(w), w)
    assert total == pytest.approx(4.5, rel=1e-9)
    # FWHM: half maximum at centre +- fwhm/2 (definition of the full width at half maximum)
    single = EmissionLines([(600.0, 4.0, 1.0)])
    peak = single.spectral_radiance(600.0)
    assert single.spectral_radiance(602.0) == pytest.approx(peak / 2, rel=1e-12)


@pytest.mark.parametrize("lam0, d", [(656.28, 1.0), (1312.56, 2.0), (400.0, 0.8), (2000.0, 4.0)])
def test_emission_line_lands_on_spectral_locus(lam0, d):
    # A line at lam0 seen with D appears at lam0 / D on the CIE 1931 spectral locus
    # (colour-science XYZ_to_xy of the CMF there); luminance D^4 K_m ybar R (total D^4).
    radiance = 2.0
    got = shade(EmissionLines([(lam0, 0.01, radiance)]), [d])[0]
    cmf = CMFS[lam0 / d]
    np.testing.assert_allclose(xyz_to_xy(got), colour.XYZ_to_xy(cmf), atol=3e-4)
    assert got[1] == pytest.approx(d**4 * 683.0 * radiance * cmf[1], rel=3e-3)


def test_emission_line_outside_the_visible_is_dark_until_shifted_in():
    ir = EmissionLines([(2000.0, 5.0, 1.0)])
    assert np.all(shade(ir, [1.0]) == 0.0)
    assert shade(ir, [4.0])[0, 1] > 0.0


def test_emission_lines_reject_bad_input():
    with pytest.raises(ValueError, match="fwhm"):
        EmissionLines([(500.0, 0.0, 1.0)])
    with pytest.raises(ValueError, match="line 1"):
        EmissionLines([(500.0, 1.0, 1.0), (500.0, 1.0)])
    with pytest.raises(ValueError, match="at least one"):
        EmissionLines([])


# ---------------------------------------------------------------------------------------
# Tabulated spectra
# ---------------------------------------------------------------------------------------


def test_tabulated_blackbody_matches_planck():
    # A table that samples Planck's law densely over the range a D = 1.5 shift needs gives
    # the blackbody's observed XYZ (independent: direct integration of Planck).
    w = np.linspace(300.0, 1400.0, 2201)
    tab = TabulatedSpectrum(w, planck_spectral_radiance(w, 3500.0), name="bb3500")
    for d in (1.0, 1.5, 0.9):
        ref = observed_xyz_direct(lambda x: planck_spectral_radiance(x, 3500.0), [d])[0]
        np.testing.assert_allclose(shade(tab, [d])[0], ref, rtol=2e-3)


def test_tabulated_spectrum_is_zero_outside_its_table():
    tab = TabulatedSpectrum([500.0, 510.0, 520.0], [0.0, 1.0, 0.0], name="bump")
    assert tab.spectral_radiance(499.0) == 0.0 and tab.spectral_radiance(1e4) == 0.0
    assert tab.spectral_radiance(505.0) == pytest.approx(0.5)
    # shifted entirely beyond 830 nm (D = 0.5 -> seen at 1000-1040 nm): black
    assert np.all(shade(tab, [0.5]) == 0.0)


def test_from_csv_reads_header_comments_and_separators(tmp_path):
    p = tmp_path / "lamp.csv"
    p.write_text("# measured\nwavelength_nm, radiance\n400, 0.1\n500 , 0.5\n\n600,0.2\n")
    tab = TabulatedSpectrum.from_csv(p)
    np.testing.assert_allclose(tab.wavelength_nm, [400, 500, 600])
    np.testing.assert_allclose(tab.radiance, [0.1, 0.5, 0.2])
    q = tmp_path / "lamp.txt"
    q.write_text("400\t0.1\n500\t0.5\n600\t0.2\n")
    np.testing.assert_allclose(shade(TabulatedSpectrum.from_csv(q), [1.0]), shade(tab, [1.0]))


@pytest.mark.parametrize(
    "text, message",
    [
        ("nm,W\n400,0.1\n500,abc\n", "line 3"),
        ("400,0.1\n500,0.2,7\n", "line 2: expected 2 columns"),
        ("400,0.1\n390,0.2\n", "line 2: wavelengths must increase"),
        ("400,0.1\n500,-1\n", "line 2: radiance must be >= 0"),
        ("nm,W\n400,1\n", "at least 2 data rows"),
    ],
)
def test_from_csv_errors_name_file_and_line(tmp_path, text, message):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    with pytest.raises(ValueError, match=message) as err:
        TabulatedSpectrum.from_csv(p)
    assert "bad.csv" in str(err.value)


def test_from_csv_missing_file(tmp_path):
    with pytest.raises(ValueError, match="nothere.csv"):
        TabulatedSpectrum.from_csv(tmp_path / "nothere.csv")


# ---------------------------------------------------------------------------------------
# Reflective
# ---------------------------------------------------------------------------------------

ROUND_TRIP_TOLERANCE = 2e-3  # linear sRGB, absolute; measured worst 1.26e-3 (docs/colour.md)


def test_rgb_round_trip_under_d65():
    # Mallett & Yuksel (2019) basis under D65 renders back to the input rgb. Sources of the
    # residual: linear instead of Sprague interpolation of the 5 nm basis, and the D65
    # spectrum's own chromaticity (0.31272, 0.32903) vs the sRGB white (0.3127, 0.3290).
    rng = np.random.default_rng(7)
    colours = np.vstack([rng.uniform(0, 1, (40, 3)), np.eye(3), [[1, 1, 1], [0, 0, 0]]])
    worst = 0.0
    for rgb in colours:
        xyz = shade(Reflective(tuple(rgb), lamp="D65", luminance=80.0), [1.0])[0]
        back = xyz_to_linear_srgb(xyz / 80.0)
        worst = max(worst, float(np.abs(back - rgb).max()))
    assert worst < ROUND_TRIP_TOLERANCE


def test_reflectance_matches_colour_science_mallett2019():
    # colour.recovery.RGB_to_sd_Mallett2019 on its own 5 nm grid
    rgb = np.array([0.7, 0.2, 0.4])
    sd = colour.recovery.RGB_to_sd_Mallett2019(rgb)
    np.testing.assert_allclose(reflectance_basis(sd.wavelengths) @ rgb, sd.values, atol=1e-12)


def test_reflectance_outside_380_780_is_held_constant():
    # Declared extension rule (docs/colour.md): each basis keeps its end value.
    b = reflectance_basis(np.array([100.0, 380.0, 780.0, 5000.0]))
    np.testing.assert_allclose(b[0], b[1])
    np.testing.assert_allclose(b[3], b[2])


def test_white_reflector_has_the_lamp_luminance_and_chromaticity():
    # Normalisation: a perfect white reflector at rest shows `luminance` cd/m^2 and the
    # lamp's chromaticity. D65: x = 0.31272, y = 0.32903 (CIE 15:2004, 2 degree);
    # a 2856 K lamp: illuminant A, x = 0.44757, y = 0.40745 (CIE 15:2004).
    d65 = shade(Reflective((1, 1, 1), lamp="D65", luminance=250.0), [1.0])[0]
    assert d65[1] == pytest.approx(250.0, rel=1e-4)
    np.testing.assert_allclose(xyz_to_xy(d65), [0.31272, 0.32903], atol=1e-4)
    a = shade(Reflective((1, 1, 1), lamp=2856.0, luminance=10.0), [1.0])[0]
    assert a[1] == pytest.approx(10.0, rel=1e-4)
    np.testing.assert_allclose(xyz_to_xy(a), [0.44757, 0.40745], atol=1.5e-4)


def test_reflective_under_blackbody_lamp_shifts_like_a_blackbody():
    # A grey reflector under a T lamp reflects a scaled Planck spectrum; with D it is seen
    # as a blackbody at D T (physics.md). Grey: the basis sums to 1 (to 1e-5).
    lamp_t = 3000.0
    grey = Reflective((0.5, 0.5, 0.5), lamp=lamp_t, luminance=100.0)
    for d in (0.7, 2.0):
        xy = xyz_to_xy(shade(grey, [d]))[0]
        ref = xyz_to_xy(observed_xyz_direct(lambda w: planck_spectral_radiance(w, lamp_t), [d]))[0]
        np.testing.assert_allclose(xy, ref, atol=2e-4)


def test_d65_lamp_extension_is_continuous_and_positive():
    w_end = spectrum.D65_WAVELENGTHS_NM[[0, -1]]
    inside = spectrum.cie_d65_relative_spd(w_end)
    np.testing.assert_allclose(
        spectrum.cie_d65_relative_spd(w_end + [-1e-9, 1e-9]), inside, rtol=1e-6
    )
    far = spectrum.cie_d65_relative_spd(np.array([50.0, 2000.0, 1e5]))
    assert np.all(far > 0) and np.all(np.isfinite(far))


def test_reflective_rejects_bad_input():
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        Reflective((1.2, 0.0, 0.0))
    with pytest.raises(ValueError, match="D65"):
        Reflective((0.5, 0.5, 0.5), lamp="D50")
    with pytest.raises(ValueError, match="luminance"):
        Reflective((0.5, 0.5, 0.5), luminance=0.0)
    with pytest.raises(ValueError, match="nothere.png"):
        Reflective((0.5, 0.5, 0.5), texture="nothere.png")


def make_texture(tmp_path):
    # 2 x 2 image, sRGB-encoded 8-bit: top row red, green; bottom row blue, white
    px = np.array([[[255, 0, 0], [0, 255, 0]], [[0, 0, 255], [255, 255, 255]]], dtype=np.uint8)
    p = tmp_path / "tex.png"
    Image.fromarray(px).save(p)
    return p


def test_texture_is_sampled_at_uv_with_wrap(tmp_path):
    p = make_texture(tmp_path)
    surf = Reflective((0.5, 0.5, 0.5), texture=p)
    # texel centres: u = 0.25 / 0.75, v = 0.75 (top row) / 0.25 (bottom row)
    uv = np.array([[0.25, 0.75], [0.75, 0.75], [0.25, 0.25], [1.75, -0.75]])
    rgb = surf.colour_at(uv, 4)
    np.testing.assert_allclose(rgb, [[1, 0, 0], [0, 1, 0], [0, 0, 1], [1, 1, 1]], atol=1e-12)
    # halfway between red and green (bilinear)
    np.testing.assert_allclose(
        sample_texture(surf._texels, np.array([[0.5, 0.75]])), [[0.5, 0.5, 0]]
    )
    # the shaded texel equals an untextured surface of the same colour
    xyz = surf.observed_xyz(np.array([1.3, 1.3]), np.zeros((2, 3)), uv[:2], ALL_ON)
    np.testing.assert_allclose(xyz[0], shade(Reflective((1, 0, 0)), [1.3])[0], rtol=1e-12)
    # without uv the surface falls back to its rgb
    np.testing.assert_allclose(
        surf.observed_xyz(np.array([1.0]), np.zeros((1, 3)), None, ALL_ON),
        shade(Reflective((0.5, 0.5, 0.5)), [1.0]),
    )


def test_texture_pixels_are_decoded_from_srgb(tmp_path):
    # 8-bit sRGB value 188 decodes to ((188/255 + 0.055)/1.055)^2.4 (IEC 61966-2-1)
    p = tmp_path / "grey.png"
    Image.fromarray(np.full((1, 1, 3), 188, dtype=np.uint8)).save(p)
    rgb = Reflective(texture=p).colour_at(np.array([[0.3, 0.3]]), 1)
    np.testing.assert_allclose(rgb, ((188 / 255 + 0.055) / 1.055) ** 2.4, rtol=1e-12)


# ---------------------------------------------------------------------------------------
# Patterns
# ---------------------------------------------------------------------------------------


def test_checks_pattern_cells():
    hot, cold = Blackbody(6000.0), Blackbody(3000.0)
    pat = Pattern("checks", period=0.1, first=hot, second=cold)
    # cells centred on multiples of the period: origin in cell 0 (first)
    pos = np.array(
        [
            [0.0, 0.0, 0.0],
            [0.07, 0.0, 0.0],
            [0.07, 0.07, 0.0],
            [-0.07, 0.0, 0.0],
            [0.04, 0.04, 0.04],
            [0.5, 0.0, 0.0],
        ]
    )
    np.testing.assert_array_equal(pat.second_mask(pos), [False, True, False, True, False, True])
    xyz = pat.observed_xyz(np.full(6, 1.2), pos, None, ALL_ON)
    np.testing.assert_allclose(xyz[0], shade(hot, [1.2])[0])
    np.testing.assert_allclose(xyz[1], shade(cold, [1.2])[0])
    # only the chosen axes count
    flat = Pattern("checks", period=0.1, first=hot, second=cold, axes=(0, 1))
    assert not flat.second_mask(np.array([[0.0, 0.0, 0.07]]))[0]


def test_grid_pattern_lines():
    pat = Pattern("grid", period=1.0, line_width=0.1, axes=(0, 1))
    # lines centred on cell boundaries at half-integers, half width 0.05
    pos = np.array([[0.0, 0.0, 0], [0.46, 0.0, 0], [0.0, -0.54, 0], [0.44, 0.3, 0], [1.5, 1.5, 0]])
    np.testing.assert_array_equal(pat.second_mask(pos), [False, True, True, False, True])
    with pytest.raises(ValueError, match="line width"):
        Pattern("grid", period=0.1, line_width=0.2)
    with pytest.raises(ValueError, match="kind"):
        Pattern("stripes")
    with pytest.raises(ValueError, match="axes"):
        Pattern(axes=(0, 3))


def test_pattern_keys_and_defaults():
    a = Pattern()
    assert a.key() == Pattern().key()
    assert a.key() != Pattern(period=0.2).key()
    xyz = a.observed_xyz(np.ones(2), np.array([[0, 0, 0], [0.1, 0, 0]]), None, None)
    assert xyz[0, 1] > xyz[1, 1] > 0  # light grey first, dark grey second
