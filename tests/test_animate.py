"""Tests for relview.animation (batch, timing, manifest, workers, flashes, video): frame
times and names, manifest, resume, interruption, exposure lock, flash check, video.

Outside references: WCAG 2.x (W3C Recommendation), success criterion 2.3.1 "Three
Flashes or Below Threshold" and the glossary entries "general flash and red flash
thresholds" and "relative luminance"; colour-science's sRGB decoding (IEC 61966-2-1)
for relative luminance; pillow, imageio and the ffmpeg binary of imageio-ffmpeg read
back what relview wrote. The scene is a demo of our own invention.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from relview.animation import batch, flashes, timing, workers
from relview.errors import OutputError, UserError
from relview.scene.model import load_scene
from relview.scene.parts import Animation

# A brick 1 m long at 0.8c passes 2 m in front of a camera: blackbody 3000 K. Light from
# the brick origin at x = 0 leaves at t = 0 and reaches the camera 6.67 ns later.
BRICK_SCENE = """\
[scene]
title = "Kiln brick passing the gate"

[render]
resolution = [48, 27]

[camera]
position = [0.0, -2.0, 0.0]
look_at  = [0.0, 0.0, 0.0]
fov      = 100.0

[[body]]
name  = "brick"
shape = "box"
size  = [1.0, 0.6, 0.6]
[body.motion]
kind     = "uniform"
beta     = [0.8, 0.0, 0.0]
position = [0.0, 0.0, 0.0]
time     = 0.0
[body.surface]
blackbody = {temperature}

[animation]
start  = 0.0
end    = 1.6e-8
frames = {frames}
fps    = 8
"""


def write_scene(path: Path, temperature: float = 3000.0, frames: int = 5) -> Path:
    path.write_text(BRICK_SCENE.format(temperature=temperature, frames=frames))
    return path


@pytest.fixture
def scene_file(tmp_path) -> Path:
    return write_scene(tmp_path / "brick.toml")


class RenderCounter:
    """Counts (and records) frames rendered in this process."""

    def __init__(self, monkeypatch):
        self.indices: list[int] = []
        original = workers.FrameRenderer.render

        def counting(renderer, index, time_s):
            self.indices.append(index)
            return original(renderer, index, time_s)

        monkeypatch.setattr(workers.FrameRenderer, "render", counting)


def run(scene_path, out, **kw):
    kw.setdefault("progress", False)
    kw.setdefault("workers", 1)
    return batch.animate(load_scene(scene_path), out, **kw)


def stamps(out: Path) -> dict[str, tuple[int, str]]:
    return {
        p.name: (p.stat().st_mtime_ns, hashlib.sha256(p.read_bytes()).hexdigest())
        for p in sorted(out.glob("frame-*.png"))
    }


# ----------------------------------------------------------------------------- times, names, ranges


def test_frame_times_are_evenly_spaced_from_start_to_end():
    # t_k = start + k (end - start) / (N - 1): the definition in relview.animation.timing
    t = timing.frame_times(Animation(start=1.0e-8, end=3.0e-8, frames=5, fps=24))
    np.testing.assert_allclose(t, [1.0e-8, 1.5e-8, 2.0e-8, 2.5e-8, 3.0e-8], rtol=1e-15)
    assert timing.frame_times(Animation(start=2.0e-8, end=9.0e-8, frames=1)).tolist() == [2.0e-8]


def test_frame_names_follow_the_pattern():
    assert timing.frame_name(0) == "frame-00000.png"
    assert timing.frame_name(123) == "frame-00123.png"
    assert timing.FRAME_NAME_PATTERN.format(index=7) == "frame-00007.png"


def test_frame_ranges_are_half_open():
    assert timing.parse_frame_range("2:4", 10) == range(2, 4)
    assert timing.parse_frame_range("7:", 10) == range(7, 10)
    assert timing.parse_frame_range(":3", 10) == range(3)
    assert timing.resolve_frames(slice(1, 3), 10) == range(1, 3)
    assert timing.resolve_frames(None, 4) == range(4)


@pytest.mark.parametrize(
    "text, words",
    [
        ("3:3", "empty"),
        ("5:2", "reversed"),
        ("0:11", "10 frame"),
        ("x:2", "whole"),
        ("4", "A:B"),
        ("-1:3", "negative"),
    ],
)
def test_bad_frame_ranges_are_user_errors(text, words):
    with pytest.raises(UserError, match=words):
        timing.parse_frame_range(text, 10)


# ----------------------------------------------------------------------------- manifest, files


def test_frames_and_manifest(scene_file, tmp_path):
    out = tmp_path / "out"
    summary = run(scene_file, out)
    scene = load_scene(scene_file)
    times = timing.frame_times(scene.animation)
    names = sorted(p.name for p in out.glob("frame-*.png"))
    assert names == [f"frame-{k:05d}.png" for k in range(5)]
    assert summary.rendered == [0, 1, 2, 3, 4] and summary.skipped == []

    m = json.loads((out / "manifest.json").read_text())
    assert m["scene"]["sha256"] == scene.source_hash
    from relview import __version__

    assert m["relview_version"] == __version__
    s = m["settings"]
    assert s["resolution"] == [48, 27] and s["samples"] == 1
    assert s["effects"] == {
        "delay": True,
        "contraction": True,
        "aberration": True,
        "doppler": True,
        "beaming": True,
    }
    assert s["projection"] == "pinhole" and s["exposure"] == "auto"
    assert s["times_s"] == times.tolist()
    lock = s["exposure_lock"]
    assert lock["mode"] == "locked" and lock["white_cd_m2"] > 0
    for k in range(5):
        entry = m["frames"][f"{k:05d}"]
        path = out / entry["file"]
        assert entry["time_s"] == times[k]
        assert entry["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
        # one white for every frame: the lock
        assert entry["white_cd_m2"] == lock["white_cd_m2"]
        assert 0.0 <= entry["mean_relative_luminance"] <= 1.0
        with Image.open(path) as im:  # provenance chunks, read back by pillow
            assert im.size == (48, 27)
            text = im.text
        assert text["frame_index"] == str(k)
        assert float(text["frame_time_s"]) == times[k]
        assert text["scene_sha256"] == scene.source_hash
        assert float(text["white_cd_m2"]) == lock["white_cd_m2"]
    # the brick is in view in some frames: not a batch of black pictures
    assert max(e["mean_relative_luminance"] for e in m["frames"].values()) > 0.01


def test_unlocked_exposure_is_automatic_per_frame(scene_file, tmp_path):
    from relview.renderer import render

    run(scene_file, tmp_path / "out", unlock_exposure=True)
    m = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert m["settings"]["exposure_lock"]["mode"] == "per-frame"
    scene = load_scene(scene_file)
    for k, t in enumerate(timing.frame_times(scene.animation)):
        # each frame's own automatic white, as a single render at that time gives it
        assert m["frames"][f"{k:05d}"]["white_cd_m2"] == render(scene, time=t).white


def test_fixed_exposure_is_kept(scene_file, tmp_path):
    scene = load_scene(scene_file)
    scene = scene.replace(
        render=scene.render.__class__(resolution=scene.render.resolution, exposure=2.5e6)
    )
    summary = batch.animate(scene, tmp_path / "out", progress=False, workers=1)
    assert summary.exposure["mode"] == "fixed" and summary.exposure["white_cd_m2"] == 2.5e6


def test_resume_skips_finished_and_redoes_altered_or_missing(scene_file, tmp_path, monkeypatch):
    out = tmp_path / "out"
    counter = RenderCounter(monkeypatch)
    run(scene_file, out)
    assert sorted(counter.indices) == [0, 1, 2, 3, 4]
    before = stamps(out)

    counter.indices.clear()
    summary = run(scene_file, out)
    assert counter.indices == [] and summary.skipped == [0, 1, 2, 3, 4]
    assert stamps(out) == before

    with open(out / "frame-00002.png", "ab") as fh:
        fh.write(b"edited")
    (out / "frame-00003.png").unlink()
    counter.indices.clear()
    # an edited frame is somebody's file now: replaced only with overwrite
    with pytest.raises(UserError, match="frames 2.*--overwrite"):
        run(scene_file, out)
    assert counter.indices == []
    summary = run(scene_file, out, overwrite=True)
    assert sorted(counter.indices) == [2, 3] and summary.rendered == [2, 3]
    after = stamps(out)
    for name in ("frame-00000.png", "frame-00001.png", "frame-00004.png"):
        assert after[name] == before[name]  # untouched
    assert after["frame-00002.png"][1] == before["frame-00002.png"][1]  # same pixels again
    assert after["frame-00003.png"][1] == before["frame-00003.png"][1]


def test_changed_scene_or_settings_redo_every_frame(scene_file, tmp_path, monkeypatch):
    out = tmp_path / "out"
    run(scene_file, out)
    counter = RenderCounter(monkeypatch)
    write_scene(scene_file, temperature=3400.0)  # the scene file changed: its hash too
    with pytest.raises(UserError, match="frames 0-4.*--overwrite"):
        run(scene_file, out)  # finished frames of the old scene are kept unless asked
    summary = run(scene_file, out, overwrite=True)
    assert sorted(counter.indices) == [0, 1, 2, 3, 4] and summary.skipped == []
    counter.indices.clear()
    scene = load_scene(scene_file)
    scene = scene.replace(render=scene.render.__class__(resolution=(40, 24)))
    batch.animate(scene, out, progress=False, workers=1, overwrite=True)  # a setting changed
    assert sorted(counter.indices) == [0, 1, 2, 3, 4]
    with Image.open(out / "frame-00000.png") as im:
        assert im.size == (40, 24)


def test_frame_subset_and_video_only_from_a_complete_set(scene_file, tmp_path, monkeypatch):
    out = tmp_path / "out"
    counter = RenderCounter(monkeypatch)
    summary = run(scene_file, out, frames=range(1, 3), video=tmp_path / "clip.gif")
    assert counter.indices == [1, 2]
    assert sorted(p.name for p in out.glob("frame-*.png")) == ["frame-00001.png", "frame-00002.png"]
    assert summary.video is None and "not finished" in summary.video_note
    assert not (tmp_path / "clip.gif").exists()
    counter.indices.clear()
    summary = run(scene_file, out, video=tmp_path / "clip.gif")
    assert sorted(counter.indices) == [0, 3, 4] and summary.skipped == [1, 2]
    assert summary.video == tmp_path / "clip.gif"


def test_interrupted_batch_keeps_finished_frames(scene_file, tmp_path, monkeypatch):
    out = tmp_path / "out"
    original = workers.FrameRenderer.render
    calls = []

    def interrupted(renderer, index, time_s):
        calls.append(index)
        if len(calls) == 3:
            raise KeyboardInterrupt  # Ctrl-C while the third frame renders
        return original(renderer, index, time_s)

    monkeypatch.setattr(workers.FrameRenderer, "render", interrupted)
    with pytest.raises(KeyboardInterrupt):
        run(scene_file, out)
    m = json.loads((out / "manifest.json").read_text())
    assert sorted(m["frames"]) == ["00000", "00001"]
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        "frame-00000.png",
        "frame-00001.png",
        "manifest.json",
    ]
    before = stamps(out)
    monkeypatch.setattr(workers.FrameRenderer, "render", original)
    counter = RenderCounter(monkeypatch)
    run(scene_file, out)
    assert sorted(counter.indices) == [2, 3, 4]
    assert {k: v for k, v in stamps(out).items() if k in before} == before


def test_unrecorded_frame_of_these_settings_is_adopted(scene_file, tmp_path, monkeypatch):
    """A kill between writing a frame and recording it: the file's own chunks vouch for it."""
    out = tmp_path / "out"
    run(scene_file, out)
    m = json.loads((out / "manifest.json").read_text())
    del m["frames"]["00004"]
    (out / "manifest.json").write_text(json.dumps(m))
    counter = RenderCounter(monkeypatch)
    summary = run(scene_file, out)
    assert counter.indices == [] and summary.adopted == [4]


# ----------------------------------------------------------------------------- never destroy


def test_refuses_a_directory_of_another_scene(scene_file, tmp_path):
    out = tmp_path / "out"
    run(scene_file, out)
    before = stamps(out)
    other = write_scene(tmp_path / "other.toml", temperature=5000.0)
    with pytest.raises(OutputError, match="another animation"):
        run(other, out)
    assert stamps(out) == before
    summary = run(other, out, overwrite=True)
    assert summary.rendered == [0, 1, 2, 3, 4]


def test_refuses_frame_files_without_a_manifest(scene_file, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "frame-00000.png").write_bytes(b"someone's picture")
    with pytest.raises(OutputError, match="not this animation's"):
        run(scene_file, out)
    assert (out / "frame-00000.png").read_bytes() == b"someone's picture"
    (out / "manifest.json").write_text("{not json")
    with pytest.raises(OutputError, match="manifest"):
        run(scene_file, out)


def test_scene_without_animation_is_a_user_error_naming_the_file(tmp_path):
    text = BRICK_SCENE.format(temperature=3000.0, frames=2).split("[animation]")[0]
    path = tmp_path / "still.toml"
    path.write_text(text)
    with pytest.raises(UserError, match="still.toml.*no \\[animation\\]"):
        run(path, tmp_path / "out")
    from relview.cli.app import main

    assert main(["animate", str(path), "-o", str(tmp_path / "out"), "--quiet"]) == 2


def test_command_line(scene_file, tmp_path, capsys):
    from relview.cli.app import main

    out = tmp_path / "cli-out"
    assert (
        main(
            [
                "animate",
                str(scene_file),
                "-o",
                str(out),
                "--frames",
                "1:3",
                "--quiet",
                "--workers",
                "1",
                "--resolution",
                "32x18",
            ]
        )
        == 0
    )
    assert sorted(p.name for p in out.glob("frame-*.png")) == ["frame-00001.png", "frame-00002.png"]
    assert "rendered 2" in capsys.readouterr().out
    assert main(["animate", str(scene_file), "-o", str(out), "--frames", "3:1", "--quiet"]) == 2
    assert "reversed" in capsys.readouterr().err


def test_worker_module_loads_no_numba():
    """A spawned worker imports relview.animation.workers to find its initialiser, which
    sets NUMBA_NUM_THREADS=1; numba must not be loaded before that (a fresh interpreter)."""
    code = "import sys, relview.animation.workers; print(sorted(m for m in sys.modules if m.startswith('numba')))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.slow  # starts a pool of worker processes
def test_worker_processes_give_the_same_bytes(scene_file, tmp_path):
    one = run(scene_file, tmp_path / "one", workers=None)  # the default: this process
    assert one.backend == "1 process"
    two = run(scene_file, tmp_path / "two", workers=2)
    assert two.backend == "2 processes, 1 numba thread each"
    for k in range(5):
        name = timing.frame_name(k)
        assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "two" / name).read_bytes()


# ----------------------------------------------------------------------------- killed batch


@pytest.mark.slow  # starts and kills a relview process
def test_killed_batch_resumes(tmp_path):
    """SIGKILL after the first frame lands; the rerun finishes and keeps what was there."""
    scene_file = write_scene(tmp_path / "brick.toml", frames=20)
    out = tmp_path / "out"
    # Warm numba's on-disk cache in this process so the child does not compile.
    workers.FrameRenderer(load_scene(scene_file), None).render(0, 0.0)
    cmd = [
        sys.executable,
        "-m",
        "relview.cli",
        "animate",
        str(scene_file),
        "-o",
        str(out),
        "--quiet",
        "--workers",
        "1",
        "--resolution",
        "160x90",
    ]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while not (out / "frame-00000.png").exists():
            assert proc.poll() is None, proc.stderr.read().decode()
            assert time.monotonic() < deadline, "no frame appeared"
            time.sleep(0.002)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.wait()
    before = stamps(out)
    assert 1 <= len(before) < 20, "the kill should land in the middle of the batch"
    json.loads((out / "manifest.json").read_text())  # a complete manifest, not a torn one
    from relview.cli.app import main

    assert main(cmd[3:]) == 0  # the same command again, in this process
    after = stamps(out)
    assert sorted(after) == [timing.frame_name(k) for k in range(20)]
    for name, stamp in before.items():
        assert after[name] == stamp, f"{name} was redone"


@pytest.mark.slow  # starts two relview processes
def test_pieces_of_a_job_array_share_one_directory(tmp_path):
    """Two pieces run at the same time into one directory keep each other's records."""
    scene_file = write_scene(tmp_path / "brick.toml", frames=8)
    out = tmp_path / "out"
    base = [sys.executable, "-m", "relview.cli", "animate", str(scene_file), "-o", str(out)]
    pieces = [
        subprocess.Popen([*base, "--quiet", "--frames", a], stderr=subprocess.PIPE)
        for a in ("0:4", "4:8")
    ]
    for p in pieces:
        assert p.wait(timeout=300) == 0, p.stderr.read().decode()
    m = json.loads((out / "manifest.json").read_text())
    assert sorted(m["frames"]) == [f"{k:05d}" for k in range(8)]
    summary = run(scene_file, out)
    assert summary.rendered == [] and summary.skipped == list(range(8))


# ----------------------------------------------------------------------------- flashes


def relative_luminance_reference(rgb8: np.ndarray) -> float:
    """WCAG 2.x "relative luminance", with sRGB decoding from colour-science (IEC 61966-2-1)."""
    import colour

    linear = colour.cctf_decoding(rgb8 / 255.0, function="sRGB")
    return float((linear @ np.array([0.2126, 0.7152, 0.0722])).mean())


def test_mean_relative_luminance_matches_wcag_definition():
    rng = np.random.default_rng(3)
    img = rng.integers(0, 256, size=(9, 11, 3), dtype=np.uint8)
    assert flashes.mean_relative_luminance(img) == pytest.approx(
        relative_luminance_reference(img), rel=1e-12
    )
    assert flashes.mean_relative_luminance(np.full((2, 2, 3), 255, np.uint8)) == pytest.approx(1.0)
    assert flashes.mean_relative_luminance(np.zeros((2, 2, 3), np.uint8)) == 0.0


def square_wave(hz: float, fps: float, seconds: float, low: float, high: float) -> np.ndarray:
    t = np.arange(int(seconds * fps)) / fps
    return np.where(np.floor(2 * hz * t) % 2 == 0, low, high)


def test_five_hertz_flashing_is_flagged():
    # WCAG 2.x SC 2.3.1: no more than three general flashes in any one-second period; a
    # general flash is a pair of opposing changes of relative luminance of 10 % or more
    # of the maximum (1.0) where the darker image is below 0.80 (glossary, "general
    # flash and red flash thresholds"; quoted from memory of the W3C text). 5 Hz
    # dark/bright: five flashes a second.
    lum = square_wave(5.0, 30.0, 2.0, 0.05, 0.60)
    episodes = flashes.find_flashes(lum, 30.0)
    assert episodes, "5 flashes per second must be flagged"
    assert episodes[0].flashes >= 4
    assert episodes[0].first_frame <= 3 and episodes[-1].last_frame >= 50


def test_slow_ramp_and_slow_blinks_are_not_flagged():
    ramp = np.linspace(0.0, 1.0, 60)  # one change over 2 s at 30 fps
    assert flashes.find_flashes(ramp, 30.0) == []
    # 2 Hz: two flashes per second, below the WCAG limit of three
    assert flashes.find_flashes(square_wave(2.0, 30.0, 3.0, 0.05, 0.60), 30.0) == []


def test_flash_thresholds_of_wcag():
    # changes below 10 % of the maximum relative luminance do not count (WCAG glossary)
    assert flashes.find_flashes(square_wave(5.0, 30.0, 2.0, 0.30, 0.38), 30.0) == []
    # the darker image at or above 0.80: not a general flash (WCAG glossary)
    assert flashes.find_flashes(square_wave(5.0, 30.0, 2.0, 0.82, 1.00), 30.0) == []
    # just over the step: 0.10 apart with the darker below 0.80 counts
    assert flashes.find_flashes(square_wave(5.0, 30.0, 2.0, 0.50, 0.61), 30.0) != []


def test_flashes_are_counted_in_playback_seconds():
    lum = square_wave(5.0, 30.0, 2.0, 0.05, 0.60)
    # the same frames played at 10 fps last 6 s: 5/3 flashes a second, not flagged
    assert flashes.find_flashes(lum, 10.0) == []


def test_flash_warning_from_a_batch(scene_file, tmp_path, monkeypatch):
    """Beaming made to blink: the batch warns and names the frames."""
    write_scene(scene_file, frames=12)
    original = workers.mean_relative_luminance

    def blinking(rgb8):  # alternate dark/bright frames: 8 fps -> 4 flashes a second
        blinking.n += 1
        return 0.05 if blinking.n % 2 else 0.7

    blinking.n = 0
    monkeypatch.setattr(workers, "mean_relative_luminance", blinking)
    with pytest.warns(flashes.FlashWarning, match="frames 0-11"):
        summary = run(scene_file, tmp_path / "out")
    monkeypatch.setattr(workers, "mean_relative_luminance", original)
    assert summary.flashes and summary.flashes[0].flashes == 4
    m = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert m["flash_check"]["episodes"][0]["first_frame"] == 0


def test_flash_warning_on_the_command_line(scene_file, tmp_path, monkeypatch, capsys):
    from relview.cli.app import main

    write_scene(scene_file, frames=12)
    levels = iter([0.05, 0.7] * 6)
    monkeypatch.setattr(workers, "mean_relative_luminance", lambda rgb8: next(levels))
    assert main(["animate", str(scene_file), "-o", str(tmp_path / "o"), "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "relview: warning:" in err and "flashing: frames 0-11" in err


# ----------------------------------------------------------------------------- video


@pytest.mark.parametrize("ext", [".mp4", ".gif"])
def test_video_is_written_and_readable(scene_file, tmp_path, ext):
    import imageio.v2 as iio2
    import imageio.v3 as iio3

    video = tmp_path / f"clip{ext}"
    # Exposure per frame, so that no two frames are alike: with the lock, the receding
    # brick (D < 1, brightness ~ D^4) is black in the last frames, and pillow's GIF
    # writer merges identical consecutive frames into one longer frame.
    summary = run(scene_file, tmp_path / "out", video=video, unlock_exposure=True)
    assert summary.video == video and video.stat().st_size > 0
    if ext == ".mp4":
        reader = iio2.get_reader(video, format="FFMPEG")  # the ffmpeg binary decodes it
        try:
            assert reader.count_frames() == 5
            assert reader.get_meta_data()["fps"] == pytest.approx(8.0)
            shape = reader.get_data(0).shape
        finally:
            reader.close()
        assert shape[:2] == (28, 48)  # odd height padded by one repeated row for yuv420p
    else:
        frames = iio3.imread(video, index=None)
        assert frames.shape[0] == 5 and frames.shape[1:3] == (27, 48)
        first = np.asarray(Image.open(tmp_path / "out" / "frame-00000.png").convert("RGB"))
        with Image.open(video) as gif:
            assert gif.n_frames == 5
            assert gif.info["duration"] == pytest.approx(125, abs=10)  # 8 fps
        assert np.abs(frames[0][..., :3].astype(int) - first).max() <= 48  # palette
    again = run(scene_file, tmp_path / "out", video=video, unlock_exposure=True)
    assert again.video == tmp_path / f"clip-1{ext}"  # the earlier video is kept


def test_unknown_video_type_is_a_user_error(scene_file, tmp_path):
    with pytest.raises(UserError, match="video"):
        run(scene_file, tmp_path / "out", video=tmp_path / "clip.avi")


def test_png_bytes_decode_to_the_recorded_luminance(scene_file, tmp_path):
    run(scene_file, tmp_path / "out")
    m = json.loads((tmp_path / "out" / "manifest.json").read_text())
    for entry in m["frames"].values():
        with Image.open(io.BytesIO((tmp_path / "out" / entry["file"]).read_bytes())) as im:
            rgb8 = np.asarray(im.convert("RGB"))
        assert entry["mean_relative_luminance"] == pytest.approx(
            relative_luminance_reference(rgb8), rel=1e-9, abs=1e-15
        )
