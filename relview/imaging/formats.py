"""The output formats relview writes, by file extension: the one list of them.

Two registries:

* :data:`FRAME_FORMATS`: a rendered frame (``Frame.save``, ``relview render -o``):
  ``.png`` (8/16-bit sRGB picture), ``.npz`` (float layers), ``.exr`` (float layers,
  when the optional OpenEXR package is installed). Each entry has the writer.
* :data:`FIGURE_FORMATS`: a matplotlib figure (comparison sheet, layer map, probe
  plot): ``.png`` for slides, ``.pdf`` and ``.svg`` for papers. matplotlib writes all
  of them; relview.imaging.figure_files.figure_metadata puts the provenance in the
  keys each one allows.

A new frame format is one writer ``write(frame, path, *, bits, tone, overwrite) ->
Path`` plus ``register_frame_format(FrameFormat(".ext", write))``; a new figure
format is ``register_figure_format(FigureFormat(".ext", "purpose"))``. Error messages
and the command line's choices are built from these registries.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol

from relview.errors import OutputError
from relview.imaging.files import safe_output_path
from relview.imaging.layer_files import exr_available, write_exr, write_layers_npz
from relview.imaging.png import write_png

__all__ = [
    "FIGURE_FORMATS",
    "FRAME_FORMATS",
    "FigureFormat",
    "FrameFormat",
    "check_output_path",
    "figure_format",
    "figure_type_hint",
    "frame_format",
    "register_figure_format",
    "register_frame_format",
]


class SavedFrame(Protocol):
    """What a frame writer reads from a frame (relview.renderer.Frame has it all)."""

    image: Any  # (H, W, 3) linear sRGB, not clipped
    layers: Mapping[str, Any]
    metadata: Mapping[str, Any]


FrameWriter = Callable[..., Path]


def _always() -> bool:
    return True


@dataclass(frozen=True)
class FrameFormat:
    """A file type a frame can be saved as.

    ``write(frame, path, *, bits, tone, overwrite)`` writes it and returns the path
    written; ``available()`` says whether it can be written here, and ``missing`` why
    not (for the error message).
    """

    extension: str  # lower case, with the dot: ".png"
    write: FrameWriter
    available: Callable[[], bool] = _always
    missing: str = ""


@dataclass(frozen=True)
class FigureFormat:
    """A file type a matplotlib figure can be saved as; ``purpose`` is shown in hints."""

    extension: str  # lower case, with the dot: ".pdf"
    purpose: str  # "slides", "papers"
    available: Callable[[], bool] = _always
    missing: str = ""

    @property
    def name(self) -> str:
        """The format name matplotlib's ``savefig(format=...)`` takes."""
        return self.extension.lstrip(".")


FRAME_FORMATS: dict[str, FrameFormat] = {}
FIGURE_FORMATS: dict[str, FigureFormat] = {}


def register_frame_format(fmt: FrameFormat) -> None:
    FRAME_FORMATS[fmt.extension] = fmt


def register_figure_format(fmt: FigureFormat) -> None:
    FIGURE_FORMATS[fmt.extension] = fmt


# --------------------------------------------------------------------------- frame writers


def _write_png_frame(
    frame: SavedFrame, path: Path, *, bits: int, tone: str, overwrite: bool
) -> Path:
    return write_png(
        path, frame.image, bits=bits, metadata=frame.metadata, tone=tone, overwrite=overwrite
    )


# The layer files keep the linear floats as they are, so bits and tone do not apply.
def _write_npz_frame(
    frame: SavedFrame, path: Path, *, bits: int, tone: str, overwrite: bool
) -> Path:
    layers = dict(frame.layers)
    layers["image"] = frame.image
    return write_layers_npz(path, layers, metadata=frame.metadata, overwrite=overwrite)


def _write_exr_frame(
    frame: SavedFrame, path: Path, *, bits: int, tone: str, overwrite: bool
) -> Path:
    return write_exr(path, frame.image, frame.layers, metadata=frame.metadata, overwrite=overwrite)


register_frame_format(FrameFormat(".png", _write_png_frame))
register_frame_format(FrameFormat(".npz", _write_npz_frame))
register_frame_format(
    FrameFormat(".exr", _write_exr_frame, exr_available, "no OpenEXR writer is installed")
)

register_figure_format(FigureFormat(".png", "slides"))
register_figure_format(FigureFormat(".pdf", "papers"))
register_figure_format(FigureFormat(".svg", "papers"))


# --------------------------------------------------------------------------- lookups


def _one_of(extensions) -> str:
    """'.png, .npz or .exr'."""
    extensions = list(extensions)
    if len(extensions) < 2:
        return "".join(extensions)
    return f"{', '.join(extensions[:-1])} or {extensions[-1]}"


def frame_format(path: str | os.PathLike) -> FrameFormat:
    """The frame format of ``path``'s extension; OutputError for an unknown one."""
    ext = Path(path).suffix.lower()
    try:
        return FRAME_FORMATS[ext]
    except KeyError:
        raise OutputError(
            f"{path}: unknown image type {ext!r}; use {_one_of(FRAME_FORMATS)}"
        ) from None


def figure_type_hint(*, purposes: bool = True) -> str:
    """'.png (slides), .pdf or .svg (papers)', or without purposes '.png, .pdf or .svg'."""
    if not purposes:
        return _one_of(FIGURE_FORMATS)
    by_purpose: dict[str, list[str]] = {}
    for fmt in FIGURE_FORMATS.values():
        by_purpose.setdefault(fmt.purpose, []).append(fmt.extension)
    return ", ".join(f"{_one_of(exts)} ({purpose})" for purpose, exts in by_purpose.items())


def figure_format(path: Path) -> str:
    """matplotlib's format name for a figure path; OutputError for an unknown extension."""
    fmt = FIGURE_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise OutputError(
            f"unknown figure type {path.suffix or '(none)'!r}; use {figure_type_hint()}",
            file=path,
        )
    return fmt.name


def check_output_path(
    path: Path, formats: Mapping[str, FrameFormat | FigureFormat] = FRAME_FORMATS
) -> None:
    """Refuse, before any rendering, an output path that could never be written.

    ``formats``: :data:`FRAME_FORMATS` (default) or :data:`FIGURE_FORMATS`. The same
    reasons the writers give, found early so no work is lost.
    """
    ext = path.suffix.lower()
    if ext not in formats:
        raise OutputError(f"unknown file type {ext!r}; use {', '.join(formats)}", file=path)
    fmt = formats[ext]
    if not fmt.available():
        usable = [e for e, f in formats.items() if f.available()]
        raise OutputError(f"cannot write {ext}: {fmt.missing}; use {_one_of(usable)}", file=path)
    safe_output_path(path)  # raises when the path is a directory
    for parent in path.absolute().parents:
        if parent.exists():
            if not parent.is_dir():
                raise OutputError(
                    f"cannot create the directory: {parent} is a file, not a directory", file=path
                )
            break
