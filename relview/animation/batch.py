"""Animations: batches of frames from a scene's ``[animation]`` section, resumable.

Frame k of an animation with ``frames`` = N exposures from ``start`` to ``end`` (s)
is the exposure at scene time

    t_k = start + k (end - start) / (N - 1)      (N = 1: t_0 = start)

written to ``<out_dir>/frame-00000.png``, ``frame-00001.png``, ...
(:data:`FRAME_NAME_PATTERN`, ``frame-{index:05d}.png``; indices from 0).

What makes a batch safe to stop and restart (docs/animation.md):

* every frame file is written atomically (film.py) and then recorded in
  ``<out_dir>/manifest.json`` (also written atomically, after every frame) with
  its time, file name and sha256, under a digest of every setting that affects
  pixels (scene sha256, resolution, samples, effects, exposure and the locked
  white, projection, frame times, PNG encoding);
* a rerun skips frames whose file exists with the recorded sha256 under the
  current settings digest and renders missing ones; stale frames (altered, or made
  under other settings or an older scene) are replaced only with ``overwrite``,
  otherwise the run stops with a UserError naming them;
* a frame file that was written but not yet recorded (the process was killed in
  between) is adopted when its own PNG text chunks carry the current settings
  digest and its index;
* a directory holding another scene's manifest, an unreadable manifest, or
  frame files without a manifest is refused (UserError) unless ``overwrite``.

Exposure is locked across the frames by default: one white level (cd/m2) decided
from a few low-resolution probe frames spread over the whole time range (the
same probes whatever ``frames`` range a run renders, so the pieces of a split
job agree), or the scene's fixed exposure. It is stored in the manifest and
reused on resume.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import math
import os
import time as _time
import warnings
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from relview.errors import OutputError, UserError
from relview.imaging import film

__all__ = [
    "DEFAULT_WORKERS",
    "FLASH_DARKER_BELOW",
    "FLASH_LUMINANCE_CHANGE",
    "FLASH_MAX_PER_SECOND",
    "FRAME_NAME_PATTERN",
    "MANIFEST_NAME",
    "AnimationSummary",
    "FlashEpisode",
    "FlashWarning",
    "FrameRenderer",
    "RenderedFrame",
    "animate",
    "assemble_video",
    "find_flashes",
    "frame_name",
    "frame_times",
    "mean_relative_luminance",
    "parse_frame_range",
    "resolve_frames",
]

#: File name of frame k inside the output directory.
FRAME_NAME_PATTERN = "frame-{index:05d}.png"
MANIFEST_NAME = "manifest.json"
#: Identifies our manifest files (checked before trusting one).
MANIFEST_KIND = "relview-animation"
MANIFEST_VERSION = 1
#: Lock file beside the manifest: serialises read-merge-write of the manifest when
#: several processes (the pieces of a job array) share one output directory.
LOCK_NAME = ".manifest.lock"

#: Probe frames for the exposure lock: how many, and their largest width (pixels).
PROBE_FRAMES = 5
PROBE_MAX_WIDTH = 160

#: Local worker processes when none are asked for. Measured with
#: benchmarks/bench_animate.py on this project's shared 2-core machines (numbers in
#: docs/animation.md): one process, whose numba kernels use both cores, rendered batches
#: at least as fast as two processes with one numba thread each, which first pay
#: seconds of start-up (imports, numba's cache). ``--workers 2`` remains available.
DEFAULT_WORKERS = 1

VIDEO_TYPES = (".mp4", ".gif")


# =========================================================================== frames and times


def frame_times(animation) -> np.ndarray:
    """(N,) scene times in s: t_k = start + k (end - start) / (N - 1); N = 1 gives [start]."""
    n = int(animation.frames)
    if n < 1:
        raise ValueError(f"an animation needs frames >= 1, got {n}")
    if n == 1:
        return np.array([float(animation.start)])
    k = np.arange(n, dtype=np.float64)
    return float(animation.start) + k * (float(animation.end) - float(animation.start)) / (n - 1)


def frame_name(index: int) -> str:
    """``frame-00007.png`` for index 7 (:data:`FRAME_NAME_PATTERN`)."""
    return FRAME_NAME_PATTERN.format(index=int(index))


def parse_frame_range(text: str, n_frames: int) -> range:
    """``"A:B"`` (half-open; ``"A:"`` and ``":B"`` too) -> range of frame indices.

    Empty, reversed or out-of-range requests are a :class:`UserError`.
    """
    raw = text
    text = text.strip()
    if text.count(":") != 1:
        raise UserError(
            f"--frames {raw!r}: expected A:B (half-open frame indices, e.g. 0:12, 12: or :6)"
        )
    a_text, b_text = (p.strip() for p in text.split(":"))
    try:
        a = int(a_text) if a_text else 0
        b = int(b_text) if b_text else n_frames
    except ValueError:
        raise UserError(
            f"--frames {raw!r}: A and B must be whole frame indices, e.g. 0:12"
        ) from None
    return _checked_range(range(a, b), n_frames, f"--frames {raw!r}")


def resolve_frames(frames: range | slice | Iterable[int] | None, n_frames: int) -> range | list:
    """The frame indices a run renders: ``None`` (all), a range, a slice or indices."""
    if frames is None:
        return range(n_frames)
    if isinstance(frames, slice):
        if frames.step not in (None, 1):
            raise UserError(f"frames {frames}: a slice of frames must have step 1")
        a = 0 if frames.start is None else frames.start
        b = n_frames if frames.stop is None else frames.stop
        return _checked_range(range(a, b), n_frames, f"frames {a}:{b}")
    if isinstance(frames, range):
        return _checked_range(frames, n_frames, f"frames {frames}")
    if isinstance(frames, str):
        return parse_frame_range(frames, n_frames)
    indices = sorted({int(i) for i in frames})
    if not indices:
        raise UserError("frames: no frame index given")
    bad = [i for i in indices if not 0 <= i < n_frames]
    if bad:
        raise UserError(f"frames: indices {bad} are outside 0..{n_frames - 1}")
    return indices


def _checked_range(r: range, n_frames: int, what: str) -> range:
    if r.start < 0 or r.stop < 0:
        raise UserError(f"{what}: frame indices start at 0; negative indices are not allowed")
    if len(r) == 0:
        kind = "reversed" if r.start > r.stop else "empty"
        raise UserError(
            f"{what}: the range is {kind} (A:B is half-open, A < B; "
            f"the animation has frames 0..{n_frames - 1})"
        )
    if r.start >= n_frames or r[-1] >= n_frames:
        raise UserError(f"{what}: the animation has {n_frames} frame(s), indices 0..{n_frames - 1}")
    return r


# =========================================================================== luminance, flashes


def _srgb_decode_table() -> np.ndarray:
    from relview.light.spectrum import decode_srgb

    return np.asarray(decode_srgb(np.arange(256) / 255.0), dtype=np.float64)


_DECODE_8BIT: np.ndarray | None = None


def mean_relative_luminance(rgb8: np.ndarray) -> float:
    """Mean relative luminance (0 black .. 1 white) of an (H, W, 3) uint8 sRGB image.

    Per pixel, WCAG 2.x "relative luminance": each encoded channel is decoded with
    the sRGB transfer function and L = 0.2126 R + 0.7152 G + 0.0722 B. WCAG's
    definition writes the decoding threshold as 0.03928 (an early sRGB draft)
    where IEC 61966-2-1 has 0.04045; no 8-bit code value lies between the two
    (10/255 = 0.0392, 11/255 = 0.0431), so for 8-bit frames they agree exactly.
    This is the luminance of what is displayed: after exposure, clipping and encoding.
    """
    global _DECODE_8BIT
    rgb8 = np.asarray(rgb8)
    if rgb8.dtype != np.uint8 or rgb8.ndim != 3 or rgb8.shape[2] != 3:
        raise ValueError(f"expected an (H, W, 3) uint8 image, got {rgb8.dtype} {rgb8.shape}")
    if _DECODE_8BIT is None:
        _DECODE_8BIT = _srgb_decode_table()
    linear = _DECODE_8BIT[rgb8]
    return float((linear @ film.LUMINANCE_WEIGHTS).mean())


# WCAG 2.x, definition of "general flash and red flash thresholds" (W3C Recommendation,
# WCAG 2.1 / 2.2, section 5 "Glossary"), used by success criterion 2.3.1 "Three
# Flashes or Below Threshold": a general flash is "a pair of opposing changes in
# relative luminance of 10% or more of the maximum relative luminance (1.0) where the
# relative luminance of the darker image is below 0.80", and content passes when there
# are "no more than three general flashes ... within any one-second period". (Quoted
# from memory of the W3C text.) Counting each pair of opposing changes once, and
# dating a change by the frame that completes it, is our reading of "pair" and "within".
#: Smallest change of relative luminance that counts (10 % of the maximum, 1.0).
FLASH_LUMINANCE_CHANGE = 0.10
#: A change counts only when the darker of its two images is below this.
FLASH_DARKER_BELOW = 0.80
#: More flashes than this within any one second of playback is flagged.
FLASH_MAX_PER_SECOND = 3


class FlashWarning(UserWarning):
    """An animation would flash more than three times in one second (WCAG 2.3.1)."""


@dataclass
class FlashEpisode:
    """Frames during which more than three general flashes fall within one second."""

    first_frame: int
    last_frame: int
    flashes: int  # the most flashes found in any one-second window of the episode
    start_s: float  # playback time of first_frame (s)
    end_s: float  # playback time of last_frame (s)

    def describe(self) -> str:
        return (
            f"frames {self.first_frame}-{self.last_frame} "
            f"({self.start_s:.2f}-{self.end_s:.2f} s of playback): up to {self.flashes} "
            f"flashes within one second (WCAG 2.3.1 allows at most {FLASH_MAX_PER_SECOND})"
        )


def _luminance_transitions(lum: np.ndarray, indices: np.ndarray) -> list[tuple[int, int, int]]:
    """Monotone changes of at least :data:`FLASH_LUMINANCE_CHANGE` between turning points.

    A reversal smaller than the threshold does not split a change (a zigzag filter
    with the WCAG 10 % step as its threshold). Returns (start frame, end frame,
    direction +1/-1) for each change whose darker end is below
    :data:`FLASH_DARKER_BELOW`.
    """
    h = FLASH_LUMINANCE_CHANGE
    changes = []
    n = len(lum)
    if n < 2:
        return changes
    lo = hi = 0
    pivot = ext = 0
    direction = 0
    for i in range(1, n):
        if direction == 0:
            if lum[i] < lum[lo]:
                lo = i
            if lum[i] > lum[hi]:
                hi = i
            if lum[i] - lum[lo] >= h:
                pivot, ext, direction = lo, i, +1
            elif lum[hi] - lum[i] >= h:
                pivot, ext, direction = hi, i, -1
            continue
        if direction * (lum[i] - lum[ext]) > 0:
            ext = i  # the change goes on
        elif direction * (lum[ext] - lum[i]) >= h:
            changes.append((pivot, ext, direction))
            pivot, ext, direction = ext, i, -direction
    if direction != 0 and abs(lum[ext] - lum[pivot]) >= h:
        changes.append((pivot, ext, direction))
    return [
        (int(indices[a]), int(indices[b]), d)
        for a, b, d in changes
        if min(lum[a], lum[b]) < FLASH_DARKER_BELOW
    ]


def _count_flashes(changes: list[tuple[int, int, int]]) -> int:
    """Pairs of opposing consecutive changes, each change used once."""
    flashes = 0
    i = 0
    while i + 1 < len(changes):
        if changes[i][2] != changes[i + 1][2]:
            flashes += 1
            i += 2
        else:
            i += 1
    return flashes


def find_flashes(
    luminance: Iterable[float], fps: float, frame_indices: Iterable[int] | None = None
) -> list[FlashEpisode]:
    """Where a frame sequence has more than three general flashes in one second.

    ``luminance``: mean relative luminance (0..1) of consecutive frames, shown at
    ``fps`` frames per second; ``frame_indices`` names them (default 0, 1, ...).
    A change of relative luminance is found between turning points of the
    sequence (:func:`_luminance_transitions`) and is dated by the frame that
    completes it. For every change, the changes completed within the one second
    of playback starting there are counted in opposing pairs; more than
    :data:`FLASH_MAX_PER_SECOND` pairs flags the window. Overlapping flagged
    windows merge into one :class:`FlashEpisode`.

    Simplifications (docs/animation.md): the whole frame's mean luminance stands
    for "the image", so WCAG's area allowance (flashes over less than a quarter of
    a 10 degree visual field pass) and the separate red-flash rule are not checked.
    """
    lum = np.asarray(list(luminance), dtype=np.float64)
    if fps <= 0:
        raise ValueError(f"fps must be > 0, got {fps}")
    idx = np.arange(len(lum)) if frame_indices is None else np.asarray(list(frame_indices))
    if len(idx) != len(lum):
        raise ValueError(f"{len(lum)} luminances but {len(idx)} frame indices")
    if np.any(~np.isfinite(lum)):
        raise ValueError("luminance values must be finite")
    changes = _luminance_transitions(lum, idx)
    episodes: list[FlashEpisode] = []
    for j, (_, end_j, _) in enumerate(changes):
        window = [c for c in changes[j:] if (c[1] - end_j) / fps < 1.0]
        flashes = _count_flashes(window)
        if flashes <= FLASH_MAX_PER_SECOND:
            continue
        first, last = window[0][0], window[-1][1]
        if episodes and first <= episodes[-1].last_frame:
            ep = episodes[-1]
            ep.last_frame = max(ep.last_frame, last)
            ep.end_s = ep.last_frame / fps
            ep.flashes = max(ep.flashes, flashes)
        else:
            episodes.append(FlashEpisode(first, last, flashes, first / fps, last / fps))
    return episodes


# =========================================================================== rendering one frame


@dataclass
class RenderedFrame:
    """One finished frame as encoded PNG bytes (what a worker sends back)."""

    index: int
    time_s: float
    png: bytes
    mean_luminance: float  # mean relative luminance of the encoded frame, 0..1
    white: float  # cd/m2 mapped to white in this frame

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.png).hexdigest()


class FrameRenderer:
    """Renders frames of one scene with one RenderContext (hierarchies built once).

    ``white``: the locked white (cd/m2), or None for per-frame automatic exposure.
    ``metadata``: extra PNG text chunks for every frame (settings digest, ...).
    Used in the calling process, in local worker processes and on Dask workers, so
    all three produce the same bytes.
    """

    def __init__(self, scene, white: float | None, metadata: dict[str, str] | None = None):
        self.scene = scene
        self.white = white
        self.metadata = dict(metadata or {})
        self._context = None

    @property
    def context(self):
        if self._context is None:
            from relview.renderer import RenderContext

            self._context = RenderContext(self.scene)
        return self._context

    def render(self, index: int, time_s: float) -> RenderedFrame:
        from relview.renderer import render

        exposure = self.white if self.white is not None else self.scene.render.exposure
        frame = render(self.scene, time=float(time_s), exposure=exposure, context=self.context)
        rgb8 = film.to_8bit(frame.image, getattr(self.scene.render, "tone", "none"))
        meta = dict(frame.metadata)
        meta.update(self.metadata)
        meta["frame_index"] = str(int(index))
        meta["frame_time_s"] = repr(float(time_s))
        png = film.encode_png(rgb8, meta)
        return RenderedFrame(
            int(index), float(time_s), png, mean_relative_luminance(rgb8), float(frame.white)
        )


# --- local worker processes (spawned; one numba thread each) -----------------------------

_PROCESS_RENDERER: FrameRenderer | None = None


def _init_worker_process(scene, white, metadata) -> None:
    """Initialiser of a local worker process: one numba thread, one RenderContext."""
    global _PROCESS_RENDERER
    import signal

    # Ctrl-C goes to the whole process group: let the parent alone decide what stops.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ["NUMBA_NUM_THREADS"] = "1"
    import numba

    numba.set_num_threads(1)  # in case numba was imported before the variable was set
    _PROCESS_RENDERER = FrameRenderer(scene, white, metadata)


def _render_in_worker_process(index: int, time_s: float) -> RenderedFrame:
    assert _PROCESS_RENDERER is not None, "worker process not initialised"
    return _PROCESS_RENDERER.render(index, time_s)


def _render_serial(renderer: FrameRenderer, jobs) -> Iterator[RenderedFrame]:
    for index, time_s in jobs:
        yield renderer.render(index, time_s)


def _render_processes(renderer: FrameRenderer, jobs, workers: int) -> Iterator[RenderedFrame]:
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    jobs = list(jobs)
    pool = ProcessPoolExecutor(
        max_workers=min(workers, len(jobs)),
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_init_worker_process,
        initargs=(renderer.scene, renderer.white, renderer.metadata),
    )
    try:
        pending = {pool.submit(_render_in_worker_process, i, t) for i, t in jobs}
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                yield fut.result()
    finally:
        pool.shutdown(wait=False, cancel_futures=True)


# =========================================================================== settings, manifest


def _digest(data: Any) -> str:
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=film._json_default)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def scene_identity(scene) -> str:
    """Which scene an output directory belongs to: its file's absolute path."""
    if scene.source_path is not None:
        return str(Path(scene.source_path).resolve())
    return f"<scene built in code: {scene.title or 'untitled'}>"


def pixel_settings(scene, times: np.ndarray) -> dict[str, Any]:
    """Everything except the exposure lock that changes the pixels of a frame."""
    settings = scene.render
    return {
        "scene_sha256": scene.source_hash,
        "resolution": [int(v) for v in settings.resolution],
        "samples": int(settings.samples),
        "seed": int(getattr(settings, "seed", 0)),
        "effects": dataclasses.asdict(settings.effects),
        "exposure": settings.exposure,
        "projection": scene.camera.projection,
        "times_s": [float(t) for t in times],
        "png_bits": 8,
        "tone": getattr(settings, "tone", "none"),
    }


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
    frames at frame times spread evenly over the whole animation, film.ExposureLock)
    or "per-frame" (automatic exposure of each frame on its own; ``unlock``).
    """
    mode = _exposure_mode(scene, unlock)
    if mode == "fixed":
        lock = film.ExposureLock(scene.render.exposure)
        return {"mode": "fixed", **lock.to_dict()}
    if mode == "per-frame":
        return {
            "mode": "per-frame",
            "setting": "auto",
            "white_cd_m2": None,
            "source": "automatic exposure of each frame",
        }
    from relview.renderer import RenderContext, render

    context = context or RenderContext(scene)
    n = min(PROBE_FRAMES, len(times))
    picks = sorted({round(float(k)) for k in np.linspace(0, len(times) - 1, n)})
    probe_res = _probe_resolution(scene.render.resolution)
    images, masks = [], []
    for k in picks:
        frame = render(
            scene, time=float(times[k]), resolution=probe_res, exposure="auto", context=context
        )
        xyz = frame.layers["xyz"]
        images.append(xyz)
        masks.append(np.any(xyz > 0, axis=-1))  # as the renderer's own automatic exposure
    lock = film.ExposureLock("auto")
    lock.lock_from(images, masks)
    return {
        "mode": "locked",
        **lock.to_dict(),
        "probe_frames": picks,
        "probe_resolution": list(probe_res),
    }


class Manifest:
    """``<out_dir>/manifest.json``: settings and finished frames of one animation.

    Saved atomically after every frame. Saving re-reads the file under a lock
    (:data:`LOCK_NAME`) and merges this run's frame records into it, so pieces of a
    job array writing into one directory keep each other's records.
    """

    def __init__(self, out_dir: Path, data: dict[str, Any]):
        self.out_dir = out_dir
        self.path = out_dir / MANIFEST_NAME
        self.data = data
        self._updates: dict[str, dict] = {}

    @property
    def frames(self) -> dict[str, dict]:
        return self.data.setdefault("frames", {})

    def record(self, index: int, entry: dict[str, Any]) -> None:
        key = _frame_key(index)
        self.frames[key] = entry
        self._updates[key] = entry

    @contextlib.contextmanager
    def _locked(self):
        import fcntl

        self.out_dir.mkdir(parents=True, exist_ok=True)
        with open(self.out_dir / LOCK_NAME, "a+b") as fh:
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
            except OSError:  # a file system without locks: go on unlocked
                pass
            yield

    def save(self) -> None:
        with self._locked():
            on_disk = _read_manifest(self.path)
            if (
                on_disk is not None
                and on_disk.get("scene", {}).get("path") == self.data["scene"]["path"]
            ):
                frames = dict(on_disk.get("frames", {}))
                frames.update(self._updates)
                self.data["frames"] = dict(sorted(frames.items()))
            film.write_json_sidecar(self.path, self.data, overwrite=True)


def _frame_key(index: int) -> str:
    return f"{int(index):05d}"


def _read_manifest(path: Path) -> dict | None:
    """The parsed manifest, None if there is none; UserError if it is not ours or unreadable."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise OutputError(
            f"cannot read the animation manifest: {exc.strerror}", file=path
        ) from None
    try:
        data = json.loads(text)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise OutputError(
            f"not a readable animation manifest ({exc}); remove it, choose another output "
            "directory, or pass --overwrite",
            file=path,
        ) from None
    if not isinstance(data, dict) or data.get("kind") != MANIFEST_KIND:
        raise OutputError(
            "this manifest.json was not written by 'relview animate'; choose another output "
            "directory, or pass --overwrite",
            file=path,
        )
    return data


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


def _claim_directory(out_dir: Path, identity: str, overwrite: bool) -> dict | None:
    """Check that ``out_dir`` may hold this animation; returns its earlier manifest (or None).

    Never destroys another animation's output: another scene's manifest, an unknown
    manifest, or frame files without a manifest are refused unless ``overwrite``.
    """
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError("the output directory is a file", file=out_dir)
    manifest_path = out_dir / MANIFEST_NAME
    try:
        data = _read_manifest(manifest_path)
    except OutputError:
        if overwrite:
            return None
        raise
    if data is not None:
        other = data.get("scene", {}).get("path")
        if other != identity:
            if overwrite:
                return None
            raise OutputError(
                f"holds the frames of another animation (scene {other}); choose another "
                "directory with -o, or pass --overwrite to replace files of the same names",
                file=out_dir,
            )
        return data
    existing = sorted(out_dir.glob("frame-*.png")) if out_dir.is_dir() else []
    if existing and not overwrite:
        raise OutputError(
            f"already holds {len(existing)} frame file(s) (e.g. {existing[0].name}) but no "
            f"{MANIFEST_NAME}, so they are not this animation's; choose another directory "
            "with -o, or pass --overwrite to replace files of the same names",
            file=out_dir,
        )
    return None


def _file_sha256(path: Path) -> str | None:
    try:
        return hashlib.sha256(path.read_bytes()).hexdigest()
    except FileNotFoundError:
        return None


def _frame_is_done(out_dir: Path, entry: dict | None, digest: str, time_s: float) -> bool:
    """The recorded frame still stands: same settings, same time, file with the recorded hash."""
    if not entry or entry.get("settings_sha256") != digest:
        return False
    if entry.get("time_s") != float(time_s):
        return False
    return _file_sha256(out_dir / entry.get("file", "")) == entry.get("sha256")


def _adopt_unrecorded(path: Path, index: int, digest: str, time_s: float) -> dict | None:
    """A frame file written by a run that stopped before recording it, if it is current.

    Its own PNG text chunks must carry the current settings digest, its index and time.
    """
    from PIL import Image

    if not path.is_file():
        return None
    try:
        data = path.read_bytes()
        import io

        with Image.open(io.BytesIO(data)) as im:
            im.load()
            text = dict(getattr(im, "text", {}) or {})
            rgb8 = np.asarray(im.convert("RGB"))
    except Exception:  # noqa: BLE001 - pillow raises many types; unreadable: render again
        return None
    if (
        text.get("animation_settings_sha256") != digest
        or text.get("frame_index") != str(index)
        or text.get("frame_time_s") != repr(float(time_s))
    ):
        return None
    return {
        "time_s": float(time_s),
        "file": path.name,
        "sha256": hashlib.sha256(data).hexdigest(),
        "settings_sha256": digest,
        "white_cd_m2": float(text.get("white_cd_m2", "nan")),
        "mean_relative_luminance": mean_relative_luminance(rgb8),
        "relview_version": text.get("relview_version", ""),
        "adopted": True,
    }


def _write_frame_file(out_dir: Path, result: RenderedFrame) -> Path:
    """Atomic write of a frame (replacing a stale frame of this animation of the same name)."""
    path = out_dir / frame_name(result.index)
    return film._atomic_write(path, lambda fh: fh.write(result.png), overwrite=True)


# =========================================================================== video


def assemble_video(
    frame_paths: list[Path], path: str | os.PathLike, fps: float, overwrite: bool = False
) -> Path:
    """Write frames (PNG files, in order) as an .mp4 (H.264 via imageio-ffmpeg) or .gif.

    MP4: yuv420p for wide playability, which needs even width and height, so an odd
    last row/column is repeated once. GIF (pillow): frame durations are stored in
    hundredths of a second, so a rate such as 24 fps plays at the nearest 1/100 s.
    Written atomically; an existing file gets a numbered new name unless ``overwrite``.
    """
    import imageio.v2 as iio2
    import imageio.v3 as iio3

    path = Path(path)
    ext = path.suffix.lower()
    if ext not in VIDEO_TYPES:
        raise OutputError(
            f"unknown video type {ext or '(none)'!r}; use {' or '.join(VIDEO_TYPES)}", file=path
        )
    if not frame_paths:
        raise OutputError("no frames to put in the video", file=path)

    def frames() -> Iterator[np.ndarray]:  # one at a time: an MP4 is streamed to ffmpeg
        for p in frame_paths:
            yield np.asarray(iio3.imread(p))[..., :3]

    def write(handle) -> None:
        import shutil

        scratch = Path(handle.name + ext)
        try:
            if ext == ".mp4":
                writer = iio2.get_writer(
                    str(scratch),
                    format="FFMPEG",
                    mode="I",
                    fps=float(fps),
                    codec="libx264",
                    pixelformat="yuv420p",
                    macro_block_size=1,
                    quality=8,
                )
                try:
                    for f in frames():
                        pad = ((0, f.shape[0] % 2), (0, f.shape[1] % 2), (0, 0))
                        writer.append_data(np.pad(f, pad, "edge"))
                finally:
                    writer.close()
            else:  # pillow assembles a GIF in memory: GIFs are for short, small clips
                iio3.imwrite(
                    scratch,
                    np.stack(list(frames())),
                    extension=".gif",
                    duration=1000.0 / float(fps),
                    loop=0,
                )
            with open(scratch, "rb") as src:
                shutil.copyfileobj(src, handle)
        finally:
            scratch.unlink(missing_ok=True)

    return film._atomic_write(path, write, overwrite)


# =========================================================================== the batch


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
    from relview.renderer import check_memory

    check_memory(*scene.render.resolution)
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
    if cluster is not None:
        if workers is not None:
            raise UserError(
                "--workers sets local worker processes; with --cluster give the workers to "
                "the cluster (local:N, or start dask workers for a tcp:// scheduler)"
            )
        from relview.animation import farm

        if isinstance(cluster, str):
            farm.parse_cluster(cluster)  # a malformed address fails before any work
    out_dir = Path(out_dir)
    identity = scene_identity(scene)
    earlier = _claim_directory(out_dir, identity, overwrite)

    base = pixel_settings(scene, times)
    base_digest = _digest(base)
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
    digest = _digest(settings)
    renderer.white = exposure.get("white_cd_m2")
    renderer.metadata = {
        "animation_settings_sha256": digest,
        "frame_count": str(len(times)),
        "exposure_lock": json.dumps(exposure, sort_keys=True),
    }
    from relview import __version__

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
        entry = manifest.frames.get(_frame_key(k))
        if _frame_is_done(out_dir, entry, digest, times[k]):
            summary.skipped.append(k)
            continue
        adopted = _adopt_unrecorded(out_dir / frame_name(k), k, digest, times[k])
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
    manifest.save()  # settings first, so the directory is claimed before any frame lands

    if todo:
        loop_started = _time.perf_counter()
        results, summary.backend = _start_backend(renderer, todo, cluster, workers)
        bar = None
        if progress:
            from tqdm import tqdm

            bar = tqdm(
                total=len(todo), desc=f"frames -> {out_dir}", unit="frame", dynamic_ncols=True
            )
            if summary.skipped or summary.adopted:
                bar.set_postfix_str(f"{len(summary.skipped) + len(summary.adopted)} already done")
        try:
            for result in results:
                written = _write_frame_file(out_dir, result)
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
        finally:
            close = getattr(results, "close", None)
            if close is not None:
                close()
            if bar is not None:
                bar.close()
    summary.seconds = _time.perf_counter() - started

    current = _current_frames(out_dir, manifest, digest, times)
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


def _start_backend(renderer: FrameRenderer, todo, cluster, workers):
    """An iterator of RenderedFrame for the jobs, and a description of where they run."""
    if cluster is not None:
        from relview.animation import farm

        return farm.render_frames(renderer, todo, cluster), f"dask {cluster}"
    n = min(DEFAULT_WORKERS if workers is None else workers, len(todo))
    if n <= 1:
        return _render_serial(renderer, todo), "1 process"
    return _render_processes(renderer, todo, n), f"{n} processes, 1 numba thread each"


def _current_frames(out_dir: Path, manifest: Manifest, digest: str, times) -> dict[int, dict]:
    """Frames of the whole animation that are finished under the current settings."""
    done = {}
    for k in range(len(times)):
        entry = manifest.frames.get(_frame_key(k))
        if _frame_is_done(out_dir, entry, digest, times[k]):
            done[k] = entry
    return done


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
