"""Lost workers: frames of a dead worker are rendered again a bounded number of times,
then the run stops with a clear error that keeps the finished frames.

The local tests kill a real worker process (os.kill with SIGKILL from inside the frame it
renders); the Dask test replaces a connection's frames with the errors a lost scheduler
raises (distributed's own CommClosedError), so no cluster has to be started.
"""

from __future__ import annotations

import json
import os
import signal
from pathlib import Path

import pytest
from test_animate import write_scene

from relview.animation import batch, farm, timing, workers
from relview.errors import WorkersLost
from relview.scene.model import load_scene

FRAMES = 4


class KillOnceRenderer(workers.FrameRenderer):
    """Kills its own worker process the first time it is asked for frame 2."""

    def render(self, index, time_s):
        marker = Path(self.metadata["marker"])
        if index == 2 and not marker.exists():
            marker.write_text("killed once")
            os.kill(os.getpid(), signal.SIGKILL)
        return super().render(index, time_s)


class AlwaysKillRenderer(workers.FrameRenderer):
    """Kills its worker process whenever it is asked for the last frame."""

    def render(self, index, time_s):
        if index == FRAMES - 1:
            os.kill(os.getpid(), signal.SIGKILL)
        return super().render(index, time_s)


def _jobs(scene):
    return [(k, float(t)) for k, t in enumerate(timing.frame_times(scene.animation))]


@pytest.mark.slow  # starts three pools of worker processes
def test_frames_of_a_killed_worker_are_rendered_again(tmp_path):
    scene = load_scene(write_scene(tmp_path / "brick.toml", frames=FRAMES))
    renderer = KillOnceRenderer(scene, None, {"marker": str(tmp_path / "killed")})
    frames = {f.index: f for f in workers.render_in_processes(renderer, _jobs(scene), 2)}
    assert (tmp_path / "killed").exists(), "the worker was not killed"
    assert sorted(frames) == list(range(FRAMES))
    plain = workers.FrameRenderer(scene, None, {"marker": str(tmp_path / "killed")})
    assert frames[2].png == plain.render(2, frames[2].time_s).png


@pytest.mark.slow  # starts three pools of worker processes
def test_worker_that_keeps_dying_stops_the_run_and_keeps_finished_frames(tmp_path, monkeypatch):
    scene = load_scene(write_scene(tmp_path / "brick.toml", frames=FRAMES))
    out = tmp_path / "out"
    monkeypatch.setattr(batch, "FrameRenderer", AlwaysKillRenderer)
    with pytest.raises(WorkersLost) as err:
        batch.animate(scene, out, progress=False, workers=2)
    message = str(err.value)
    assert message.startswith(f"{out}: 1 frame(s) (frames 3) could not be rendered")
    assert f"lost {workers.MAX_RETRIES + 1} time(s) (BrokenProcessPool" in message
    assert "the finished frames are kept" in message and err.value.frames == [3]
    done = json.loads((out / "manifest.json").read_text())["frames"]
    assert sorted(done) == ["00000", "00001", "00002"]
    monkeypatch.setattr(batch, "FrameRenderer", workers.FrameRenderer)
    summary = batch.animate(
        load_scene(write_scene(tmp_path / "brick.toml", frames=FRAMES)),
        out,
        progress=False,
        workers=1,
    )
    assert summary.rendered == [3] and summary.skipped == [0, 1, 2]  # a rerun resumes


class _Session(farm.FarmSession):
    """A session that counts (re)connections and opens no cluster."""

    def open(self):
        self.opened = getattr(self, "opened", 0) + 1
        self.client = object()
        return self

    def close(self):
        self.client = None


def test_frames_lost_with_the_scheduler_are_sent_again_on_a_new_connection(monkeypatch):
    from distributed.comm.core import CommClosedError

    from relview.animation.workers import RenderedFrame

    def lost_once(client, renderer, remaining):
        for k in sorted(remaining):
            remaining.pop(k)
            yield RenderedFrame(k, 0.0, b"", 0.0, 1.0)
            if session.opened == 1:  # the first connection dies after one frame
                raise CommClosedError("in <TCP (closed)>: Stream is closed")

    session = _Session("tcp://127.0.0.1:8786").open()
    monkeypatch.setattr(farm, "_farm_pass", lost_once)
    got = [f.index for f in farm.render_frames(None, [(k, 0.0) for k in range(4)], session)]
    assert got == [0, 1, 2, 3] and session.opened == 2


def test_scheduler_lost_every_time_is_a_user_error_naming_the_missing_frames(monkeypatch):
    from distributed.comm.core import CommClosedError

    def always_lost(client, renderer, remaining):
        raise CommClosedError("in <TCP (closed)>: Stream is closed")
        yield  # a generator, as the real pass

    session = _Session("tcp://127.0.0.1:8786").open()
    monkeypatch.setattr(farm, "_farm_pass", always_lost)
    with pytest.raises(
        WorkersLost,
        match=r"2 frame\(s\) \(frames 0, 1\) could not be rendered: "
        r"workers of the Dask cluster were lost 3 time\(s\) \(CommClosedError",
    ):
        list(farm.render_frames(None, [(0, 0.0), (1, 0.0)], session))
    assert session.opened == 1 + workers.MAX_RETRIES
