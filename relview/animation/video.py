"""Video: the finished frames of an animation as one .mp4 (H.264) or .gif file.

An animation's video is assembled only from a complete set of frames finished under
the current settings (relview.animation.batch decides that); this module only encodes.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from relview.errors import OutputError
from relview.imaging.files import atomic_write

__all__ = ["VIDEO_TYPES", "assemble_video"]

#: The video file types :func:`assemble_video` writes, by file name extension.
VIDEO_TYPES = (".mp4", ".gif")


def assemble_video(
    frame_paths: list[Path], path: str | os.PathLike, fps: float, overwrite: bool = False
) -> Path:
    """Write frames (PNG files, in order) as an .mp4 (H.264 via imageio-ffmpeg) or .gif.

    MP4: yuv420p for wide playability, which needs even width and height, so an odd
    last row/column is repeated once. GIF (pillow): frame durations are stored in
    hundredths of a second, so a rate such as 24 fps plays at the nearest 1/100 s.
    Written atomically; an existing file gets a numbered new name unless ``overwrite``.
    """
    # imageio (and its ffmpeg plugin) is imported only when a video is written.
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

    return atomic_write(path, write, overwrite)
