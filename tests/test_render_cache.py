"""The per-process cache of built scene geometry (relview.renderer.scene_geometry).

The reference for every check is the same renderer with the cache emptied: a render
through the cache must equal a render that builds everything afresh, bit for bit, and an
edit of anything the built geometry depends on must give that fresh render, not the
picture of the scene before the edit.
"""

from __future__ import annotations

import copy
import os

import numpy as np
import pytest
from conftest import camera_scene, moving_body

from relview import renderer
from relview.kinematics.uniform import UniformMotion
from relview.renderer import RenderContext, clear_geometry_cache, geometry_key, render
from relview.scene.parts import Effects


def scene():
    return camera_scene(
        [
            moving_body("ball", "sphere", beta=(0.6, 0.0, 0.0), radius=0.6, detail=3),
            moving_body(
                "crate",
                "box",
                beta=(0.0, 0.3, 0.0),
                size=(0.5, 0.5, 0.5),
                position=(1.2, 0.5, 0.0),
                rotation=(0.0, 0.0, 20.0),
            ),
        ],
        resolution=(64, 36),
    )


def same_frames(a, b) -> None:
    """Identical pictures and layers (NaN where the other has NaN)."""
    assert np.array_equal(a.image, b.image)
    assert a.layers.keys() == b.layers.keys()
    for name in a.layers:
        assert np.array_equal(a.layers[name], b.layers[name], equal_nan=True), name


def fresh(s, **kw):
    clear_geometry_cache()
    return render(s, **kw)


def test_second_render_reuses_the_built_geometry_and_equals_a_fresh_build():
    s = scene()
    first = fresh(s)
    groups = RenderContext(s).uniform_groups
    second = render(s)
    assert RenderContext(s).uniform_groups is groups  # nothing built again
    # a copy of the scene (a new object of the same content) shares it too
    assert RenderContext(copy.deepcopy(s)).uniform_groups is groups
    same_frames(first, second)


@pytest.mark.parametrize(
    "edit", ["radius", "detail", "rotation", "beta", "position", "add body", "motion object"]
)
def test_an_edit_of_what_the_geometry_depends_on_builds_it_again(edit):
    s = scene()
    before = fresh(s)
    key = geometry_key(s, s.render.effects)
    ball, crate = s.bodies
    if edit == "radius":
        ball.radius = 0.4
    elif edit == "detail":
        ball.detail = 1
    elif edit == "rotation":
        crate.rotation = np.array([0.0, 0.0, 45.0])
    elif edit == "beta":
        crate.motion = UniformMotion(
            beta=np.array([0.0, -0.3, 0.0]), position=np.array([1.2, 0.5, 0.0]), time=0.0
        )
    elif edit == "position":
        ball.motion.position[0] = -0.5  # an in-place edit of an array
    elif edit == "add body":
        s.bodies.append(
            moving_body("far", "sphere", position=(-1.5, 1.0, 0.0), radius=0.3, detail=2)
        )
    elif edit == "motion object":
        ball.motion = copy.deepcopy(ball.motion)  # same content: the same key
    edited = render(s)
    if edit == "motion object":
        assert geometry_key(s, s.render.effects) == key
        same_frames(before, edited)
        return
    assert geometry_key(s, s.render.effects) != key
    assert not np.array_equal(before.layers["body"], edited.layers["body"])
    same_frames(edited, fresh(s))


def test_effect_switches_key_the_geometry():
    s = scene()
    galilean = Effects(contraction=False)
    assert geometry_key(s, galilean) != geometry_key(s, s.render.effects)
    a = fresh(s, effects=galilean)
    render(s)  # relativistic geometry built and cached beside it
    same_frames(a, render(s, effects=galilean))
    assert not np.array_equal(
        a.layers["rest_position"], render(s).layers["rest_position"], equal_nan=True
    )


def test_a_rewritten_mesh_file_is_read_again(tmp_path):
    import trimesh

    path = tmp_path / "part.obj"
    trimesh.creation.box(extents=(0.6, 0.6, 0.6)).export(path)
    s = scene()
    s.bodies[1].shape, s.bodies[1].file, s.bodies[1].size = "mesh", path, None
    before = fresh(s)
    trimesh.creation.box(extents=(1.0, 0.3, 0.6)).export(path)
    st = path.stat()
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns + 1_000_000))  # a later write
    edited = render(s)
    assert not np.array_equal(before.layers["body"], edited.layers["body"])
    same_frames(edited, fresh(s))


def test_the_cache_holds_a_bounded_number_of_scenes():
    clear_geometry_cache()
    s = scene()
    for k in range(renderer.GEOMETRY_CACHE_SIZE + 3):
        s.bodies[0].radius = 0.3 + 0.01 * k
        RenderContext(s)
    assert len(renderer._GEOMETRY_CACHE) == renderer.GEOMETRY_CACHE_SIZE
