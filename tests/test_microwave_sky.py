"""The microwave sky ([background] kind = "cmb"): the temperature a moving camera records.

References: T(theta) = T0 / (gamma (1 - beta cos theta)) for a blackbody sky seen by an
observer moving at beta, theta measured in the observer's frame from the direction of
motion (Peebles & Wilkinson 1968, Phys. Rev. 174, 2168; the relativistic Doppler factor
of Einstein 1905, section 7); T0 = 2.7255 K (Fixsen 2009, ApJ 707, 916); the solar
system's speed 369.82 km/s and the dipole amplitude 3.362 mK (Planck 2018 results I,
A&A 641, A1, table 3: 3362.08 +- 0.99 uK).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import relview
from relview.errors import SceneError, UserError
from relview.figures.layer_maps import layer_values
from relview.scene.model import scene_from_dict

C_KM_S = 299_792.458  # exact, SI definition
T0 = 2.7255
W, H = 96, 48


def panorama_scene(background: dict, beta=(0.0, 0.0, 0.0)) -> dict:
    return {
        "render": {"resolution": [W, H]},
        "camera": {
            "position": [0.0, 0.0, 0.0],
            "direction": [1.0, 0.0, 0.0],
            "up": [0.0, 0.0, 1.0],
            "projection": "panorama",
            "beta": list(beta),
        },
        "background": {"kind": "cmb", **background},
    }


def panorama_cos_theta() -> tuple[np.ndarray, np.ndarray]:
    """cos of the angle from +x of every pixel centre, and each pixel's solid angle,
    written out here from the equirectangular projection (longitude across the width,
    latitude down the height; camera looking along +x with z up), independently of
    relview.geometry.camera."""
    x = (np.arange(W) + 0.5 - W / 2) / W * 2 * math.pi  # longitude
    y = (H / 2 - (np.arange(H) + 0.5)) / H * math.pi  # latitude
    lon, lat = np.meshgrid(x, y)
    cos_theta = np.cos(lat) * np.cos(lon)  # forward component of the direction
    omega = (2 * math.pi / W) * (math.pi / H) * np.cos(lat)
    return cos_theta, omega


def test_camera_speed_gives_the_published_dipole_in_every_pixel():
    scene = scene_from_dict(
        panorama_scene({"camera_speed": 369.82, "camera_direction": [1.0, 0.0, 0.0]})
    )
    frame = relview.render(scene)
    t = frame.layers["temperature"]
    beta = 369.82 / C_KM_S
    gamma = 1.0 / math.sqrt(1.0 - beta * beta)
    cos_theta, omega = panorama_cos_theta()
    expected = T0 / (gamma * (1.0 - beta * cos_theta))  # Peebles & Wilkinson 1968
    np.testing.assert_allclose(t, expected, rtol=1e-13, atol=0)
    # dipole: the l = 1 coefficient (3 / 4 pi) int T cos(theta) dOmega, by the pixel sum
    dipole = 3.0 / (4.0 * math.pi) * float(np.sum(t * cos_theta * omega))
    assert dipole * 1e3 == pytest.approx(3.362, abs=0.002)  # Planck 2018 I: 3.362 mK
    # the sky at 2.7 K sends no visible light: the picture is the layer, not the image
    assert float(np.max(frame.layers["xyz"])) == 0.0


def test_fast_camera_sees_the_aberrated_dipole():
    # The camera itself moves at 0.5 c through a sky at rest in the scene frame: the
    # pixels are camera-frame directions, so T follows the formula with the camera-frame
    # angle (aberration and Doppler shift together; Einstein 1905, sections 7-8).
    scene = scene_from_dict(panorama_scene({}, beta=(0.5, 0.0, 0.0)))
    t = relview.render(scene).layers["temperature"]
    gamma = 1.0 / math.sqrt(0.75)
    cos_theta, _ = panorama_cos_theta()
    np.testing.assert_allclose(t, T0 / (gamma * (1.0 - 0.5 * cos_theta)), rtol=1e-12)
    assert t.max() == pytest.approx(T0 * math.sqrt(3.0), rel=2e-3)  # ahead: sqrt((1+b)/(1-b))


def test_sky_frame_given_by_its_own_velocity():
    # frame_beta = -u with a camera at rest is the same sky as camera_speed u
    beta = 0.2
    a = relview.render(scene_from_dict(panorama_scene({"frame_beta": [-beta, 0.0, 0.0]})))
    b = relview.render(
        scene_from_dict(
            panorama_scene({"camera_speed": beta * C_KM_S, "camera_direction": [2.0, 0.0, 0.0]})
        )
    )
    np.testing.assert_allclose(a.layers["temperature"], b.layers["temperature"], rtol=1e-13)


def test_doppler_switch_off_gives_the_rest_temperature():
    data = panorama_scene({"camera_speed": 369.82, "camera_direction": [1.0, 0.0, 0.0]})
    data["render"]["effects"] = {"doppler": False}
    t = relview.render(scene_from_dict(data)).layers["temperature"]
    assert np.all(t == T0)


def test_bodies_hide_the_sky_in_the_temperature_layer():
    data = panorama_scene({})
    data["body"] = [
        {
            "name": "ball",
            "shape": "sphere",
            "radius": 1.0,
            "motion": {"position": [5.0, 0.0, 0.0]},
            "surface": {"blackbody": 3000.0},
        }
    ]
    frame = relview.render(scene_from_dict(data))
    seen = frame.layers["body"] >= 0
    assert seen.any() and np.all(np.isnan(frame.layers["temperature"][seen]))
    assert np.all(np.isfinite(frame.layers["temperature"][~seen]))


def test_microwave_sky_keys_are_checked():
    with pytest.raises(SceneError, match="not both") as err:
        scene_from_dict(
            panorama_scene(
                {"frame_beta": [0.1, 0, 0], "camera_speed": 10.0, "camera_direction": [1, 0, 0]}
            )
        )
    assert "frame_beta" in err.value.key
    with pytest.raises(SceneError, match="at or above c") as err:
        scene_from_dict(panorama_scene({"camera_speed": 4e5, "camera_direction": [1, 0, 0]}))
    assert "camera_speed" in err.value.key
    with pytest.raises(SceneError, match="camera_direction"):
        scene_from_dict(panorama_scene({"camera_speed": 10.0}))
    with pytest.raises(SceneError, match="does not apply"):
        scene_from_dict(panorama_scene({"count": 10}))


def test_temperature_layer_map_needs_the_microwave_sky():
    data = panorama_scene({})
    data["background"] = {"kind": "black"}
    frame = relview.render(scene_from_dict(data))
    with pytest.raises(UserError, match="cmb"):
        layer_values(frame, "temperature", np.zeros(3))
