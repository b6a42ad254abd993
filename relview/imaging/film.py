"""Transitional: the few names relview.animation still reads as ``film.<name>``.

The former film module is split into relview.imaging.{exposure, display, files, png,
layer_files, false_colour, figure_files, formats}. Only the names the animation
package uses through ``film.`` are kept here, each from the module that now owns it,
until those call sites import them from there; then this module goes. Nothing new
should import it.
"""

from __future__ import annotations

from relview.imaging.display import LUMINANCE_WEIGHTS, to_8bit
from relview.imaging.exposure import ExposureLock
from relview.imaging.files import atomic_write as _atomic_write
from relview.imaging.files import json_default as _json_default
from relview.imaging.files import write_json_sidecar
from relview.imaging.png import encode_png

__all__ = [
    "LUMINANCE_WEIGHTS",
    "ExposureLock",
    "_atomic_write",
    "_json_default",
    "encode_png",
    "to_8bit",
    "write_json_sidecar",
]
