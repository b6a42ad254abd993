"""False colour: one scalar data layer as colours through a matplotlib colour map.

:func:`false_colour` turns an (H, W) layer (Doppler factor, light delay, luminance,
...) into display RGB; :func:`save_layer_figure` draws it with a labelled colour bar
and writes the figure (relview.imaging.figure_files). NaN (no data) is shown in a
neutral grey, :data:`NAN_RGB`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from relview.imaging.figure_files import write_figure

__all__ = ["NAN_RGB", "false_colour", "save_layer_figure"]

#: Colour of NaN (no data, e.g. background in the Doppler layer) in false-colour maps:
#: a neutral mid grey that no perceptually uniform matplotlib map contains.
NAN_RGB = (128, 128, 128)


def _colour_scale(values: np.ndarray, vmin: float | None, vmax: float | None, log: bool):
    """(valid mask, vmin, vmax) for a false-colour map; validates the range."""
    valid = np.isfinite(values)
    if log:
        valid &= values > 0.0
    if vmin is None or vmax is None:
        shown = values[valid]
        lo = float(shown.min()) if shown.size else (1.0 if log else 0.0)
        hi = float(shown.max()) if shown.size else (10.0 if log else 1.0)
        vmin = lo if vmin is None else vmin
        vmax = hi if vmax is None else vmax
    vmin, vmax = float(vmin), float(vmax)
    if not (math.isfinite(vmin) and math.isfinite(vmax)) or vmax < vmin:
        raise ValueError(f"colour range must be finite with vmin <= vmax, got [{vmin}, {vmax}]")
    if log and vmin <= 0.0:
        raise ValueError(f"a logarithmic colour scale needs vmin > 0, got {vmin}")
    return valid, vmin, vmax


def _colour_map(cmap: str):
    import matplotlib  # here, not at the top: matplotlib is slow to import

    try:
        return matplotlib.colormaps[cmap]
    except KeyError:
        raise ValueError(
            f"unknown colour map {cmap!r}; e.g. 'viridis', 'magma', 'cividis', 'coolwarm'"
        ) from None


def false_colour(
    values: Any,
    vmin: float | None = None,
    vmax: float | None = None,
    cmap: str = "viridis",
    log: bool = False,
) -> np.ndarray:
    """(H, W) scalar layer -> (H, W, 3) uint8 RGB through a matplotlib colour map.

    Values are placed linearly (or by log10 when ``log``) between ``vmin`` and
    ``vmax`` (default: the finite data range) and clipped to the ends. NaN and
    infinite values, and on a log scale values <= 0 (which have no place on the
    axis), are shown in :data:`NAN_RGB`. The output is display-referred RGB.
    """
    v = np.asarray(values, dtype=np.float64)
    if v.ndim != 2:
        raise ValueError(f"false colour needs an (H, W) layer, got shape {v.shape}")
    valid, vmin, vmax = _colour_scale(v, vmin, vmax, log)
    colour_map = _colour_map(cmap)
    with np.errstate(divide="ignore", invalid="ignore"):
        if log:
            pos, lo, hi = np.log10(np.where(valid, v, 1.0)), math.log10(vmin), math.log10(vmax)
        else:
            pos, lo, hi = np.where(valid, v, 0.0), vmin, vmax
    fraction = np.full(v.shape, 0.5) if hi == lo else np.clip((pos - lo) / (hi - lo), 0.0, 1.0)
    rgb = colour_map(fraction, bytes=True)[..., :3].copy()
    rgb[~valid] = NAN_RGB
    return rgb


def save_layer_figure(
    path: str | os.PathLike,
    values: Any,
    label: str,
    unit: str,
    log: bool = False,
    *,
    vmin: float | None = None,
    vmax: float | None = None,
    cmap: str = "viridis",
    title: str | None = None,
    dpi: int = 100,
    overwrite: bool = False,
    metadata: Mapping[str, Any] | None = None,
) -> Path:
    """A figure of an (H, W) layer in false colour with a labelled colour bar (atomic).

    The colour bar reads ``label (unit)``; NaN pixels are shown in :data:`NAN_RGB`
    and noted under the bar. The format follows the file extension (png, pdf,
    svg, ...). ``metadata`` (provenance) is stored as :func:`figure_metadata`
    describes
    (relview.imaging.figure_files). Returns the path written.
    """
    # matplotlib is imported here, not at the top, because it is slow to import
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import LogNorm, Normalize
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, NullFormatter

    v = np.asarray(values, dtype=np.float64)
    rgb = false_colour(v, vmin, vmax, cmap, log)
    valid, vmin, vmax = _colour_scale(v, vmin, vmax, log)
    if vmin == vmax:  # a flat layer still gets a readable bar
        vmin, vmax = (vmin / 2, vmin * 2) if log else (vmin - 0.5, vmax + 0.5)
    fmt = Path(path).suffix.lstrip(".").lower() or "png"
    height, width = v.shape
    fig = Figure(figsize=(6.4, max(2.0, 6.4 * height / width * 0.85)), dpi=dpi)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.imshow(rgb, interpolation="nearest")
    ax.set_axis_off()
    if title:
        ax.set_title(title)
    norm = LogNorm(vmin, vmax) if log else Normalize(vmin, vmax)
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=_colour_map(cmap)), ax=ax)
    bar.set_label(f"{label} ({unit})" if unit else label)
    if log:  # plain numbers (1.25, 3, 100) rather than 1.25 x 10^0
        plain = FuncFormatter(lambda v, _pos: f"{v:g}")
        bar.ax.yaxis.set_major_formatter(plain)
        # label the 2..9 ticks too when the range spans less than two decades
        bar.ax.yaxis.set_minor_formatter(plain if vmax / vmin < 100.0 else NullFormatter())
    if not valid.all():
        bar.ax.set_xlabel("grey: no data", fontsize="small")
    return write_figure(fig, path, fmt, metadata, overwrite)
