"""Animations: the frames of a scene's ``[animation]`` section rendered as a resumable batch.

:func:`animate` drives one run: it claims the output directory, decides the exposure,
skips the frames already finished under the current settings, renders the others on
the chosen backend (this process, local worker processes or a Dask cluster), records
each frame in the manifest as it lands, checks the finished frames for flashing and
assembles a video once the set is complete. The parts live in their own modules:

* relview.animation.timing: frame times t_k, frame file names, ``--frames A:B`` ranges;
* relview.animation.manifest: the manifest and what makes a run safe to stop and
  restart (settings digest, directory claim, finished and adopted frames);
* relview.animation.workers: rendering a frame to PNG bytes, serially or in local
  worker processes; relview.animation.farm: the same on a Dask cluster;
* relview.animation.flashes: the WCAG 2.3.1 flash check;
* relview.animation.video: .mp4 / .gif assembly.

Exposure is locked across the frames by default: one white level (cd/m2) decided
from a few low-resolution probe frames spread over the whole time range (the
same probes whatever ``frames`` range a run renders, so the pieces of a split
job agree), or the scene's fixed exposure. It is stored in the manifest and
reused on resume.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import os
import time as _time
import warnings
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from relview import __version__
from relview.animation import farm
from relview.animation.flashes import FlashEpisode, FlashWarning, find_flashes
from relview.animation.manifest import (
    MANIFEST_KIND,
    MANIFEST_VERSION,
    Manifest,
    adopt_unrecorded_frame,
    claim_directory,
    current_frames,
    frame_is_done,
    frame_key,
    pixel_settings,
    scene_identity,
    settings_digest,
    write_frame_file,
)
from relview.animation.timing import FRAME_NAME_PATTERN, frame_name, frame_times, resolve_frames
from relview.animation.video import VIDEO_TYPES, assemble_video
from relview.animation.workers import (
    WORKER_BASE_BYTES,
    FrameRenderer,
    check_worker_count,
    render_in_processes,
    render_serial,
)
from relview.errors import OutputError, UserError, WorkersLost
from relview.frame_memory import check_memory, estimate_bytes
from relview.geometry.shapes import mesh_data
from relview.imaging.exposure import ExposureLock

__all__ = [
    "DEFAULT_WORKERS",
    "PROBE_FRAMES",
    "AnimationSummary",
    "animate",
    "decide_exposure",
]

#: Probe frames for the exposure lock: how many, and their largest width (pixels).
PROBE_FRAMES = 5
PROBE_MAX_WIDTH = 160

#: Local worker processes when none are asked for. Measured with
#: benchmarks/bench_animate.py on this project's shared 2-core machines (numbers in
#: docs/animation.md): one process, whose numba kernels use both cores, rendered batches
#: at least as fast as two processes with one numba thread each, which first pay
#: seconds of start-up (imports, numba's cache). ``--workers 2`` remains available.
DEFAULT_WORKERS = 1


def _probe_resolution(resolution) -> tuple[int, int]:
    w, h = (int(v) for v in resolution)
    if w <= PROBE_MAX_WIDTH:
        return w, h
    return PROBE_MAX_WIDTH, max(1, round(h * PROBE_MAX_WIDTH / w))


def _exposure_mode(scene, unlock: bool) -> str:
    setting = scene.render.exposure
    if not (isinstance(setting, str) and setting.strip().lower() == "auto"):
        return "fixed"
    return "per-frame" if unlock else "locked"


def decide_exposure(scene, times: np.ndarray, unlock: bool, context=None) -> dict[str, Any]:
    """The exposure rule for the frames (stored in the manifest).

    ``mode``: "fixed" (the scene or --exposure gives a white in cd/m2), "locked"
    (automatic exposure pooled over :data:`PROBE_FRAMES` low-resolution probe
    frames at frame times spread evenly over the whole animation, ExposureLock)
    or "per-frame" (automatic exposure of each frame on its own; ``unlock``).
    """
    # imported here: the renderer loads the numba kernels, which `relview --help` and the
    # option checks of `relview animate` do not need
    from relview.renderer import RenderContext, metering_masks, render

    mode = _exposure_mode(scene, unlock)
    if mode == "fixed":
        lock = ExposureLock(scene.render.exposure)
        return {"mode": "fixed", **lock.to_dict()}
    if mode == "per-frame":
        return {
            "mode": "per-frame",
            "setting": "auto",
            "white_cd_m2": None,
            "source": "automatic exposure of each frame",
        }
    context = context or RenderContext(scene)
    n = min(PROBE_FRAMES, len(times))
    picks = sorted({round(float(k)) for k in np.linspace(0, len(times) - 1, n)})
    probe_res = _probe_resolution(scene.render.resolution)
    images, masks, lamps = [], [], []
    for k in picks:
        frame = render(
            scene, time=float(times[k]), resolution=probe_res, exposure="auto", context=context
        )
        xyz = frame.layers["xyz"]
        images.append(xyz)
        # the renderer's own metering: the scene's region, lamps left out
        region, lamp = metering_masks(
            scene, xyz, frame.layers["body"], frame.layers["rest_position"]
        )
        masks.append(region)
        lamps.append(lamp)
    lock = ExposureLock("auto")
    lock.lock_from(images, masks, lamps)
    return {
        "mode": "locked",
        **lock.to_dict(),
        "probe_frames": picks,
        "probe_resolution": list(probe_res),
    }


def _frame_ranges(indices: list[int]) -> str:
    """[0, 1, 2, 5, 7, 8] -> 'frames 0-2, 5, 7-8'."""
    parts, start = [], None
    for i, k in enumerate(indices):
        if start is None:
            start = k
        if i + 1 == len(indices) or indices[i + 1] != k + 1:
            parts.append(f"{start}" if start == k else f"{start}-{k}")
            start = None
    return "frames " + ", ".join(parts)


@dataclass
class AnimationSummary:
    """What one call of :func:`animate` did."""

    out_dir: Path
    manifest: Path
    frames_requested: list[int]
    rendered: list[int] = field(default_factory=list)
    skipped: list[int] = field(default_factory=list)  # already done under these settings
    adopted: list[int] = field(default_factory=list)  # written before, recorded now
    exposure: dict[str, Any] = field(default_factory=dict)
    flashes: list[FlashEpisode] = field(default_factory=list)
    video: Path | None = None
    video_note: str = ""  # why no video was written, when one was asked for
    seconds: float = 0.0  # wall time of the whole call
    render_seconds: float = 0.0  # wall time from starting the workers to the last frame
    backend: str = ""

    @property
    def frames_per_minute(self) -> float:
        """Frames rendered per minute of :attr:`render_seconds` (worker start-up included)."""
        if not self.rendered or self.render_seconds <= 0:
            return math.nan
        return 60.0 * len(self.rendered) / self.render_seconds


def animate(
    scene,
    out_dir: str | os.PathLike,
    frames: range | slice | Iterable[int] | str | None = None,
    video: str | os.PathLike | None = None,
    cluster=None,
    overwrite: bool = False,
    progress: bool = True,
    *,
    workers: int | None = None,
    unlock_exposure: bool = False,
) -> AnimationSummary:
    """Render the frames of ``scene``'s ``[animation]`` into ``out_dir``, resumably.

    ``frames``: the frame indices this run is responsible for (a range, a slice,
    ``"A:B"`` or indices; default all). ``video``: an .mp4 or .gif path, written
    when every frame of the animation is finished (a split run writes it from
    whichever piece completes the set, or from a later rerun). ``cluster``: a Dask
    scheduler address ``"tcp://host:8786"``, ``"local:N"`` or a
    ``distributed.Client``; None renders on this machine with ``workers`` processes
    (default :data:`DEFAULT_WORKERS`; 1 renders in this process).
    ``overwrite``: allow writing into a directory that holds other output (replacing
    files of the same names) and replace an existing video. ``unlock_exposure``:
    automatic exposure per frame instead of one locked white.
    """
    started = _time.perf_counter()
    anim = scene.animation
    if anim is None:
        where = scene.source_path or "the scene"
        raise UserError(
            "has no [animation] section; add one with start, end (s), frames and fps "
            "(docs/scene-format.md)",
            file=where,
        )
    faces = scene_faces(scene)
    check_memory(*scene.render.resolution, faces=faces)
    times = frame_times(anim)
    wanted = resolve_frames(frames, len(times))
    if video is not None and Path(video).suffix.lower() not in VIDEO_TYPES:
        raise OutputError(
            f"unknown video type {Path(video).suffix or '(none)'!r}; "
            f"use {' or '.join(VIDEO_TYPES)}",
            file=video,
        )
    if workers is not None and workers < 1:
        raise UserError(f"--workers must be >= 1, got {workers}")
    per_worker = WORKER_BASE_BYTES + estimate_bytes(*scene.render.resolution, faces=faces)
    if workers is not None and workers > 1:
        check_worker_count(workers, per_worker, f"--workers {workers}")
    if cluster is not None:
        if workers is not None:
            raise UserError(
                "--workers sets local worker processes; with --cluster give the workers to "
                "the cluster (local:N, or start dask workers for a tcp:// scheduler)"
            )
        if isinstance(cluster, str):
            kind, value = farm.parse_cluster(cluster)  # a malformed address fails before work
            if kind == "local":
                check_worker_count(int(value), per_worker, f"--cluster {cluster}")
    out_dir = Path(out_dir)
    identity = scene_identity(scene)
    earlier = claim_directory(out_dir, identity, overwrite)

    base = pixel_settings(scene, times)
    base_digest = settings_digest(base)
    renderer = FrameRenderer(scene, None)
    exposure = None
    if earlier is not None and earlier.get("base_settings_sha256") == base_digest:
        prev = earlier.get("settings", {}).get("exposure_lock", {})
        if prev.get("mode") == _exposure_mode(scene, unlock_exposure):
            exposure = prev  # a resumed run uses the same white
    if exposure is None:
        probing = _exposure_mode(scene, unlock_exposure) == "locked"
        context = renderer.context if probing else None  # built only when probes need it
        exposure = decide_exposure(scene, times, unlock_exposure, context=context)
    settings = dict(base, exposure_lock=exposure)
    digest = settings_digest(settings)
    renderer.white = exposure.get("white_cd_m2")
    renderer.metadata = {
        "animation_settings_sha256": digest,
        "frame_count": str(len(times)),
        "exposure_lock": json.dumps(exposure, sort_keys=True),
    }
    data = {
        "kind": MANIFEST_KIND,
        "manifest_version": MANIFEST_VERSION,
        "relview_version": __version__,
        "scene": {"path": identity, "sha256": scene.source_hash, "title": scene.title},
        "animation": {
            "start_s": anim.start,
            "end_s": anim.end,
            "frames": anim.frames,
            "fps": anim.fps,
        },
        "frame_name_pattern": FRAME_NAME_PATTERN,
        "base_settings_sha256": base_digest,
        "settings_sha256": digest,
        "settings": settings,
        "frames": dict((earlier or {}).get("frames", {})),
    }
    manifest = Manifest(out_dir, data)
    summary = AnimationSummary(out_dir, manifest.path, list(wanted), exposure=exposure)

    todo = []
    for k in wanted:
        entry = manifest.frames.get(frame_key(k))
        if frame_is_done(out_dir, entry, digest, times[k]):
            summary.skipped.append(k)
            continue
        adopted = adopt_unrecorded_frame(out_dir / frame_name(k), k, digest, times[k])
        if adopted is not None and not (entry and entry.get("settings_sha256") == digest):
            manifest.record(k, adopted)
            summary.adopted.append(k)
            continue
        todo.append((k, float(times[k])))
    # A frame file that is not this run's finished frame (other settings, an older scene,
    # or edited since) is still somebody's output: replace it only when asked.
    replaced = [k for k, _ in todo if (out_dir / frame_name(k)).exists()]
    if replaced and not overwrite:
        raise UserError(
            f"{out_dir}: {len(replaced)} frame file(s) ({_frame_ranges(replaced)}) were made "
            "with other settings or an earlier version of the scene, or changed since; pass "
            "--overwrite to render them again in place, or write to another directory with -o"
        )
    with contextlib.ExitStack() as stack:
        session = None
        if todo and cluster is not None:
            # Connect (or start local:N) before the manifest is written, so a cluster that
            # cannot be reached leaves no frameless manifest behind.
            session = stack.enter_context(farm.FarmSession(cluster))
        manifest.save()  # settings first, so the directory is claimed before any frame lands
        if todo:
            _render_todo(renderer, todo, session, workers, manifest, digest, summary, progress)
    summary.seconds = _time.perf_counter() - started

    current = current_frames(out_dir, manifest, digest, times)
    summary.flashes = _flash_check(manifest, current, anim.fps)
    manifest.save()
    if video is not None:
        missing = [k for k in range(len(times)) if k not in current]
        if missing:
            summary.video_note = (
                f"video not written: {len(missing)} of {len(times)} frames are not finished "
                f"(first missing: {missing[0]}); rerun without --frames to complete the set"
            )
        else:
            paths = [out_dir / current[k]["file"] for k in range(len(times))]
            summary.video = assemble_video(paths, video, anim.fps, overwrite=overwrite)
    summary.rendered.sort()
    return summary


def scene_faces(scene) -> int:
    """Triangles of the scene's bodies (mesh files are read once and cached by shapes)."""
    return sum(len(mesh_data(body).faces) for body in scene.bodies)


def _start_backend(renderer: FrameRenderer, todo, session, workers):
    """An iterator of RenderedFrame for the jobs, and a description of where they run."""
    if session is not None:
        return farm.render_frames(renderer, todo, session), f"dask {session.cluster}"
    n = min(DEFAULT_WORKERS if workers is None else workers, len(todo))
    if n <= 1:
        return render_serial(renderer, todo), "1 process"
    return render_in_processes(renderer, todo, n), f"{n} processes, 1 numba thread each"


def _render_todo(renderer, todo, session, workers, manifest, digest, summary, progress) -> None:
    """Render the ``todo`` frames, writing and recording each one as it lands."""
    out_dir = manifest.out_dir
    loop_started = _time.perf_counter()
    results, summary.backend = _start_backend(renderer, todo, session, workers)
    bar = None
    if progress:
        from tqdm import tqdm  # ~50 ms to import; needed only when a bar is shown

        bar = tqdm(total=len(todo), desc=f"frames -> {out_dir}", unit="frame", dynamic_ncols=True)
        if summary.skipped or summary.adopted:
            bar.set_postfix_str(f"{len(summary.skipped) + len(summary.adopted)} already done")
    try:
        for result in results:
            written = write_frame_file(out_dir, result.index, result.png)
            manifest.record(
                result.index,
                {
                    "time_s": result.time_s,
                    "file": written.name,
                    "sha256": result.sha256,
                    "settings_sha256": digest,
                    "white_cd_m2": result.white,
                    "mean_relative_luminance": result.mean_luminance,
                    "relview_version": __version__,
                },
            )
            manifest.save()
            summary.rendered.append(result.index)
            if bar is not None:
                bar.update(1)
        summary.render_seconds = _time.perf_counter() - loop_started
    except WorkersLost as exc:
        exc.file = str(out_dir)  # the message says where the finished frames are kept
        raise
    finally:
        close = getattr(results, "close", None)
        if close is not None:
            close()
        if bar is not None:
            bar.close()


def _flash_check(manifest: Manifest, current: dict[int, dict], fps: float) -> list[FlashEpisode]:
    """Check each contiguous run of finished frames; warn and record the result."""
    episodes: list[FlashEpisode] = []
    indices = sorted(current)
    runs: list[list[int]] = []
    for k in indices:
        if runs and k == runs[-1][-1] + 1:
            runs[-1].append(k)
        else:
            runs.append([k])
    for run in runs:
        lum = [current[k]["mean_relative_luminance"] for k in run]
        episodes.extend(find_flashes(lum, fps, run))
    manifest.data["flash_check"] = {
        "rule": "WCAG 2.x SC 2.3.1, general flash threshold, on each frame's mean relative "
        "luminance",
        "frames_checked": len(indices),
        "episodes": [dataclasses.asdict(e) for e in episodes],
    }
    for e in episodes:
        warnings.warn(FlashWarning(f"{manifest.out_dir}: flashing: {e.describe()}"), stacklevel=3)
    return episodes
