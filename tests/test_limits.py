"""Limits and clear errors where a traceback or an unbounded cost used to be.

Each test names the behaviour it guards. The scene is the kiln-brick demo of
tests/test_animate.py (our own invention); limits come from relview's own documented
constants (docs/errors.md, "Limits"), so the tests check the messages and that the work
is refused before it starts.
"""

from __future__ import annotations

import hashlib
import os
import stat
import tracemalloc
from pathlib import Path

import pytest
from test_animate import write_scene

from relview.animation import batch, farm, timing, workers
from relview.cli.app import main
from relview.errors import MeshError, SceneError, UserError
from relview.geometry import shapes
from relview.scene import reader, table
from relview.scene.model import load_scene, scene_from_dict


def _with_render_line(path: Path, line: str) -> Path:
    text = write_scene(path).read_text().replace("[render]\n", f"[render]\n{line}\n", 1)
    path.write_text(text)
    return path


# ----------------------------------------------------------------------------- scene files


@pytest.mark.parametrize("value", ["[" * 400 + "]" * 400, "{a = " * 400 + "1" + "}" * 400])
def test_deeply_nested_values_are_a_scene_error_with_the_line(tmp_path, value):
    scene = _with_render_line(tmp_path / "deep.toml", f"x = {value}")
    with pytest.raises(SceneError, match="nested more than 32 levels") as err:
        load_scene(scene)
    assert err.value.file == str(scene) and err.value.line == 5  # the line after [render]


def test_nesting_below_the_parser_limit_is_refused_too(tmp_path):
    """40 levels parse, but no key needs them; the message is the same."""
    scene = _with_render_line(tmp_path / "deep.toml", "x = " + "[" * 40 + "]" * 40)
    with pytest.raises(SceneError, match="nested more than 32 levels"):
        load_scene(scene)


def test_deeply_nested_dict_is_a_scene_error():
    data: dict = {}
    inner = data
    for _ in range(5000):  # deeper than Python's recursion limit
        inner["a"] = {}
        inner = inner["a"]
    with pytest.raises(SceneError, match="nested more than"):
        scene_from_dict(data, source="deep.toml")


def test_scene_file_above_the_size_cap_is_refused_before_parsing(tmp_path, monkeypatch):
    scene = write_scene(tmp_path / "big.toml")
    monkeypatch.setattr(reader, "MAX_SCENE_BYTES", scene.stat().st_size - 1)
    parsed = []
    monkeypatch.setattr(reader.tomllib, "loads", lambda text: parsed.append(text))
    with pytest.raises(SceneError, match="larger than") as err:
        load_scene(scene)
    assert err.value.file == str(scene) and not parsed


def test_scene_file_size_cap_on_the_command_line(tmp_path, capsys):
    scene = tmp_path / "huge.toml"
    scene.write_text('title = "' + "a" * reader.MAX_SCENE_BYTES + '"\n')
    assert main(["check", str(scene)]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"relview: error: {scene}: the scene file is larger than 8 MiB")
    assert "Traceback" not in err


def test_line_index_of_a_long_string_needs_little_memory():
    """The string pattern used to keep ~120 bytes of backtracking state per character
    (2.4 GB for a 20 MB title); 2 MB of title must now cost about its own size."""
    text = 'title = "' + "a" * 2_000_000 + '"\nfov = 60.0\n'
    tracemalloc.start()
    try:
        lines = table.index_lines(text)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert lines[("title",)] == 1 and lines[("fov",)] == 2
    assert peak < 20 * 2**20, f"{peak / 2**20:.0f} MiB"


def test_symlink_loop_scene_file_is_named_a_loop(tmp_path):
    a, b = tmp_path / "a.toml", tmp_path / "b.toml"
    a.symlink_to(b)
    b.symlink_to(a)
    with pytest.raises(SceneError, match="loop of symbolic links"):
        load_scene(a)


def _mesh_scene(tmp_path: Path, file: str) -> Path:
    path = write_scene(tmp_path / "mesh.toml")
    path.write_text(
        path.read_text().replace(
            'shape = "box"\nsize  = [1.0, 0.6, 0.6]', f'shape = "mesh"\nfile  = "{file}"'
        )
    )
    return path


def test_symlink_loop_mesh_is_named_a_loop_not_missing(tmp_path):
    (tmp_path / "a.obj").symlink_to(tmp_path / "b.obj")
    (tmp_path / "b.obj").symlink_to(tmp_path / "a.obj")
    with pytest.raises(
        SceneError, match='mesh file path is a loop of symbolic links: file = "a.obj"'
    ):
        load_scene(_mesh_scene(tmp_path, "a.obj"))


def test_dangling_symlink_mesh_names_its_target(tmp_path):
    (tmp_path / "hull.obj").symlink_to(tmp_path / "gone.obj")
    with pytest.raises(SceneError, match="symbolic link to a missing file.*gone.obj"):
        load_scene(_mesh_scene(tmp_path, "hull.obj"))


OBJ_TETRAHEDRON = "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nf 1 3 2\nf 1 2 4\nf 1 4 3\nf 2 3 4\n"


def test_mesh_without_extension_says_so(tmp_path):
    (tmp_path / "hull").write_text(OBJ_TETRAHEDRON)
    with pytest.raises(MeshError, match="mesh file name has no extension; readable formats"):
        load_scene(_mesh_scene(tmp_path, "hull"))


# ----------------------------------------------------------------------------- meshes


def test_mesh_too_large_for_free_memory_is_refused_before_reading(tmp_path, monkeypatch):
    """A PLY header declares its face count; the mesh is refused before trimesh reads it."""
    import trimesh

    ply = tmp_path / "hull.ply"
    trimesh.creation.icosphere(subdivisions=2).export(ply)  # 320 faces
    monkeypatch.setattr(shapes, "free_memory", lambda: 100 * shapes.BYTES_PER_FACE)
    monkeypatch.setattr(trimesh, "load", lambda *a, **k: pytest.fail("the file was read"))
    shapes.clear_cache()
    with pytest.raises(MeshError, match="320 triangles, which need about") as err:
        load_scene(_mesh_scene(tmp_path, "hull.ply"))
    assert "simplify the mesh" in str(err.value) and str(tmp_path / "hull.ply") in str(err.value)


@pytest.mark.parametrize("ext", ["stl", "obj", "off", "ply"])
def test_declared_face_counts_match_trimesh(tmp_path, ext):
    """The cheap header count agrees with trimesh (reference library) on its own exports."""
    import trimesh

    mesh = trimesh.creation.icosphere(subdivisions=3)
    path = tmp_path / f"ico.{ext}"
    mesh.export(path)
    assert shapes._face_count_from_header(path, ext) == len(trimesh.load(path).faces) == 1280


def test_frame_estimate_includes_mesh_triangles(monkeypatch):
    from relview import frame_memory

    plain = frame_memory.estimate_bytes(48, 27)
    assert frame_memory.estimate_bytes(48, 27, faces=1000) == plain + 1000 * shapes.BYTES_PER_FACE
    monkeypatch.setattr(frame_memory, "free_memory", lambda: 2 * plain)
    frame_memory.check_memory(48, 27)  # the frame alone fits
    with pytest.raises(UserError, match="a frame with 1,000,000 mesh triangles needs about"):
        frame_memory.check_memory(48, 27, faces=1_000_000)


# ----------------------------------------------------------------------------- spectra


def test_non_spectrum_file_is_named_with_its_line_not_its_text(tmp_path):
    from relview.light.materials import TabulatedSpectrum

    secret = tmp_path / "notes.txt"
    secret.write_text("name value\ntoken = s3cr3t-Value\n")
    with pytest.raises(ValueError) as err:
        TabulatedSpectrum.from_csv(secret)
    message = str(err.value)
    assert f"{secret}, line 2: expected two numbers" in message
    assert "s3cr3t" not in message


# ----------------------------------------------------------------------------- animate options


def test_huge_frame_range_is_a_user_error_not_an_overflow():
    with pytest.raises(UserError, match="the animation has 5 frame"):
        timing.parse_frame_range("0:99999999999999999999", 5)
    with pytest.raises(UserError, match="the animation has 5 frame"):
        timing.resolve_frames(range(3, 10**30), 5)


def test_huge_frame_range_on_the_command_line(tmp_path, capsys):
    scene = write_scene(tmp_path / "brick.toml")
    code = main(
        [
            "animate",
            str(scene),
            "-o",
            str(tmp_path / "o"),
            "--frames",
            "0:99999999999999999999",
            "--quiet",
        ]
    )
    err = capsys.readouterr().err
    assert code == 2 and "the animation has 5 frame(s), indices 0..4" in err


@pytest.mark.parametrize("address", ["http://127.0.0.1:1", "ftp://host:8786", "udp://h:1"])
def test_unknown_cluster_scheme_is_a_user_error(address):
    with pytest.raises(UserError, match="unknown address scheme.*tcp:// or tls://"):
        farm.parse_cluster(address)


def test_more_workers_than_cores_are_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(workers, "usable_cores", lambda: 2)
    scene = load_scene(write_scene(tmp_path / "brick.toml"))
    for kw, option in (
        ({"workers": 3}, "--workers 3"),
        ({"cluster": "local:100000"}, "--cluster local:100000"),
    ):
        with pytest.raises(UserError, match=f"{option}: .* has 2 core"):
            batch.animate(scene, tmp_path / "o", progress=False, **kw)
    assert not (tmp_path / "o").exists()  # refused before any output


def test_workers_beyond_free_memory_are_refused(monkeypatch):
    monkeypatch.setattr(workers, "usable_cores", lambda: 64)
    monkeypatch.setattr(workers, "available_memory", lambda: 10 * 2**30)
    workers.check_worker_count(8, 2**30, "--workers 8")  # 8 GiB of 10: fits in 80 %
    with pytest.raises(UserError, match=r"--workers 9: .* about 9\.0 GiB .* use at most 8"):
        workers.check_worker_count(9, 2**30, "--workers 9")


# ----------------------------------------------------------------------------- farm mesh cache


def test_worker_mesh_copy_is_checked_by_content_in_a_private_directory(tmp_path):
    """A same-size file swapped in for the worker's copy is replaced, not rendered."""
    data = OBJ_TETRAHEDRON.encode()
    (tmp_path / "tetra.obj").write_bytes(data)
    scene = load_scene(_mesh_scene(tmp_path, "tetra.obj"))
    bundle = farm.bundle_scene(scene)
    copy = Path(farm._unpack_on_worker(bundle).bodies[0].file)
    assert copy.read_bytes() == data
    folder = copy.parent.parent  # the process's private root
    mode = folder.stat().st_mode
    assert folder.stat().st_uid == os.getuid() and not mode & (stat.S_IRWXG | stat.S_IRWXO)
    planted = data.replace(b"v 0 0 1", b"v 0 0 9")
    assert len(planted) == len(data)
    copy.write_bytes(planted)
    again = Path(farm._unpack_on_worker(bundle).bodies[0].file)
    assert hashlib.sha256(again.read_bytes()).hexdigest() == hashlib.sha256(data).hexdigest()


def test_stale_temporaries_of_a_killed_write_are_removed_by_the_next_write(tmp_path):
    # A write killed between creating its hidden temporary and the rename leaves
    # ".NAME.XXXXXXXX.part" behind; the next write of that file removes it once it is old
    # enough that no running write can own it, and leaves young or foreign files alone.
    import os
    import time

    from relview.imaging.files import STALE_PART_AGE_S, atomic_write

    stale = tmp_path / ".fig.png.0123abcd.part"
    young = tmp_path / ".fig.png.89abcdef.part"
    foreign = tmp_path / ".fig.png.notours.part"
    other_target = tmp_path / ".other.png.0123abcd.part"
    for f in (stale, young, foreign, other_target):
        f.write_bytes(b"half a file")
    old = time.time() - 2 * STALE_PART_AGE_S
    for f in (stale, foreign, other_target):
        os.utime(f, (old, old))
    written = atomic_write(tmp_path / "fig.png", lambda fh: fh.write(b"png"))
    assert written.read_bytes() == b"png"
    assert not stale.exists()
    assert young.exists() and foreign.exists() and other_target.exists()


def test_a_path_with_a_nul_character_is_a_user_error(tmp_path):
    # found by the long fuzz run: Path.exists() says False for it, os.stat raises ValueError
    from relview.errors import SceneError
    from relview.scene.model import scene_from_dict

    data = {
        "camera": {"position": [0.0, -5.0, 0.0], "look_at": [0.0, 0.0, 0.0]},
        "body": [{"name": "b", "shape": "mesh", "file": "\x00", "surface": {"blackbody": 5e3}}],
    }
    with pytest.raises(SceneError, match="is not a usable path") as err:
        scene_from_dict(data, base_dir=tmp_path)
    assert "file" in err.value.key
