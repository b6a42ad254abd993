"""Tests for relview.animation.farm: frames rendered on a Dask cluster equal local frames
byte for byte.

The cluster is dask.distributed's own LocalCluster: two worker processes on
127.0.0.1, reached through their scheduler's tcp:// address as a remote cluster
would be. The scene is a demo of our own invention (tests/test_animate.py).
"""

from __future__ import annotations

import hashlib
import logging
from pathlib import Path

import pytest
from test_animate import stamps, write_scene

from relview.animation import batch, farm, timing
from relview.errors import UserError
from relview.scene.model import load_scene

FRAMES = 4


@pytest.fixture(scope="module")
def local_frames(tmp_path_factory) -> tuple[Path, Path]:
    """The scene and its frames rendered in this process (this also fills numba's cache,
    so the worker processes load the compiled kernels instead of compiling them)."""
    base = tmp_path_factory.mktemp("farm")
    scene_file = write_scene(base / "brick.toml", frames=FRAMES)
    batch.animate(load_scene(scene_file), base / "local", progress=False, workers=1)
    return scene_file, base / "local"


@pytest.fixture(scope="module")
def scheduler(local_frames):
    """Address of a LocalCluster with 2 worker processes on 127.0.0.1 (1 thread each)."""
    from distributed import LocalCluster

    with LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address="127.0.0.1:0",
        silence_logs=logging.ERROR,
        env={"NUMBA_NUM_THREADS": "1"},
    ) as cluster:
        yield cluster.scheduler_address


def test_parse_cluster():
    assert farm.parse_cluster("local:2") == ("local", 2)
    assert farm.parse_cluster("tcp://10.0.0.5:8786") == ("address", "tcp://10.0.0.5:8786")
    for bad in ("local:0", "local:x", "10.0.0.5:8786", "tcp://"):
        with pytest.raises(UserError, match="--cluster"):
            farm.parse_cluster(bad)


@pytest.mark.slow  # starts a Dask cluster
def test_cluster_frames_are_byte_identical_to_local(local_frames, scheduler, tmp_path):
    scene_file, local = local_frames
    assert scheduler.startswith("tcp://127.0.0.1:")
    summary = batch.animate(
        load_scene(scene_file), tmp_path / "dask", cluster=scheduler, progress=False
    )
    assert summary.rendered == list(range(FRAMES)) and summary.backend.startswith("dask")
    for k in range(FRAMES):
        name = timing.frame_name(k)
        assert (tmp_path / "dask" / name).read_bytes() == (local / name).read_bytes(), name


@pytest.mark.slow  # starts a Dask cluster
def test_cluster_run_resumes(local_frames, scheduler, tmp_path, monkeypatch):
    scene_file, local = local_frames
    out = tmp_path / "dask"
    batch.animate(load_scene(scene_file), out, cluster=scheduler, progress=False)
    before = stamps(out)
    (out / "frame-00001.png").unlink()
    with open(out / "frame-00003.png", "ab") as fh:
        fh.write(b"edited")
    # the edited frame is replaced only when asked (the missing one needs no permission)
    summary = batch.animate(
        load_scene(scene_file), out, cluster=scheduler, progress=False, overwrite=True
    )
    assert summary.rendered == [1, 3] and summary.skipped == [0, 2]
    after = stamps(out)
    assert after["frame-00000.png"] == before["frame-00000.png"]
    assert after["frame-00002.png"] == before["frame-00002.png"]
    for k in (1, 3):
        name = timing.frame_name(k)
        assert (out / name).read_bytes() == (local / name).read_bytes()
    # nothing left to do: no task reaches the cluster
    again = batch.animate(load_scene(scene_file), out, cluster=scheduler, progress=False)
    assert again.rendered == [] and again.backend == ""


def test_cluster_and_workers_together_are_refused(local_frames, tmp_path):
    scene_file, _ = local_frames
    with pytest.raises(UserError, match="--workers"):
        batch.animate(
            load_scene(scene_file), tmp_path / "x", cluster="local:2", workers=2, progress=False
        )


def _animate_on_unreachable_scheduler(scene_file, out, monkeypatch):
    monkeypatch.setattr(farm, "CONNECT_TIMEOUT_S", 1)
    with pytest.raises(UserError, match="cannot reach"):
        batch.animate(load_scene(scene_file), out, cluster="tcp://127.0.0.1:9", progress=False)


def test_unreachable_scheduler_is_a_user_error(local_frames, tmp_path, monkeypatch):
    scene_file, _ = local_frames
    _animate_on_unreachable_scheduler(scene_file, tmp_path / "x", monkeypatch)


def test_unreachable_scheduler_leaves_no_manifest(local_frames, tmp_path, monkeypatch):
    """The cluster is reached before anything is written to the output directory."""
    scene_file, _ = local_frames
    _animate_on_unreachable_scheduler(scene_file, tmp_path / "x", monkeypatch)
    assert not (tmp_path / "x").exists()


OBJ_TETRAHEDRON = """\
v 0 0 0
v 1 0 0
v 0 1 0
v 0 0 1
f 1 3 2
f 1 2 4
f 1 4 3
f 2 3 4
"""


def test_mesh_files_travel_as_bytes(tmp_path):
    """A worker renders a mesh body from the shipped bytes, not from the client's file."""
    from relview.renderer import render

    (tmp_path / "meshes").mkdir()
    (tmp_path / "meshes" / "tetra.obj").write_text(OBJ_TETRAHEDRON)
    text = write_scene(tmp_path / "x.toml").read_text()
    text = text.replace(
        'shape = "box"\nsize  = [1.0, 0.6, 0.6]', 'shape = "mesh"\nfile  = "meshes/tetra.obj"'
    )
    scene_file = tmp_path / "tetra.toml"
    scene_file.write_text(text)
    scene = load_scene(scene_file)
    bundle = farm.bundle_scene(scene)
    assert bundle.mesh_files[0] == ("tetra.obj", OBJ_TETRAHEDRON.encode())
    expected = render(scene, time=4.0e-9).image
    (tmp_path / "meshes" / "tetra.obj").unlink()  # the worker cannot see the client's disk
    unpacked = farm._unpack_on_worker(bundle)
    assert unpacked.bodies[0].file != scene.bodies[0].file
    assert (
        hashlib.sha256(Path(unpacked.bodies[0].file).read_bytes()).hexdigest()
        == hashlib.sha256(OBJ_TETRAHEDRON.encode()).hexdigest()
    )
    assert (render(unpacked, time=4.0e-9).image == expected).all()
