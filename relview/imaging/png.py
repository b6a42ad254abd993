"""The PNG encoder and writer: 8- or 16-bit sRGB RGB with text metadata.

Pillow cannot write 16-bit RGB, so the file is assembled here from the PNG
specification (W3C, ISO/IEC 15948): IHDR, an sRGB chunk, text chunks, one zlib
IDAT with Paeth-filtered rows, IEND. Files are written atomically
(relview.imaging.files).
"""

from __future__ import annotations

import json
import os
import struct
import zlib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from relview.imaging.display import to_8bit, to_16bit
from relview.imaging.files import atomic_write, json_default

__all__ = ["encode_png", "write_png"]

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _png_chunk(kind: bytes, data: bytes) -> bytes:
    # Chunk layout and CRC-32 over type + data: PNG specification (W3C, ISO/IEC 15948), 5.3.
    return (
        struct.pack(">I", len(data))
        + kind
        + data
        + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)
    )


def _png_text_chunk(key: str, value: str) -> bytes:
    """tEXt for Latin-1 text, iTXt (UTF-8) otherwise (PNG specification 11.3.4)."""
    if not isinstance(key, str) or not 1 <= len(key) <= 79:
        raise ValueError(f"PNG metadata key must be text of 1 to 79 characters, got {key!r}")
    try:
        keyword = key.encode("latin-1")
    except UnicodeEncodeError:
        raise ValueError(f"PNG metadata key {key!r} must be Latin-1 text") from None
    if any(b < 32 or 126 < b < 161 for b in keyword) or key != key.strip() or "  " in key:
        raise ValueError(
            f"PNG metadata key {key!r}: printable characters only, "
            "no leading, trailing or double spaces"
        )
    try:
        data = value.encode("latin-1")
        if b"\x00" not in data:
            return _png_chunk(b"tEXt", keyword + b"\x00" + data)
    except UnicodeEncodeError:
        pass
    # keyword, null, compression flag 0, method 0, empty language tag, null,
    # empty translated keyword, null, UTF-8 text
    return _png_chunk(b"iTXt", keyword + b"\x00\x00\x00\x00\x00" + value.encode("utf-8"))


def _paeth_filtered(raw: np.ndarray, bytes_per_pixel: int) -> np.ndarray:
    """Rows of bytes -> PNG filter type 4 (Paeth) rows, each led by the filter byte.

    PNG specification 9.4: predictor from a = left, b = above, c = above-left
    (unfiltered bytes; 0 outside the image); ties prefer a, then b.
    """
    raw16 = raw.astype(np.int16)
    a = np.zeros_like(raw16)
    a[:, bytes_per_pixel:] = raw16[:, :-bytes_per_pixel]
    b = np.zeros_like(raw16)
    b[1:] = raw16[:-1]
    c = np.zeros_like(raw16)
    c[1:, bytes_per_pixel:] = raw16[:-1, :-bytes_per_pixel]
    p = a + b - c
    pa, pb, pc = np.abs(p - a), np.abs(p - b), np.abs(p - c)
    predictor = np.where((pa <= pb) & (pa <= pc), a, np.where(pb <= pc, b, c))
    filtered = ((raw16 - predictor) & 0xFF).astype(np.uint8)
    lead = np.full((raw.shape[0], 1), 4, dtype=np.uint8)
    return np.hstack([lead, filtered])


def encode_png(rgb: np.ndarray, metadata: Mapping[str, Any] | None = None) -> bytes:
    """(H, W, 3) uint8 or uint16 RGB -> PNG file bytes (colour type 2, 8 or 16 bit).

    Pillow cannot write 16-bit RGB, so the file is assembled here: IHDR, an sRGB
    chunk (the data are sRGB-encoded), text chunks, one zlib IDAT, IEND.
    """
    rgb = np.asarray(rgb)
    if rgb.ndim != 3 or rgb.shape[2] != 3 or rgb.shape[0] < 1 or rgb.shape[1] < 1:
        raise ValueError(f"PNG image must have shape (H, W, 3), got {rgb.shape}")
    if rgb.dtype == np.uint8:
        bit_depth, big_endian = 8, rgb
    elif rgb.dtype == np.uint16:
        bit_depth, big_endian = 16, rgb.astype(">u2")
    else:
        raise ValueError(f"PNG image must be uint8 or uint16, got {rgb.dtype}")
    height, width = rgb.shape[:2]
    raw = np.ascontiguousarray(big_endian).view(np.uint8).reshape(height, -1)
    scanlines = _paeth_filtered(raw, 3 * bit_depth // 8)
    parts = [
        _PNG_SIGNATURE,
        # width, height, bit depth, colour type 2 (RGB), deflate, adaptive filters, no interlace
        _png_chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, bit_depth, 2, 0, 0, 0)),
        _png_chunk(b"sRGB", b"\x01"),  # rendering intent: relative colorimetric
    ]
    for key, value in (metadata or {}).items():
        text = (
            value
            if isinstance(value, str)
            else json.dumps(value, default=json_default, ensure_ascii=False)
        )
        parts.append(_png_text_chunk(key, text))
    parts.append(_png_chunk(b"IDAT", zlib.compress(scanlines.tobytes(), 6)))
    parts.append(_png_chunk(b"IEND", b""))
    return b"".join(parts)


def _as_png_integers(image: Any, bits: int, tone: str) -> np.ndarray:
    if bits not in (8, 16):
        raise ValueError(f"PNG bit depth must be 8 or 16, got {bits!r}")
    arr = np.asarray(image)
    if arr.dtype == np.uint8 or arr.dtype == np.uint16:
        if arr.dtype.itemsize * 8 != bits:
            raise ValueError(
                f"a {arr.dtype} image cannot be written as a {bits}-bit PNG "
                "without rescaling; pass linear floats or matching integers"
            )
        return arr
    if not np.issubdtype(arr.dtype, np.floating):
        raise ValueError(f"PNG image must be linear sRGB floats or uint8/uint16, got {arr.dtype}")
    return to_8bit(arr, tone) if bits == 8 else to_16bit(arr, tone)


def write_png(
    path: str | os.PathLike,
    image: Any,
    bits: int = 8,
    metadata: Mapping[str, Any] | None = None,
    *,
    tone: str = "none",
    overwrite: bool = False,
) -> Path:
    """Write an (H, W, 3) image as an 8- or 16-bit sRGB PNG (atomic); return the path written.

    ``image``: linear sRGB floats (encoded with :func:`to_8bit` / :func:`to_16bit`
    and ``tone``), or already encoded uint8 (bits=8) / uint16 (bits=16).
    ``metadata``: key -> text, stored as PNG text chunks (non-text values as JSON).
    """
    data = encode_png(_as_png_integers(image, bits, tone), metadata)
    return atomic_write(path, lambda fh: fh.write(data), overwrite)
