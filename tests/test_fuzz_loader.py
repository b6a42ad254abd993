"""Property-based fuzzing of the scene loader: bad input gives a UserError, never a crash.

The property (the project's rule for bad input, docs/errors.md): whatever a scene file
or a scene dict holds, ``load_scene`` / ``scene_from_dict`` either return a Scene or
raise :class:`relview.errors.UserError`. Any other exception would reach the user as
an internal error (exit status 1) and is a bug in the loader.

Inputs:

* random TOML-like structures: nested tables of known and unknown keys with values
  of every TOML type (booleans, huge and negative integers, NaN, +-inf, strings
  that look like paths or code, lists, nested tables);
* the demo scenes in scenes/ with values replaced, keys deleted or added at random
  places of the parsed structure;
* the demo scene texts with random character edits, read through ``load_scene``
  (TOML syntax errors, broken strings, truncated files);
* the demo scene texts with a deeply nested value (arrays or inline tables, up to 1000
  levels) or a huge string (up to 9 MB, beyond the scene-file size cap) inserted, and
  dicts nested deeper than Python's recursion limit.

The CI profile is short (``RELVIEW_FUZZ_EXAMPLES`` examples per test, default 200).
For a long run outside CI::

    RELVIEW_FUZZ_EXAMPLES=20000 /tmp/venv/bin/pytest tests/test_fuzz_loader.py -q -m "slow or not slow"

The slow tests also render demo scenes with extreme numbers at 4 x 3 pixels.
"""

from __future__ import annotations

import copy
import math
import os
import tomllib
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

import relview
from relview.errors import MeshWarning, UserError
from relview.scene.model import Scene, load_scene, scene_from_dict

REPO = Path(__file__).resolve().parents[1]
DEMO_SCENES = sorted((REPO / "scenes").glob("*.toml"))
EXAMPLES = int(os.environ.get("RELVIEW_FUZZ_EXAMPLES", "200"))

FUZZ_SETTINGS = settings(
    max_examples=EXAMPLES,
    deadline=None,
    suppress_health_check=[
        HealthCheck.too_slow,
        HealthCheck.data_too_large,
        HealthCheck.function_scoped_fixture,
    ],
    derandomize=False,
)

# Every key the scene format knows (docs/scene-format.md), so random tables often hit
# real keys with wrong values instead of being rejected at the first unknown key.
KNOWN_KEYS = [
    "scene",
    "render",
    "camera",
    "body",
    "background",
    "animation",
    "title",
    "format",
    "resolution",
    "samples",
    "exposure",
    "seed",
    "effects",
    "delay",
    "contraction",
    "aberration",
    "doppler",
    "beaming",
    "position",
    "look_at",
    "direction",
    "up",
    "fov",
    "time",
    "beta",
    "projection",
    "name",
    "shape",
    "rotation",
    "motion",
    "surface",
    "size",
    "radius",
    "height",
    "detail",
    "file",
    "scale",
    "center",
    "kind",
    "count",
    "temperature",
    "luminance",
    "spacing",
    "width",
    "start",
    "end",
    "frames",
    "fps",
    "blackbody",
    "line",
    "lines",
    "spectrum",
    "color",
    "pattern",
    "lamp",
    "texture",
    "nm",
    "width_nm",
    "radiance",
    "period",
    "line_width",
    "axes",
    "first",
    "second",
    # motion kinds registered by relview.kinematics.motion
    "acceleration",
    "axis",
    "period",
    "phase",
    "times",
    "positions",
    "base",
    "angular_velocity",
    "center_offset",
    "shutter",
    "shutter_samples",
]
KNOWN_STRINGS = [
    "box",
    "sphere",
    "cylinder",
    "plane",
    "mesh",
    "pinhole",
    "panorama",
    "fisheye",
    "black",
    "stars",
    "graticule",
    "uniform",
    "hyperbolic",
    "orbit",
    "path",
    "spin",
    "rolling",
    "checks",
    "grid",
    "auto",
    "D65",
    "cube.obj",
    "missing.obj",
    "empty.obj",
    "junk.obj",
    "../outside.obj",
    "spectrum.csv",
    "",
    " ",
    "\x00",
    "~",
    "/",
    "__import__('os').system('touch pwned')",
    "${HOME}",
    "nan",
    "1e309",
    "~no-such-user-relview/cube.obj",
    "n" * 300 + ".obj",
    "/dev/zero",
    "/proc/self/mem",
    "a\x00b.obj",
    "\udc80.obj",
    "spectra/../cube.obj",
]

FLOATS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(
        [
            0.0,
            -0.0,
            1.0,
            -1.0,
            0.5,
            0.9999999999,
            1.0000001,
            1e308,
            -1e308,
            5e-324,
            1e-300,
            3.0e8,
            math.nan,
            math.inf,
            -math.inf,
        ]
    ),
)
INTS = st.one_of(
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.sampled_from([0, 1, -1, 2, 3, 7, 8, 2**31, 2**53 + 1, 10**30, -(10**30)]),
)
TEXT = st.one_of(st.sampled_from(KNOWN_STRINGS), st.text(max_size=12))
KEYS = st.one_of(st.sampled_from(KNOWN_KEYS), st.text(min_size=1, max_size=8))
SCALARS = st.one_of(st.booleans(), INTS, FLOATS, TEXT)


def _values(leaf=SCALARS):
    return st.recursive(
        leaf,
        lambda inner: st.one_of(
            st.lists(inner, max_size=5),
            st.dictionaries(KEYS, inner, max_size=5),
        ),
        max_leaves=20,
    )


VALUES = _values()
NUMERIC_LISTS = st.lists(st.one_of(INTS, FLOATS), min_size=0, max_size=4)
# Values of the right shape and a sensible size, so that edits often pass a key's
# checks and the loader goes on to the next one (or accepts the scene).
SMALL = st.one_of(st.floats(-2.0, 2.0), st.integers(0, 64), st.sampled_from([0.5, 0.99, 5000.0]))
PLAUSIBLE = st.one_of(
    SMALL,
    st.booleans(),
    st.sampled_from(KNOWN_STRINGS),
    st.lists(SMALL, min_size=2, max_size=3),
    st.lists(st.lists(SMALL, min_size=3, max_size=3), min_size=1, max_size=4),
    st.dictionaries(st.sampled_from(KNOWN_KEYS), SMALL, max_size=3),
)
ANY_VALUE = st.one_of(VALUES, NUMERIC_LISTS, PLAUSIBLE, PLAUSIBLE)


@pytest.fixture(scope="module")
def base_dir(tmp_path_factory):
    """A directory with the files random paths may name: a closed cube, an empty file,
    a corrupt file, a spectrum, and a mesh one level up (reached with '..')."""
    import trimesh

    root = tmp_path_factory.mktemp("fuzz")
    scenes = root / "scenes"
    scenes.mkdir()
    trimesh.creation.box(extents=(1, 1, 1)).export(scenes / "cube.obj")
    trimesh.creation.box(extents=(1, 2, 1)).export(root / "outside.obj")
    (scenes / "empty.obj").write_bytes(b"")
    (scenes / "junk.obj").write_bytes(b"v 1 2\nf 1 2 9\n\x00\xff garbage")
    (scenes / "spectrum.csv").write_text("wavelength_nm,radiance\n400,1\n500,2\n700,1\n")
    return scenes


def _accepts_or_user_error(load):
    """Run ``load``; a Scene or a UserError is fine, anything else fails the test."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MeshWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        try:
            scene = load()
        except UserError as exc:
            # The message must be printable and say something.
            assert str(exc).strip()
            # What stopped the load (shown by --hypothesis-show-statistics), to see that
            # the inputs reach past the first check.
            event(f"{type(exc).__name__}: {exc.key or exc.message[:30]}")
            return None
    assert isinstance(scene, Scene)
    event("accepted")
    return scene


# ------------------------------------------------------------------ random structures


@FUZZ_SETTINGS
@given(data=st.dictionaries(KEYS, ANY_VALUE, max_size=6))
def test_random_structures_load_or_raise_user_error(base_dir, data):
    _accepts_or_user_error(lambda: scene_from_dict(data, base_dir=base_dir, source="fuzz.toml"))


# A valid skeleton with random values put into the sections the loader reads.
SECTION_KEYS = {
    "scene": ["title", "format"],
    "render": [
        "resolution",
        "samples",
        "exposure",
        "seed",
        "effects",
        "shutter",
        "shutter_samples",
    ],
    "camera": [
        "position",
        "look_at",
        "direction",
        "up",
        "fov",
        "time",
        "beta",
        "projection",
        "motion",
    ],
    "background": ["kind", "count", "seed", "temperature", "luminance", "spacing", "width"],
    "animation": ["start", "end", "frames", "fps"],
}
BODY_KEYS = [
    "name",
    "shape",
    "rotation",
    "size",
    "radius",
    "height",
    "detail",
    "file",
    "scale",
    "center",
]
MOTION_KEYS = [
    "kind",
    "beta",
    "position",
    "time",
    "acceleration",
    "center",
    "radius",
    "period",
    "axis",
    "phase",
    "times",
    "positions",
    "base",
    "angular_velocity",
    "center_offset",
]
SURFACE_KEYS = [
    "blackbody",
    "scale",
    "line",
    "lines",
    "spectrum",
    "color",
    "lamp",
    "luminance",
    "texture",
    "pattern",
]


def _skeleton(mesh: bool = False):
    shape = (
        {"shape": "mesh", "file": "cube.obj"}
        if mesh
        else {"shape": "sphere", "radius": 1.0, "detail": 1}
    )
    return {
        "camera": {"position": [0.0, -5.0, 0.0], "look_at": [0.0, 0.0, 0.0]},
        "body": [
            {
                "name": "b",
                **shape,
                "motion": {"kind": "uniform", "beta": [0.5, 0.0, 0.0]},
                "surface": {"blackbody": 5000.0},
            }
        ],
    }


FILE_SURFACES = st.one_of(
    st.builds(lambda f: {"spectrum": f}, TEXT),
    st.builds(lambda f: {"color": [0.5, 0.5, 0.5], "texture": f}, TEXT),
)


@st.composite
def skeleton_edits(draw):
    scene = _skeleton(mesh=draw(st.booleans()))
    if draw(st.booleans()):
        if scene["body"][0]["shape"] == "mesh":
            scene["body"][0]["file"] = draw(TEXT)
        else:
            scene["body"][0]["surface"] = draw(FILE_SURFACES)
    for _ in range(draw(st.integers(1, 4))):
        where = draw(st.sampled_from(["section", "body", "motion", "camera-motion", "surface"]))
        if where == "section":
            section = draw(st.sampled_from(sorted(SECTION_KEYS)))
            key = draw(st.sampled_from(SECTION_KEYS[section]))
            scene.setdefault(section, {})[key] = draw(ANY_VALUE)
        elif where == "body":
            scene["body"][0][draw(st.sampled_from(BODY_KEYS))] = draw(ANY_VALUE)
        elif where == "motion":
            scene["body"][0]["motion"][draw(st.sampled_from(MOTION_KEYS))] = draw(ANY_VALUE)
        elif where == "camera-motion":
            camera = scene["camera"]
            camera.pop("position", None)
            motion = camera.get("motion")
            if not isinstance(motion, dict):  # absent, or a random value from "section"
                motion = camera["motion"] = {
                    "kind": draw(
                        st.sampled_from(
                            ["uniform", "hyperbolic", "orbit", "path", "spin", "rolling"]
                        )
                    )
                }
            motion[draw(st.sampled_from(MOTION_KEYS))] = draw(ANY_VALUE)
        else:
            surface = {draw(st.sampled_from(SURFACE_KEYS)): draw(ANY_VALUE)}
            scene["body"][0]["surface"] = surface
    return scene


@FUZZ_SETTINGS
@given(data=skeleton_edits())
def test_random_values_in_known_keys_load_or_raise_user_error(base_dir, data):
    _accepts_or_user_error(lambda: scene_from_dict(data, base_dir=base_dir, source="fuzz.toml"))


# ------------------------------------------------------------------ demo scene mutations


def _demo_dicts():
    return [tomllib.loads(p.read_text()) for p in DEMO_SCENES]


def _paths(node, prefix=()):
    """Every (path to a value) in a parsed TOML structure."""
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


@st.composite
def demo_mutations(draw):
    demos = _demo_dicts()
    scene = copy.deepcopy(draw(st.sampled_from(demos)))
    for _ in range(draw(st.integers(1, 3))):
        paths = [p for p in _paths(scene) if p]
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = scene
        for part in path[:-1]:
            parent = parent[part]
        action = draw(st.sampled_from(["replace", "delete", "add"]))
        if action == "replace":
            parent[path[-1]] = draw(ANY_VALUE)
        elif action == "delete":
            if isinstance(parent, dict):
                del parent[path[-1]]
            else:
                parent.pop(path[-1])
        elif isinstance(parent, dict):
            parent[draw(KEYS)] = draw(ANY_VALUE)
        else:
            parent.append(draw(ANY_VALUE))
    return scene


@pytest.mark.skipif(not DEMO_SCENES, reason="no demo scenes in scenes/")
@FUZZ_SETTINGS
@given(data=demo_mutations())
def test_mutated_demo_scenes_load_or_raise_user_error(base_dir, data):
    _accepts_or_user_error(lambda: scene_from_dict(data, base_dir=base_dir, source="fuzz.toml"))


# ------------------------------------------------------------------ text mutations

TOML_CHARS = st.sampled_from(
    list("[]{}=\".,'#\n\\ 0123456789-+eE_abcxyz")
    + ["nan", "inf", "true", "\ufeff", "\x00", "\xff", '"""', "[[body]]", "1e999"]
)


@st.composite
def text_mutations(draw):
    text = draw(st.sampled_from([p.read_text() for p in DEMO_SCENES]))
    for _ in range(draw(st.integers(1, 4))):
        i = draw(st.integers(0, len(text)))
        j = min(len(text), i + draw(st.integers(0, 6)))
        text = text[:i] + "".join(draw(st.lists(TOML_CHARS, max_size=4))) + text[j:]
    return text


@pytest.mark.skipif(not DEMO_SCENES, reason="no demo scenes in scenes/")
@FUZZ_SETTINGS
@given(text=text_mutations())
def test_mutated_scene_texts_load_or_raise_user_error(base_dir, text):
    path = base_dir / "mutated.toml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    _accepts_or_user_error(lambda: load_scene(path))


@pytest.mark.skipif(not DEMO_SCENES, reason="no demo scenes in scenes/")
@FUZZ_SETTINGS
@given(raw=st.binary(max_size=200), cut=st.integers(0, 4000))
def test_truncated_or_binary_scene_files_raise_user_error(base_dir, raw, cut):
    text = DEMO_SCENES[cut % len(DEMO_SCENES)].read_bytes()
    path = base_dir / "binary.toml"
    path.write_bytes(text[: cut % (len(text) + 1)] + raw)
    _accepts_or_user_error(lambda: load_scene(path))


# ------------------------------------------------------------------ long run


@pytest.mark.slow
@settings(max_examples=max(EXAMPLES, 5000), deadline=None, suppress_health_check=list(HealthCheck))
@given(
    data=st.one_of(demo_mutations(), skeleton_edits(), st.dictionaries(KEYS, ANY_VALUE, max_size=6))
)
def test_long_fuzz_run(base_dir, data):
    _accepts_or_user_error(lambda: scene_from_dict(data, base_dir=base_dir, source="fuzz.toml"))


# ------------------------------------------------------------------ whole renders (slow)

NUMERIC_FACTORS = st.sampled_from(
    [-1.0, 0.0, 1e-300, 1e-9, 0.5, 0.999, 1.001, 2.0, 10.0, 1e6, 1e100, 1e300]
)


def _numeric_leaves(node, path=()):
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _numeric_leaves(v, path + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _numeric_leaves(v, path + (i,))
    elif isinstance(node, (int, float)) and not isinstance(node, bool):
        yield path


@st.composite
def scaled_demo_scenes(draw):
    """A demo scene with one to three numbers scaled by extreme factors, at 4 x 3 pixels."""
    path = draw(st.sampled_from(DEMO_SCENES))
    scene = tomllib.loads(path.read_text())
    leaves = list(_numeric_leaves(scene))
    for _ in range(draw(st.integers(1, 3))):
        where = draw(st.sampled_from(leaves))
        parent = scene
        for part in where[:-1]:
            parent = parent[part]
        value, factor = parent[where[-1]], draw(NUMERIC_FACTORS)
        if isinstance(value, float):
            parent[where[-1]] = value * factor
        elif abs(value * factor) < 2**62:
            parent[where[-1]] = int(value * factor)
    scene.setdefault("render", {})["resolution"] = [4, 3]
    scene["render"].pop("samples", None)
    return path.parent, scene


@pytest.mark.slow
@pytest.mark.skipif(not DEMO_SCENES, reason="no demo scenes in scenes/")
@settings(max_examples=max(EXAMPLES, 1000), deadline=None, suppress_health_check=list(HealthCheck))
@given(case=scaled_demo_scenes())
def test_scaled_demo_scenes_render_or_raise_user_error(case):
    """Past the loader: a scene that loads must render (tiny) or raise UserError."""
    from relview.renderer import render

    base, data = case
    scene = _accepts_or_user_error(lambda: scene_from_dict(data, base_dir=base))
    if scene is None:
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            frame = render(scene, resolution=(4, 3), samples=1)
        except UserError:
            return
    assert frame.image.shape == (3, 4, 3)


# ------------------------------------------------------------------ deep nesting, huge strings


def _nested(kind: str, depth: int) -> str:
    if kind == "array":
        return "[" * depth + "]" * depth
    if kind == "table":
        return "{a = " * depth + "1" + "}" * depth
    return "[{a = " * depth + "1" + "}]" * depth


@st.composite
def extreme_texts(draw):
    """A demo scene with one extreme value added to its first table or set as its title."""
    text = draw(st.sampled_from([p.read_text() for p in DEMO_SCENES]))
    if draw(st.booleans()):
        kind = draw(st.sampled_from(["array", "table", "mixed"]))
        value = _nested(kind, draw(st.integers(1, 1000)))
    else:
        size = draw(st.sampled_from([10, 10**4, 10**6, 3 * 10**6, 9 * 10**6]))
        char = draw(st.sampled_from(["a", "\\\\", "\u00e9", "[", "{"]))
        value = '"' + char * (size // len(char)) + '"'
    key = draw(st.sampled_from(["title", "fov", "x"]))
    lines = text.splitlines()
    header = next((i for i, line in enumerate(lines) if line.startswith("[")), 0)
    lines.insert(header + 1, f"{key} = {value}")
    return "\n".join(lines) + "\n"


@pytest.mark.skipif(not DEMO_SCENES, reason="no demo scenes in scenes/")
@settings(FUZZ_SETTINGS, max_examples=min(EXAMPLES, 60))  # megabyte strings: fewer examples
@given(text=extreme_texts())
def test_deep_nesting_and_huge_strings_load_or_raise_user_error(tmp_path_factory, text):
    path = tmp_path_factory.mktemp("extreme") / "scene.toml"
    path.write_text(text, encoding="utf-8")
    _accepts_or_user_error(lambda: load_scene(path))


@FUZZ_SETTINGS
@given(depth=st.integers(1, 5000), key=KEYS)
def test_deeply_nested_dicts_load_or_raise_user_error(base_dir, depth, key):
    data: dict = {}
    inner = data
    for _ in range(depth):
        inner[key] = {}
        inner = inner[key]
    _accepts_or_user_error(lambda: scene_from_dict(data, base_dir=base_dir, source="fuzz.toml"))


# A compact moving-ball scene (16 x 9 pixels) in which every time and position can be
# shifted together; translations of time and space leave the physics unchanged (the
# Poincare group; Rindler 2006, section 2.6).
_SHIFT_SCENE = {
    "render": {"resolution": [16, 9], "exposure": 5.0e6},
    "camera": {"position": [0.0, -3.0, 0.0], "look_at": [0.0, 0.0, 0.0], "fov": 90.0},
    "body": [
        {
            "name": "ball",
            "shape": "sphere",
            "radius": 1.0,
            "detail": 2,
            "motion": {"beta": [0.9, 0.0, 0.0], "position": [1.0, 0.0, 0.0]},
            "surface": {"blackbody": 4500.0},
        }
    ],
}


def _shifted(dt: float, dx: tuple) -> dict:
    data = copy.deepcopy(_SHIFT_SCENE)
    cam, motion = data["camera"], data["body"][0]["motion"]
    cam["time"] = motion["time"] = dt
    for point in (cam["position"], cam["look_at"], motion["position"]):
        for i in range(3):
            point[i] += dx[i]
    return data


@settings(FUZZ_SETTINGS, max_examples=min(EXAMPLES, 25))  # each example renders twice
@given(
    dt=st.one_of(
        st.floats(-1e300, 1e300, allow_nan=False), st.integers(-60, 60).map(lambda k: float(2.0**k))
    ),
    dx=st.tuples(*[st.integers(-60, 60).map(lambda k: float(2.0**k))] * 3),
)
def test_time_and_space_shifts_render_the_same_or_raise_user_error(base_dir, dt, dx):
    """A shifted scene either renders exactly the unshifted picture (power-of-two position
    shifts keep every coordinate exact in float64) or, beyond what float64 resolves,
    is refused as a user error; it never renders a different picture."""
    reference = relview.render(scene_from_dict(_SHIFT_SCENE, base_dir=base_dir))
    scene = _accepts_or_user_error(
        lambda: scene_from_dict(_shifted(dt, dx), base_dir=base_dir, source="fuzz.toml")
    )
    if scene is None:
        return
    frame = relview.render(scene)
    np.testing.assert_array_equal(frame.layers["body"], reference.layers["body"])
    np.testing.assert_array_equal(frame.image, reference.image)
