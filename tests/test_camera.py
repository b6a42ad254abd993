"""Camera projections (relview.geometry.camera): round trips, solid angles against closed
forms, the fused ray kernel against the reference path, aberration against Einstein's
formula, and the projection registry."""

import math

import numpy as np
import pytest

from relview.geometry import camera as cam_mod
from relview.geometry.camera import (
    PROJECTIONS,
    directions_to_pixels,
    pixel_grid,
    pixel_solid_angle,
    pixels_to_directions,
    scene_directions,
)
from relview.kinematics.lorentz import aberrate_to_scene
from relview.scene.model import scene_from_dict
from relview.scene.parts import Camera

#: a field of view per projection that exercises its general case
FOV = {"pinhole": 70.0, "panorama": 360.0, "fisheye": 220.0}


def tilted_camera(projection: str, fov: float) -> Camera:
    """A camera looking along an oblique direction, so the image axes mix every scene axis."""
    return Camera(
        position=np.zeros(3), look_at=np.array([1.0, 2.0, 0.5]), fov=fov, projection=projection
    )


def test_every_registered_projection_is_tested_here():
    assert set(FOV) == set(PROJECTIONS)


@pytest.mark.parametrize("name", sorted(FOV))
def test_pixel_direction_pixel_round_trip(name):
    cam = tilted_camera(name, FOV[name])
    w, h = 64, 40
    rng = np.random.default_rng(3)
    px = rng.uniform([0.0, 0.0], [w, h], size=(2000, 2))
    d, ok = pixels_to_directions(cam, w, h, px)
    assert ok.sum() > 1000
    assert np.linalg.norm(d[ok], axis=-1) == pytest.approx(1.0, abs=1e-12)
    back, ok_back = directions_to_pixels(cam, w, h, d[ok])
    assert ok_back.all()
    assert back == pytest.approx(px[ok], abs=1e-9)


@pytest.mark.parametrize("name", sorted(FOV))
def test_direction_pixel_direction_round_trip(name):
    cam = tilted_camera(name, FOV[name])
    w, h = 64, 40
    rng = np.random.default_rng(4)
    d = rng.normal(size=(3000, 3))
    d /= np.linalg.norm(d, axis=-1, keepdims=True)
    px, ok = directions_to_pixels(cam, w, h, d)
    # keep directions that land on the image (a pinhole or fisheye sees only part of the sky)
    on = ok & (px[:, 0] >= 0) & (px[:, 0] <= w) & (px[:, 1] >= 0) & (px[:, 1] <= h)
    assert on.sum() > 100
    again, ok2 = pixels_to_directions(cam, w, h, px[on])
    assert ok2.all()
    assert again == pytest.approx(d[on], abs=1e-9)


def test_no_image_behind_a_pinhole_or_outside_a_fisheye_field():
    pin = tilted_camera("pinhole", 70.0)
    back = -pin.forward()[None, :]
    assert not directions_to_pixels(pin, 32, 18, back)[1][0]
    fish = tilted_camera("fisheye", 180.0)
    assert not directions_to_pixels(fish, 32, 18, back)[1][0]
    assert directions_to_pixels(fish, 32, 18, fish.forward()[None, :])[1][0]
    # a pixel past the fisheye's image circle has no direction
    assert not pixels_to_directions(fish, 32, 18, np.array([[0.5, 0.5]]))[1][0]


@pytest.mark.parametrize("fov,w,h", [(90.0, 400, 300), (40.0, 320, 180), (150.0, 300, 300)])
def test_pinhole_solid_angles_sum_to_the_rectangular_pyramid(fov, w, h):
    # The solid angle of a rectangular pyramid with half apex angles a and b is
    # Omega = 4 asin(sin a sin b) (E. W. Weisstein, "Solid Angle", MathWorld; the formula
    # quoted from memory). The image rectangle at focal length f spans tan a = (w/2)/f and
    # tan b = (h/2)/f.
    cam = Camera(position=np.zeros(3), direction=np.array([0.0, 1.0, 0.0]), fov=fov)
    a = math.radians(fov) / 2.0
    b = math.atan(math.tan(a) * h / w)
    want = 4.0 * math.asin(math.sin(a) * math.sin(b))
    got = pixel_solid_angle(cam, w, h).sum()
    # midpoint rule over pixels: error O(pixel^2), common practice tolerance
    assert got == pytest.approx(want, rel=2e-4)


def test_panorama_solid_angles_sum_to_the_full_sphere():
    # the whole sphere is 4 pi steradians (definition of the steradian, SI Brochure)
    cam = Camera(
        position=np.zeros(3), direction=np.array([1.0, 0.0, 0.0]), fov=360.0, projection="panorama"
    )
    om = pixel_solid_angle(cam, 360, 180)
    assert om.sum() == pytest.approx(4.0 * math.pi, rel=1e-4)
    # an equirectangular pixel covers cos(latitude) dlon dlat: the rows at the poles are
    # the smallest, the equator's the largest
    assert om[0].max() < om[90].min()


@pytest.mark.parametrize("fov,want", [(180.0, 2.0 * math.pi), (360.0, 4.0 * math.pi)])
def test_fisheye_solid_angles_sum_to_its_field(fov, want):
    # An equidistant fisheye of field F covers the spherical cap of half-angle F/2:
    # Omega = 2 pi (1 - cos(F/2)) (cap area, any geometry handbook): a hemisphere at 180 deg,
    # the sphere at 360 deg. Pixels cut by the image circle are counted whole or not at all,
    # an error of about one ring of pixels: O(1/width).
    cam = Camera(
        position=np.zeros(3), direction=np.array([1.0, 0.0, 0.0]), fov=fov, projection="fisheye"
    )
    w = h = 400
    om = pixel_solid_angle(cam, w, h).ravel()
    _, ok = pixels_to_directions(cam, w, h, pixel_grid(w, h))
    assert om[ok].sum() == pytest.approx(want, rel=1.5e-2)
    assert (om[ok] > 0).all()


@pytest.mark.parametrize(
    "projection,fov", [("pinhole", 70.0), ("panorama", 360.0), ("fisheye", 220.0)]
)
def test_fused_camera_rays_match_projection_then_aberration(projection, fov):
    # The compiled ray generator must equal the reference path: projection, then the
    # aberration formula checked above (Einstein 1905).
    cam = Camera(
        position=np.zeros(3), look_at=np.array([1.0, 2.0, 0.5]), fov=fov, projection=projection
    )
    px = pixel_grid(40, 24) + 0.123
    beta = np.array([0.5, -0.3, 0.6])
    d_cam, ok = pixels_to_directions(cam, 40, 24, px)
    fused, ok2 = scene_directions(cam, 40, 24, px, beta)
    assert np.array_equal(ok, ok2)
    assert fused[ok] == pytest.approx(aberrate_to_scene(d_cam[ok], beta), abs=1e-12)


@pytest.mark.parametrize("beta", [0.3, 0.8, 0.95])
def test_camera_rays_obey_einsteins_aberration_formula(beta):
    # Einstein 1905 (Ann. Phys. 17, 891), section 7: light seen at angle theta' to the
    # direction of motion in the moving camera's frame comes, in S, from angle theta with
    # cos(theta) = (cos(theta') - beta) / (1 - beta cos(theta'))
    # (angles measured towards the source; physics.md writes the inverse form).
    cam = tilted_camera("panorama", 360.0)
    v_hat = np.array([0.6, 0.0, 0.8])
    w, h = 48, 24
    px = pixel_grid(w, h)
    d_cam, _ = pixels_to_directions(cam, w, h, px)
    d_s, _ = scene_directions(cam, w, h, px, beta * v_hat)
    cos_cam = d_cam @ v_hat
    want = (cos_cam - beta) / (1.0 - beta * cos_cam)
    assert d_s @ v_hat == pytest.approx(want, abs=1e-12)
    # the azimuth about the direction of motion is unchanged (aberration is in the plane
    # of the direction and the velocity)
    perp_cam = d_cam - np.outer(cos_cam, v_hat)
    perp_s = d_s - np.outer(d_s @ v_hat, v_hat)
    big = np.linalg.norm(perp_cam, axis=-1) > 1e-6
    unit = lambda a: a / np.linalg.norm(a, axis=-1, keepdims=True)
    assert unit(perp_s[big]) == pytest.approx(unit(perp_cam[big]), abs=1e-9)


def test_aberration_worked_value_from_physics_contract():
    # physics.md check (Einstein 1905, section 7): at beta = 0.8, light arriving in S at
    # 90 deg to the motion is seen at theta' = acos(0.8) = 36.87 deg.
    cam = Camera(position=np.zeros(3), direction=np.array([1.0, 0.0, 0.0]), fov=120.0)
    w, h = 2000, 3
    px = np.column_stack([np.arange(w) + 0.5, np.full(w, 1.5)])
    d_s, _ = scene_directions(cam, w, h, px, np.array([0.8, 0.0, 0.0]))
    d_cam, _ = pixels_to_directions(cam, w, h, px)
    i = np.argmin(np.abs(d_s[:, 0]))  # the pixel whose light arrives at 90 deg in S
    theta_cam = math.degrees(math.acos(d_cam[i, 0]))
    assert theta_cam == pytest.approx(36.87, abs=0.05)


# ----------------------------------------------------------------- the projection registry


def test_registry_codes_follow_registration_and_name_the_classes():
    for code, (name, proj) in enumerate(PROJECTIONS.items()):
        assert proj.name == name and proj.code == code
        assert cam_mod.projection(name) is proj
    with pytest.raises(ValueError, match="unknown projection 'mirror'"):
        cam_mod.projection("mirror")


def test_register_refuses_a_taken_name_or_code():
    class Again(cam_mod.Projection):
        name = "pinhole"
        code = len(PROJECTIONS)

    with pytest.raises(ValueError, match="pinhole"):
        cam_mod.register(Again)

    class Skipping(cam_mod.Projection):
        name = "skipping"
        code = len(PROJECTIONS) + 1

    with pytest.raises(ValueError, match="next free"):
        cam_mod.register(Skipping)
    assert "skipping" not in PROJECTIONS


def test_unknown_code_gives_no_direction_rather_than_another_projection():
    cam = tilted_camera("pinhole", 60.0)
    px = pixel_grid(4, 3)
    d, ok = cam_mod._scene_directions(
        px, 4.0, 3.0, cam.basis(), len(PROJECTIONS), 1.0, np.eye(4), False
    )
    assert not ok.any() and np.isnan(d).all()


def _camera_from_reader(projection, fov=None):
    camera = {"position": [0.0, 0.0, 0.0], "direction": [1.0, 0.0, 0.0], "projection": projection}
    if fov is not None:
        camera["fov"] = fov
    body = {
        "name": "dot",
        "shape": "sphere",
        "radius": 0.1,
        "detail": 0,
        "motion": {"position": [5.0, 0.0, 0.0]},
        "surface": {"blackbody": 5000.0},
    }
    return scene_from_dict({"camera": camera, "body": [body]}).camera


@pytest.mark.parametrize("name", sorted(FOV))
def test_scene_reader_follows_the_registry_fov_rules(name):
    from relview.errors import UserError
    from relview.scene import reader

    proj = PROJECTIONS[name]
    assert reader.PROJECTIONS == tuple(PROJECTIONS)
    assert _camera_from_reader(name).fov == proj.fov_default
    if proj.fov_fixed is not None:
        with pytest.raises(UserError, match="fov"):
            _camera_from_reader(name, proj.fov_fixed)
        return
    assert _camera_from_reader(name, proj.fov_max / 2).fov == proj.fov_max / 2
    with pytest.raises(UserError, match="fov"):
        _camera_from_reader(name, proj.fov_max + 1.0)
    if proj.fov_max_inclusive:
        assert _camera_from_reader(name, proj.fov_max).fov == proj.fov_max
    else:
        with pytest.raises(UserError, match="fov"):
            _camera_from_reader(name, proj.fov_max)
