"""Files of float data layers: compressed NumPy .npz and, when available, OpenEXR.

Both keep the unclipped linear data (image, XYZ, Doppler factor, emission events,
...) for analysis; both are written atomically (relview.imaging.files).
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np

from relview.errors import OutputError
from relview.imaging.files import atomic_write, json_default, metadata_json

__all__ = ["METADATA_ENTRY", "exr_available", "write_exr", "write_layers_npz"]

METADATA_ENTRY = "metadata"


def write_layers_npz(
    path: str | os.PathLike,
    layers: Mapping[str, Any],
    metadata: Mapping[str, Any] | None = None,
    *,
    overwrite: bool = False,
) -> Path:
    """Write named arrays to a compressed .npz (atomic); return the path written.

    ``metadata`` is stored as a JSON string in the entry ``"metadata"`` (a 0-d
    unicode array: ``json.loads(str(np.load(path)["metadata"]))``), so reading
    never needs pickle. Object arrays are refused for the same reason.
    """
    if not isinstance(layers, Mapping):
        raise ValueError(f"layers must be a dict of name -> array, got {type(layers).__name__}")
    arrays: dict[str, np.ndarray] = {}
    for name, value in layers.items():
        if not isinstance(name, str) or not name or name == METADATA_ENTRY or "/" in name:
            raise ValueError(
                f"layer name {name!r} is not allowed (non-empty text, "
                f"no '/', not {METADATA_ENTRY!r})"
            )
        arr = np.asarray(value)
        if arr.dtype.hasobject:
            raise ValueError(
                f"layer {name!r} has dtype object, which needs pickle; store numbers or text"
            )
        arrays[name] = arr
    arrays[METADATA_ENTRY] = np.array(metadata_json(metadata))
    return atomic_write(path, lambda fh: np.savez_compressed(fh, **arrays), overwrite)


def exr_available() -> bool:
    """True when the optional ``OpenEXR`` package can be imported."""
    try:
        import OpenEXR  # noqa: F401  (optional package: imported only when asked about)
    except ImportError:
        return False
    return True


def _exr_channels(linear: Any, layers: Mapping[str, Any] | None) -> dict[str, np.ndarray]:
    rgb = np.asarray(linear, dtype=np.float32)
    if rgb.ndim != 3 or rgb.shape[2] != 3:
        raise ValueError(f"EXR image must have shape (H, W, 3), got {rgb.shape}")
    channels = {name: np.ascontiguousarray(rgb[..., i]) for i, name in enumerate("RGB")}
    for name, value in (layers or {}).items():
        arr = np.asarray(value)
        if arr.shape[:2] != rgb.shape[:2] or arr.ndim not in (2, 3):
            raise ValueError(
                f"EXR layer {name!r} has shape {arr.shape}; "
                f"expected {rgb.shape[:2]} or {rgb.shape[:2] + (3,)}"
            )
        if arr.dtype.kind not in "biuf":
            raise ValueError(f"EXR layer {name!r} must be numeric, got {arr.dtype}")
        arr = arr.astype(np.float32)  # integer layers (body index) too: exact below 2**24
        if arr.ndim == 2:
            channels[str(name)] = np.ascontiguousarray(arr)
        else:
            for i in range(arr.shape[2]):
                channels[f"{name}.{'xyz'[i] if arr.shape[2] == 3 else i}"] = np.ascontiguousarray(
                    arr[..., i]
                )
    return channels


def write_exr(
    path: str | os.PathLike,
    linear: Any,
    layers: Mapping[str, Any] | None = None,
    metadata: Mapping[str, Any] | None = None,
    *,
    overwrite: bool = False,
) -> Path:
    """Write (H, W, 3) linear sRGB as a float32 OpenEXR file (atomic); return the path written.

    ``layers`` (optional): further (H, W) or (H, W, k) arrays stored as float32
    channels ``name`` or ``name.x``/``.y``/``.z`` (``name.0``... for k != 3).
    Metadata entries become string attributes of the header.
    Needs the optional ``OpenEXR`` package (3.x API); without it this raises
    :class:`OutputError` saying so (check :func:`exr_available` first).
    """
    try:
        import OpenEXR  # optional package, imported only when an .exr is written
    except ImportError:
        raise OutputError(
            "cannot write OpenEXR: the optional package 'OpenEXR' is not "
            "installed (pip install 'relview[exr]', or pip install OpenEXR)",
            file=path,
        ) from None
    channels = _exr_channels(linear, layers)
    header: dict[str, Any] = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    for key, value in (metadata or {}).items():
        header[str(key)] = (
            value if isinstance(value, str) else json.dumps(value, default=json_default)
        )

    def write(handle: BinaryIO) -> None:
        # OpenEXR writes by file name: write beside the temporary file, copy the bytes in.
        scratch = Path(handle.name + ".exr")
        try:
            with OpenEXR.File(header, channels) as exr_file:
                exr_file.write(str(scratch))
            handle.write(scratch.read_bytes())
        finally:
            scratch.unlink(missing_ok=True)

    return atomic_write(path, write, overwrite)
