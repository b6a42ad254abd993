"""A shift of every time (or position) in a scene leaves the picture unchanged.

Physics is invariant under translations of time and space (the Poincare group; e.g.
Rindler, Relativity: Special, General and Cosmological, 2nd ed., section 2.6), so the
renderer solves each exposure relative to its exposure event. Shifting the demo flyby by
T seconds must give the same image and data layers; a time too large for float64 to
resolve is refused with a clear message (relview.kinematics.magnitudes).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import write_text

import relview
from relview.errors import SceneError
from relview.scene.model import load_scene

# the demo scene scenes/sphere-flyby.toml as the issue reproduced it (a 1 m ball at 0.95c
# passing 3 m from the camera), kept here so that edits to the demo do not move the test
FLYBY = """[render]
resolution = [960, 540]

[camera]
position = [0.0, -3.0, 0.0]
look_at = [0.0, 0.0, 0.0]
fov = 90.0

[[body]]
name = "ball"
shape = "sphere"
radius = 1.0
[body.motion]
beta = [0.95, 0.0, 0.0]
position = [2.0, 0.0, 0.0]
[body.surface]
pattern = { kind = "grid", period = 0.25, line_width = 0.03, first = { blackbody = 4500.0 }, second = { blackbody = 4500.0, scale = 0.05 } }

[background]
kind = "graticule"
luminance = 1.0e6
"""


def _shifted_flyby(tmp_path: Path, time_s: float, offset=(0.0, 0.0, 0.0)) -> Path:
    """The demo flyby at 64 x 36 with ``time_s`` added to the camera's and the ball's time
    and ``offset`` (m) added to both positions."""
    text = FLYBY
    text = text.replace("resolution = [960, 540]", "resolution = [64, 36]\nexposure = 5.0e6")
    text = text.replace("[camera]\n", f"[camera]\ntime = {time_s!r}\n")
    text = text.replace("[body.motion]\n", f"[body.motion]\ntime = {time_s!r}\n")
    ox, oy, oz = offset
    text = text.replace(
        "position = [0.0, -3.0, 0.0]", f"position = [{ox!r}, {-3.0 + oy!r}, {oz!r}]"
    )
    text = text.replace("look_at = [0.0, 0.0, 0.0]", f"look_at = [{ox!r}, {oy!r}, {oz!r}]")
    text = text.replace("position = [2.0, 0.0, 0.0]", f"position = [{2.0 + ox!r}, {oy!r}, {oz!r}]")
    return write_text(tmp_path, text, f"flyby_{time_s!r}_{ox!r}.toml")


def test_shifting_every_time_leaves_the_picture_and_layers_unchanged(tmp_path):
    reference = relview.render(load_scene(_shifted_flyby(tmp_path, 0.0)))
    assert (reference.layers["body"] >= 0).sum() > 100  # the ball is in view
    for shift in (1e3, 1e6, 1e9):
        frame = relview.render(load_scene(_shifted_flyby(tmp_path, shift)))
        np.testing.assert_array_equal(frame.image, reference.image)
        for name in ("xyz", "doppler", "rest_position", "body", "emit_position"):
            np.testing.assert_array_equal(frame.layers[name], reference.layers[name], err_msg=name)
        # the emission times themselves move with the shift; each is t_E - l/c, rounded
        # once at the size of t_E, so it matches to a few ulp of the shifted time
        hit = reference.layers["body"] >= 0
        np.testing.assert_allclose(
            frame.layers["emit_time"][hit] - shift,
            reference.layers["emit_time"][hit],
            rtol=0,
            atol=4 * np.spacing(shift),
        )


def test_shifting_every_position_leaves_the_picture_unchanged(tmp_path):
    # a shift by a power of two keeps every position of the scene exact in float64, so
    # only the renderer's own arithmetic could tell the two apart
    reference = relview.render(load_scene(_shifted_flyby(tmp_path, 0.0)))
    moved = relview.render(load_scene(_shifted_flyby(tmp_path, 0.0, (2.0**30, -(2.0**30), 0.0))))
    np.testing.assert_array_equal(moved.image, reference.image)
    np.testing.assert_array_equal(moved.layers["rest_position"], reference.layers["rest_position"])


def test_a_time_float64_cannot_resolve_is_a_clear_error(tmp_path):
    path = _shifted_flyby(tmp_path, 1e300)
    with pytest.raises(SceneError, match=r"\[camera\] time.*too large to compute with"):
        load_scene(path)
    # a fresh process, so that any NumPy warning would reach its stderr
    command = "import sys; from relview.cli.app import main; sys.exit(main(sys.argv[1:]))"
    run = subprocess.run(
        [
            sys.executable,
            "-c",
            command,
            "render",
            str(path),
            "-o",
            str(tmp_path / "out.png"),
            "--quiet",
        ],
        capture_output=True,
        text=True,
    )
    assert run.returncode == 2
    assert "too large to compute with" in run.stderr
    assert "Warning" not in run.stderr and "Traceback" not in run.stderr
    assert not (tmp_path / "out.png").exists()


@pytest.mark.parametrize(
    "motion, key",
    [
        ('kind = "uniform"\nbeta = [0.5, 0.0, 0.0]\ntime = 1e17', "time"),
        ('kind = "uniform"\nbeta = [0.5, 0.0, 0.0]\nposition = [0.0, 1e16, 0.0]', "position"),
        ('kind = "hyperbolic"\nacceleration = [1e3, 0.0, 0.0]\ntime = -1e20', "time"),
        ('kind = "orbit"\nradius = 5.0\nbeta = 0.1\ncenter = [1e18, 0.0, 0.0]', "center"),
        (
            'kind = "path"\ntimes = [0.0, 1e16]\npositions = [[0.0, 0.0, 0.0], [1.0, 0.0, 0.0]]',
            "times",
        ),
        ('kind = "spin"\nangular_velocity = 1.0\ntime = 1e16', "time"),
        (
            'kind = "rolling"\nradius = 1.0\nbeta = [0.5, 0.0, 0.0]\nposition = [0.0, 0.0, -1e17]',
            "position",
        ),
    ],
)
def test_each_motion_kind_refuses_unresolvable_times_and_positions(tmp_path, motion, key):
    text = (
        "[camera]\nposition = [0.0, -10.0, 0.0]\nlook_at = [0.0, 0.0, 0.0]\n"
        '[[body]]\nname = "b"\nshape = "sphere"\nradius = 1.0\n'
        f"[body.motion]\n{motion}\n[body.surface]\nblackbody = 5000.0\n"
    )
    with pytest.raises(SceneError, match=rf"\[body.motion\] {key}.*too large to compute with"):
        load_scene(write_text(tmp_path, text))


def test_an_exposure_time_float64_cannot_resolve_is_refused(tmp_path):
    scene = load_scene(_shifted_flyby(tmp_path, 0.0))
    with pytest.raises(relview.errors.UserError, match="too large to compute with"):
        relview.render(scene, 1e17)
