"""Layer maps: one data layer of a render in false colour with a labelled colour bar.

A *layer map* shows one data layer of a render (Doppler factor, light delay, body
index, ...) in false colour (relview.imaging.false_colour.save_layer_figure), with the
render's provenance in the figure's metadata and in a JSON sidecar beside it
(docs/figures.md, "False-colour layer maps").
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from relview.errors import UserError
from relview.figures.sheets import panel_kind, panel_scene, time_text
from relview.imaging.false_colour import save_layer_figure
from relview.imaging.figure_files import sidecar_path
from relview.imaging.files import write_json_sidecar
from relview.imaging.formats import figure_format
from relview.scene.model import Scene

__all__ = ["LAYERS", "LayerView", "layer_map", "layer_values"]


@dataclass(frozen=True)
class LayerView:
    """How one data layer is shown: label, unit, scale and colour map."""

    label: str
    unit: str
    log: bool
    cmap: str
    note: str


LAYERS: dict[str, LayerView] = {
    "doppler": LayerView(
        "Doppler factor D = nu_obs / nu_emit",
        "",
        True,
        "RdBu",
        "blue: approaching (D > 1), red: receding (D < 1)",
    ),
    "delay": LayerView(
        "light delay t_exposure - t_emit",
        "ns",
        False,
        "viridis",
        "time light took from the surface to the camera",
    ),
    "emit_time": LayerView(
        "emission time t_emit - t_exposure",
        "ns",
        False,
        "viridis",
        "scene-frame time the light left the surface",
    ),
    "distance": LayerView(
        "distance to the emission point",
        "m",
        False,
        "viridis",
        "scene frame, from the camera at the exposure event",
    ),
    "body": LayerView("body index", "", False, "tab10", "which body each pixel sees"),
    "luminance": LayerView("luminance Y", "cd/m2", True, "magma", "CIE 1931 Y, observed"),
    "temperature": LayerView(
        "recorded sky temperature T",
        "K",
        False,
        "coolwarm",
        'blackbody temperature of the microwave sky ([background] kind = "cmb") the camera '
        "records; hotter (red) towards its motion through the sky's frame",
    ),
}


def layer_values(frame, layer: str, camera_position: np.ndarray) -> np.ndarray:
    """(H, W) float values of the named map layer from a Frame (NaN where nothing)."""
    L = frame.layers
    if layer == "doppler":
        return np.asarray(L["doppler"], float)
    if layer == "delay":
        return (frame.time - np.asarray(L["emit_time"], float)) * 1e9
    if layer == "emit_time":
        return (np.asarray(L["emit_time"], float) - frame.time) * 1e9
    if layer == "distance":
        return np.linalg.norm(np.asarray(L["emit_position"], float) - camera_position, axis=-1)
    if layer == "body":
        b = np.asarray(L["body"], float)
        return np.where(b >= 0, b, np.nan)
    if layer == "luminance":
        y = np.asarray(L["xyz"], float)[..., 1]
        return np.where(y > 0, y, np.nan)
    if layer == "temperature":
        if "temperature" not in L:
            raise UserError(
                '--layer temperature: only a scene whose [background] kind = "cmb" '
                "has a temperature layer"
            )
        return np.asarray(L["temperature"], float)
    raise UserError(f"--layer {layer!r}: unknown layer; choose from: {', '.join(LAYERS)}")


def layer_map(
    scene: Scene,
    layer: str,
    out,
    time: float | None = None,
    *,
    panel: str | None = None,
    resolution=None,
    overwrite: bool = False,
    vmin: float | None = None,
    vmax: float | None = None,
    progress: bool = False,
) -> tuple[Path, Path, np.ndarray]:
    """Render once and write a false-colour map of ``layer`` with a labelled colour bar.

    ``panel``: render with that panel's effects (and rest scene for "rest"); default:
    the scene's own effects. Returns (figure path, sidecar path, (H, W) values).
    """
    # the renderer is imported here, not at the top: it compiles numba kernels, and
    # `relview compare --help` must stay quick
    from relview.renderer import camera_state, render

    if layer not in LAYERS:
        raise UserError(f"--layer {layer!r}: unknown layer; choose from: {', '.join(LAYERS)}")
    view = LAYERS[layer]
    out = Path(out)
    figure_format(out)  # refuse a bad extension before rendering
    t = scene.camera.time if time is None else float(time)
    if panel is not None:
        kind = panel_kind(panel)
        s, effects = panel_scene(scene, kind, t), kind.effects
    else:
        s, effects = scene, scene.render.effects
    frame = render(s, t, resolution=resolution, effects=effects, progress=progress)
    values = layer_values(frame, layer, camera_state(s, t)[0][1:])
    if layer == "doppler" and vmin is None and vmax is None:
        finite = values[np.isfinite(values) & (values > 0)]
        # symmetric on the log axis about D = 1, so white means no shift
        m = float(np.max(np.abs(np.log(finite)))) if finite.size else 0.0
        m = max(m, math.log(1.01))
        vmin, vmax = math.exp(-m), math.exp(m)
    if layer == "body" and vmin is None and vmax is None:
        vmin, vmax = -0.5, 9.5  # tab10 has ten colours: one per body index 0..9
    title = f"{scene.title + ': ' if scene.title else ''}{layer}, {time_text(t)}"
    if panel is not None:
        title += f" ({panel_kind(panel).name})"
    meta = dict(frame.metadata)
    meta.update(
        {
            "title": f"relview layer map: {layer}",
            "layer": layer,
            "layer_unit": view.unit,
            "layer_note": view.note,
            "panel": panel_kind(panel).name if panel else "",
        }
    )
    written = save_layer_figure(
        out,
        values,
        view.label,
        view.unit,
        view.log,
        vmin=vmin,
        vmax=vmax,
        cmap=view.cmap,
        title=title,
        overwrite=overwrite,
        metadata=meta,
    )
    side = write_json_sidecar(sidecar_path(written), meta, overwrite=overwrite)
    return written, side, values
