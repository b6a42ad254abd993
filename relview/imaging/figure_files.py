"""Figure files: matplotlib figures written atomically with provenance metadata.

A figure (comparison sheet, probe plot, layer map) is written in the format its file
extension names (relview.imaging.formats.FIGURE_FORMATS), with the provenance record
in the file's own metadata (:func:`figure_metadata`) and, by :func:`save_figure`, in a
JSON sidecar ``<figure>.json`` beside it. Nothing replaces an earlier file unless
``overwrite`` (relview.imaging.files).
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from relview.imaging.files import atomic_write, json_default, metadata_json, write_json_sidecar
from relview.imaging.formats import figure_format

__all__ = ["figure_metadata", "save_figure", "sidecar_path", "write_figure"]


def figure_metadata(fmt: str, metadata: Mapping[str, Any] | None) -> dict[str, str] | None:
    """Provenance for matplotlib's ``savefig(metadata=...)`` in the keys each format allows.

    PNG: every entry as its own text chunk. PDF (document information dictionary) and
    SVG (Dublin Core): only fixed keys exist, so the whole record goes as JSON into
    ``Subject`` (PDF) or ``Description`` (SVG), with ``Title`` and ``Creator`` set.
    Other formats: None (matplotlib has no metadata for them).
    """
    if not metadata:
        return None
    fmt = fmt.lower()
    if fmt == "png":
        return {
            str(k): v if isinstance(v, str) else json.dumps(v, default=json_default)
            for k, v in metadata.items()
        }
    record = metadata_json(metadata)
    title = str(metadata.get("title") or metadata.get("scene") or "relview figure")
    creator = f"relview {metadata.get('relview_version', '')}".strip()
    if fmt == "pdf":
        return {"Title": title, "Subject": record, "Creator": creator}
    if fmt == "svg":
        return {"Title": title, "Description": record, "Creator": creator}
    return None


def write_figure(
    fig, path: str | os.PathLike, fmt: str, metadata: Mapping[str, Any] | None, overwrite: bool
) -> Path:
    """Write a matplotlib figure as ``fmt`` (atomic), metadata as :func:`figure_metadata`
    says; return the path written."""
    meta = figure_metadata(fmt, metadata)
    return atomic_write(path, lambda fh: fig.savefig(fh, format=fmt, metadata=meta), overwrite)


def sidecar_path(path: Path) -> Path:
    """Where the JSON provenance of a figure goes: beside it, ``<figure name>.json``."""
    return path.with_name(path.name + ".json")


def save_figure(fig, path, metadata: dict, overwrite: bool = False) -> tuple[Path, Path]:
    """Write a matplotlib figure (format by extension) and its JSON sidecar, atomically.

    Returns (figure path, sidecar path); numbered names are used instead of replacing
    existing files unless ``overwrite``.
    """
    path = Path(path)
    written = write_figure(fig, path, figure_format(path), metadata, overwrite)
    side = write_json_sidecar(sidecar_path(written), metadata, overwrite=overwrite)
    return written, side
