"""Compiled passes over a frame's pixels for relview.imaging.exposure.

The exposure of a frame reads every pixel a few times: which are lit, the luminance and
largest linear sRGB channel of the metered ones, the exposed picture, and which of its
pixels clip. numpy does each of these as several whole-frame passes with temporary
arrays (a comparison, a reduction over the 3 channels, a boolean gather, a matrix
product); here each is one parallel pass that reads the (N, 3) pixels once and writes
only its result. The numbers are the same to the last bit: the colour matrix is applied
as numpy applies it (:func:`relview.light.spectrum.linear_srgb_at`), comparisons and
divisions are exact, and gathered values keep the pixels' order.

Kept apart from relview.imaging.exposure so that importing that module (ExposureLock,
check_white) stays free of numba; its functions import these on first use.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from relview.light.spectrum import XYZ_TO_LINEAR_SRGB, linear_srgb_at

#: pixels per block of the two-step gathers (a count per block, then the writes)
BLOCK = 4096


def as_pixel_rows(image) -> np.ndarray:
    """(..., 3) image as contiguous float64 (N, 3) rows (a view when it already is)."""
    return np.ascontiguousarray(np.asarray(image, dtype=np.float64).reshape(-1, 3))


@njit(parallel=True, cache=True)
def _any_above(rows, level):
    """(N,) bool: pixels with a channel above ``level`` (NaN is not above anything)."""
    n = rows.shape[0]
    out = np.empty(n, np.bool_)
    for i in prange(n):
        out[i] = rows[i, 0] > level or rows[i, 1] > level or rows[i, 2] > level
    return out


def any_channel_above(image, level: float) -> np.ndarray:
    """``np.any(image > level, axis=-1)`` for a (..., 3) image, in one pass."""
    rows = as_pixel_rows(image)
    return _any_above(rows, float(level)).reshape(np.shape(image)[:-1])


@njit(parallel=True, cache=True)
def _block_counts(mask, block):
    n = mask.shape[0]
    n_blocks = (n + block - 1) // block
    counts = np.zeros(n_blocks + 1, np.int64)
    for b in prange(n_blocks):
        c = 0
        for i in range(b * block, min(n, (b + 1) * block)):
            if mask[i]:
                c += 1
        counts[b + 1] = c
    return counts


@njit(parallel=True, cache=True)
def _gather_metered(rows, mask, m, block, offsets, y, peak):
    n = rows.shape[0]
    for b in prange(offsets.shape[0] - 1):
        k = offsets[b]
        for i in range(b * block, min(n, (b + 1) * block)):
            if mask[i]:
                r, g, bl = linear_srgb_at(rows[i, 0], rows[i, 1], rows[i, 2], m)
                y[k] = rows[i, 1]
                # np.max(..., initial=-inf) over the channels: NaN wins
                if r != r or g != g or bl != bl:
                    peak[k] = np.nan
                else:
                    peak[k] = max(max(-np.inf, r), max(g, bl))
                k += 1


def metered_values(image, mask) -> tuple[np.ndarray, np.ndarray]:
    """(Y, peak) of the pixels of a (..., 3) XYZ image where ``mask`` (...) is True, in
    pixel order: the luminance and the largest linear sRGB channel (at white = 1)."""
    rows = as_pixel_rows(image)
    flat = np.ascontiguousarray(np.asarray(mask, dtype=bool).reshape(-1))
    offsets = np.cumsum(_block_counts(flat, BLOCK))
    y = np.empty(offsets[-1])
    peak = np.empty(offsets[-1])
    _gather_metered(rows, flat, XYZ_TO_LINEAR_SRGB, BLOCK, offsets, y, peak)
    return y, peak


@njit(parallel=True, cache=True)
def _expose(rows, white, m, out):
    for i in prange(rows.shape[0]):
        out[i, 0], out[i, 1], out[i, 2] = linear_srgb_at(
            rows[i, 0] / white, rows[i, 1] / white, rows[i, 2] / white, m
        )


def expose_rows(image, white: float) -> np.ndarray:
    """Linear sRGB of a (..., 3) absolute XYZ image divided by ``white``: the numbers of
    ``xyz_to_linear_srgb(xyz / white)``, in one pass and one new array."""
    rows = as_pixel_rows(image)
    out = np.empty(rows.shape)
    _expose(rows, float(white), XYZ_TO_LINEAR_SRGB, out)
    return out.reshape(np.shape(image))


@njit(parallel=True, cache=True)
def _count_clipped(rows, mask, level):
    """(pixels in mask, of them with a channel above level); an empty mask: every pixel."""
    n = rows.shape[0]
    every = mask.shape[0] == 0
    chosen = 0
    over = 0
    for i in prange(n):
        if every or mask[i]:
            chosen += 1
            if rows[i, 0] > level or rows[i, 1] > level or rows[i, 2] > level:
                over += 1
    return chosen, over


def clipped_counts(image, mask, level: float) -> tuple[int, int]:
    """(masked pixels, masked pixels with a channel above ``level``) of a (..., 3) image;
    ``mask`` None: every pixel."""
    rows = as_pixel_rows(image)
    flat = (
        np.empty(0, bool)
        if mask is None
        else np.ascontiguousarray(np.asarray(mask, dtype=bool).reshape(-1))
    )
    chosen, over = _count_clipped(rows, flat, float(level))
    return int(chosen), int(over)
