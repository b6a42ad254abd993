"""Scene-file reading and validation (relview.scene.reader).

Every error case of the validation catalogue has a test that checks the message
names the file, the key and the offending value (and the line where the loader
can find it). Surfaces are the real relview.light.materials objects (each surface kind
reads its own keys there); the tests check the values they were built with on their
attributes, so spectrum and texture files they name are small valid files.
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

import numpy as np
import pytest
import trimesh

from relview.errors import MeshError, SceneError, UserError
from relview.kinematics.kinds import MOTION_KINDS, register_motion
from relview.kinematics.uniform import UniformMotion
from relview.light.materials import (
    SURFACE_KINDS,
    Blackbody,
    EmissionLines,
    Pattern,
    Reflective,
    TabulatedSpectrum,
    register_surface,
)
from relview.scene.model import Scene, load_scene, scene_from_dict
from relview.scene.table import index_lines

REPO = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------- helpers


CAMERA = """\
[camera]
position = [0.0, -5.0, 0.0]
look_at = [0.0, 0.0, 0.0]
"""

BODY = """\
[[body]]
name = "rod"
shape = "box"
size = [1.0, 0.1, 0.1]

[body.motion]
kind = "uniform"
beta = [0.5, 0.0, 0.0]

[body.surface]
blackbody = 5800.0
"""

VALID = CAMERA + "\n" + BODY


def write(tmp_path: Path, text: str, name: str = "scene.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def load_text(tmp_path: Path, text: str) -> Scene:
    return load_scene(write(tmp_path, text))


def error_of(tmp_path: Path, text: str, cls=SceneError) -> UserError:
    with pytest.raises(cls) as info:
        load_text(tmp_path, text)
    return info.value


def line_of(text: str, needle: str) -> int:
    """1-based number of the first line containing ``needle``."""
    for i, line in enumerate(text.splitlines(), 1):
        if needle in line:
            return i
    raise AssertionError(needle)


def assert_names(err: UserError, key: str, value: str, line: int | None = None) -> None:
    message = str(err)
    assert err.file.endswith("scene.toml") and message.startswith(err.file), message
    assert key in message, message
    assert value in message, message
    if line is not None:
        assert err.line == line, message
        assert f"scene.toml:{line}:" in message, message


def replace(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


# --------------------------------------------------------------------------- valid files


def scene_format_example() -> str:
    """The complete example scene of docs/scene-format.md (first ```toml block)."""
    doc = (REPO / "docs" / "scene-format.md").read_text()
    match = re.search(r"```toml\n(.*?)```", doc, re.DOTALL)
    assert match, "docs/scene-format.md has no ```toml example"
    return match.group(1)


def test_documented_example_loads(tmp_path):
    text = scene_format_example()
    # The example references a mesh and a spectrum next to the scene file.
    (tmp_path / "meshes").mkdir()
    trimesh.creation.box(extents=(2.0, 1.0, 0.5)).export(tmp_path / "meshes" / "hull.obj")
    (tmp_path / "hydrogen.csv").write_text("nm,radiance\n400,0.1\n700,0.2\n")
    scene = load_text(tmp_path, text)
    assert scene.title
    assert len(scene.bodies) >= 3
    assert {b.shape for b in scene.bodies} >= {"box", "sphere", "mesh"}


def test_minimal_scene_defaults(tmp_path):
    scene = load_text(tmp_path, VALID)
    assert scene.format == 1 and scene.title == ""
    assert scene.render.resolution == (960, 540)
    assert scene.render.samples == 1 and scene.render.exposure == "auto" and scene.render.seed == 0
    e = scene.render.effects
    assert e.delay and e.contraction and e.aberration and e.doppler and e.beaming
    cam = scene.camera
    assert cam.fov == 60.0 and cam.time == 0.0 and cam.projection == "pinhole"
    np.testing.assert_array_equal(cam.up, [0.0, 0.0, 1.0])
    np.testing.assert_array_equal(cam.beta, [0.0, 0.0, 0.0])
    assert cam.direction is None
    body = scene.bodies[0]
    assert body.name == "rod" and body.shape == "box"
    np.testing.assert_array_equal(body.size, [1.0, 0.1, 0.1])
    np.testing.assert_array_equal(body.rotation, [0.0, 0.0, 0.0])
    assert isinstance(body.motion, UniformMotion)
    np.testing.assert_array_equal(body.motion.beta, [0.5, 0.0, 0.0])
    np.testing.assert_array_equal(body.motion.position, [0.0, 0.0, 0.0])
    assert body.motion.time == 0.0
    assert type(body.surface) is Blackbody
    assert (body.surface.temperature_k, body.surface.scale) == (5800.0, 1.0)
    assert scene.background.kind == "black"
    assert scene.animation is None
    assert scene.source_path == tmp_path / "scene.toml"


def test_body_without_motion_is_at_rest_and_gets_a_name(tmp_path):
    text = CAMERA + '[[body]]\nshape = "sphere"\nradius = 1.0\n[body.surface]\nblackbody = 3000\n'
    body = load_text(tmp_path, text).bodies[0]
    assert body.name == "body1"
    np.testing.assert_array_equal(body.motion.beta, [0.0, 0.0, 0.0])
    assert body.radius == 1.0 and body.detail is None


def test_all_sections_and_keys(tmp_path):
    text = """\
[scene]
title = "Two lamps and a ring"
format = 1

[render]
resolution = [64, 48]
samples = 4
exposure = 250.0
seed = 7

[render.effects]
delay = false
beaming = false

[camera]
position = [1.0, 2.0, 3.0]
direction = [0.0, 2.0, 0.0]
up = [0.0, 0.0, 1.0]
fov = 300.0
projection = "fisheye"
time = 1.5e-9
beta = [0.0, 0.3, 0.0]

[[body]]
name = "lamp"
shape = "cylinder"
radius = 0.2
height = 1.0
detail = 3
rotation = [0.0, 90.0, 0.0]
[body.motion]
beta = [0.0, 0.0, -0.6]
position = [0.0, 4.0, 0.0]
time = 2.0e-9
[body.surface]
lines = [ { nm = 656.28, width_nm = 1.0, radiance = 2.0 },
          { nm = 486.13, width_nm = 0.5, radiance = 1.0 } ]

[[body]]
name = "sign"
shape = "plane"
size = [2.0, 1.0]
[body.surface]
color = [0.9, 0.5, 0.1]
lamp = "D65"
luminance = 80.0

[background]
kind = "stars"
count = 500
seed = 3
temperature = [4000.0, 9000.0]
luminance = 2.0

[animation]
start = 0.0
end = 1.0e-8
frames = 10
fps = 30
"""
    scene = load_text(tmp_path, text)
    assert scene.title == "Two lamps and a ring"
    r = scene.render
    assert r.resolution == (64, 48) and r.samples == 4 and r.exposure == 250.0 and r.seed == 7
    assert (r.effects.delay, r.effects.beaming, r.effects.doppler) == (False, False, True)
    c = scene.camera
    np.testing.assert_allclose(c.direction, [0.0, 1.0, 0.0])  # normalised
    assert c.look_at is None and c.fov == 300.0 and c.projection == "fisheye" and c.time == 1.5e-9
    np.testing.assert_array_equal(c.beta, [0.0, 0.3, 0.0])
    lamp, sign = scene.bodies
    assert (lamp.radius, lamp.height, lamp.detail) == (0.2, 1.0, 3)
    np.testing.assert_array_equal(lamp.rotation, [0.0, 90.0, 0.0])
    assert lamp.motion.time == 2.0e-9
    np.testing.assert_array_equal(lamp.motion.position, [0.0, 4.0, 0.0])
    assert type(lamp.surface) is EmissionLines
    assert lamp.surface.lines == ((656.28, 1.0, 2.0), (486.13, 0.5, 1.0))
    np.testing.assert_array_equal(sign.size, [2.0, 1.0])
    assert type(sign.surface) is Reflective
    s = sign.surface
    assert (s.rgb, s.lamp, s.luminance, s.texture) == ((0.9, 0.5, 0.1), "D65", 80.0, None)
    bg = scene.background
    assert (bg.kind, bg.count, bg.seed, bg.temperature, bg.luminance) == (
        "stars",
        500,
        3,
        (4000.0, 9000.0),
        2.0,
    )
    a = scene.animation
    assert (a.start, a.end, a.frames, a.fps) == (0.0, 1.0e-8, 10, 30.0)


def test_graticule_background_and_panorama(tmp_path):
    text = replace(
        VALID, "look_at = [0.0, 0.0, 0.0]\n", 'look_at = [0.0, 0.0, 0.0]\nprojection = "panorama"\n'
    )
    text += '\n[background]\nkind = "graticule"\nspacing = 10.0\nwidth = 0.5\ntemperature = 5000.0\nluminance = 3.0\n'
    scene = load_text(tmp_path, text)
    assert scene.camera.projection == "panorama" and scene.camera.fov == 360.0
    bg = scene.background
    assert (bg.kind, bg.spacing, bg.width, bg.temperature, bg.luminance) == (
        "graticule",
        10.0,
        0.5,
        (5000.0, 5000.0),
        3.0,
    )


def test_pattern_surface_nests(tmp_path):
    text = replace(
        VALID,
        "blackbody = 5800.0",
        'pattern = { kind = "checks", period = 0.25, line_width = 0.02, '
        "first = { blackbody = 6500 }, second = { color = [0.1, 0.1, 0.1] } }",
    )
    surface = load_text(tmp_path, text).bodies[0].surface
    assert type(surface) is Pattern
    assert (surface.kind, surface.period, surface.line_width, surface.axes) == (
        "checks",
        0.25,
        0.02,
        (0, 1, 2),
    )
    first, second = surface.first, surface.second
    assert type(first) is Blackbody and first.temperature_k == 6500.0
    assert type(second) is Reflective and second.rgb == (0.1, 0.1, 0.1)
    assert second.lamp == 5800.0 and second.luminance == 100.0


def test_single_line_surface_and_blackbody_scale(tmp_path):
    text = replace(
        VALID, "blackbody = 5800.0", "line = { nm = 656.28, width_nm = 1.0, radiance = 1.0 }"
    )
    surface = load_text(tmp_path, text).bodies[0].surface
    assert type(surface) is EmissionLines and surface.lines == ((656.28, 1.0, 1.0),)
    text = replace(VALID, "blackbody = 5800.0", "blackbody = 3000\nscale = 0.5")
    surface = load_text(tmp_path, text).bodies[0].surface
    assert type(surface) is Blackbody and (surface.temperature_k, surface.scale) == (3000.0, 0.5)


def test_paths_resolve_relative_to_scene_file(tmp_path, monkeypatch):
    scene_dir = tmp_path / "project" / "scenes"
    (scene_dir / "meshes").mkdir(parents=True)
    trimesh.creation.box(extents=(1.0, 2.0, 3.0)).export(scene_dir / "meshes" / "crate.stl")
    (scene_dir / "glow.csv").write_text("nm,radiance\n400,1\n800,1\n")
    from PIL import Image

    Image.new("RGB", (4, 4), (200, 10, 10)).save(scene_dir / "paint.png")
    text = (
        CAMERA
        + """
[[body]]
name = "crate"
shape = "mesh"
file = "meshes/crate.stl"
[body.surface]
spectrum = "glow.csv"

[[body]]
name = "panel"
shape = "plane"
size = [1.0, 1.0]
[body.surface]
color = [0.5, 0.5, 0.5]
texture = "paint.png"
"""
    )
    path = write(scene_dir, text)
    monkeypatch.chdir(tmp_path)  # the working directory must not matter
    scene = load_scene(Path("project/scenes/scene.toml"))
    crate, panel = scene.bodies
    assert crate.file == scene_dir / "meshes" / "crate.stl"
    assert type(crate.surface) is TabulatedSpectrum
    assert crate.surface.name == str(scene_dir / "glow.csv")  # the path from_csv was given
    assert type(panel.surface) is Reflective and panel.surface.texture == scene_dir / "paint.png"
    # source_hash: sha256 over the scene bytes and each referenced file (name + bytes).
    h = hashlib.sha256(path.read_bytes())
    for f in (scene_dir / "meshes" / "crate.stl", scene_dir / "glow.csv", scene_dir / "paint.png"):
        h.update(b"\0" + f.name.encode() + b"\0")
        h.update(f.read_bytes())
    assert scene.source_hash == h.hexdigest()


def test_source_hash_follows_referenced_files(tmp_path):
    trimesh.creation.box(extents=(1.0, 1.0, 1.0)).export(tmp_path / "m.ply")
    text = CAMERA + '[[body]]\nshape = "mesh"\nfile = "m.ply"\n[body.surface]\nblackbody = 4000\n'
    first = load_text(tmp_path, text).source_hash
    assert load_text(tmp_path, text).source_hash == first
    trimesh.creation.box(extents=(1.0, 1.0, 2.0)).export(tmp_path / "m.ply")
    assert load_text(tmp_path, text).source_hash != first
    assert (
        load_text(tmp_path, text + "\n# a comment\n").source_hash
        != load_text(tmp_path, text).source_hash
    )


def test_from_dict_builds_the_same_scene(tmp_path):
    data = {
        "camera": {"position": [0.0, -5.0, 0.0], "look_at": [0.0, 0.0, 0.0]},
        "body": [
            {
                "name": "rod",
                "shape": "box",
                "size": (1.0, 0.1, 0.1),
                "motion": {"kind": "uniform", "beta": np.array([0.5, 0.0, 0.0])},
                "surface": {"blackbody": 5800.0},
            }
        ],
    }
    scene = Scene.from_dict(data)
    from_file = load_text(tmp_path, VALID)
    np.testing.assert_array_equal(scene.bodies[0].motion.beta, from_file.bodies[0].motion.beta)
    np.testing.assert_array_equal(scene.bodies[0].size, from_file.bodies[0].size)
    assert scene.source_path is None and len(scene.source_hash) == 64
    data["camera"]["fov"] = 0.0
    with pytest.raises(SceneError) as info:
        scene_from_dict(data, source="my-script")
    assert str(info.value).startswith("my-script: [camera] fov: ")


def test_from_dict_accepts_paths_and_ready_made_objects(tmp_path):
    trimesh.creation.box(extents=(1.0, 1.0, 1.0)).export(tmp_path / "cube.stl")
    surface = Blackbody(4000.0)
    motion = UniformMotion(beta=np.array([0.1, 0.0, 0.0]))
    data = {
        "camera": {"position": [0.0, -5.0, 0.0], "direction": [0.0, 1.0, 0.0]},
        "body": [
            {"shape": "mesh", "file": tmp_path / "cube.stl", "surface": surface, "motion": motion}
        ],
    }
    b = scene_from_dict(data, base_dir=tmp_path).bodies[0]
    assert b.file == tmp_path / "cube.stl" and b.surface is surface and b.motion is motion


def test_line_numbers_in_later_bodies_and_dotted_keys(tmp_path):
    second = replace(BODY, 'name = "rod"', 'name = "beam"').replace(
        "beta = [0.5, 0.0, 0.0]", "beta = [0.0, 0.0, 1.5]"
    )
    text = VALID + "\n" + second
    err = error_of(tmp_path, text)
    assert_names(err, '[body.motion] beta (body "beam")', "[0.0, 0.0, 1.5]", line_of(text, "1.5"))
    # dotted keys inside a [[body]] table, and a multi-line array before them
    text = (
        CAMERA
        + '[[body]]\nname = "dot"\nshape = "box"\nsize = [\n  1.0,  # x [m]\n  1.0,\n  1.0,\n]\n'
        + 'motion.kind = "uniform"\nmotion.beta = [0.0, 2.0, 0.0]\nsurface.blackbody = 3000\n'
    )
    err = error_of(tmp_path, text)
    assert_names(
        err, '[body.motion] beta (body "dot")', "[0.0, 2.0, 0.0]", line_of(text, "motion.beta")
    )


def test_index_lines_follows_tables_and_arrays_of_tables():
    text = (
        '[camera]\nposition = [0, 0, 0]\n[[body]]\nname = "a"\n[body.surface]\nblackbody = 1\n'
        '[[body]]\n"name" = "b"\nsurface = { line = { nm = 500 } }\nnote = """\nfov = 1\n"""\nshape = "box"\n'
    )
    lines = index_lines(text)
    assert lines[("camera", "position")] == 2
    assert lines[("body", 0)] == 3 and lines[("body", 0, "surface", "blackbody")] == 6
    assert lines[("body", 1)] == 7 and lines[("body", 1, "name")] == 8
    assert lines[("body", 1, "surface")] == 9
    assert ("body", 1, "fov") not in lines  # inside a multi-line string
    assert lines[("body", 1, "shape")] == 13


def test_registered_motion_kind_is_used(tmp_path):
    class Spin:
        def __init__(self, rate):
            self.rate = rate

    def parse_spin(table):
        table.check_keys(("kind", "rate"))
        return Spin(table.number("rate", positive=True, unit="rad/s"))

    register_motion("test-spin", parse_spin)
    try:
        text = replace(
            VALID, 'kind = "uniform"\nbeta = [0.5, 0.0, 0.0]', 'kind = "test-spin"\nrate = 3.0'
        )
        assert load_text(tmp_path, text).bodies[0].motion.rate == 3.0
        err = error_of(tmp_path, replace(text, "rate = 3.0", "rate = -3.0"))
        assert_names(err, '[body.motion] rate (body "rod")', "-3.0", line_of(text, "rate ="))
    finally:
        MOTION_KINDS.pop("test-spin")


def test_registered_surface_kind_is_used(tmp_path):
    # a new surface kind: one class with its schema, plus its registration
    class Glow(Blackbody):
        @classmethod
        def from_table(cls, table):
            return cls(
                table.number("test-glow", positive=True, unit="K"), scale=table.number("gain", 1.0)
            )

    register_surface("test-glow", Glow.from_table, extras=("gain",))
    try:
        text = replace(VALID, "blackbody = 5800.0", "test-glow = 4000.0\ngain = 0.25")
        surface = load_text(tmp_path, text).bodies[0].surface
        assert type(surface) is Glow and (surface.temperature_k, surface.scale) == (4000.0, 0.25)
        # the table's own checks name the key and line
        err = error_of(tmp_path, replace(text, "test-glow = 4000.0", "test-glow = -4000.0"))
        assert_names(
            err, '[body.surface] test-glow (body "rod")', "-4000.0", line_of(text, "test-glow")
        )
        # a constructor's ValueError is reported at the kind key, with its value
        err = error_of(tmp_path, replace(text, "gain = 0.25", "gain = -1.0"))
        assert_names(
            err,
            '[body.surface] test-glow (body "rod")',
            "test-glow = 4000.0",
            line_of(text, "test-glow"),
        )
        assert "blackbody scale must be finite and >= 0" in str(err)
        # its extra key belongs to it alone
        text = replace(VALID, "blackbody = 5800.0", "blackbody = 5800.0\ngain = 2")
        err = error_of(tmp_path, text)
        assert_names(err, '[body.surface] gain (body "rod")', "gain = 2", line_of(text, "gain"))
        assert "applies only to test-glow surfaces, not blackbody" in str(err)
        # and it can fill a pattern
        text = replace(
            VALID,
            "blackbody = 5800.0",
            'pattern = { kind = "checks", '
            "first = { test-glow = 3000 }, second = { blackbody = 2000 } }",
        )
        assert type(load_text(tmp_path, text).bodies[0].surface.first) is Glow
    finally:
        SURFACE_KINDS.pop("test-glow")
    err = error_of(tmp_path, replace(VALID, "blackbody = 5800.0", "test-glow = 4000.0"))
    assert 'unknown key "test-glow"' in str(err)


# --------------------------------------------------------------------------- error catalogue


def test_syntax_error_has_line_and_column(tmp_path):
    text = VALID.replace("fov", "") + "\n[render]\nsamples = = 2\n"
    err = error_of(tmp_path, text)
    assert err.line == line_of(text, "samples = = 2") and err.column is not None
    assert f"scene.toml:{err.line}:{err.column}: TOML syntax error" in str(err)


def test_missing_scene_file(tmp_path):
    with pytest.raises(SceneError) as info:
        load_scene(tmp_path / "nowhere.toml")
    assert "nowhere.toml" in str(info.value) and "does not exist" in str(info.value)


def test_scene_file_not_utf8(tmp_path):
    path = tmp_path / "scene.toml"
    path.write_bytes(VALID.encode() + b'\n[scene]\ntitle = "caf\xe9"\n')
    with pytest.raises(SceneError) as info:
        load_scene(path)
    assert (
        "scene.toml" in str(info.value) and "UTF-8" in str(info.value) and "0xe9" in str(info.value)
    )


@pytest.mark.parametrize(
    "old, new, key, suggestion",
    [
        ("[camera]", "[camra]", "camra", '"camera"'),
        (
            "look_at = [0.0, 0.0, 0.0]",
            "look_at = [0.0, 0.0, 0.0]\nfvo = 60.0",
            "[camera] fvo",
            '"fov"',
        ),
        (
            "size = [1.0, 0.1, 0.1]",
            "size = [1.0, 0.1, 0.1]\nrotaton = [0, 0, 0]",
            '[body] rotaton (body "rod")',
            '"rotation"',
        ),
        (
            'kind = "uniform"',
            'kind = "uniform"\npositon = [0, 0, 0]',
            '[body.motion] positon (body "rod")',
            '"position"',
        ),
        (
            "blackbody = 5800.0",
            "blackbdy = 5800.0",
            '[body.surface] blackbdy (body "rod")',
            '"blackbody"',
        ),
    ],
)
def test_unknown_keys_suggest_nearest(tmp_path, old, new, key, suggestion):
    text = replace(VALID, old, new)
    err = error_of(tmp_path, text)
    bad = key.split("]")[-1].split("(")[0].strip() if "]" in key else key
    assert_names(err, key, f'unknown key "{bad}"', line_of(text, new.splitlines()[-1]))
    assert f"did you mean {suggestion}?" in str(err)


def test_unknown_keys_in_other_sections(tmp_path):
    cases = [
        ("[render]\nsampels = 2\n", "[render] sampels", '"samples"'),
        (
            "[render.effects]\ndoppler_shift = false\n",
            "[render.effects] doppler_shift",
            '"doppler"',
        ),
        ('[background]\nkind = "stars"\ncuont = 5\n', "[background] cuont", '"count"'),
        ("[animation]\nframe = 5\n", "[animation] frame", '"frames"'),
        ('[scene]\ntitel = "x"\n', "[scene] titel", '"title"'),
    ]
    for section, key, suggestion in cases:
        text = VALID + "\n" + section
        err = error_of(tmp_path, text)
        assert_names(err, key, "unknown key", len(text.splitlines()))
        assert f"did you mean {suggestion}?" in str(err)


# Wrong types, NaN/inf, zero or negative sizes: (old text, new text, key, value, what the message says)
BAD_VALUES = [
    (
        "look_at = [0.0, 0.0, 0.0]",
        'look_at = [0.0, 0.0, 0.0]\nfov = "sixty"',
        "[camera] fov",
        '"sixty"',
        "expected",
    ),
    (
        "position = [0.0, -5.0, 0.0]",
        "position = [0.0, -5.0]",
        "[camera] position",
        "[0.0, -5.0]",
        "expected",
    ),
    (
        "position = [0.0, -5.0, 0.0]",
        'position = [0.0, "a", 1.0]',
        "[camera] position",
        '[0.0, "a", 1.0]',
        "expected",
    ),
    ("beta = [0.5, 0.0, 0.0]", "beta = 0.5", '[body.motion] beta (body "rod")', "0.5", "expected"),
    (
        "look_at = [0.0, 0.0, 0.0]",
        "look_at = [0.0, 0.0, 0.0]\ntime = true",
        "[camera] time",
        "true",
        "expected",
    ),
    ('name = "rod"', "name = 7", "[body] name (body #1)", "7", "expected"),
    (
        "blackbody = 5800.0",
        'blackbody = "hot"',
        '[body.surface] blackbody (body "rod")',
        '"hot"',
        "expected",
    ),
    (
        "look_at = [0.0, 0.0, 0.0]",
        "look_at = [0.0, 0.0, 0.0]\nfov = nan",
        "[camera] fov",
        "nan",
        "finite",
    ),
    (
        "position = [0.0, -5.0, 0.0]",
        "position = [inf, -5.0, 0.0]",
        "[camera] position",
        "[inf, -5.0, 0.0]",
        "finite",
    ),
    (
        "blackbody = 5800.0",
        "blackbody = -inf",
        '[body.surface] blackbody (body "rod")',
        "-inf",
        "finite",
    ),
    (
        "beta = [0.5, 0.0, 0.0]",
        "beta = [nan, 0.0, 0.0]",
        '[body.motion] beta (body "rod")',
        "[nan, 0.0, 0.0]",
        "finite",
    ),
    (
        "size = [1.0, 0.1, 0.1]",
        "size = [1.0, 0.0, 0.1]",
        '[body] size (body "rod")',
        "[1.0, 0.0, 0.1]",
        "> 0",
    ),
    (
        "size = [1.0, 0.1, 0.1]",
        "size = [1.0, -0.1, 0.1]",
        '[body] size (body "rod")',
        "[1.0, -0.1, 0.1]",
        "> 0",
    ),
    (
        'shape = "box"\nsize = [1.0, 0.1, 0.1]',
        'shape = "sphere"\nradius = -1.0',
        '[body] radius (body "rod")',
        "-1.0",
        "> 0",
    ),
    (
        'shape = "box"\nsize = [1.0, 0.1, 0.1]',
        'shape = "cylinder"\nradius = 1.0\nheight = 0.0',
        '[body] height (body "rod")',
        "0.0",
        "> 0",
    ),
    (
        'shape = "box"\nsize = [1.0, 0.1, 0.1]',
        'shape = "plane"\nsize = [0.0, 1.0]',
        '[body] size (body "rod")',
        "[0.0, 1.0]",
        "> 0",
    ),
    (
        "blackbody = 5800.0",
        "blackbody = 0.0",
        '[body.surface] blackbody (body "rod")',
        "0.0",
        "> 0",
    ),
    (
        "blackbody = 5800.0",
        "blackbody = 5800.0\nscale = 0",
        '[body.surface] scale (body "rod")',
        "0",
        "> 0",
    ),
]


@pytest.mark.parametrize("old, new, key, value, says", BAD_VALUES)
def test_bad_values(tmp_path, old, new, key, value, says):
    text = replace(VALID, old, new)
    err = error_of(tmp_path, text)
    assert_names(err, key, value, line_of(text, new.splitlines()[-1]))
    assert says in str(err)


@pytest.mark.parametrize(
    "section, key, value, says",
    [
        ("[render]\nresolution = [640]\n", "[render] resolution", "[640]", "expected"),
        (
            "[render]\nresolution = [640.5, 480]\n",
            "[render] resolution",
            "[640.5, 480]",
            "expected",
        ),
        ("[render]\nsamples = 2.5\n", "[render] samples", "2.5", "expected"),
        ('[render.effects]\ndelay = "no"\n', "[render.effects] delay", '"no"', "expected"),
        ("[render]\nresolution = [0, 540]\n", "[render] resolution", "[0, 540]", ">= 1"),
        ("[render]\nresolution = [960, -1]\n", "[render] resolution", "[960, -1]", ">= 1"),
        ("[render]\nsamples = 0\n", "[render] samples", "samples = 0", ">= 1"),
        (
            '[render]\nexposure = "automatic"\n',
            "[render] exposure",
            '"automatic"',
            'did you mean "auto"',
        ),
        ("[render]\nexposure = -5.0\n", "[render] exposure", "-5.0", "> 0"),
    ],
)
def test_bad_render_values(tmp_path, section, key, value, says):
    text = VALID + "\n" + section
    err = error_of(tmp_path, text)
    assert_names(err, key, value, len(text.splitlines()))
    assert says in str(err)


@pytest.mark.parametrize(
    "extra, key, value",
    [
        ("fov = 180.0", "[camera] fov", "180.0"),
        ("fov = 0.0", "[camera] fov", "0.0"),
        ("fov = -10", "[camera] fov", "-10"),
        ('projection = "fisheye"\nfov = 361.0', "[camera] fov", "361.0"),
        ('projection = "panorama"\nfov = 90.0', "[camera] fov", "90.0"),
    ],
)
def test_fov_out_of_range(tmp_path, extra, key, value):
    text = replace(VALID, "look_at = [0.0, 0.0, 0.0]", "look_at = [0.0, 0.0, 0.0]\n" + extra)
    err = error_of(tmp_path, text)
    assert_names(err, key, value, line_of(text, "fov ="))


def test_fisheye_accepts_full_circle(tmp_path):
    text = replace(
        VALID,
        "look_at = [0.0, 0.0, 0.0]",
        'look_at = [0.0, 0.0, 0.0]\nprojection = "fisheye"\nfov = 360',
    )
    assert load_text(tmp_path, text).camera.fov == 360.0


@pytest.mark.parametrize(
    "beta, speed",
    [("[0.8, 0.8, 0.0]", "1.13137"), ("[1.0, 0.0, 0.0]", "1"), ("[0.0, 0.0, -3.0]", "3")],
)
def test_body_speed_at_or_above_c(tmp_path, beta, speed):
    text = replace(VALID, "beta = [0.5, 0.0, 0.0]", f"beta = {beta}")
    err = error_of(tmp_path, text)
    assert_names(err, '[body.motion] beta (body "rod")', beta, line_of(text, "beta ="))
    assert f"speed |beta| = {speed} is at or above c" in str(err)


def test_camera_speed_at_or_above_c(tmp_path):
    text = replace(
        VALID, "look_at = [0.0, 0.0, 0.0]", "look_at = [0.0, 0.0, 0.0]\nbeta = [0.0, 0.99999, 0.01]"
    )
    err = error_of(tmp_path, text)
    assert_names(
        err, "[camera] beta", "[0.0, 0.99999, 0.01]", line_of(text, "beta = [0.0, 0.99999")
    )
    assert "at or above c" in str(err)


def test_look_at_equal_to_position(tmp_path):
    text = replace(VALID, "look_at = [0.0, 0.0, 0.0]", "look_at = [0.0, -5.0, 0.0]")
    err = error_of(tmp_path, text)
    assert_names(err, "[camera] look_at", "[0.0, -5.0, 0.0]", line_of(text, "look_at"))
    assert "equals the camera position" in str(err)


@pytest.mark.parametrize("up", ["[0.0, 1.0, 0.0]", "[0.0, -2.0, 0.0]"])
def test_up_parallel_to_view(tmp_path, up):
    text = replace(VALID, "look_at = [0.0, 0.0, 0.0]", f"look_at = [0.0, 0.0, 0.0]\nup = {up}")
    err = error_of(tmp_path, text)
    assert_names(err, "[camera] up", up, line_of(text, "up ="))
    assert "parallel to the view direction" in str(err)


def test_zero_direction_and_zero_up(tmp_path):
    text = replace(VALID, "look_at = [0.0, 0.0, 0.0]", "direction = [0, 0, 0]")
    assert_names(
        error_of(tmp_path, text), "[camera] direction", "[0, 0, 0]", line_of(text, "direction")
    )
    text = replace(VALID, "look_at = [0.0, 0.0, 0.0]", "look_at = [0.0, 0.0, 0.0]\nup = [0, 0, 0]")
    assert_names(error_of(tmp_path, text), "[camera] up", "[0, 0, 0]", line_of(text, "up ="))


def test_exactly_one_of_look_at_and_direction(tmp_path):
    text = replace(
        VALID, "look_at = [0.0, 0.0, 0.0]", "look_at = [0.0, 0.0, 0.0]\ndirection = [0.0, 1.0, 0.0]"
    )
    err = error_of(tmp_path, text)
    assert_names(
        err, "[camera] direction", "direction = [0.0, 1.0, 0.0]", line_of(text, "direction")
    )
    assert "exactly one of look_at, direction" in str(err)  # (and aim_at, the third way)
    text = replace(VALID, "look_at = [0.0, 0.0, 0.0]\n", "")
    err = error_of(tmp_path, text)
    assert "[camera]" in str(err) and "neither" in str(err) and err.line == 1


def test_missing_required_keys(tmp_path):
    text = replace(VALID, "position = [0.0, -5.0, 0.0]\n", "")
    assert_names(
        error_of(tmp_path, text), "[camera] position", 'missing required key "position"', 1
    )
    text = replace(VALID, "size = [1.0, 0.1, 0.1]\n", "")
    assert_names(
        error_of(tmp_path, text),
        '[body] size (body "rod")',
        'missing required key "size"',
        line_of(text, "[[body]]"),
    )
    text = BODY
    assert_names(error_of(tmp_path, text), "camera", 'missing required key "camera"')
    text = replace(VALID, "[body.surface]\nblackbody = 5800.0\n", "")
    assert_names(
        error_of(tmp_path, text),
        '[body] surface (body "rod")',
        'missing required key "surface"',
        line_of(text, "[[body]]"),
    )


def test_key_for_another_shape(tmp_path):
    text = replace(VALID, "size = [1.0, 0.1, 0.1]", "size = [1.0, 0.1, 0.1]\nradius = 0.5")
    err = error_of(tmp_path, text)
    assert_names(err, '[body] radius (body "rod")', "radius = 0.5", line_of(text, "radius"))
    assert 'does not apply to shape "box"' in str(err)


@pytest.mark.parametrize(
    "old, new, key, value, suggestion",
    [
        ('shape = "box"', 'shape = "shpere"', '[body] shape (body "rod")', '"shpere"', '"sphere"'),
        (
            'kind = "uniform"',
            'kind = "unifrom"',
            '[body.motion] kind (body "rod")',
            '"unifrom"',
            '"uniform"',
        ),
        (
            "look_at = [0.0, 0.0, 0.0]",
            'look_at = [0.0, 0.0, 0.0]\nprojection = "fishey"',
            "[camera] projection",
            '"fishey"',
            '"fisheye"',
        ),
        (
            "blackbody = 5800.0",
            (
                'pattern = { kind = "check", first = { blackbody = 1000 }, '
                "second = { blackbody = 2000 } }"
            ),
            '[body.surface] pattern.kind (body "rod")',
            '"check"',
            '"checks"',
        ),
        (
            "blackbody = 5800.0",
            'color = [0.5, 0.5, 0.5]\nlamp = "D56"',
            '[body.surface] lamp (body "rod")',
            '"D56"',
            '"D65"',
        ),
    ],
)
def test_unknown_values_suggest(tmp_path, old, new, key, value, suggestion):
    text = replace(VALID, old, new)
    err = error_of(tmp_path, text)
    assert_names(err, key, value, line_of(text, new.splitlines()[-1]))
    assert f"did you mean {suggestion}?" in str(err)


def test_unknown_background_kind(tmp_path):
    text = VALID + '\n[background]\nkind = "starz"\n'
    err = error_of(tmp_path, text)
    assert_names(err, "[background] kind", '"starz"', len(text.splitlines()))
    assert 'did you mean "stars"?' in str(err)


def test_background_key_for_other_kind_and_ranges(tmp_path):
    text = VALID + '\n[background]\nkind = "graticule"\ncount = 10\n'
    err = error_of(tmp_path, text)
    assert_names(err, "[background] count", "count = 10", len(text.splitlines()))
    assert 'does not apply to background kind "graticule"' in str(err)
    text = VALID + '\n[background]\nkind = "stars"\ntemperature = [9000.0, 3000.0]\n'
    assert_names(
        error_of(tmp_path, text),
        "[background] temperature",
        "[9000.0, 3000.0]",
        len(text.splitlines()),
    )
    text = VALID + '\n[background]\nkind = "graticule"\nspacing = 5.0\nwidth = 6.0\n'
    assert_names(error_of(tmp_path, text), "[background] width", "6.0", len(text.splitlines()))


def test_duplicate_body_names(tmp_path):
    text = VALID + "\n" + BODY
    err = error_of(tmp_path, text)
    second_name_line = [i for i, line in enumerate(text.splitlines(), 1) if line == 'name = "rod"'][
        1
    ]
    assert_names(err, "[body] name", '"rod"', second_name_line)
    assert "duplicate body name" in str(err) and "body #1" in str(err)


def test_body_must_be_array_of_tables(tmp_path):
    text = CAMERA + '[body]\nshape = "box"\n'
    err = error_of(tmp_path, text)
    assert "[[body]]" in str(err) and err.line == line_of(text, "[body]")


def test_format_newer_than_supported(tmp_path):
    text = "[scene]\nformat = 2\nnew_key_of_format_2 = 1\n\n" + VALID
    err = error_of(tmp_path, text)
    assert_names(err, "[scene] format", "format = 2", 2)
    assert "newer than this version of relview supports (up to 1)" in str(err)
    text = "[scene]\nformat = 0\n\n" + VALID
    assert_names(error_of(tmp_path, text), "[scene] format", "format = 0", 2)


def test_animation_end_before_start_and_frames(tmp_path):
    text = VALID + "\n[animation]\nstart = 1.0e-8\nend = 0.5e-8\nframes = 10\n"
    err = error_of(tmp_path, text)
    assert_names(err, "[animation] end", "5e-09", line_of(text, "end ="))
    assert "before start" in str(err)
    text = VALID + "\n[animation]\nstart = 0.0\nend = 1.0\nframes = 0\n"
    assert_names(
        error_of(tmp_path, text), "[animation] frames", "frames = 0", line_of(text, "frames =")
    )
    text = VALID + "\n[animation]\nfps = 0\n"
    assert_names(error_of(tmp_path, text), "[animation] fps", "fps = 0", line_of(text, "fps ="))


def test_surface_needs_exactly_one_kind(tmp_path):
    text = replace(VALID, "blackbody = 5800.0", "blackbody = 5800.0\ncolor = [0.5, 0.5, 0.5]")
    err = error_of(tmp_path, text)
    assert_names(
        err,
        '[body.surface] color (body "rod")',
        "blackbody = 5800.0, color = [0.5, 0.5, 0.5]",
        line_of(text, "color"),
    )
    assert "exactly one kind" in str(err)
    text = replace(VALID, "blackbody = 5800.0", "scale = 2.0")
    err = error_of(tmp_path, text)
    assert "[body.surface]" in str(err) and "no surface kind given" in str(err)
    assert err.line == line_of(text, "[body.surface]")
    text = replace(VALID, "blackbody = 5800.0", "blackbody = 5800.0\nlamp = 3000.0")
    err = error_of(tmp_path, text)
    assert_names(err, '[body.surface] lamp (body "rod")', "lamp = 3000.0", line_of(text, "lamp"))
    assert "applies only to color surfaces" in str(err)


def test_surface_value_checks(tmp_path):
    cases = [
        ("color = [1.2, 0.5, 0.5]", '[body.surface] color (body "rod")', "[1.2, 0.5, 0.5]", "0..1"),
        (
            "line = { nm = 656.28, width_nm = 0.0, radiance = 1.0 }",
            '[body.surface] line.width_nm (body "rod")',
            "width_nm = 0.0",
            "> 0",
        ),
        (
            "line = { nm = 656.28, width = 1.0, radiance = 1.0 }",
            '[body.surface] line.width (body "rod")',
            "unknown key",
            'did you mean "width_nm"',
        ),
        ("lines = []", '[body.surface] lines (body "rod")', "[]", "non-empty"),
        (
            (
                'pattern = { kind = "grid", period = 0.1, line_width = 0.2, first = { blackbody = 1000 }, '
                "second = { blackbody = 2000 } }"
            ),
            '[body.surface] pattern.line_width (body "rod")',
            "0.2",
            "smaller",
        ),
        (
            'pattern = { kind = "grid", first = { blackbody = 1000 }, second = { blackbdy = 2000 } }',
            '[body.surface] pattern.second.blackbdy (body "rod")',
            "2000",
            'did you mean "blackbody"',
        ),
        (
            'pattern = { kind = "grid", axes = [0, 3], first = { blackbody = 1000 }, second = { blackbody = 2000 } }',
            '[body.surface] pattern.axes (body "rod")',
            "[0, 3]",
            "distinct values from 0, 1, 2",
        ),
        (
            'pattern = { kind = "grid", first = { blackbody = 1000 } }',
            '[body.surface] pattern.second (body "rod")',
            'missing required key "second"',
            "second",
        ),
    ]
    for new, key, value, hint in cases:
        text = replace(VALID, "blackbody = 5800.0", new)
        err = error_of(tmp_path, text)
        assert_names(err, key, value, line_of(text, new))
        assert hint in str(err)


def test_spectrum_and_texture_files(tmp_path):
    text = replace(VALID, "blackbody = 5800.0", 'spectrum = "missing.csv"')
    err = error_of(tmp_path, text)
    assert_names(
        err, '[body.surface] spectrum (body "rod")', '"missing.csv"', line_of(text, "spectrum")
    )
    assert "not found" in str(err) and str(tmp_path / "missing.csv") in str(err)
    (tmp_path / "paint.png").write_bytes(b"not an image at all")
    text = replace(VALID, "blackbody = 5800.0", 'color = [0.5, 0.5, 0.5]\ntexture = "paint.png"')
    err = error_of(tmp_path, text)
    assert_names(
        err, '[body.surface] texture (body "rod")', '"paint.png"', line_of(text, "texture")
    )
    assert "not a readable image" in str(err)


# --------------------------------------------------------------------------- mesh files

MESH_BODY = (
    CAMERA
    + """
[[body]]
name = "hull"
shape = "mesh"
file = "{file}"
[body.surface]
blackbody = 5800.0
"""
)


def test_mesh_body_loads_and_scales(tmp_path):
    trimesh.creation.box(extents=(1.0, 2.0, 3.0)).export(tmp_path / "crate.obj")
    text = MESH_BODY.format(file="crate.obj").replace(
        'shape = "mesh"', 'shape = "mesh"\nscale = 0.5'
    )
    body = load_text(tmp_path, text).bodies[0]
    assert body.file == tmp_path / "crate.obj" and body.scale == 0.5 and body.center is True


@pytest.mark.parametrize(
    "make, problem",
    [
        (None, "not found"),
        (lambda p: p.write_bytes(b""), "empty"),
        (
            lambda p: p.write_bytes(
                b"ply\nformat binary_little_endian 1.0\nelement vertex 9\nproperty float x\n"
                b"end_header\n\x00"
            ),
            "cannot read mesh file",
        ),
        (lambda p: p.mkdir(), "not a file"),
    ],
)
def test_bad_mesh_files(tmp_path, make, problem):
    mesh = tmp_path / "hull.ply"
    if make is not None:
        make(mesh)
    text = MESH_BODY.format(file="hull.ply")
    err = error_of(tmp_path, text, cls=UserError)
    assert_names(err, '[body] file (body "hull")', '"hull.ply"', line_of(text, "file ="))
    assert problem in str(err)
    if make is not None and problem != "not a file":
        assert isinstance(err, MeshError)


@pytest.mark.skipif(
    not hasattr(__import__("os"), "geteuid") or __import__("os").geteuid() == 0,
    reason="root reads files regardless of permissions",
)
def test_unreadable_mesh_file(tmp_path):
    mesh = tmp_path / "hull.obj"
    trimesh.creation.box().export(mesh)
    mesh.chmod(0)
    try:
        err = error_of(tmp_path, MESH_BODY.format(file="hull.obj"), cls=UserError)
    finally:
        mesh.chmod(0o644)
    assert_names(err, '[body] file (body "hull")', '"hull.obj"')
    assert "cannot read" in str(err) or "not readable" in str(err)


# --------------------------------------------------------------------------- real materials


def test_documented_example_builds_real_materials(tmp_path):
    materials = pytest.importorskip("relview.light.materials")
    (tmp_path / "meshes").mkdir()
    trimesh.creation.box(extents=(2.0, 1.0, 0.5)).export(tmp_path / "meshes" / "hull.obj")
    (tmp_path / "hydrogen.csv").write_text("nm,radiance\n400,0.1\n700,0.2\n")
    scene = load_text(tmp_path, scene_format_example())
    kinds = [type(b.surface).__name__ for b in scene.bodies]
    assert kinds == ["Pattern", "Blackbody", "Reflective", "EmissionLines", "TabulatedSpectrum"]
    assert all(isinstance(b.surface, materials.Surface) for b in scene.bodies)


def test_malformed_spectrum_csv_names_scene_key_and_csv_line(tmp_path):
    pytest.importorskip("relview.light.materials")
    (tmp_path / "glow.csv").write_text("nm,radiance\n400,0.1\n500,abc\n")
    text = replace(VALID, "blackbody = 5800.0", 'spectrum = "glow.csv"')
    err = error_of(tmp_path, text)
    assert_names(
        err, '[body.surface] spectrum (body "rod")', '"glow.csv"', line_of(text, "spectrum")
    )
    assert "glow.csv, line 3" in str(err)


def test_motion_kinds_from_relview_motion_are_registered(tmp_path):
    pytest.importorskip("relview.kinematics.kinds")
    text = replace(
        VALID,
        'kind = "uniform"\nbeta = [0.5, 0.0, 0.0]',
        'kind = "hyperbolic"\nacceleration = [9.81, 0, 0]',
    )
    motion = load_text(tmp_path, text).bodies[0].motion
    assert type(motion).__name__ == "HyperbolicMotion"
    err = error_of(tmp_path, replace(text, "acceleration =", "acceleraton ="))
    assert_names(
        err, '[body.motion] acceleraton (body "rod")', "acceleraton", line_of(text, "acceleration")
    )


def test_real_materials_are_built(tmp_path):
    materials = pytest.importorskip("relview.light.materials")
    text = replace(
        VALID,
        "blackbody = 5800.0",
        'pattern = { kind = "checks", period = 0.25, line_width = 0.02, '
        "first = { blackbody = 6500 }, second = { color = [0.1, 0.1, 0.1] } }",
    )
    surface = load_text(tmp_path, text).bodies[0].surface
    assert isinstance(surface, materials.Pattern)
    assert isinstance(load_text(tmp_path, VALID).bodies[0].surface, materials.Blackbody)
