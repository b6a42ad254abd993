"""Flash check: does an animation flash more than three times a second (WCAG 2.3.1)?

Every frame's mean relative luminance (WCAG 2.x's "relative luminance" of the encoded
frame, :func:`mean_relative_luminance`) is recorded when the frame is rendered. After a
run, each contiguous run of finished frames is checked by :func:`find_flashes`:
opposing changes of relative luminance of 10 % or more of the maximum, with the darker
image below 0.80, are counted in pairs (general flashes) within every second of
playback at the animation's fps; more than three flags an episode, reported as a
:class:`FlashWarning` and stored in the manifest (docs/animation.md).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from relview.imaging.display import LUMINANCE_WEIGHTS

__all__ = [
    "FLASH_DARKER_BELOW",
    "FLASH_LUMINANCE_CHANGE",
    "FLASH_MAX_PER_SECOND",
    "FlashEpisode",
    "FlashWarning",
    "find_flashes",
    "mean_relative_luminance",
]


def _srgb_decode_table() -> np.ndarray:
    # Imported here: relview.light.spectrum loads numba, which a local worker process
    # (relview.animation.workers) must not load before it sets NUMBA_NUM_THREADS=1.
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
    return float((linear @ LUMINANCE_WEIGHTS).mean())


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
