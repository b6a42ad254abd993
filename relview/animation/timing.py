"""Frame timing: which scene time each frame of an animation shows, its file name, ranges.

Frame k of an animation with ``frames`` = N exposures from ``start`` to ``end`` (s)
is the exposure at scene time

    t_k = start + k (end - start) / (N - 1)      (N = 1: t_0 = start)

written to ``<out_dir>/frame-00000.png``, ``frame-00001.png``, ...
(:data:`FRAME_NAME_PATTERN`, ``frame-{index:05d}.png``; indices from 0).

A run may render part of the frames (``--frames A:B``, half-open, e.g. one piece of a
job array); :func:`parse_frame_range` and :func:`resolve_frames` turn such requests
into frame indices and refuse empty, reversed or out-of-range ones with a UserError.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from relview.errors import UserError

__all__ = [
    "FRAME_NAME_PATTERN",
    "frame_name",
    "frame_times",
    "parse_frame_range",
    "resolve_frames",
]

#: File name of frame k inside the output directory.
FRAME_NAME_PATTERN = "frame-{index:05d}.png"


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
    # Only comparisons of start and stop here: len(r) and r[-1] overflow a C ssize_t
    # for a range such as 0:99999999999999999999 (OverflowError).
    if r.start < 0 or r.stop < 0:
        raise UserError(f"{what}: frame indices start at 0; negative indices are not allowed")
    if r.start >= r.stop:
        kind = "reversed" if r.start > r.stop else "empty"
        raise UserError(
            f"{what}: the range is {kind} (A:B is half-open, A < B; "
            f"the animation has frames 0..{n_frames - 1})"
        )
    if r.start >= n_frames or r.stop > n_frames:
        raise UserError(f"{what}: the animation has {n_frames} frame(s), indices 0..{n_frames - 1}")
    return r
