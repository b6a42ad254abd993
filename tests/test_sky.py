"""Scene-frame skies (relview.light.sky) against Planck's law, colour-science, Einstein's
aberration formula and the radiance invariants of Rybicki & Lightman."""

import math

import numpy as np
import pytest
from conftest import chromaticity, cie_1931_cmfs, xyz_colour_science_blackbody

import relview
from relview.geometry.camera import pixel_solid_angle
from relview.light import sky
from relview.light.spectrum import planck_spectral_radiance
from relview.scene.model import Scene
from relview.scene.parts import Background, Camera, Effects, RenderSettings


def source_at_rest_doppler(d_scene, beta_cam, relativistic=True):
    """D of light from a source at rest in S seen along d (towards the source) by a camera
    moving with beta_cam, written out here: D = gamma (1 - beta.n) with n = -d
    (Rybicki & Lightman 1979, eq. 4.11; physics.md). Without relativity the gamma goes."""
    beta_cam = np.asarray(beta_cam, float)
    g = 1.0 / math.sqrt(1.0 - beta_cam @ beta_cam) if relativistic else 1.0
    return g * (1.0 + np.asarray(d_scene, float) @ beta_cam)


def one_star(temperature=4000.0, seed=11):
    return Background(
        kind="stars", count=1, seed=seed, temperature=(temperature, temperature), luminance=1.0
    )


def star_camera(direction, beta_cam):
    return Camera(
        position=np.zeros(3),
        direction=np.asarray(direction, float),
        fov=40.0,
        beta=np.asarray(beta_cam, float),
    )


def splat_one_star(bg, beta_cam, effects=Effects(), w=61, h=61):
    """(XYZ of the star's pixel, the pixel's solid angle, D of the star) for a camera
    looking straight at the one star of ``bg``."""
    d_star = sky.generate_stars(bg)[0][0]
    beta_cam = np.asarray(beta_cam, float)
    cam = star_camera(d_star, beta_cam)
    img = sky.star_splat(bg, cam, w, h, beta_cam, effects)
    lit = np.argwhere(img[..., 1] > 0)
    assert len(lit) == 1, "the star lands in exactly one pixel"
    iy, ix = lit[0]
    omega = pixel_solid_angle(cam, w, h)[iy, ix]
    return img[iy, ix], omega, source_at_rest_doppler(d_star, beta_cam)


@pytest.mark.parametrize("speed", [-0.6, 0.0, 0.5, 0.9])
def test_a_star_seen_in_motion_has_the_colour_of_a_blackbody_at_d_t(speed):
    # A blackbody at T seen with Doppler factor D is a blackbody at D T (Planck's law with
    # the invariance of I_nu / nu^3, Rybicki & Lightman 1979, eq. 4.97). Chromaticity from
    # colour-science (sd_blackbody + sd_to_XYZ, CIE 1931 2 degree observer).
    bg = one_star(4000.0)
    d_star = sky.generate_stars(bg)[0][0]
    xyz, _, dop = splat_one_star(bg, speed * d_star)  # moving towards (+) or away (-)
    want = chromaticity(xyz_colour_science_blackbody(dop * 4000.0))
    # relview's tabulated XYZ against colour-science's 1 nm sum: common practice tolerance
    assert chromaticity(xyz) == pytest.approx(want, abs=1e-3)
    if speed > 0:
        assert dop > 1.0  # approaching the star: blue shift
    elif speed < 0:
        assert dop < 1.0


def test_star_flux_with_beaming_alone_scales_as_d_squared():
    # With the colour shift off, a star's radiance goes as D^4 (bolometric radiance,
    # I / nu^3 invariance integrated over nu: Rybicki & Lightman eq. 4.97) and its solid
    # angle as 1/D^2 (aberration, R&L ch. 4): its flux, radiance x solid angle, as D^2,
    # as the sky module's docstring states.
    bg = one_star(6000.0)
    d_star = sky.generate_stars(bg)[0][0]
    only_beaming = Effects(doppler=False)
    xyz0, om0, _ = splat_one_star(bg, np.zeros(3), only_beaming)
    xyz, om, dop = splat_one_star(bg, 0.7 * d_star, only_beaming)
    assert dop == pytest.approx(math.sqrt(1.7 / 0.3))  # head-on: sqrt((1+b)/(1-b))
    assert xyz * om == pytest.approx(xyz0 * om0 * dop**2, rel=1e-9)


# ------------------------------------------------------------------------------ graticule


def graticule(luminance=2.0, temperature=5000.0, spacing=30.0, width=3.0):
    return Background(
        kind="graticule", luminance=luminance, temperature=temperature, spacing=spacing, width=width
    )


def test_graticule_line_at_rest_has_its_stated_luminance_and_colour():
    # scene-format.md: `luminance` is the rest-frame luminance (cd/m2) of the lines, which
    # glow as a blackbody at `temperature`
    bg = graticule(luminance=3.5, temperature=5000.0)
    on_equator = np.array([[1.0, 0.0, 0.0]])
    xyz = sky.sky_xyz(bg, on_equator, np.zeros(3), Effects())[0]
    assert xyz[1] == pytest.approx(3.5, rel=1e-9)
    assert chromaticity(xyz) == pytest.approx(
        chromaticity(xyz_colour_science_blackbody(5000.0)), abs=1e-3
    )
    a = math.radians(15.0)  # latitude and longitude 15 deg: midway between lines
    between_lines = np.array([[math.cos(a) * math.cos(a), math.cos(a) * math.sin(a), math.sin(a)]])
    assert sky.sky_xyz(bg, between_lines, np.zeros(3), Effects())[0] == pytest.approx(0.0)


def test_graticule_luminance_ratio_follows_the_shifted_planck_spectrum():
    # Per wavelength the observed radiance is D^5 B_lambda(D lambda; T) (I_nu / nu^3
    # invariance, Rybicki & Lightman eq. 4.97; physics.md). The luminance ratio, moving /
    # at rest, integrated here against colour-science's CIE 1931 ybar on its 1 nm grid.
    bg = graticule(luminance=1.0, temperature=5000.0)
    d = np.array([[1.0, 0.0, 0.0]])
    beta = np.array([0.4, 0.0, 0.0])
    dop = source_at_rest_doppler(d[0], beta)
    got = (
        sky.sky_xyz(bg, d, beta, Effects())[0, 1] / sky.sky_xyz(bg, d, np.zeros(3), Effects())[0, 1]
    )
    cmfs = cie_1931_cmfs()
    lam = cmfs.wavelengths
    ybar = cmfs.values[:, 1]
    moving = np.sum(dop**5 * planck_spectral_radiance(dop * lam, 5000.0) * ybar)
    rest = np.sum(planck_spectral_radiance(lam, 5000.0) * ybar)
    assert got == pytest.approx(moving / rest, rel=2e-3)


@pytest.mark.parametrize(
    "doppler,beaming", [(True, True), (True, False), (False, True), (False, False)]
)
def test_graticule_doppler_and_beaming_switches_behave_as_documented(doppler, beaming):
    # scene-format.md (effect switches) and spectrum.apply_effects: doppler shifts the
    # colour, beaming multiplies by the bolometric D^4 (Rybicki & Lightman eq. 4.97)
    bg = graticule(luminance=1.0, temperature=4000.0)
    d = np.array([[0.0, 1.0, 0.0]])
    beta = np.array([0.0, 0.6, 0.0])  # flying towards the line at (0, 1, 0)
    dop = source_at_rest_doppler(d[0], beta)
    assert dop == pytest.approx(2.0)  # physics.md check: beta = 0.6 head-on gives D = 2
    rest = sky.sky_xyz(bg, d, np.zeros(3), Effects())[0]
    shifted = sky.sky_xyz(bg, d, beta, Effects())[0]  # the observed sky: blackbody at D T
    want = {
        (True, True): shifted,
        (True, False): shifted / dop**4,  # the colour shift without the D^4 brightening
        (False, True): rest * dop**4,  # the rest-frame colour brightened by D^4
        (False, False): rest,  # the sky as at rest
    }[doppler, beaming]
    got = sky.sky_xyz(bg, d, beta, Effects(doppler=doppler, beaming=beaming))[0]
    assert got == pytest.approx(want, rel=1e-9)
    # the colour shift is real: the shifted line is bluer than the line at rest
    assert chromaticity(shifted)[0] < chromaticity(rest)[0] - 0.05


def test_graticule_without_contraction_uses_the_classical_doppler_factor():
    # Galilean kinematics (contraction off) drop the gamma: D = 1 + beta.d for a source at
    # rest (classical Doppler factor of light moving at c in S; scene-format.md)
    bg = graticule(luminance=1.0, temperature=4000.0)
    d = np.array([[0.0, 1.0, 0.0]])
    beta = np.array([0.0, 0.6, 0.0])
    only_beaming = Effects(contraction=False, doppler=False)
    got = sky.sky_xyz(bg, d, beta, only_beaming)[0, 1]
    assert got == pytest.approx(1.6**4, rel=1e-9)


def graticule_panorama(beta_z, aberration=True):
    """A panorama (rows = camera-frame latitude) of a bodiless graticule sky, the camera
    flying along the graticule's pole (scene z) at beta_z."""
    cam = Camera(
        position=np.zeros(3),
        direction=np.array([1.0, 0.0, 0.0]),
        fov=360.0,
        projection="panorama",
        beta=np.array([0.0, 0.0, beta_z]),
    )
    scene = Scene(
        camera=cam,
        bodies=[],
        background=graticule(spacing=30.0, width=3.0),
        render=RenderSettings(resolution=(720, 360), effects=Effects(aberration=aberration)),
    )
    return relview.render(scene).layers["xyz"][..., 1] > 0


def line_rows(on):
    """Centres of the lit runs (image rows) in the column at camera longitude 15 deg, midway
    between two meridians: the latitude lines crossing it, and the polar caps (where the
    meridians converge) at the top and bottom edges."""
    h, w = on.shape
    col = on[:, w // 2 + w // 24]  # the view direction is at the centre column
    edges = np.flatnonzero(np.diff(np.concatenate([[0], col.astype(int), [0]])))
    runs = edges.reshape(-1, 2)  # [first row, last row + 1) of each lit run
    inner = [(a + b) / 2.0 for a, b in runs if a > 0 and b < h]
    return np.array(inner)


def test_moving_camera_sees_the_graticule_aberrated_as_einstein_predicts():
    # Einstein 1905 (Ann. Phys. 17, 891), section 7, in the form of physics.md: light
    # arriving in S at angle theta to the direction of motion is seen at theta' with
    # cos theta' = (cos theta + beta) / (1 + beta cos theta). With the motion along the
    # pole, a line of latitude lat (theta = 90 deg - lat) is seen at latitude lat' with
    # sin lat' = (sin lat + beta) / (1 + beta sin lat).
    beta = 0.8
    on = graticule_panorama(beta)
    h = on.shape[0]
    lats = np.radians(np.arange(-60.0, 61.0, 30.0))
    seen = np.arcsin((np.sin(lats) + beta) / (1.0 + beta * np.sin(lats)))
    want = np.sort(h / 2.0 - seen / np.pi * h)  # panorama: latitude linear down the image
    got = line_rows(on)
    assert len(got) == len(want)
    assert got == pytest.approx(want, abs=2.0)
    # where the lines at 0 and -30, -60 deg would be without aberration, that column is dark
    col = on[:, on.shape[1] // 2 + on.shape[1] // 24]
    for lat in (0.0, -30.0, -60.0):
        assert not col[int(h / 2.0 - lat / 180.0 * h)]
    # at rest the same column shows the lines where they are
    assert line_rows(graticule_panorama(0.0)) == pytest.approx(
        np.sort(h / 2.0 - lats / np.pi * h), abs=1.0
    )


def test_graticule_with_aberration_off_stays_where_it_is_at_rest():
    on = graticule_panorama(0.8, aberration=False)
    rest = graticule_panorama(0.0)
    assert np.array_equal(on, rest)
