"""Probe tables over time: where, when and how chosen body points are seen, frame by frame.

For chosen rest-frame points of one body and a list of exposure times, each row holds
(relview.probes.probe_many): emission time and position (scene frame), light delay,
the apparent direction as azimuth / elevation in the camera frame, the pixel, whether
the point is in view and not hidden, and its Doppler factor.

With exactly two points the table also holds the *photographed length* between them
against time: the distance between their emission positions, i.e. the length a
photograph taken at that exposure records (physics.md: "A short rod ... photographs
with length D L0"), beside the rest length L0 and the length measured at one instant
in the scene frame (Lorentz-contracted: L0 / gamma for a segment along the motion).

Outputs: CSV with a commented provenance header, JSON, and a matplotlib plot (PNG,
PDF or SVG, with provenance metadata). Units are in every column name.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from relview import __version__
from relview.errors import OutputError, UserError
from relview.imaging.figure_files import save_figure
from relview.imaging.files import atomic_write
from relview.imaging.formats import FIGURE_FORMATS, figure_type_hint
from relview.scene.model import Scene
from relview.scene.parts import Effects

#: Column name -> (unit, meaning). Order is the CSV column order.
COLUMNS: dict[str, tuple[str, str]] = {
    "time_s": ("s", "exposure time, scene frame"),
    "body": ("", "body name"),
    "point": ("", "index of the point (0-based, in the order given)"),
    "point_x_m": ("m", "point, body rest frame x"),
    "point_y_m": ("m", "point, body rest frame y"),
    "point_z_m": ("m", "point, body rest frame z"),
    "emit_time_s": ("s", "when the light left the point, scene frame"),
    "emit_x_m": ("m", "where the point was then, scene frame x"),
    "emit_y_m": ("m", "scene frame y"),
    "emit_z_m": ("m", "scene frame z"),
    "light_delay_s": ("s", "exposure time minus emission time"),
    "azimuth_deg": ("deg", "apparent direction, camera frame: angle right of the view axis"),
    "elevation_deg": (
        "deg",
        ("apparent direction, camera frame: angle above the image horizontal plane"),
    ),
    "pixel_x": ("px", "image column, from the left edge (centres at half-integers)"),
    "pixel_y": ("px", "image row, from the top edge"),
    "in_view": ("", "the projection has an image of the direction (pixel may be off-image)"),
    "visible": ("", "no surface hides the point"),
    "doppler": ("", "Doppler factor D = nu_observed / nu_emitted"),
    "proper_time_s": ("s", "the body clock's reading carried by the light (seen)"),
    "tick_rate": ("", "d(seen reading) / d(camera proper time): how fast the clock is seen to run"),
    "computed_proper_time_s": (
        "s",
        "the body clock's reading at the point's event at the exposure's scene time (computed)",
    ),
    "camera_proper_time_s": ("s", "the camera's own clock at the exposure"),
}

#: Columns of the length table (two points).
LENGTH_COLUMNS: dict[str, tuple[str, str]] = {
    "time_s": ("s", "exposure time, scene frame"),
    "photographed_length_m": ("m", "distance between the two emission positions"),
    "photographed_along_motion_m": (
        "m",
        ("its component along the body's velocity at the first point's emission (NaN at rest)"),
    ),
    "angular_separation_deg": ("deg", "angle between the two apparent directions"),
    "rest_length_m": ("m", "L0, distance between the points in the body's rest frame"),
    "contracted_length_m": (
        "m",
        (
            "distance between the points at one instant of the "
            "scene frame (L0 / gamma along the motion)"
        ),
    ),
}

_BOOL_COLUMNS = ("in_view", "visible")
_TEXT_COLUMNS = ("body",)
_INT_COLUMNS = ("point",)


#: Largest number of exposure times one probe table takes (each is a full retarded solve
#: and a visibility cast per point).
MAX_TIMES = 100_000


def parse_times(text: str) -> np.ndarray:
    """'A:B:N' -> N evenly spaced times from A to B seconds (both included)."""
    parts = str(text).split(":")
    try:
        if len(parts) != 3:
            raise ValueError
        a, b, n = float(parts[0]), float(parts[1]), int(parts[2])
    except ValueError:
        raise UserError(
            f"--times {text!r}: expected START:END:COUNT in seconds, e.g. 0:4e-8:21"
        ) from None
    if not (math.isfinite(a) and math.isfinite(b)):
        raise UserError(f"--times {text!r}: start and end must be finite numbers")
    if n < 1:
        raise UserError(f"--times {text!r}: COUNT must be >= 1, got {n}")
    if n > MAX_TIMES:
        raise UserError(
            f"--times {text!r}: COUNT = {n} is more than {MAX_TIMES} exposures; "
            "split the range into several runs"
        )
    if b < a:
        raise UserError(f"--times {text!r}: END ({b}) is before START ({a})")
    if n == 1 and b != a:
        raise UserError(f"--times {text!r}: one time needs START = END")
    return np.linspace(a, b, n)


def apparent_angles(directions: np.ndarray, camera) -> tuple[np.ndarray, np.ndarray]:
    """(N, 3) unit directions (camera frame, scene axes) -> (azimuth, elevation) degrees.

    With the camera's image axes right r, up u, forward f: azimuth = atan2(d.r, d.f)
    (positive to the right of the view axis), elevation = asin(d.u) (positive up).
    """
    basis = camera.basis()
    local = np.atleast_2d(np.asarray(directions, float)) @ basis.T
    az = np.degrees(np.arctan2(local[:, 0], local[:, 2]))
    el = np.degrees(np.arcsin(np.clip(local[:, 1], -1.0, 1.0)))
    return az, el


@dataclass
class ProbeTable:
    """Rows (one per time and point), an optional length table, and provenance."""

    rows: list[dict]
    length: list[dict] | None = None
    metadata: dict = field(default_factory=dict)

    def column(self, name: str, point: int | None = None) -> np.ndarray:
        """One column as an array (of one point's rows when ``point`` is given)."""
        rows = self.rows if point is None else [r for r in self.rows if r["point"] == point]
        return np.array([r[name] for r in rows])

    def length_column(self, name: str) -> np.ndarray:
        if not self.length:
            raise KeyError("this table has no length rows (needs exactly two points)")
        return np.array([r[name] for r in self.length], float)

    @property
    def points(self) -> list[int]:
        return sorted({r["point"] for r in self.rows})


def table_provenance(
    scene: Scene, body_name: str, points: np.ndarray, times: np.ndarray, effects: Effects
) -> dict:

    return {
        "relview_version": __version__,
        "title": f"relview probe table: {body_name}",
        "scene": str(scene.source_path or ""),
        "scene_sha256": scene.source_hash,
        "body": body_name,
        "points_m": [[float(v) for v in p] for p in points],
        "times_s": [float(times[0]), float(times[-1]), len(times)],
        "effects": dataclasses.asdict(effects),
        "resolution": "x".join(str(v) for v in scene.render.resolution),
        "projection": scene.camera.projection,
    }


def probe_table(
    scene: Scene, body, points, times, effects: Effects | None = None, progress: bool = False
) -> ProbeTable:
    """Probe rest-frame ``points`` (N, 3) m of ``body`` (name or index) at every time (s)."""
    # imported here: it loads the numba kernels, which command start-up does not need
    from relview.probes import probe_many, retarded_events
    from relview.renderer import RenderContext, camera_state

    effects = effects or scene.render.effects
    bi = body if isinstance(body, (int, np.integer)) else scene.body_index(body)
    name = scene.bodies[bi].name
    pts = np.atleast_2d(np.asarray(points, float))
    if pts.shape[1] != 3:
        raise UserError(f"points must be X,Y,Z triples in metres, got shape {pts.shape}")
    times = np.atleast_1d(np.asarray(times, float))
    context = RenderContext(scene, effects)
    instant = dataclasses.replace(effects, delay=False, contraction=True)
    rows, length = [], []
    iterator = times
    if progress:
        from tqdm import tqdm

        iterator = tqdm(times, desc="probe", unit="time", leave=False)
    for t in iterator:
        res = probe_many(scene, bi, pts, float(t), effects, context=context)
        az, el = apparent_angles(np.array([r.direction for r in res]), scene.camera)
        for k, r in enumerate(res):
            rows.append(
                {
                    "time_s": float(t),
                    "body": name,
                    "point": k,
                    "point_x_m": r.point[0],
                    "point_y_m": r.point[1],
                    "point_z_m": r.point[2],
                    "emit_time_s": r.emit_time,
                    "emit_x_m": r.emit_position[0],
                    "emit_y_m": r.emit_position[1],
                    "emit_z_m": r.emit_position[2],
                    "light_delay_s": r.light_delay,
                    "azimuth_deg": float(az[k]),
                    "elevation_deg": float(el[k]),
                    "pixel_x": r.pixel[0],
                    "pixel_y": r.pixel[1],
                    "in_view": r.in_view,
                    "visible": r.visible,
                    "doppler": r.doppler,
                    "proper_time_s": r.proper_time,
                    "tick_rate": r.tick_rate,
                    "computed_proper_time_s": r.computed_proper_time,
                    "camera_proper_time_s": r.camera_proper_time,
                }
            )
        if len(pts) == 2:
            e = np.array([r.emit_position for r in res])
            sep = e[1] - e[0]
            beta = np.asarray(res[0].beta_emit, float)
            b = float(np.linalg.norm(beta))
            d = np.array([r.direction for r in res])
            event, _ = camera_state(scene, float(t))
            now, _ = retarded_events(scene, bi, pts, event, instant)
            length.append(
                {
                    "time_s": float(t),
                    "photographed_length_m": float(np.linalg.norm(sep)),
                    "photographed_along_motion_m": float(sep @ beta / b) if b > 0 else math.nan,
                    "angular_separation_deg": float(
                        np.degrees(np.arccos(np.clip(d[0] @ d[1], -1.0, 1.0)))
                    ),
                    "rest_length_m": float(np.linalg.norm(pts[1] - pts[0])),
                    "contracted_length_m": float(np.linalg.norm(now[1, 1:] - now[0, 1:])),
                }
            )
    meta = table_provenance(scene, name, pts, times, effects)
    return ProbeTable(rows, length or None, meta)


# --------------------------------------------------------------------------- CSV / JSON


def _csv_text(rows: list[dict], columns: dict, metadata: dict, what: str) -> str:
    buf = io.StringIO()
    buf.write(f"# relview {what}\n")
    for key, value in metadata.items():
        text = value if isinstance(value, str) else json.dumps(value, sort_keys=True)
        buf.write(f"# {key}: {text}\n")
    for name, (unit, meaning) in columns.items():
        buf.write(f"# column {name}: {meaning}{f' [{unit}]' if unit else ''}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(columns))
    for r in rows:
        w.writerow(
            [
                repr(float(r[c]))
                if isinstance(r[c], float)
                else str(r[c]).lower()
                if isinstance(r[c], bool)
                else r[c]
                for c in columns
            ]
        )
    return buf.getvalue()


def _write_text(path, text: str, overwrite: bool) -> Path:
    return atomic_write(path, lambda fh: fh.write(text.encode("utf-8")), overwrite)


def length_csv_path(path) -> Path:
    """Where the length table goes beside a probe CSV: NAME.length.csv."""
    path = Path(path)
    return path.with_name(f"{path.stem}.length{path.suffix or '.csv'}")


def write_csv(table: ProbeTable, path, overwrite: bool = False) -> list[Path]:
    """Write the rows as CSV (commented provenance header, '#' lines); with a length
    table also ``NAME.length.csv``. Returns the paths written."""
    out = [
        _write_text(path, _csv_text(table.rows, COLUMNS, table.metadata, "probe table"), overwrite)
    ]
    if table.length:
        out.append(
            _write_text(
                length_csv_path(out[0]),
                _csv_text(
                    table.length, LENGTH_COLUMNS, table.metadata, "photographed length table"
                ),
                overwrite,
            )
        )
    return out


def _parse_cell(name: str, text: str):
    if name in _TEXT_COLUMNS:
        return text
    if name in _BOOL_COLUMNS:
        if text not in ("true", "false"):
            raise ValueError(f"column {name}: expected true or false, got {text!r}")
        return text == "true"
    if name in _INT_COLUMNS:
        return int(text)
    return float(text)


def read_csv(path) -> tuple[list[dict], dict]:
    """Read a CSV written by :func:`write_csv` -> (rows with typed values, metadata)."""
    path = Path(path)
    meta, body = {}, []
    for line in path.read_text(encoding="utf-8").splitlines():
        if line.startswith("# ") and ": " in line and not line.startswith("# column "):
            key, _, value = line[2:].partition(": ")
            try:
                meta[key] = json.loads(value)
            except ValueError:
                meta[key] = value
        elif not line.startswith("#"):
            body.append(line)
    reader = csv.DictReader(body)
    try:
        rows = [{k: _parse_cell(k, v) for k, v in r.items()} for r in reader]
    except ValueError as exc:
        raise UserError(f"{path}: not a relview probe table: {exc}") from None
    return rows, meta


def table_json(table: ProbeTable) -> dict:
    """The whole table as one JSON-ready dict (NaN becomes null)."""

    def clean(rows):
        return [
            {
                k: (None if isinstance(v, float) and not math.isfinite(v) else v)
                for k, v in r.items()
            }
            for r in rows
        ]

    doc = {
        "metadata": table.metadata,
        "columns": {k: {"unit": u, "meaning": m} for k, (u, m) in COLUMNS.items()},
        "rows": clean(table.rows),
    }
    if table.length:
        doc["length_columns"] = {
            k: {"unit": u, "meaning": m} for k, (u, m) in LENGTH_COLUMNS.items()
        }
        doc["length"] = clean(table.length)
    return doc


def write_json(table: ProbeTable, path, overwrite: bool = False) -> Path:
    text = json.dumps(table_json(table), indent=2, sort_keys=False, allow_nan=False) + "\n"
    return _write_text(path, text, overwrite)


def read_json(path) -> ProbeTable:
    """Read a file written by :func:`write_json` (null -> NaN in float columns)."""
    doc = json.loads(Path(path).read_text(encoding="utf-8"))

    def unclean(rows):
        return [{k: (math.nan if v is None else v) for k, v in r.items()} for r in rows]

    return ProbeTable(
        unclean(doc["rows"]),
        unclean(doc["length"]) if "length" in doc else None,
        doc.get("metadata", {}),
    )


# --------------------------------------------------------------------------- plot


def _time_unit(times: np.ndarray) -> tuple[str, float]:
    span = float(np.max(np.abs(times))) if len(times) else 0.0
    for unit, f in (("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9)):
        if span >= f:
            return unit, f
    return "ns", 1e-9


def draw_table(table: ProbeTable):
    """A matplotlib Figure: apparent direction, Doppler factor, light delay, the clock
    readings (seen, computed, camera) (and the photographed length with rest and contracted lengths) against exposure time.
    Hollow markers: the point is hidden or out of view."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter

    n_ax = 5 if table.length else 4
    fig = Figure(figsize=(7.0, 2.2 * n_ax + 0.6), dpi=100)
    FigureCanvasAgg(fig)
    axes = fig.subplots(n_ax, 1, sharex=True)
    unit, f = _time_unit(table.column("time_s"))
    for k in table.points:
        t = table.column("time_s", k) / f
        seen = table.column("visible", k).astype(bool) & table.column("in_view", k).astype(bool)
        colour = f"C{k % 10}"
        for ax, name, style in (
            (axes[0], "azimuth_deg", "-"),
            (axes[0], "elevation_deg", ":"),
            (axes[1], "doppler", "-"),
            (axes[2], "light_delay_s", "-"),
        ):
            y = table.column(name, k).astype(float)
            if name == "light_delay_s":
                y = y * 1e9
            label = f"point {k}" + {"azimuth_deg": " azimuth", "elevation_deg": " elevation"}.get(
                name, ""
            )
            ax.plot(t, y, style, color=colour, label=label)
            ax.plot(t[seen], y[seen], "o", color=colour, ms=3)
            ax.plot(t[~seen], y[~seen], "o", mfc="none", color=colour, ms=4)
    axes[0].set_ylabel("direction (deg)")
    axes[0].legend(fontsize="x-small", ncol=2)
    axes[1].set_ylabel("Doppler factor D")
    axes[1].set_yscale("log")
    # plain numbers (0.5, 1, 2) rather than 5 x 10^-1; minor ticks labelled at 2, 3 and 5 only
    axes[1].yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    axes[1].yaxis.set_minor_formatter(
        FuncFormatter(
            lambda v, _pos: (
                f"{v:g}"
                if v > 0 and round(v / 10 ** math.floor(math.log10(v))) in (2, 3, 5)
                else ""
            )
        )
    )
    axes[1].axhline(1.0, color="0.6", lw=0.8)
    axes[2].set_ylabel("light delay (ns)")
    _draw_clocks(axes[3], table, f, unit)
    if table.length:
        t = table.length_column("time_s") / f
        ax = axes[4]
        ax.plot(
            t,
            table.length_column("photographed_length_m"),
            "-o",
            ms=3,
            color="C3",
            label="photographed",
        )
        ax.plot(t, table.length_column("rest_length_m"), "--", color="0.3", label="rest L0")
        ax.plot(
            t,
            table.length_column("contracted_length_m"),
            ":",
            color="C0",
            label="one instant (contracted)",
        )
        ax.set_ylabel("length (m)")
        ax.legend(fontsize="x-small")
    axes[-1].set_xlabel(f"exposure time ({unit})")
    m = table.metadata
    fig.suptitle(
        f"{m.get('body', '')}: probe table  (relview {m.get('relview_version', '')}, "
        f"scene sha256 {str(m.get('scene_sha256', ''))[:12]})\n"
        "filled markers: visible; hollow: hidden or out of view",
        fontsize="small",
    )
    fig.tight_layout()
    return fig


def _draw_clocks(ax, table: ProbeTable, f: float, unit: str) -> None:
    """Clock readings against exposure time: each point's seen reading (the light's), the
    computed reading at the exposure's scene time, and the camera's own clock; all in the
    time axis' unit, so a slope of 1 is one second per second."""
    if "proper_time_s" not in table.rows[0]:  # a table written before clocks existed
        ax.set_visible(False)
        return
    for k in table.points:
        t = table.column("time_s", k) / f
        colour = f"C{k % 10}"
        ax.plot(
            t,
            table.column("proper_time_s", k).astype(float) / f,
            "-",
            color=colour,
            label=f"point {k} seen",
        )
        ax.plot(
            t,
            table.column("computed_proper_time_s", k).astype(float) / f,
            "--",
            color=colour,
            label=f"point {k} computed (one instant)",
        )
    t = table.column("time_s", table.points[0]) / f
    ax.plot(
        t,
        table.column("camera_proper_time_s", table.points[0]).astype(float) / f,
        ":",
        color="0.3",
        label="camera clock",
    )
    ax.set_ylabel(f"clock reading ({unit})")
    ax.legend(fontsize="x-small", ncol=2)


def write_plot(table: ProbeTable, path, overwrite: bool = False) -> tuple[Path, Path]:
    """Draw the table (format by extension: .png, .pdf, .svg) with provenance metadata and
    a JSON sidecar. Returns (plot path, sidecar path)."""
    path = Path(path)
    if path.suffix.lower() not in FIGURE_FORMATS:
        raise OutputError(
            f"unknown plot type {path.suffix or '(none)'!r}; use {figure_type_hint(purposes=False)}",
            file=path,
        )
    return save_figure(draw_table(table), path, table.metadata, overwrite)


def format_rows(table: ProbeTable) -> str:
    """A compact text table for the terminal."""
    head = (
        "time_s",
        "pt",
        "emit_time_s",
        "az_deg",
        "el_deg",
        "pixel_x",
        "pixel_y",
        "seen",
        "D",
        "clock_seen_s",
        "tick_rate",
        "clock_comp_s",
        "camera_s",
    )
    lines = ["  ".join(f"{h:>12}" for h in head)]
    for r in table.rows:
        seen = "yes" if (r["visible"] and r["in_view"]) else "no"
        vals = (
            f"{r['time_s']:.6g}",
            str(r["point"]),
            f"{r['emit_time_s']:.6g}",
            f"{r['azimuth_deg']:.4f}",
            f"{r['elevation_deg']:.4f}",
            f"{r['pixel_x']:.2f}",
            f"{r['pixel_y']:.2f}",
            seen,
            f"{r['doppler']:.5g}",
            f"{r['proper_time_s']:.6g}",
            f"{r['tick_rate']:.5g}",
            f"{r['computed_proper_time_s']:.6g}",
            f"{r['camera_proper_time_s']:.6g}",
        )
        lines.append("  ".join(f"{v:>12}" for v in vals))
    if table.length:
        lines.append("")
        lines.append(
            "  ".join(f"{h:>14}" for h in ("time_s", "photographed_m", "rest_m", "contracted_m"))
        )
        for r in table.length:
            lines.append(
                "  ".join(
                    f"{v:>14}"
                    for v in (
                        f"{r['time_s']:.6g}",
                        f"{r['photographed_length_m']:.6g}",
                        f"{r['rest_length_m']:.6g}",
                        f"{r['contracted_length_m']:.6g}",
                    )
                )
            )
    return "\n".join(lines)


__all__ = [
    "COLUMNS",
    "LENGTH_COLUMNS",
    "ProbeTable",
    "apparent_angles",
    "draw_table",
    "format_rows",
    "length_csv_path",
    "parse_times",
    "probe_table",
    "read_csv",
    "read_json",
    "table_json",
    "table_provenance",
    "write_csv",
    "write_json",
    "write_plot",
]
