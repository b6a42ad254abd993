"""The output directory of an animation: its manifest, and which frames stand.

What makes a batch safe to stop and restart (docs/animation.md):

* every frame file is written atomically (relview.imaging.files) and then recorded in
  ``<out_dir>/manifest.json`` (also written atomically, after every frame) with
  its time, file name and sha256, under a digest of every setting that affects
  pixels (scene sha256, resolution, samples, effects, exposure and the locked
  white, projection, frame times, PNG encoding);
* a rerun skips frames whose file exists with the recorded sha256 under the
  current settings digest (:func:`frame_is_done`) and renders missing ones; stale
  frames (altered, or made under other settings or an older scene) are replaced only
  with ``overwrite``, otherwise the run stops with a UserError naming them;
* a frame file that was written but not yet recorded (the process was killed in
  between) is adopted when its own PNG text chunks carry the current settings
  digest and its index (:func:`adopt_unrecorded_frame`);
* a directory holding another scene's manifest, an unreadable manifest, or
  frame files without a manifest is refused (UserError) unless ``overwrite``
  (:func:`claim_directory`);
* pieces of a job array writing into one directory merge their frame records
  under a lock (:class:`Manifest`).
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import io
import json
from pathlib import Path
from typing import Any

import numpy as np

from relview.animation.flashes import mean_relative_luminance
from relview.animation.timing import frame_name
from relview.errors import OutputError
from relview.imaging.files import atomic_write, json_default, write_json_sidecar

__all__ = [
    "LOCK_NAME",
    "MANIFEST_KIND",
    "MANIFEST_NAME",
    "MANIFEST_VERSION",
    "Manifest",
    "adopt_unrecorded_frame",
    "claim_directory",
    "current_frames",
    "frame_is_done",
    "frame_key",
    "pixel_settings",
    "scene_identity",
    "settings_digest",
    "write_frame_file",
]

#: The record of an animation's frames inside its output directory.
MANIFEST_NAME = "manifest.json"
#: Identifies our manifest files (checked before trusting one).
MANIFEST_KIND = "relview-animation"
MANIFEST_VERSION = 1
#: Lock file beside the manifest: serialises read-merge-write of the manifest when
#: several processes (the pieces of a job array) share one output directory.
LOCK_NAME = ".manifest.lock"


def settings_digest(data: Any) -> str:
    """sha256 of ``data`` as canonical JSON (sorted keys, no spaces): names a settings set."""
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=json_default)
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
        key = frame_key(index)
        self.frames[key] = entry
        self._updates[key] = entry

    @contextlib.contextmanager
    def _locked(self):
        # fcntl exists on POSIX systems only: imported where the lock is taken, so that
        # the package (and every other command) still imports where it is missing.
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
            write_json_sidecar(self.path, self.data, overwrite=True)


def frame_key(index: int) -> str:
    """Key of frame ``index`` in the manifest's ``frames`` table: ``"00007"``."""
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


def claim_directory(out_dir: Path, identity: str, overwrite: bool) -> dict | None:
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


def frame_is_done(out_dir: Path, entry: dict | None, digest: str, time_s: float) -> bool:
    """The recorded frame still stands: same settings, same time, file with the recorded hash."""
    if not entry or entry.get("settings_sha256") != digest:
        return False
    if entry.get("time_s") != float(time_s):
        return False
    return _file_sha256(out_dir / entry.get("file", "")) == entry.get("sha256")


def adopt_unrecorded_frame(path: Path, index: int, digest: str, time_s: float) -> dict | None:
    """A frame file written by a run that stopped before recording it, if it is current.

    Its own PNG text chunks must carry the current settings digest, its index and time.
    """
    from PIL import Image  # pillow is imported only when a frame file is checked

    if not path.is_file():
        return None
    try:
        data = path.read_bytes()
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


def write_frame_file(out_dir: Path, index: int, png: bytes) -> Path:
    """Atomic write of a frame (replacing a stale frame of this animation of the same name)."""
    path = out_dir / frame_name(index)
    return atomic_write(path, lambda fh: fh.write(png), overwrite=True)


def current_frames(out_dir: Path, manifest: Manifest, digest: str, times) -> dict[int, dict]:
    """Frames of the whole animation that are finished under the current settings."""
    done = {}
    for k in range(len(times)):
        entry = manifest.frames.get(frame_key(k))
        if frame_is_done(out_dir, entry, digest, times[k]):
            done[k] = entry
    return done
