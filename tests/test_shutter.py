"""The open shutter is an unbiased box filter over [t - shutter/2, t + shutter/2].

A pixel whose ray a plate covers for a fraction f of the exposure must record f times
the light of the covered pixel. The analytic covered fraction follows from the plate's
straight worldline: with the delay effect, the pixel's ray along +y meets the plate's
front face (at y = D) at the emission time t_camera - D/c, so the leading edge, which
moves at beta c, crosses that ray at the camera time t_x = t_e + D/c; the pixel is
covered from t_x on (physics.md, "What the camera records").
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import dict_scene

import relview
from relview.kinematics.lorentz import C
from relview.renderer import exposure_times

SHUTTER = 1e-8  # s
BETA = 0.5
DISTANCE = 10.0  # m, camera to the plate's front face
WIDTH = 100.0  # m, plate rest length along the motion (contracted: WIDTH / gamma)


def _plate_scene(covered: float, shutter: float, shutter_samples: int = 8):
    """Camera at the origin looking along +y at a wide plate moving along +x whose leading
    edge crosses the central pixel's ray so that it covers that ray for the fraction
    ``covered`` of the exposure (nominal time 0)."""
    gamma = 1.0 / np.sqrt(1.0 - BETA**2)
    t_cross = (0.5 - covered) * SHUTTER  # camera time at which the edge reaches the ray
    t_emit = t_cross - DISTANCE / C
    # leading edge x_centre + WIDTH/(2 gamma) = 0 at t_emit; centre at x0 + BETA c t
    x0 = -WIDTH / (2 * gamma) - BETA * C * t_emit
    camera = {"position": [0.0, 0.0, 0.0], "look_at": [0.0, 1.0, 0.0], "fov": 10.0}
    plate = {
        "name": "plate",
        "shape": "box",
        "size": [WIDTH, 0.2, 100.0],
        "motion": {"beta": [BETA, 0.0, 0.0], "position": [x0, DISTANCE + 0.1, 0.0]},
        "surface": {"blackbody": 6000.0},
    }
    render = {
        "resolution": [5, 5],
        "samples": 1,
        "exposure": 1e6,
        "shutter": shutter,
        "shutter_samples": shutter_samples,
    }
    return dict_scene(camera, [plate], render)


def _centre_luminance(scene, time=None) -> float:
    return float(relview.render(scene, time).layers["xyz"][2, 2, 1])


def test_exposure_events_are_equal_strata_without_a_repeated_nominal_time():
    # midpoint rule on n equal strata (the stratified box filter; e.g. Pharr, Jakob &
    # Humphreys, Physically Based Rendering, 3rd ed., section 7.3)
    times = exposure_times(0.0, 1.0, 1, 8)
    np.testing.assert_allclose(times, (np.arange(8) + 0.5) / 8 - 0.5, rtol=0, atol=1e-15)
    assert len(np.unique(times)) == 8


@pytest.mark.parametrize("covered, shutter_samples", [(0.5, 8), (0.25, 8), (0.75, 16)])
def test_a_pixel_covered_for_a_fraction_of_the_exposure_records_that_fraction(
    covered, shutter_samples
):
    full = _centre_luminance(_plate_scene(covered, 0.0), time=SHUTTER)  # covered, instant
    empty = _centre_luminance(_plate_scene(covered, 0.0), time=-SHUTTER)
    assert full > 0 and empty == 0  # the plate is in and out of that ray
    blurred = _centre_luminance(_plate_scene(covered, SHUTTER, shutter_samples))
    # these fractions fall on stratum boundaries, where the midpoint rule is exact
    assert blurred / full == pytest.approx(covered, rel=1e-9)
