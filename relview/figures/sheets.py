"""Comparison sheets: one exposure event rendered with different effects, side by side.

A *sheet* shows one exposure event of a scene as several labelled panels side by
side, each a render of the same camera at the same scene time with a different set
of effects (docs/figures.md defines every panel precisely):

* ``rest``: every body at rest (beta = 0) where it is at the exposure time, the
  camera at rest too: the rest-frame shapes, placed where they are now;
* ``measured``: the scene frame's one-instant picture: light instantaneous (delay
  off), Lorentz kinematics (contraction on), no camera aberration, no Doppler
  colour or beaming: the Lorentz-contracted bodies, shape only;
* ``photograph``: every effect on: what the camera records;
* ``classical``: light delay with Galilean kinematics (contraction off) and the
  classical Doppler factor;
* ``delay-only``, ``aberration-only``, ``doppler-only``, ``beaming-only``: the
  ``measured`` panel with exactly that one effect switched on.

Every file carries provenance: scene hash, relview version and settings, in the PNG
text chunks or PDF/SVG metadata, and in a JSON sidecar next to the figure
(relview.imaging.figure_files). False-colour maps of one data layer are in
relview.figures.layer_maps.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from relview import __version__
from relview.errors import UserError
from relview.imaging.display import to_8bit
from relview.imaging.figure_files import save_figure
from relview.imaging.formats import figure_format
from relview.kinematics.lorentz import C, lorentz_factor
from relview.kinematics.uniform import UniformMotion
from relview.scene.model import Scene
from relview.scene.parts import Effects

# --------------------------------------------------------------------------- panels


@dataclass(frozen=True)
class PanelKind:
    """One kind of panel: the effects it renders with and how it is labelled."""

    name: str
    effects: Effects
    subtitle: str
    at_rest: bool = False  # render the rest scene (every beta = 0) instead of the scene
    # clock panels print the bodies' clock readings under the picture: "computed" (at
    # the exposure's scene time) or "seen" (carried by the light); "" for none
    clock: str = ""


_SHAPE_ONLY = {
    "delay": False,
    "contraction": True,
    "aberration": False,
    "doppler": False,
    "beaming": False,
}

PANELS: dict[str, PanelKind] = {
    k.name: k
    for k in (
        PanelKind(
            "rest", Effects(), "bodies and camera at rest, placed where they are at t", at_rest=True
        ),
        PanelKind(
            "measured",
            Effects(**_SHAPE_ONLY),
            "one instant in the scene frame (no light delay);\nLorentz-contracted; "
            "shape only: no Doppler colour or beaming",
        ),
        PanelKind(
            "photograph",
            Effects(),
            "all effects: light delay, contraction,\naberration, Doppler colour, beaming",
        ),
        PanelKind(
            "classical",
            Effects(delay=True, contraction=False, aberration=False, doppler=True, beaming=True),
            "light delay with Galilean motion;\nclassical Doppler colour and beaming",
        ),
        PanelKind(
            "delay-only",
            Effects(**{**_SHAPE_ONLY, "delay": True}),
            "measured + light delay;\nshape only: no Doppler colour or beaming",
        ),
        PanelKind(
            "aberration-only",
            Effects(**{**_SHAPE_ONLY, "aberration": True}),
            "measured + the camera's aberration;\nno light delay, no Doppler, no beaming",
        ),
        PanelKind(
            "doppler-only",
            Effects(**{**_SHAPE_ONLY, "doppler": True}),
            "measured + Doppler colour shift;\nno light delay, no beaming",
        ),
        PanelKind(
            "beaming-only",
            Effects(**{**_SHAPE_ONLY, "beaming": True}),
            "measured + beaming (brightness ~ D^4);\nno light delay, no colour shift",
        ),
        PanelKind(
            "clock-computed",
            Effects(**_SHAPE_ONLY),
            "the clocks at one instant of the scene frame (no light delay):\n"
            "the readings the Lorentz transformation gives",
            clock="computed",
        ),
        PanelKind(
            "clock-photograph",
            Effects(),
            "the clocks as photographed: each point shows\nthe reading its light left with",
            clock="seen",
        ),
    )
}

DEFAULT_PANELS = ("rest", "measured", "photograph")


def panel_kind(name: str) -> PanelKind:
    """The panel called ``name`` ('delay only', 'delay_only' and 'delay-only' are one)."""
    key = "-".join(str(name).strip().lower().replace("_", " ").split())
    try:
        return PANELS[key]
    except KeyError:
        import difflib

        near = difflib.get_close_matches(key, PANELS, n=1)
        hint = f"; did you mean {near[0]!r}?" if near else ""
        raise UserError(
            f"--panels: unknown panel {name!r}{hint} Choose from: {', '.join(PANELS)}"
        ) from None


def parse_panels(text: str) -> list[PanelKind]:
    """'rest,measured,photograph' -> panel kinds, in that order, no repeats."""
    kinds = [panel_kind(p) for p in str(text).split(",") if p.strip()]
    if not kinds:
        raise UserError(f"--panels: no panel named in {text!r}; e.g. rest,measured,photograph")
    names = [k.name for k in kinds]
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise UserError(f"--panels {text!r}: panel {min(dup)!r} is named twice")
    return kinds


# --------------------------------------------------------------------------- body state


def body_state(scene: Scene, index: int, time_s: float) -> tuple[np.ndarray, np.ndarray]:
    """(position of the body origin (3,) m, its beta (3,)) at scene time ``time_s``."""
    motion = scene.bodies[index].motion
    x, beta = motion.state(np.zeros((1, 3)), C * time_s)
    return np.asarray(x[0], float), np.asarray(beta[0], float)


def main_body_index(scene: Scene, body=None, time_s: float = 0.0) -> int | None:
    """The body named ``body`` (or index), else the fastest at ``time_s`` (first on ties)."""
    if not scene.bodies:
        return None
    if body is not None:
        if isinstance(body, (int, np.integer)):
            return int(body)
        try:
            return scene.body_index(body)
        except KeyError:
            names = ", ".join(b.name for b in scene.bodies)
            raise UserError(f"--body {body!r}: no such body; bodies: {names}") from None
    speeds = [
        float(np.linalg.norm(body_state(scene, i, time_s)[1])) for i in range(len(scene.bodies))
    ]
    return int(np.argmax(speeds))


def rest_pose(scene: Scene, index: int, time_s: float) -> tuple[np.ndarray, np.ndarray]:
    """(origin position (3,) m, rotation (x, y, z turns, degrees)) of a body at rest as it
    stands at scene time ``time_s``.

    Inertial motion: the origin's position at ``time_s`` and the body's own rotation.
    Other motions (relview.kinematics.worldline, rigid-body worldlines): the rest-frame configuration
    tied to the reference event of the origin's worldline at ``time_s``: origin X(s)
    plus the attitude M(s) and offset of the motion (docs/motion.md, "events"), so a spin
    shows its angle phase + omega (tau(s) - tau(time)). Euler angles use the convention
    of Body.rotation_matrix (R = Rz Ry Rx, scipy's extrinsic 'xyz').
    """
    body = scene.bodies[index]
    motion = body.motion
    if motion.is_inertial:  # the body axes never turn
        return body_state(scene, index, time_s)[0], np.asarray(body.rotation, float)
    from scipy.spatial.transform import Rotation

    s = np.array([C * time_s])
    x0 = np.asarray(motion._origin(s)[0], float)[0]
    m, _, offset, _ = motion._attitude(s, relativistic=True)
    rotation = np.asarray(m[0], float) @ body.rotation_matrix()
    angles = Rotation.from_matrix(rotation).as_euler("xyz", degrees=True)
    return x0 + np.asarray(offset[0], float), angles


def rest_scene(scene: Scene, time_s: float) -> Scene:
    """The scene with every body and the camera at rest where they are at ``time_s``.

    Bodies keep their rest-frame shapes (no contraction, since beta = 0); bodies on
    non-uniform worldlines keep their orientation at ``time_s`` (:func:`rest_pose`).
    """
    # imported here: it loads the numba kernels, which command start-up does not need
    from relview.renderer import camera_state

    bodies = []
    for i, b in enumerate(scene.bodies):
        pos, rotation = rest_pose(scene, i, time_s)
        bodies.append(
            dataclasses.replace(
                b,
                rotation=rotation,
                motion=UniformMotion(beta=np.zeros(3), position=pos, time=time_s),
            )
        )
    event, _ = camera_state(scene, time_s)
    camera = dataclasses.replace(
        scene.camera, position=event[1:].copy(), time=time_s, beta=np.zeros(3)
    )
    return dataclasses.replace(scene, bodies=bodies, camera=camera)


# --------------------------------------------------------------------------- scale bar


def metres_per_pixel(camera, width: int, distance_m: float) -> float:
    """Image scale (m per pixel) of a length across the view at distance ``distance_m``.

    pinhole: 2 d tan(fov/2) / W, with d the depth of the point along the view axis
    (the pinhole's image plane maps a length L at depth d to f L / d pixels,
    f = W / (2 tan(fov/2)) pixels).
    fisheye (equidistant): d fov / W, fov in radians (fov/2 spans W/2 pixels along any
    radius, so each pixel is fov/W radians; arc length = d x angle, small lengths).
    panorama (equirectangular): d 2 pi / W, exact on the horizon row, where a pixel is
    2 pi / W radians of longitude; elsewhere across the image it shrinks as cos(lat).
    """
    if not (distance_m > 0 and math.isfinite(distance_m)):
        return math.nan
    if camera.projection == "pinhole":
        return 2.0 * distance_m * math.tan(math.radians(camera.fov) / 2.0) / width
    if camera.projection == "fisheye":
        return distance_m * math.radians(camera.fov) / width
    if camera.projection == "panorama":
        return distance_m * 2.0 * math.pi / width
    raise ValueError(f"unknown projection {camera.projection!r}")


def scale_distance(camera, camera_position: np.ndarray, point: np.ndarray) -> float:
    """The distance :func:`metres_per_pixel` wants: depth along the view axis (pinhole),
    straight-line distance (fisheye, panorama). m, scene frame."""
    sep = np.asarray(point, float) - np.asarray(camera_position, float)
    if camera.projection == "pinhole":
        return float(sep @ camera.forward())
    return float(np.linalg.norm(sep))


def nice_length(max_m: float) -> float:
    """The largest 1, 2 or 5 x 10^k metres not above ``max_m`` (common practice for bars)."""
    if not (max_m > 0 and math.isfinite(max_m)):
        return math.nan
    k = math.floor(math.log10(max_m))
    for m in (5.0, 2.0, 1.0):
        if m * 10.0**k <= max_m:
            return m * 10.0**k
    return 10.0**k  # pragma: no cover - 1 x 10^k always fits


def format_length(metres: float) -> str:
    for unit, f in (("km", 1e3), ("m", 1.0), ("cm", 1e-2), ("mm", 1e-3), ("um", 1e-6)):
        if metres >= f * 0.999:
            return f"{metres / f:g} {unit}"
    return f"{metres:g} m"


# --------------------------------------------------------------------------- rendering


@dataclass
class Panel:
    """One rendered panel of a sheet."""

    kind: PanelKind
    frame: object  # relview.renderer.Frame
    metres_per_pixel: float  # at the main body's centre as drawn in this panel; NaN if none
    scale_distance_m: float  # the distance that scale refers to
    exposure: str  # "held" or "each"
    camera: object = None  # the camera this panel was rendered with (framing applied)
    out_of_view: str = ""  # why the main body is not seen in this panel ("" when it is)

    @property
    def title(self) -> str:
        return self.kind.name


@dataclass
class Sheet:
    """The panels of one exposure event, and where the figure went (if written)."""

    scene: Scene
    time: float  # s, scene-frame time of the exposure
    panels: list[Panel]
    main_body: str | None
    beta: np.ndarray  # of the main body at ``time``
    gamma: float
    white: float | None  # cd/m2 held across panels, None with exposure="each"
    metadata: dict = field(default_factory=dict)
    path: Path | None = None
    sidecar: Path | None = None
    framing: str = "scene"  # how the panels were framed (FRAMINGS)
    overlay: bool = False  # draw the measured and photographed outlines on one more panel

    def panel(self, name: str) -> Panel:
        key = panel_kind(name).name
        for p in self.panels:
            if p.kind.name == key:
                return p
        raise KeyError(name)


def panel_scene(scene: Scene, kind: PanelKind, time_s: float) -> Scene:
    """The scene a panel of this kind renders: the rest scene for "rest", else ``scene``."""
    return rest_scene(scene, time_s) if kind.at_rest else scene


def _drawn_centre(scene: Scene, index: int, time_s: float, effects: Effects, context):
    """Where the main body's origin is drawn: its emission position for this panel."""
    # imported here: it loads the numba kernels, which command start-up does not need
    from relview.probes import probe_many

    r = probe_many(scene, index, np.zeros((1, 3)), time_s, effects, context=context)[0]
    return np.asarray(r.emit_position, float)


#: How a sheet frames its panels. scene: the scene's camera as written; common: one
#: view direction and field of view holding the main body's apparent image in every panel;
#: each: every panel aims at and fits the main body itself; auto: the scene's camera when
#: it shows the main body in every panel, else common.
FRAMINGS = ("auto", "scene", "common", "each")


def _framed_scenes(
    scenes: list[Scene],
    kinds: list[PanelKind],
    index: int | None,
    time_s: float,
    resolution,
    framing_mode: str,
) -> tuple[list[Scene], str]:
    """The panels' scenes with the sheet's framing applied, and the framing used."""
    # imported here: it loads the numba kernels, which command start-up does not need
    from relview import framing
    from relview.renderer import camera_state

    if framing_mode not in FRAMINGS:
        raise UserError(f"framing must be one of {', '.join(FRAMINGS)}, got {framing_mode!r}")
    if index is None or framing_mode == "scene":
        return scenes, "scene"
    name = scenes[0].bodies[index].name
    if framing_mode == "each":
        return [
            dataclasses.replace(
                s, camera=dataclasses.replace(s.camera, aim_at=(name,), fit=(name,))
            )
            for s in scenes
        ], "each"
    seen, cameras = [], []
    for s, kind in zip(scenes, kinds):
        event, beta = camera_state(s, time_s)
        verts = framing.mesh_vertices(s)[index]
        seen.append(framing.apparent(s, index, verts, event, beta, kind.effects).directions)
        cameras.append(framing.resolve_camera(s, event, beta, kind.effects, resolution=resolution))
    if framing_mode == "auto":
        w, h = resolution
        if all(framing.holds(c, w, h, d) for c, d in zip(cameras, seen)):
            return scenes, "scene"
    directions = np.concatenate(seen)
    base = scenes[0].camera
    aimed = dataclasses.replace(
        base,
        direction=framing.centre_direction(directions, np.asarray(base.up, float)),
        look_at=None,
        aim_at=(),
        fit=(),
    )
    aimed.fov = framing.fitted_fov(aimed, *resolution, directions, base.margin)
    return [
        dataclasses.replace(
            s,
            camera=dataclasses.replace(
                aimed,
                position=s.camera.position,
                time=s.camera.time,
                beta=s.camera.beta,
                motion=s.camera.motion,
            ),
        )
        for s in scenes
    ], "common"


def render_panels(
    scene: Scene,
    time: float | None = None,
    panels=DEFAULT_PANELS,
    *,
    resolution=None,
    exposure: str = "held",
    body=None,
    progress: bool = False,
    framing: str = "auto",
    overlay: bool = False,
) -> Sheet:
    """Render the panels of one exposure event (no file written; see :func:`compare_sheet`).

    ``exposure``: "held" (default): one white level for every panel, the one the scene's
    exposure setting gives the first panel without Doppler colour or beaming (or, if
    every panel has them, an extra unshown "rest" render); a fixed setting is used as it is;
    "each": every panel exposed by itself (brightness then not comparable).
    ``framing``: one of :data:`FRAMINGS`. ``overlay``: the sheet gets one more panel with
    the main body's measured and photographed outlines (both panels are rendered, shown
    or not).
    """
    # imported here: it loads the numba kernels, which command start-up does not need
    from relview import framing as framing_mod
    from relview.renderer import RenderContext, camera_state, render

    if exposure not in ("held", "each"):
        raise UserError(f"exposure mode must be 'held' or 'each', got {exposure!r}")
    kinds = (
        parse_panels(panels)
        if isinstance(panels, str)
        else [k if isinstance(k, PanelKind) else panel_kind(k) for k in panels]
    )
    if not kinds:
        raise UserError("a comparison sheet needs at least one panel")
    if overlay:  # the outlines come from these two panels
        kinds += [PANELS[n] for n in ("measured", "photograph") if PANELS[n] not in kinds]
    t = scene.camera.time if time is None else float(time)
    res = tuple(resolution or scene.render.resolution)
    bi = main_body_index(scene, body, t)
    if overlay and bi is None:
        raise UserError("an outline overlay needs a body in the scene")
    scenes, framing_used = _framed_scenes(
        [panel_scene(scene, k, t) for k in kinds], kinds, bi, t, res, framing
    )
    beta = body_state(scene, bi, t)[1] if bi is not None else np.zeros(3)
    white = None
    # Held exposure is set by rest-frame brightness: the first panel without Doppler colour
    # and beaming goes first and fixes the white; with none among the panels, an unshown
    # "rest" render fixes it. Every sheet of a scene then maps the same light to white.
    order = sorted(
        range(len(kinds)), key=lambda i: kinds[i].effects.doppler or kinds[i].effects.beaming
    )
    if exposure == "held" and scene.render.exposure != "auto":
        white = float(scene.render.exposure)
    elif exposure == "held" and all(k.effects.doppler or k.effects.beaming for k in kinds):
        white = render(
            panel_scene(scene, PANELS["rest"], t),
            t,
            resolution=res,
            effects=PANELS["rest"].effects,
        ).white
    out: list[Panel | None] = [None] * len(kinds)
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(kinds), desc="panels", unit="panel", leave=False)
    for i in order:
        kind = kinds[i]
        s = scenes[i]
        context = RenderContext(s, kind.effects)
        setting = scene.render.exposure if (exposure == "each" or white is None) else white
        frame = render(
            s, t, resolution=res, effects=kind.effects, exposure=setting, context=context
        )
        if exposure == "held" and white is None:
            white = frame.white
        mpp, dist = math.nan, math.nan
        event, beta_cam = camera_state(s, t)
        camera = framing_mod.resolve_camera(s, event, beta_cam, kind.effects, context.meshes, res)
        missing = ""
        if bi is not None:
            centre = _drawn_centre(s, bi, t, kind.effects, context)
            dist = scale_distance(camera, event[1:], centre)
            mpp = metres_per_pixel(camera, res[0], dist)
            if not np.any(frame.layers["body"] == bi):
                sight = framing_mod.sightings(
                    s, event, beta_cam, kind.effects, camera, frame, context.meshes, res
                )[bi]
                missing = (
                    f"{sight.body} hidden behind another body"
                    if sight.in_frame
                    else f"{sight.body} out of view: {sight.miss_deg:.3g} deg outside the frame"
                    + (f" ({sight.miss_side})" if sight.miss_side else "")
                )
        out[i] = Panel(kind, frame, mpp, dist, exposure, camera, missing)
        if bar is not None:
            bar.update(1)
    if bar is not None:
        bar.close()
    name = scene.bodies[bi].name if bi is not None else None
    sheet = Sheet(
        scene,
        t,
        out,
        name,
        beta,
        float(lorentz_factor(beta)),
        white,
        framing=framing_used,
        overlay=overlay,
    )
    sheet.metadata = sheet_provenance(sheet)
    return sheet


def sheet_provenance(sheet: Sheet) -> dict:
    """Everything needed to make the sheet again, and the numbers printed on it."""

    scene = sheet.scene
    first = sheet.panels[0].frame
    return {
        "relview_version": __version__,
        "title": f"relview comparison: {scene.title or scene.source_path or 'scene'}",
        "scene": str(scene.source_path or ""),
        "scene_sha256": scene.source_hash,
        "time_s": repr(sheet.time),
        "resolution": first.metadata.get("resolution", ""),
        "samples": first.metadata.get("samples", ""),
        "projection": scene.camera.projection,
        "main_body": sheet.main_body or "",
        "beta": [float(v) for v in sheet.beta],
        "gamma": sheet.gamma,
        "exposure_mode": sheet.panels[0].exposure,
        "framing": sheet.framing,
        "overlay": sheet.overlay,
        "panels": [
            {
                "name": p.kind.name,
                "effects": dataclasses.asdict(p.kind.effects),
                "bodies_at_rest": p.kind.at_rest,
                "white_cd_m2": float(p.frame.white),
                "metres_per_pixel": None if math.isnan(p.metres_per_pixel) else p.metres_per_pixel,
                "scale_distance_m": None if math.isnan(p.scale_distance_m) else p.scale_distance_m,
                "view_direction": [float(v) for v in p.camera.forward()],
                "fov_deg": float(p.camera.fov),
                "main_body_out_of_view": p.out_of_view,
            }
            for p in sheet.panels
        ],
    }


# --------------------------------------------------------------------------- drawing


def _draw_scale_bar(ax, mpp: float, width: int, height: int) -> None:
    """A bar of a round length in the lower left, about a quarter of the panel wide."""
    length = nice_length(0.3 * width * mpp)
    if not math.isfinite(length):
        return
    px = length / mpp
    x0, y0 = 0.05 * width, 0.92 * height
    for colour, lw in (("black", 4.0), ("white", 2.0)):
        ax.plot([x0, x0 + px], [y0, y0], color=colour, lw=lw, solid_capstyle="butt")
    ax.text(
        x0 + px / 2,
        y0 - 0.03 * height,
        format_length(length),
        color="white",
        ha="center",
        va="bottom",
        fontsize="small",
        bbox={"facecolor": "black", "alpha": 0.5, "lw": 0, "pad": 1.0},
    )


def _draw_notice(ax, text: str, width: int, height: int) -> None:
    """A panel's notice (e.g. the main body out of view), across its middle."""
    ax.text(
        width / 2,
        height / 2,
        text,
        color="white",
        ha="center",
        va="center",
        fontsize="medium",
        wrap=True,
        bbox={"facecolor": "0.25", "edgecolor": "white", "lw": 0.8, "pad": 4.0},
    )


#: Line styles of the outline overlay: (panel, colour, line style, what it is).
OVERLAY_LINES = (
    ("measured", "#4fc3f7", "solid", "measured (one instant, contracted)"),
    ("photograph", "#ffb74d", "dashed", "photograph (light delay)"),
)


def _draw_overlay(ax, sheet: Sheet, width: int, height: int) -> None:
    """The main body's outline in the measured and the photographed panel, one style each,
    on one panel; with the photograph's scale bar (both panels share one camera only when
    the sheet's framing is not "each")."""
    index = sheet.scene.body_index(sheet.main_body)
    ax.imshow(np.zeros((height, width, 3)), interpolation="nearest")
    ax.set_xticks([])
    ax.set_yticks([])
    handles = []
    for name, colour, style, label in OVERLAY_LINES:
        mask = (sheet.panel(name).frame.layers["body"] == index).astype(float)
        if mask.any():
            ax.contour(mask, levels=[0.5], colors=[colour], linestyles=[style], linewidths=1.6)
        handles.append((colour, style, label + ("" if mask.any() else ": out of view")))
    from matplotlib.lines import Line2D  # local: matplotlib loads only when drawing

    ax.legend(
        [Line2D([], [], color=c, ls=s, lw=1.6) for c, s, _ in handles],
        [lab for _, _, lab in handles],
        loc="upper right",
        fontsize="x-small",
        facecolor="0.15",
        labelcolor="white",
        edgecolor="0.5",
    )
    photo = sheet.panel("photograph")
    if math.isfinite(photo.metres_per_pixel):
        _draw_scale_bar(ax, photo.metres_per_pixel, width, height)
    ax.set_title("measured vs photographed", fontsize="large", fontweight="bold")
    same = "one camera" if sheet.framing != "each" else "each panel framed by itself"
    ax.text(
        0.0,
        -0.02,
        f"outlines of {sheet.main_body}; {same}\n{time_text(sheet.time)}\n"
        "scale bar at the photographed centre",
        transform=ax.transAxes,
        fontsize="x-small",
        ha="left",
        va="top",
    )


def time_text(t: float) -> str:
    """The exposure time as printed on figures: seconds and nanoseconds."""
    return f"t = {t:.6g} s ({t * 1e9:.4g} ns)" if t else "t = 0 s"


def clock_text(sheet: Sheet, panel: Panel) -> str:
    """Clock panels: each clock-faced body's reading (the main body's when no body has a
    clock face) at its origin, computed at the exposure's scene time or as photographed,
    and the camera's own clock (relview.probes)."""
    from relview.probes import probe  # local: probes loads the numba kernels

    scene = sheet.scene
    names = [b.name for b in scene.bodies if getattr(b.surface, "uses_proper_time", False)]
    if not names and sheet.main_body:
        names = [sheet.main_body]
    lines, camera = [], None
    for name in names:
        r = probe(scene, name, (0.0, 0.0, 0.0), time=sheet.time, effects=panel.kind.effects)
        value = r.computed_proper_time if panel.kind.clock == "computed" else r.proper_time
        rate = "" if panel.kind.clock == "computed" else f", seen to run x{r.tick_rate:.4g}"
        lines.append(f"{name} clock {value * 1e9:.4g} ns{rate}")
        camera = r.camera_proper_time
    if camera is not None:
        lines.append(f"camera clock {camera * 1e9:.4g} ns")
    return "\n".join(lines)


def _speed_text(sheet: Sheet, panel: Panel) -> str:
    """Per-panel line: time, and the main body's speed (or that it is shown at rest)."""
    text = time_text(sheet.time)
    if sheet.main_body:
        b = float(np.linalg.norm(sheet.beta))
        speed = f"beta = {b:.4g}, gamma = {sheet.gamma:.4g}"
        if panel.kind.at_rest:
            text += f"; {sheet.main_body} shown at rest (moves at {speed})"
        else:
            text += f"; {sheet.main_body}: {speed}"
    return text


def draw_sheet(sheet: Sheet, *, columns: int = 4, tone: str = "none"):
    """A matplotlib Figure of the sheet: panels side by side (wrapping after ``columns``)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    n = len(sheet.panels) + (1 if sheet.overlay else 0)
    ncol = min(n, columns)
    nrow = math.ceil(n / ncol)
    h, w = sheet.panels[0].frame.image.shape[:2]
    panel_w = 4.0
    fig = Figure(
        figsize=(panel_w * ncol, nrow * (panel_w * h / w + 1.0) + 0.5),
        dpi=100,
        layout="constrained",
    )
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrow, ncol, squeeze=False)
    for ax in axes.ravel()[n:]:
        ax.set_axis_off()
    for ax, p in zip(axes.ravel(), sheet.panels):
        ax.imshow(to_8bit(p.frame.image, tone), interpolation="nearest")
        ax.set_xticks([])
        ax.set_yticks([])
        expo = (
            f"white {p.frame.white:.3g} cd/m2, held"
            if p.exposure == "held"
            else f"white {p.frame.white:.3g} cd/m2, own auto"
        )
        ax.set_title(p.kind.name, fontsize="large", fontweight="bold")
        clocks = f"\n{clock_text(sheet, p)}" if p.kind.clock else ""
        ax.text(
            0.0,
            -0.02,
            f"{p.kind.subtitle}\n{_speed_text(sheet, p)}\n{expo}{clocks}",
            transform=ax.transAxes,
            fontsize="x-small",
            ha="left",
            va="top",
        )
        if math.isfinite(p.metres_per_pixel):
            _draw_scale_bar(ax, p.metres_per_pixel, w, h)
        if p.out_of_view:
            _draw_notice(ax, p.out_of_view, w, h)
    if sheet.overlay:
        _draw_overlay(axes.ravel()[len(sheet.panels)], sheet, w, h)
    b = np.linalg.norm(sheet.beta)
    head = f"{sheet.scene.title + ': ' if sheet.scene.title else ''}{time_text(sheet.time)}"
    if sheet.main_body:
        head += (
            f";  {sheet.main_body}: beta = {b:.4g}, gamma = {sheet.gamma:.4g};  "
            f"scale bars at {sheet.main_body}'s centre as drawn"
        )
    fig.suptitle(head, fontsize="medium")
    foot = (
        f"relview {sheet.metadata.get('relview_version', '')}  scene sha256 "
        f"{sheet.scene.source_hash[:16]}  {sheet.metadata.get('resolution', '')}"
    )
    fig.supxlabel(foot, x=0.995, ha="right", fontsize=6, color="0.4")
    return fig


def compare_sheet(
    scene: Scene,
    time: float | None = None,
    panels=DEFAULT_PANELS,
    out=None,
    *,
    resolution=None,
    exposure: str = "held",
    body=None,
    overwrite: bool = False,
    progress: bool = False,
    framing: str = "auto",
    overlay: bool = False,
) -> Sheet:
    """Render a comparison sheet of one exposure event; write it to ``out`` if given.

    ``panels``: names (see :data:`PANELS`) as a list or a comma-separated string.
    ``out``: .png for slides, .pdf or .svg for papers; a JSON sidecar
    ``<out>.json`` holds the provenance. Returns the :class:`Sheet`.
    """
    if out is not None:
        figure_format(Path(out))  # refuse a bad extension before rendering
    sheet = render_panels(
        scene,
        time,
        panels,
        resolution=resolution,
        exposure=exposure,
        body=body,
        progress=progress,
        framing=framing,
        overlay=overlay,
    )
    if out is not None:
        fig = draw_sheet(sheet)
        sheet.path, sheet.sidecar = save_figure(fig, out, sheet.metadata, overwrite)
    return sheet


__all__ = [
    "DEFAULT_PANELS",
    "FRAMINGS",
    "PANELS",
    "Panel",
    "PanelKind",
    "Sheet",
    "body_state",
    "clock_text",
    "compare_sheet",
    "draw_sheet",
    "main_body_index",
    "metres_per_pixel",
    "nice_length",
    "panel_kind",
    "panel_scene",
    "parse_panels",
    "render_panels",
    "rest_pose",
    "rest_scene",
    "scale_distance",
    "sheet_provenance",
    "time_text",
]
