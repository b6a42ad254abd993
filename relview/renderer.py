"""render(scene) -> Frame: camera rays, retarded-time cast, shading, sky, exposure.

Pipeline for one exposure event (docs/physics.md):

1. pixel directions in the camera's rest frame (camera.py), jittered when samples > 1;
2. aberration into the scene frame S with the camera's velocity (lorentz.py);
3. backward null rays from the exposure event, first hit per ray (trace.py);
4. Doppler factor of each hit from the emitter's and the camera's velocities;
5. observed CIE XYZ from the body's surface (materials.py) or from the sky (sky.py);
6. exposure to linear sRGB (relview.imaging.exposure).
"""

from __future__ import annotations

import hashlib
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from relview import __version__, framing, illumination
from relview.errors import SceneWarning
from relview.frame_memory import RAYS_PER_BATCH, check_memory
from relview.geometry import camera as cam_mod
from relview.geometry import lightcone, shapes
from relview.geometry.trace import Hits, Tracer, bodies_hit, frame_matrix, uniform_groups
from relview.imaging.display import to_8bit
from relview.imaging.exposure import clipped_fraction, expose, exposure_white, metered_pixels
from relview.imaging.exposure_passes import any_channel_above
from relview.imaging.formats import frame_format
from relview.imaging.png import encode_png
from relview.kinematics.clocks import body_readings, reading_from_coordinate
from relview.kinematics.lorentz import C
from relview.kinematics.lorentz import doppler_along as lorentz_doppler_along
from relview.kinematics.magnitudes import check_time
from relview.light import sky
from relview.light.materials import Blackbody, SpectralSurface
from relview.light.spectrum import packed_tables, shade_by_table
from relview.scene.model import Scene
from relview.scene.parts import Effects


@dataclass
class Frame:
    """One rendered exposure."""

    image: np.ndarray  # (H, W, 3) linear sRGB after exposure, not clipped
    layers: dict[str, np.ndarray]  # xyz, doppler, emit_time, emit_position, rest_position, body
    white: float  # cd/m2 mapped to white
    time: float  # s, scene-frame time of the exposure
    metadata: dict[str, str] = field(default_factory=dict)
    tone: str = "none"  # display curve used by save() for PNGs (render.tone)

    def save(self, path, overwrite: bool = False, bits: int = 8, tone: str | None = None) -> Path:
        """Write by extension: .png (8 or 16 bit sRGB), .npz (float layers), .exr if available.

        An existing file is never replaced unless ``overwrite``: a numbered name is used.
        Returns the path written. ``tone``: "none" (clip) or "reinhard"
        (relview.imaging.display); default: the scene's render.tone. The writers are
        registered by extension in relview.imaging.formats.
        """
        path = Path(path)
        return frame_format(path).write(
            self, path, bits=bits, tone=tone or self.tone, overwrite=overwrite
        )

    def _repr_png_(self) -> bytes:
        """The picture as 8-bit sRGB PNG bytes (the scene's tone curve, provenance in text
        chunks): what Jupyter and IPython show for a Frame."""
        return encode_png(to_8bit(self.image, self.tone), self.metadata)

    def __repr__(self) -> str:
        """One line: size, time, white and the scene (the arrays are in .image, .layers)."""
        height, width = self.image.shape[:2]
        scene = Path(self.metadata.get("scene") or "scene").name
        return (
            f"<Frame {width}x{height} of {scene} at t = {self.time:.6g} s, "
            f"white {self.white:.4g} cd/m2, layers: {', '.join(self.layers)}>"
        )


#: Built scene geometry kept per process, most recently used last (at most this many
#: scenes): renders, animations, sheets, probes and Dask workers in one process share it.
GEOMETRY_CACHE_SIZE = 8
_GEOMETRY_CACHE: OrderedDict[str, SceneGeometry] = OrderedDict()
#: Pixel-centre grids by (width, height), shared the same way.
_PIXEL_CENTRES: dict[tuple[int, int], np.ndarray] = {}


@dataclass
class SceneGeometry:
    """What a scene's bodies give before any exposure: rest-frame meshes, the inertial
    frame groups with their hierarchies (built on first use, kept by the groups), and
    the tracer over them when every body moves inertially. Read-only once built."""

    meshes: list  # (vertices (V, 3), faces (F, 3)) per body, rest frame, rotation applied
    uv: list  # (V, 2) per body, or None
    other: list[int]  # bodies whose motion is not inertial (light-cone snapshots)
    uniform_groups: list
    uniform_tracer: Tracer | None
    # bodies with an inside (inertial, not planes): scene index, frame map (K, 4, 4),
    # rest-frame origin event (K, 4), mesh bounds (K, 3) each; for bodies_around_camera
    enclosing: tuple | None = None


def geometry_key(scene: Scene, effects: Effects) -> str:
    """Digest of everything :class:`SceneGeometry` depends on: each body's mesh inputs
    (shape, size, radius, height, detail, mesh file with its modification time and size,
    scale, centring, rotation), whether its motion is inertial and then its rest frame
    (velocity, origin event, origin time), and the effect switches. Scripts edit Scene
    objects in place, so the key is the content, never the object's identity."""
    h = hashlib.sha256(repr(sorted(vars(effects).items())).encode())

    def add(*values):
        for v in values:
            h.update(
                np.asarray(v, float).tobytes() if isinstance(v, np.ndarray) else repr(v).encode()
            )
            h.update(b"|")

    for body in scene.bodies:
        file = getattr(body, "file", None)
        stamp = None
        if file is not None:
            try:
                st = Path(file).stat()
                stamp = (str(Path(file).resolve()), st.st_mtime_ns, st.st_size)
            except OSError:
                stamp = str(file)  # mesh_data reports the problem
        add(
            body.shape,
            _floats(body.size),
            body.radius,
            body.height,
            body.detail,
            stamp,
            float(body.scale),
            bool(getattr(body, "center", True)),
            _floats(body.rotation),
        )
        motion = body.motion
        if motion.is_inertial:
            beta, event = motion.inertial_frame()
            add("inertial", _floats(beta), _floats(event), getattr(motion, "time", None))
        else:
            add("snapshots")
    return h.hexdigest()


def _floats(value) -> np.ndarray | None:
    return None if value is None else np.asarray(value, float)


def scene_geometry(scene: Scene, effects: Effects) -> SceneGeometry:
    """The scene's :class:`SceneGeometry`, from the per-process cache when a scene of the
    same content (:func:`geometry_key`) was built before, else built and kept."""
    key = geometry_key(scene, effects)
    built = _GEOMETRY_CACHE.get(key)
    if built is not None:
        _GEOMETRY_CACHE.move_to_end(key)
        return built

    meshes, uv = [], []
    for body in scene.bodies:
        md = shapes.mesh_data(body)
        meshes.append((md.vertices, md.faces))
        uv.append(md.uv)
    # inertial bodies are traced exactly in their rest frames; the others through
    # light-cone snapshots rebuilt per exposure
    uniform = [i for i, b in enumerate(scene.bodies) if b.motion.is_inertial]
    other = [i for i in range(len(scene.bodies)) if i not in set(uniform)]
    groups = uniform_groups(scene.bodies, meshes, effects, uniform)
    built = SceneGeometry(meshes, uv, other, groups, Tracer(groups) if not other else None)
    solid = [i for i in uniform if scene.bodies[i].shape != "plane"]
    frames = [scene.bodies[i].motion.inertial_frame() for i in solid]
    built.enclosing = (
        np.array(solid, np.int64),
        np.array([frame_matrix(np.asarray(b, float), effects) for b, _ in frames]).reshape(
            -1, 4, 4
        ),
        np.array([np.asarray(e, float) for _, e in frames]).reshape(-1, 4),
        np.array([meshes[i][0].min(axis=0) for i in solid]).reshape(-1, 3),
        np.array([meshes[i][0].max(axis=0) for i in solid]).reshape(-1, 3),
    )
    _GEOMETRY_CACHE[key] = built
    while len(_GEOMETRY_CACHE) > GEOMETRY_CACHE_SIZE:
        _GEOMETRY_CACHE.popitem(last=False)
    return built


def clear_geometry_cache() -> None:
    """Forget every scene's built geometry (the next render builds it again)."""
    _GEOMETRY_CACHE.clear()


class RenderContext:
    """What a scene needs before any exposure: meshes and the uniform-motion hierarchies.

    Reused across the frames of an animation. The built parts come from the per-process
    cache (:func:`scene_geometry`), so a new context for a scene of unchanged content,
    as ``render(scene)`` makes on every call, builds nothing again; the context itself
    holds only the state of the exposure being rendered.
    """

    def __init__(self, scene: Scene, effects: Effects | None = None):
        self.scene = scene
        self.effects = effects or scene.render.effects
        built = scene_geometry(scene, self.effects)
        self.meshes = built.meshes
        self.uv = built.uv
        self.other = built.other
        self.uniform_groups = built.uniform_groups
        self._uniform_tracer = built.uniform_tracer
        self.enclosing = built.enclosing

    def pixel_centres(self, width: int, height: int) -> np.ndarray:
        """(H*W, 2) pixel-centre positions, kept across the frames of an animation."""
        if getattr(self, "_centres_size", None) != (width, height):
            self._centres = _PIXEL_CENTRES.get((width, height))
            if self._centres is None:  # shared by every context of this process, read-only
                self._centres = cam_mod.pixel_grid(width, height)
                self._centres.setflags(write=False)
                if len(_PIXEL_CENTRES) >= GEOMETRY_CACHE_SIZE:
                    _PIXEL_CENTRES.pop(next(iter(_PIXEL_CENTRES)))
                _PIXEL_CENTRES[(width, height)] = self._centres
            self._centres_size = (width, height)
        return self._centres

    def tracer(
        self, camera_event: np.ndarray, reference=None, tolerance: float | None = None
    ) -> Tracer:
        """The tracer for one exposure event (light-cone snapshots join uniform groups).

        ``reference`` = (t s, x m), the exposure event the snapshots are centred on (pass
        the same to Tracer.cast); ``tolerance``: the snapshots' (default: a fraction of
        the scene's pixel, relview.geometry.lightcone.pixel_tolerance)."""
        if not self.other:
            tracer = self._uniform_tracer
        else:
            snap = lightcone.snapshot_groups(
                self.scene,
                self.meshes,
                self.other,
                camera_event,
                self.effects,
                tolerance,
                reference=reference,
            )
            tracer = Tracer(self.uniform_groups + snap)
        # the exposure being rendered: shade() casts the lamps' shadow rays and the
        # mirrors' reflected rays through it, bodies on non-inertial worldlines on the
        # light cones of the rays' own start events (illumination.RetardedOccluders)
        secondary = tracer
        if self.other and (
            illumination.scene_lit(self.scene)
            or any(getattr(b.surface, "mirror", False) for b in self.scene.bodies)
        ):
            secondary = illumination.RetardedOccluders(
                self.scene,
                self.meshes,
                self.other,
                self.uniform_groups,
                tracer,
                camera_event,
                tolerance,
            )
        self.exposure = (np.asarray(camera_event, float), secondary, reference)
        return tracer

    def lamp_layers(self, height: int, width: int) -> dict[str, np.ndarray]:
        """The float layers a lit scene adds (relview.illumination.LAYER_NAMES), from the
        first colour picture of the frame just rendered; none for scenes without lamps."""
        layers, self._lamp_layers = getattr(self, "_lamp_layers", None), None
        return {} if layers is None else layers.images(height, width)


def camera_state(scene: Scene, time_s: float) -> tuple[np.ndarray, np.ndarray]:
    """(exposure event (ct, x) in metres, camera beta) at scene time ``time_s``."""
    cam = scene.camera
    motion = getattr(cam, "motion", None)
    if motion is not None:
        # solved with times counted from the exposure, exact for equal times however large
        x, beta = motion.shifted(time_s, np.zeros(3)).state(np.zeros((1, 3)), 0.0)
        return np.concatenate([[C * time_s], x[0]]), np.asarray(beta[0], float)
    beta = np.asarray(cam.beta, float)
    x = np.asarray(cam.position, float) + beta * C * (time_s - cam.time)
    return np.concatenate([[C * time_s], x]), beta


def doppler_along(
    beta_emit: np.ndarray, d_scene: np.ndarray, beta_cam: np.ndarray, effects: Effects
) -> np.ndarray:
    """D for emitters moving with (N, 3) beta seen along (N, 3) S directions towards them.

    n = -d is the propagation direction, emitter -> camera. Relativistic:
    D = gamma_cam (1 - beta_cam.n) / (gamma_emit (1 - beta_emit.n))
    (physics.md; Rybicki & Lightman eq. 4.11). With contraction off (Galilean
    kinematics, no time dilation) the gammas are dropped: the classical Doppler
    factor for light moving at c in S.
    """
    return lorentz_doppler_along(beta_emit, d_scene, beta_cam, relativistic=effects.contraction)


def bodies_around_camera(
    scene: Scene, context: RenderContext, camera_event: np.ndarray
) -> list[str]:
    """Names of the uniformly moving bodies whose inside holds the exposure event.

    The event is mapped into each body's rest frame (the same boost, or Galilean map
    without contraction, the tracer uses), where the body is its static rest-frame
    mesh; the point is tested with trimesh's ray-parity ``contains``. Being inside a
    rigid body's world tube does not depend on the frame. Open meshes and planes have
    no inside and are skipped. The maps and mesh bounds come with the context
    (SceneGeometry.enclosing), and one vectorised test over every body (its bounds
    widened by a part in 1e9) leaves the few whose bounds may hold the event.
    """
    index, matrices, origins, lo, hi = context.enclosing
    event = np.asarray(camera_event, float)
    x_all = np.einsum("kij,kj->ki", matrices, event - origins)[:, 1:]
    slack = 1e-9 * (np.abs(x_all) + (hi - lo))
    near = np.all((x_all >= lo - slack) & (x_all <= hi + slack), axis=1)
    inside = []
    for k in np.nonzero(near)[0]:
        i = int(index[k])
        body = scene.bodies[i]
        x = (matrices[k] @ (event - origins[k]))[1:]
        vertices, faces = context.meshes[i]
        if np.any(x < lo[k]) or np.any(x > hi[k]):
            continue
        import trimesh

        mesh = trimesh.Trimesh(vertices=np.array(vertices), faces=np.array(faces), process=False)
        mesh.merge_vertices()
        if mesh.is_watertight and bool(mesh.contains(x[None, :])[0]):
            inside.append(body.name)
    return inside


def exposure_times(t: float, shutter: float, samples: int, shutter_samples: int) -> np.ndarray:
    """Scene times (s) of the exposure events whose pictures are averaged into one frame,
    each with the same weight.

    With an open shutter (``shutter`` > 0 s) the frame integrates n = samples *
    shutter_samples events, one at the middle of each of n equal strata of
    [t - shutter/2, t + shutter/2] (relativistic motion blur: each is a full retarded-time
    picture). Equal weights over equal strata make this an unbiased box filter: a pixel
    covered for a fraction f of the exposure gets f (to within 1/n). The data layers
    come from a separate picture at the nominal time t (render). Without a shutter every
    event is at t and only the pixel position is jittered.
    """
    n = samples * (shutter_samples if shutter > 0 else 1)
    if shutter <= 0 or n == 1:
        return np.full(n, float(t))
    return t + shutter * ((np.arange(n) + 0.5) / n - 0.5)


def render(
    scene: Scene,
    time: float | None = None,
    *,
    resolution=None,
    samples=None,
    exposure=None,
    effects: Effects | None = None,
    context: RenderContext | None = None,
    progress: bool = False,
) -> Frame:
    """Render one exposure of ``scene`` at scene time ``time`` (default: camera.time)."""

    width, height = resolution or scene.render.resolution
    samples = samples or scene.render.samples
    effects = effects or scene.render.effects
    exposure = scene.render.exposure if exposure is None else exposure
    check_memory(width, height)
    if context is None or context.effects != effects:
        context = RenderContext(scene, effects)
    t = scene.camera.time if time is None else time
    check_time(t, "time" if time is not None else "[camera] time")
    event, beta_cam = camera_state(scene, t)
    # snapshots of non-inertial bodies are held to a fraction of the pixel rendered,
    # which differs from the scene file's when resolution is passed here
    tolerance = lightcone.pixel_tolerance(scene, width)
    for name in bodies_around_camera(scene, context, event):
        import warnings

        warnings.warn(
            f"{scene.source_path or 'scene'}: the camera is inside body {name!r} "
            f"at t = {t:.6g} s (tested in the body's rest frame); every ray starts "
            "inside it, so the image shows its inner faces",
            SceneWarning,
            stacklevel=2,
        )
    cam = framing.resolve_camera(scene, event, beta_cam, effects, context.meshes, (width, height))
    rng = np.random.default_rng(scene.render.seed)
    n_pix = width * height
    # sample 0 covers every pixel, so every array below is filled before it is read
    # When one batch covers the frame its arrays become the layers as they are (no copies)
    batched = n_pix > RAYS_PER_BATCH

    def empty(*shape, dtype=float):
        return np.empty((n_pix, *shape), dtype) if batched else None

    xyz = empty(3)
    layer_d = empty()
    layer_t = empty()
    layer_pos = empty(3)
    layer_rest = empty(3)
    layer_body = empty(dtype=np.int64)
    layer_clock = empty()  # the body clock's reading at emission, s (NaN: sky)
    # the microwave sky's recorded blackbody temperature (K), NaN where a body is seen
    layer_temp = np.full(n_pix, np.nan) if scene.background.kind == "cmb" else None
    centres = context.pixel_centres(width, height)
    times = exposure_times(t, scene.render.shutter, samples, scene.render.shutter_samples)
    n_samples = len(times)  # pictures averaged into the colour
    # With an open shutter the data layers come from an extra picture at the nominal time
    # that adds nothing to the colour (exposure_times); otherwise sample 0 serves both.
    first_colour = 1 if scene.render.shutter > 0 else 0
    if first_colour:
        times = np.concatenate([[float(t)], times])
    batches = [(s, a) for s in range(len(times)) for a in range(0, n_pix, RAYS_PER_BATCH)]
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(batches), desc="render", unit="batch", leave=False)
    state = {}
    for s, a in batches:
        if s not in state:  # one exposure event (and light-cone snapshot) per sample
            state.clear()
            ev, beta_c = (event, beta_cam) if s == 0 else camera_state(scene, times[s])
            # every cast is centred on its own exposure event (relview.geometry.trace)
            reference = (times[s], ev[1:])
            state[s] = (ev, beta_c, context.tracer(ev, reference, tolerance), reference)
        ev, beta_c, tracer, reference = state[s]
        b = min(a + RAYS_PER_BATCH, n_pix)
        px = centres[a:b]
        if s > 0 and samples > 1:
            px = px + rng.uniform(-0.5, 0.5, size=px.shape)
        d_s, valid = cam_mod.scene_directions(
            cam, width, height, px, beta_c if effects.aberration else None
        )
        hits = tracer.cast(ev, d_s, effects, beta_cam=beta_c, reference=reference, lazy_beta=True)
        if not valid.all():
            hits.body[~valid] = -1
            hits.doppler[~valid] = np.nan
        dop = hits.doppler
        if s < first_colour:  # the nominal picture of an open shutter: data layers only
            col = None
        else:
            col = shade(
                scene, context, hits, dop, effects, slice(a, b) if s == first_colour else None
            )
        if sky.per_pixel(scene.background):
            miss = (hits.body < 0) & valid
            if np.any(miss) and col is not None:
                col[miss] = sky.sky_xyz(scene.background, d_s[miss], beta_c, effects)
            if np.any(miss):
                if s == 0 and layer_temp is not None:
                    layer_temp[a:b][miss] = sky.microwave_temperature(
                        scene.background, d_s[miss], beta_c, effects
                    )
        if s == first_colour and not batched:  # the whole frame: no copy
            xyz = col
        elif s == first_colour:
            xyz[a:b] = col
        elif s > first_colour:
            xyz[a:b] += col
        if s == 0:
            clock = body_readings(scene.bodies, hits.body, hits.clock, effects.contraction)
        if s == 0 and not batched:  # the whole frame in one batch: no copies
            layer_clock = clock
            layer_d, layer_body, layer_rest = dop, hits.body, hits.rest_position
            layer_t, layer_pos = hits.emit_event[:, 0] / C, hits.emit_event[:, 1:]  # ct -> s
        elif s == 0:
            layer_clock[a:b] = clock
            layer_d[a:b] = dop
            layer_t[a:b] = hits.emit_event[:, 0] / C
            layer_pos[a:b] = hits.emit_event[:, 1:]
            layer_rest[a:b] = hits.rest_position
            layer_body[a:b] = hits.body
        if bar is not None:
            bar.update(1)
    if bar is not None:
        bar.close()
    if n_samples > 1:
        xyz /= n_samples
    xyz_img = xyz.reshape(height, width, 3)
    stars = sky.star_splat(
        scene.background,
        cam,
        width,
        height,
        beta_cam,
        effects,
        occluded=layer_body.reshape(height, width) >= 0,
    )
    if stars is not None:
        xyz_img = xyz_img + stars
    region, lamps = metering_masks(
        scene, xyz_img, layer_body.reshape(height, width), layer_rest.reshape(height, width, 3)
    )
    white = exposure_white(xyz_img, region, exposure, lamps)
    image = expose(xyz_img, white)
    layers = {
        "xyz": xyz_img,
        "doppler": layer_d.reshape(height, width),
        "emit_time": layer_t.reshape(height, width),
        "emit_position": layer_pos.reshape(height, width, 3),
        "rest_position": layer_rest.reshape(height, width, 3),
        "body": layer_body.reshape(height, width),
        "proper_time": layer_clock.reshape(height, width),
    }
    if layer_temp is not None:
        layers["temperature"] = layer_temp.reshape(height, width)
    layers.update(context.lamp_layers(height, width))
    meta = provenance(
        scene,
        t,
        width,
        height,
        samples,
        effects,
        white,
        metering=metering_report(scene, exposure, image, region, lamps),
    )
    return Frame(image, layers, white, t, meta, tone=scene.render.tone)


def shade(
    scene: Scene,
    context: RenderContext,
    hits: Hits,
    doppler: np.ndarray,
    effects: Effects,
    layer_rows: slice | None = None,
    viewer: np.ndarray | None = None,
    bounce: int = 0,
) -> np.ndarray:
    """(N, 3) observed XYZ of every hit (zeros on misses), one call per body's surface.

    Surfaces lit by the scene's lamps get their incident light from
    relview.illumination (shadow rays through the exposure's tracer,
    ``context.exposure``); ``layer_rows``: where these hits sit in the frame, to fill the
    lamp layers (the first colour picture only). Mirrors reflect the rays on
    (:func:`mirror_xyz`): ``viewer`` (default the exposure event) is where the rays
    started, (4,) or (N, 4), ``bounce`` how many reflections they made before."""
    lit_scene = bool(scene.lamps) and illumination.scene_lit(scene)
    if lit_scene and layer_rows is not None:
        if layer_rows.start == 0:  # a new frame (pixel_centres holds its size)
            context._lamp_layers = illumination.LampLayers(int(np.prod(context._centres_size)))
        lamp_layers = context._lamp_layers.values
    # Bodies shaded by one Doppler table each (emitters without lamps or mirrors) are
    # shaded in one compiled pass over all rows, which also zeroes the misses; the loop
    # below does the rest.
    out = np.empty((len(doppler), 3))
    done = _shade_by_tables(scene, hits.body, doppler, effects, lit_scene, out)
    if done is None:
        return out
    # Bodies whose hits are shaded by their own light alone are gathered by surface (the
    # same surface.key(), and texture coordinates or none) and shaded in one call per
    # surface: surfaces shade each hit on its own, so this gives the same colours as one
    # call per body without a Doppler-table launch per body (benchmarks/results.md).
    plain: dict = {}  # (surface key, has uv) -> [surface, [(body, rows, uv)]]
    keys: dict = {}  # id(surface) -> surface.key(), computed once per surface object
    for i, sel in rows_by_body(hits.body):
        if done[i]:
            continue
        body = scene.bodies[i]
        surface = body.surface
        uv = illumination.hit_uv(context, i, hits, sel, surface)
        if getattr(surface, "mirror", False):
            if bounce < surface.bounces:
                seen_by = context.exposure[0] if viewer is None else viewer
                out[sel] = mirror_xyz(
                    scene,
                    context,
                    hits,
                    i,
                    sel,
                    doppler[sel],
                    effects,
                    seen_by[sel] if np.ndim(seen_by) == 2 else seen_by,
                    bounce,
                )
            continue
        if not (lit_scene and illumination.takes_lamps(surface)):
            if id(surface) not in keys:
                keys[id(surface)] = surface.key()
            entry = plain.setdefault((keys[id(surface)], uv is not None), [surface, []])
            entry[1].append((i, sel, uv))
            continue
        rest = hits.rest_position[sel]
        clock = {}  # the clock reading at emission, for surfaces that show it (clock faces)
        if getattr(surface, "uses_proper_time", False):
            clock["proper_time"] = reading_from_coordinate(
                body.motion, body.clock, hits.clock[sel], effects.contraction
            )
        camera_event, tracer, reference = context.exposure
        if viewer is not None:  # seen in a mirror: received at the mirror's hit events
            camera_event = viewer[sel] if np.ndim(viewer) == 2 else viewer
        incident, d_in, shadowed = illumination.incident_light(
            scene, i, context.meshes[i], tracer, hits, sel, camera_event, effects, reference
        )
        out[sel] = surface.lit_xyz(doppler[sel], rest, uv, effects, incident, **clock)
        if layer_rows is not None:
            rows = np.arange(layer_rows.start, layer_rows.stop)[sel]
            lamp_layers["incident_doppler"][rows] = d_in
            lamp_layers["shadowed_fraction"][rows] = shadowed
            lamp_layers["total_doppler"][rows] = d_in * doppler[sel]
    for surface, members in plain.values():
        sel = np.concatenate([rows for _, rows, _ in members])
        uv = None if members[0][2] is None else np.concatenate([m[2] for m in members])
        rest = hits.rest_position[sel] if getattr(surface, "uses_position", True) else None
        clock = {}
        if getattr(surface, "uses_proper_time", False):
            clock["proper_time"] = body_readings(
                scene.bodies, hits.body[sel], hits.clock[sel], effects.contraction
            )
        out[sel] = surface.observed_xyz(doppler[sel], rest, uv, effects, **clock)
    return out


def _doppler_table(surface):
    """(DopplerTable, scale) of a surface whose observed_xyz is scale * apply_effects(table,
    D) (relview.light.spectrum), or None. Decided by the class's own method, so a subclass
    that shades otherwise is never taken for one."""
    method = getattr(type(surface), "observed_xyz", None)
    if method is SpectralSurface.observed_xyz:
        return surface.table(), 1.0
    if method is Blackbody.observed_xyz:
        return surface.table(), surface.scale
    return None


def _shade_by_tables(
    scene: Scene,
    body: np.ndarray,
    doppler: np.ndarray,
    effects: Effects,
    lit_scene: bool,
    out: np.ndarray,
) -> np.ndarray | None:
    """Fill ``out`` (N, 3) with the XYZ of every hit on a body shaded by one Doppler table
    (no lamps on it, not a mirror: :func:`_doppler_table`), in one compiled pass
    (spectrum.shade_by_table: the numbers of observed_xyz), and zeros elsewhere. Returns
    None when every hit is done, else (n_bodies,) bool: the bodies done, whose rows the
    caller must leave alone."""
    n_bodies = len(scene.bodies)
    seen = bodies_hit(body, n_bodies)
    body_table = np.full(n_bodies, -1, np.int64)
    body_scale = np.ones(n_bodies)
    tables: dict[int, int] = {}  # id(table) -> its index in the pack
    table_list = []
    for i in np.nonzero(seen)[0].tolist():
        surface = scene.bodies[i].surface
        if getattr(surface, "mirror", False) or (lit_scene and illumination.takes_lamps(surface)):
            continue
        found = _doppler_table(surface)
        if found is None:
            continue
        table, body_scale[i] = found
        if id(table) not in tables:
            tables[id(table)] = len(table_list)
            table_list.append(table)
        body_table[i] = tables[id(table)]
    if not table_list:
        out[:] = 0.0
        return np.zeros(n_bodies, bool)
    others, outside = shade_by_table(
        body,
        doppler,
        body_table,
        body_scale,
        packed_tables(table_list),
        bool(effects.doppler),
        bool(effects.beaming),
        out,
    )
    if outside:  # a D beyond a table (grown by observed_xyz) or not valid (its error)
        return np.zeros(n_bodies, bool)
    return (body_table >= 0) if others else None


def mirror_xyz(
    scene: Scene,
    context: RenderContext,
    hits: Hits,
    body_index: int,
    sel: np.ndarray,
    doppler: np.ndarray,
    effects: Effects,
    viewer: np.ndarray,
    bounce: int,
) -> np.ndarray:
    """(N, 3) XYZ a moving mirror shows at its hits ``sel`` (docs/physics.md, "Mirrors").

    Each ray is reflected in the mirror's rest frame (relview.illumination) and cast on
    as a backward null ray from the mirror's hit event through the exposure's tracer, so
    what it meets is seen at its own retarded event. Its light reaches the camera with
    D = D_in D_out: D_in from the source into the mirror's rest frame, where reflection
    keeps the frequency and multiplies the radiance by R, and ``doppler`` = D_out from
    the mirror to the camera (I_nu / nu^3 invariant along both legs, Rybicki & Lightman
    ch. 4), which reproduces Einstein 1905, section 8 (tests/test_mirrors.py)."""
    surface = scene.bodies[body_index].surface
    _, _, reference = context.exposure
    _, beta_cam = camera_state(scene, scene.camera.time if reference is None else reference[0])
    if surface.tint is not None:  # a colour: filtered wavelength by wavelength
        return illumination.tinted_mirror_xyz(
            scene, context, hits, body_index, sel, doppler, effects, viewer, bounce, beta_cam
        )
    start, d_r, beta_m, seen, d_total = illumination.reflected_rays(
        scene, context, hits, body_index, sel, doppler, effects, viewer
    )
    col = shade(scene, context, seen, d_total, effects, viewer=start, bounce=bounce + 1)
    away = seen.body < 0
    if sky.seen_in_mirrors(scene.background) and np.any(away):
        # a reflected ray that escapes sees the sky along its own direction, received by
        # the mirror and shifted on by the mirror's D_out (relview.light.sky.seen_along)
        col[away] = sky.seen_along(
            scene.background, d_r[away], beta_cam, effects, beta_m[away], doppler[away]
        )
    return surface.reflectivity * col


def _lamp_surface_pixels(surface, rest: np.ndarray) -> np.ndarray:
    """(N,) bool: which of the hits at rest-frame points ``rest`` (N, 3) show a
    self-luminous part of ``surface`` (blackbody, lines, tabulated spectrum; a pattern
    per cell). A surface may say so itself with a ``self_luminous`` attribute."""

    if hasattr(surface, "second_mask"):  # a pattern of two surfaces
        second = surface.second_mask(rest)
        return np.where(
            second,
            _lamp_surface_pixels(surface.second, rest),
            _lamp_surface_pixels(surface.first, rest),
        )
    return np.full(len(rest), _self_luminous(surface))


def _self_luminous(surface) -> bool:
    """Whether ``surface`` (not a pattern) glows by itself: blackbody, lines, tabulated
    spectrum, or one that says so with a ``self_luminous`` attribute."""
    return bool(getattr(surface, "self_luminous", isinstance(surface, SpectralSurface)))


def rows_by_body(body: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """(body index, its rows in ascending order) for every body that ``body`` (N,) names
    (-1: none): one sort instead of a pass over all rows per body of the scene."""
    seen = np.nonzero(body >= 0)[0]
    order = seen[np.argsort(body[seen], kind="stable")]
    index, starts = np.unique(body[order], return_index=True)
    return list(zip(index.tolist(), np.split(order, starts[1:]))) if len(order) else []


def lamp_pixels(scene: Scene, body_layer: np.ndarray, rest_layer: np.ndarray) -> np.ndarray:
    """(H, W) bool: pixels that see a lamp, i.e. a self-luminous surface (automatic
    exposure leaves them out; docs/colour.md). ``body_layer`` (H, W) body indices (-1:
    background), ``rest_layer`` (H, W, 3) rest-frame hit points."""
    body = np.ascontiguousarray(body_layer, dtype=np.int64).reshape(-1)
    seen = bodies_hit(body, len(scene.bodies))
    # a surface is a lamp all over or nowhere (one flag per body, gathered in one pass),
    # except patterns, whose cells decide per hit point
    flag = np.zeros(len(scene.bodies) + 1, bool)  # [0]: the sky
    per_point = []
    for i in np.nonzero(seen)[0].tolist():
        surface = scene.bodies[i].surface
        if hasattr(surface, "second_mask"):
            per_point.append(i)
        else:
            flag[i + 1] = _self_luminous(surface)
    lamps = flag[body + 1]
    if per_point:
        rest = rest_layer.reshape(-1, 3)
        for i in per_point:
            sel = np.nonzero(body == i)[0]
            lamps[sel] = _lamp_surface_pixels(scene.bodies[i].surface, rest[sel])
    return lamps.reshape(body_layer.shape)


def metering_masks(
    scene: Scene, xyz_img: np.ndarray, body_layer: np.ndarray, rest_layer: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(region, lamps): the lit pixels of the scene's metering region (render.metering:
    "frame" every lit pixel, sky included; "bodies" those that see a body; "body" those
    of render.metering_body) and the lamp pixels that automatic exposure leaves out."""
    lit = any_channel_above(xyz_img, 0.0)
    settings = scene.render
    mode = getattr(settings, "metering", "frame")
    if mode == "bodies":
        lit &= body_layer >= 0
    elif mode == "body":
        lit &= body_layer == scene.body_index(settings.metering_body)
    return lit, lamp_pixels(scene, body_layer, rest_layer)


def metering_report(
    scene: Scene, exposure, image: np.ndarray, region: np.ndarray, lamps: np.ndarray
) -> dict[str, str]:
    """Provenance entries of the exposure: how it was metered and what clipped."""
    lit = any_channel_above(image, 0.0)
    if isinstance(exposure, str):  # "auto": what was metered
        settings = scene.render
        mode = getattr(settings, "metering", "frame")
        where = f"body {settings.metering_body}" if mode == "body" else mode
        metering = f"{where}: {metered_pixels(region, lamps)[1]} pixels metered"
    else:
        metering = "none (fixed white)"
    return {
        "metering": metering,
        # lit pixels of the whole frame with a channel above white, lamps apart
        "clipped_fraction": repr(clipped_fraction(image, lit & ~lamps)),
        "clipped_fraction_lamps": repr(clipped_fraction(image, lit & lamps)),
    }


def provenance(
    scene: Scene,
    t: float,
    width: int,
    height: int,
    samples: int,
    effects: Effects,
    white: float,
    metering: dict[str, str] | None = None,
) -> dict[str, str]:
    """Text that lets a figure be regenerated exactly (stored in PNG chunks / sidecars);
    ``metering``: the entries of :func:`metering_report`."""
    import json

    return {
        "relview_version": __version__,
        "scene": str(scene.source_path or ""),
        "scene_sha256": scene.source_hash,
        "time_s": repr(float(t)),
        "resolution": f"{width}x{height}",
        "samples": str(samples),
        "effects": json.dumps(effects.__dict__, sort_keys=True),
        "white_cd_m2": repr(float(white)),
        "projection": scene.camera.projection,
        "tone": scene.render.tone,
        "shutter_s": repr(float(scene.render.shutter)),
        **(metering or {}),
    }
