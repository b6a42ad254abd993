"""Lamps lighting reflective surfaces: lamp events, shadow rays, incident light per hit.

For each shading point, the emission event E = (ct_E, x_E) of a camera ray on a surface
that is lit by the scene's lamps (docs/physics.md, "Lamps"):

1. the lamp event L on E's past light cone (the retarded solve of bodies, vectorised over
   the events E; closed form for inertial lamps); with ``delay`` off, the lamp where it
   is at t_E;
2. the shadow test: a backward null ray from E towards L, cast through the exposure's
   Tracer (every inertial body exactly at its own retarded event along the ray); a hit
   with path length l below |x_E - x_L| means shadow. Sphere lamps send
   ``shadow_samples`` rays to seeded points of their disc: the unshadowed fraction;
3. the photon 4-momentum (1, k), k = (x_E - x_L)/|x_E - x_L|, carried into the surface's
   rest frame R and the lamp's: D_in = gamma_s (1 - beta_s.k) / (gamma_L (1 - beta_L.k)),
   the direction in R (aberration) gives cos(theta') against the rest-frame normal, and
   r' = |x_E - x_L| gamma_s (1 - beta_s.k) is the lamp distance in R;
4. the factor A of relview.light.lamps (power or irradiance, cos, distance, 1/pi), which
   the surface turns into XYZ with D_in and the camera's D_out.

Distant lamps are plane waves from a fixed direction in their own frame; their light is
aberrated into S, the shadow ray runs to infinity.

Effect switches (docs/physics.md): ``delay`` off places lamps and shadow rays at the
time of E; ``contraction`` off uses Galilean maps (no gammas, k' = k - beta);
``aberration`` off takes the S direction of the incident light unchanged as its
direction in R; ``doppler`` / ``beaming`` act on D_in as on D_out (relview.light.lamps).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from relview.geometry.trace import Tracer
from relview.kinematics.clocks import reading_from_coordinate
from relview.kinematics.lorentz import C
from relview.kinematics.solvers import SOLVER_RTOL, _solve_increasing, inertial_light_delay
from relview.light import sky
from relview.light.lamps import Incident, lit_table
from relview.light.spectrum import CMF_VALUES, CMF_WAVELENGTHS_NM, K_M_LM_PER_W
from relview.scene.parts import Effects, Lamp

#: shadow rays start this far (m) from the surface, against hitting their own triangle
SHADOW_OFFSET_M = 1e-6
#: names of the float layers a lit scene adds to a Frame
LAYER_NAMES = ("incident_doppler", "shadowed_fraction", "total_doppler")


def null_to_frame(k: np.ndarray, beta: np.ndarray, relativistic: bool = True):
    """A photon of 4-momentum (1, k) in S (k (N,3) unit propagation direction) seen from a
    frame moving with (N,3) or (3,) ``beta``: (frequency ratio k0' (N,), unit direction
    (N,3)). Relativistic: the pure boost (Jackson eq. 11.19 with (gamma-1)/b^2 =
    gamma^2/(gamma+1)); Galilean: k0' = 1 - beta.k and k' = k - beta. Compiled
    (:func:`_null_to_frame`)."""
    k = np.ascontiguousarray(k, dtype=np.float64).reshape(-1, 3)
    beta = np.ascontiguousarray(beta, dtype=np.float64).reshape(-1, 3)
    if beta.shape[0] not in (1, k.shape[0]):
        beta = np.ascontiguousarray(np.broadcast_to(beta, k.shape))
    return _null_to_frame(k, beta, bool(relativistic))


@njit(cache=True, inline="always")
def _boost(kx, ky, kz, bx, by, bz, relativistic):
    """A photon (1, k) seen from a frame moving with beta: (frequency ratio k0, unit
    direction k' components, the length |k - beta| of the Galilean map or k0). The pure
    boost (Jackson eq. 11.19, (gamma-1)/b^2 = gamma^2/(gamma+1)): k0 = gamma (1 - beta.k),
    k' = (k + (gamma^2/(gamma+1) beta.k - gamma) beta) / k0; Galilean: 1 - beta.k and
    (k - beta) / |k - beta|."""
    bk = bx * kx + by * ky + bz * kz
    if relativistic:
        g = 1.0 / math.sqrt(1.0 - (bx * bx + by * by + bz * bz))
        k0 = g * (1.0 - bk)
        a = g * g / (g + 1.0) * bk - g
        return k0, (kx + a * bx) / k0, (ky + a * by) / k0, (kz + a * bz) / k0, k0
    x, y, z = kx - bx, ky - by, kz - bz
    q = math.sqrt(x * x + y * y + z * z)
    return 1.0 - bk, x / q, y / q, z / q, q


@njit(parallel=True, cache=True)
def _null_to_frame(k, beta, relativistic):
    n = k.shape[0]
    k0 = np.empty(n)
    kp = np.empty((n, 3))
    step = 0 if beta.shape[0] == 1 else 1  # one velocity for all, or one per photon
    for i in prange(n):
        j = i * step
        k0[i], kp[i, 0], kp[i, 1], kp[i, 2], _ = _boost(
            k[i, 0], k[i, 1], k[i, 2], beta[j, 0], beta[j, 1], beta[j, 2], relativistic
        )
    return k0, kp


def null_from_frame(k_rest: np.ndarray, beta: np.ndarray, relativistic: bool = True):
    """The inverse of :func:`null_to_frame`: the unit S propagation direction (N,3) of a
    photon whose direction in the frame moving with ``beta`` (N,3) is unit ``k_rest``
    (N,3) (the frame's axes parallel to S's). Relativistic: the boost by -beta;
    Galilean: the unit k with k - beta parallel to k_rest (light at c in S)."""
    beta = np.broadcast_to(np.asarray(beta, float), k_rest.shape)
    if relativistic:
        return null_to_frame(k_rest, -beta, True)[1]
    bk = np.sum(beta * k_rest, axis=1)
    s = -bk + np.sqrt(bk * bk + 1.0 - np.sum(beta * beta, axis=1))
    k = beta + s[:, None] * k_rest
    return k / np.linalg.norm(k, axis=1)[:, None]


def reflect_in_rest_frame(
    k_out: np.ndarray, beta_m: np.ndarray, normals: np.ndarray, effects: Effects
) -> np.ndarray:
    """(N,3) unit S propagation direction k_in of the light that a mirror moving with
    beta_m (N,3), of rest-frame unit normals (N,3), reflects into the unit S direction
    k_out (N,3): k_out boosted into the mirror's rest frame, its spatial part reflected
    about the normal there (the law of reflection holds in the rest frame, the frequency
    is kept), boosted back (Einstein 1905, section 8, whose formulas this reproduces:
    tests/test_mirrors.py). Reflection is its own inverse, so the same map takes k_in to
    k_out. ``aberration`` off reflects the S direction itself."""
    rel = bool(effects.contraction)
    if not effects.aberration:
        return k_out - 2.0 * np.sum(k_out * normals, axis=1)[:, None] * normals
    _, k_rest = null_to_frame(k_out, beta_m, rel)
    k_rest = k_rest - 2.0 * np.sum(k_rest * normals, axis=1)[:, None] * normals
    return null_from_frame(k_rest, beta_m, rel)


def doppler_between(
    k: np.ndarray, beta_source: np.ndarray, beta_receiver: np.ndarray, effects: Effects
) -> np.ndarray:
    """(N,) D = frequency received / frequency sent of light propagating along unit S
    directions k (N,3) from a source moving with beta_source to a receiver moving with
    beta_receiver: gamma_r (1 - beta_r.k) / (gamma_s (1 - beta_s.k)) (Rybicki & Lightman
    eq. 4.11 applied twice); without ``contraction`` the gammas are dropped."""
    rel = bool(effects.contraction)
    return null_to_frame(k, beta_receiver, rel)[0] / null_to_frame(k, beta_source, rel)[0]


def mirror_directions(
    body, body_index: int, mesh, hits, sel: np.ndarray, viewer: np.ndarray, effects: Effects
):
    """(backward S directions (N,3) of the reflected rays, mirror velocities beta_m (N,3))
    at the hits ``sel`` of mirror body ``body_index``, seen by rays that started at the
    ``viewer`` events ((4,) or (N,4): the camera's exposure event, or the previous
    mirror's hit events). The reflected ray is the backward null ray from each hit event
    along -k_in of :func:`reflect_in_rest_frame`."""
    events = hits.emit_event[sel]
    beta_m = hits.beta_emit[sel]
    normals = rest_normals(
        body, body_index, mesh, hits.face[sel], hits.bary[sel], events, beta_m, effects
    )
    k_out = np.asarray(viewer, float)[..., 1:] - events[:, 1:]  # towards the viewer
    k_out /= np.linalg.norm(k_out, axis=1)[:, None]
    return -reflect_in_rest_frame(k_out, beta_m, normals, effects), beta_m


def lamp_events(lamp: Lamp, events: np.ndarray, effects: Effects):
    """(L (N,4) [ct, x] m, beta_L (N,3)): the lamp centre's events whose light reaches each
    of the (N,4) ``events`` (the retarded solve of RigidKinematics.retarded, vectorised
    over the receiving events); with ``delay`` off, the lamp at the events' own times."""
    motion = lamp.motion
    n = len(events)
    t = events[:, 0]
    origin = np.zeros((n, 3))
    if not effects.delay:
        x, beta = motion.state(origin, t, contraction=effects.contraction)
        return np.column_stack([t, x]), beta
    if motion.is_inertial:
        beta, e0 = motion.inertial_frame()
        beta = np.asarray(beta, float)
        if not np.any(beta):  # at rest: its light left |x_E - x_L| before E
            return _at_rest_source(events, np.asarray(e0[1:], float)), np.broadcast_to(beta, (n, 3))
        x_now = e0[1:] + np.outer(t - e0[0], beta)  # the lamp at each event's time
        tau = inertial_light_delay(events[:, 1:] - x_now, beta)
        x_now -= tau[:, None] * beta
        ev = np.empty((n, 4))
        ev[:, 0] = t - tau
        ev[:, 1:] = x_now
        return ev, np.broadcast_to(beta, (n, 3))  # one velocity: a read-only view
    ev_now, _ = motion.events(origin, t, effects.contraction)
    dist = np.linalg.norm(events[:, 1:] - ev_now[:, 1:], axis=1) + np.abs(ev_now[:, 0] - t)

    def fun(s, idx):
        # h(s) = |x_E - X(s)| - (t_E - t(s)), increasing along a timelike worldline
        e, de = motion.events(origin[idx], s, effects.contraction)
        r = events[idx, 1:] - e[:, 1:]
        rn = np.linalg.norm(r, axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            dr = np.where(rn > 0, -np.sum(r * de[:, 1:], axis=1) / rn, 0.0)
        return rn - (t[idx] - e[:, 0]), dr + de[:, 0]

    step = dist + 1e-9 * (1.0 + np.abs(t))
    tol = SOLVER_RTOL * dist + 4 * np.finfo(float).eps * (np.abs(t) + dist) + 1e-300
    s = _solve_increasing(fun, t - dist, step, tol)
    ev, dev = motion.events(origin, s, effects.contraction)
    return ev, dev[:, 1:] / dev[:, :1]


#: unit face normals of the meshes shaded so far: id(vertices) -> (vertices, faces,
#: normals); the arrays are kept so that an id is not reused while its entry lives
_FACE_NORMALS: dict = {}


def face_normals(vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """(F,3) unit normals (e1 x e2, right-handed in the face's vertex order) of a mesh,
    computed once per mesh (the meshes of a scene are built once, RenderContext)."""
    entry = _FACE_NORMALS.get(id(vertices))
    if entry is not None and entry[0] is vertices and entry[1] is faces:
        return entry[2]
    tri = vertices[faces]
    n = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    n /= np.linalg.norm(n, axis=1)[:, None]
    if len(_FACE_NORMALS) >= 64:
        _FACE_NORMALS.pop(next(iter(_FACE_NORMALS)))
    _FACE_NORMALS[id(vertices)] = (vertices, faces, n)
    return n


def rest_normals(
    body, body_index: int, mesh, hits_face, hits_bary, events, beta_s, effects: Effects
) -> np.ndarray:
    """(N,3) unit normals of the hit faces in each surface point's rest frame (axes
    parallel to S's). Inertial bodies: the face normal of the rest-frame mesh. Other
    motions: two short face tangents placed simultaneously in S at the hit time
    (motion.state), then stretched back by gamma along beta (the inverse of the
    Lorentz-FitzGerald contraction of relview.kinematics.lorentz.contract), crossed."""
    vertices, faces = mesh
    if body.motion.is_inertial:
        return face_normals(vertices, faces)[hits_face]
    tri = vertices[faces[hits_face]]  # (N, 3, 3), mesh axes (rotation applied)
    e1 = tri[:, 1] - tri[:, 0]
    e2 = tri[:, 2] - tri[:, 0]
    u = hits_bary[:, :1]
    v = hits_bary[:, 1:]
    p = (1.0 - u - v) * tri[:, 0] + u * tri[:, 1] + v * tri[:, 2]
    size = np.maximum(np.linalg.norm(e1, axis=1), np.linalg.norm(e2, axis=1))[:, None]
    eps = 1e-4 * size
    t1 = e1 / np.linalg.norm(e1, axis=1)[:, None] * eps
    t2 = e2 / np.linalg.norm(e2, axis=1)[:, None] * eps
    m = len(p)
    pts = np.concatenate([p, p + t1, p + t2])
    x, _ = body.motion.state(pts, np.tile(events[:, 0], 3), contraction=effects.contraction)
    w1 = x[m : 2 * m] - x[:m]
    w2 = x[2 * m :] - x[:m]
    if effects.contraction:
        b2 = np.sum(beta_s * beta_s, axis=1)
        g = 1.0 / np.sqrt(1.0 - b2)
        with np.errstate(invalid="ignore", divide="ignore"):
            f = np.where(b2 > 0, (g - 1.0) / b2, 0.0)
        w1 = w1 + (f * np.sum(w1 * beta_s, axis=1))[:, None] * beta_s
        w2 = w2 + (f * np.sum(w2 * beta_s, axis=1))[:, None] * beta_s
    n = np.cross(w1, w2)
    return n / np.linalg.norm(n, axis=1)[:, None]


@njit(parallel=True, cache=True)
def _facing(normals, viewer, events, beta_s, relativistic, aberration):
    """(normals turned to the viewer's side (N,3), unit direction towards the viewer in
    the surface's rest frame (N,3)): the S direction from each event (N,4) to the viewer
    ((1,4) or (N,4)) boosted into the frame moving with beta_s (:func:`_null_to_frame`'s
    formulas); the normals are judged against it, and with ``aberration`` off the S
    direction itself is returned as the rest-frame one (docs/physics.md)."""
    n = events.shape[0]
    turned = np.empty((n, 3))
    towards = np.empty((n, 3))
    step = 0 if viewer.shape[0] == 1 else 1
    for i in prange(n):
        j = i * step
        x = viewer[j, 1] - events[i, 1]
        y = viewer[j, 2] - events[i, 2]
        z = viewer[j, 3] - events[i, 3]
        r = math.sqrt(x * x + y * y + z * z)
        kx, ky, kz = x / r, y / r, z / r
        _, rx, ry, rz, _ = _boost(
            kx, ky, kz, beta_s[i, 0], beta_s[i, 1], beta_s[i, 2], relativistic
        )
        dot = normals[i, 0] * rx + normals[i, 1] * ry + normals[i, 2] * rz
        sign = -1.0 if dot < 0.0 else 1.0
        for c in range(3):
            turned[i, c] = sign * normals[i, c]
        if aberration:
            towards[i, 0], towards[i, 1], towards[i, 2] = rx, ry, rz
        else:
            towards[i, 0], towards[i, 1], towards[i, 2] = kx, ky, kz
    return turned, towards


#: shading points whose emission events lie within this angle (rad), seen from the
#: exposure event, of their cluster's event share one light-cone snapshot of the bodies on
#: non-inertial worldlines (RetardedOccluders)
CLUSTER_ANGLE = 0.01
#: at most this many clusters (snapshots) per cast of shadow or mirror rays
MAX_CLUSTERS = 6


def event_clusters(events: np.ndarray, spread_m: float, max_clusters: int = MAX_CLUSTERS):
    """Group the (N,4) ``events`` by the cells of a grid in (ct, x, y, z) anchored at 0,
    of side a the power of 2 (m) at most spread_m / (0.5 + sqrt(3)/2), doubled until at
    most ``max_clusters`` cells are occupied (so the casts of one exposure share cells).
    Where that needs cells wider than the events' extent, one cluster: their bounding
    box. Returns [(key, centre event (4,), rows, spread m)], the spread the bound
    max |ct - ct_c| + |x - x_c| about the centre."""
    root3 = 0.5 + 0.5 * math.sqrt(3.0)
    side = 2.0 ** math.floor(math.log2(max(float(spread_m), 1e-300) / root3))
    extent = float(np.max(np.ptp(events, axis=0)))
    while side <= extent:
        cells = np.floor(events / side).astype(np.int64)
        index, inverse = np.unique(cells, axis=0, return_inverse=True)
        if len(index) <= max_clusters:
            inverse = inverse.reshape(-1)
            return [
                (
                    (side, tuple(cell)),
                    (cell + 0.5) * side,
                    np.nonzero(inverse == j)[0],
                    side * root3,
                )
                for j, cell in enumerate(index)
            ]
        side *= 2.0
    lo, hi = events.min(axis=0), events.max(axis=0)
    half = 0.5 * (hi - lo)
    centre = 0.5 * (lo + hi)
    return [
        (
            ("box", tuple(centre)),
            centre,
            np.arange(len(events)),
            float(half[0] + np.linalg.norm(half[1:])),
        )
    ]


class RetardedOccluders:
    """Shadow and mirror rays (backward null rays from surface events) through the scene's
    bodies, each met where it was when the light along the ray passed it: inertial bodies
    exactly (the uniform groups), bodies on other worldlines through light-cone snapshots
    (relview.geometry.lightcone) built on the past light cone of the rays' own start
    events, not the camera's. The start events of a cast are grouped by the grid cells
    of :func:`event_clusters` with the spread CLUSTER_ANGLE x their median distance from
    the exposure event, and each cell casts through snapshots on its centre's light cone
    (kept for the other casts of the exposure, which is what this object serves). A body point on the snapshot of a centre C instead of a start event E is
    displaced by at most beta (|ct_E - ct_C| + |x_E - x_C|): first order in the spread
    (measured in tests/test_lamps.py). ``spread`` holds the largest spread of the last
    cast (m). Duck-types Tracer.cast and Tracer.packed."""

    def __init__(
        self,
        scene,
        meshes,
        other,
        uniform_groups,
        exposure_tracer: Tracer,
        exposure_event: np.ndarray,
        tolerance: float | None = None,
        cluster_angle: float = CLUSTER_ANGLE,
        max_clusters: int = MAX_CLUSTERS,
    ):
        self.scene = scene
        self.meshes = meshes
        self.other = list(other)
        self.uniform_groups = list(uniform_groups)
        self.exposure_tracer = exposure_tracer
        self.exposure_event = np.asarray(exposure_event, float).reshape(4)
        self.tolerance = tolerance
        self.cluster_angle = cluster_angle
        self.max_clusters = max_clusters
        self.spread = 0.0
        self._tracers: dict = {}

    @property
    def packed(self):
        return self.exposure_tracer.packed

    def first_hits(self, ray_origin, d_scene, effects: Effects, l_min=1e-9, reference=None):
        """(l, body) of the nearest hits (Tracer.first_hits), each cluster of start events
        through the snapshots on its centre's light cone."""
        n = len(d_scene)
        l = np.full(n, np.inf)
        body = np.full(n, -1, np.int64)
        for tracer, rows, starts in self._clusters(ray_origin, d_scene, effects, reference):
            l[rows], body[rows] = tracer.first_hits(
                starts, d_scene[rows], effects, l_min, reference
            )
        return l, body

    def _clusters(self, ray_origin, d_scene, effects: Effects, reference):
        """(tracer, rows, their start events) per cluster of the start events (class
        docstring): the tracer of the uniform groups and the cluster's snapshots."""
        from relview.geometry import lightcone  # loads the snapshot kernels on first use

        starts = np.broadcast_to(np.asarray(ray_origin, float), (len(d_scene), 4))
        where = np.median(np.linalg.norm(starts[:, 1:] - self.exposure_event[1:], axis=1))
        clusters = event_clusters(starts, self.cluster_angle * where, self.max_clusters)
        self.spread = max(c[3] for c in clusters)
        for key, centre, rows, _ in clusters:
            tracer = self._tracers.get(key)
            if tracer is None:  # one snapshot per grid cell and exposure, shared by casts
                snaps = lightcone.snapshot_groups(
                    self.scene,
                    self.meshes,
                    self.other,
                    centre,
                    effects,
                    self.tolerance,
                    reference=reference,
                )
                tracer = self._tracers[key] = Tracer(self.uniform_groups + snaps)
            yield tracer, rows, np.ascontiguousarray(starts[rows])

    def cast(
        self,
        ray_origin: np.ndarray,
        d_scene: np.ndarray,
        effects: Effects,
        l_min: float = 1e-9,
        beta_cam=None,
        reference=None,
    ):
        d_scene = np.asarray(d_scene, float)
        if len(d_scene) == 0:
            starts = np.broadcast_to(np.asarray(ray_origin, float), (0, 4))
            return self.exposure_tracer.cast(starts, d_scene, effects, l_min, beta_cam, reference)
        merged = None
        for tracer, rows, starts in self._clusters(ray_origin, d_scene, effects, reference):
            hits = tracer.cast(starts, d_scene[rows], effects, l_min, beta_cam, reference)
            if merged is None:
                merged = {
                    k: (None if v is None else np.empty((len(d_scene),) + v.shape[1:], v.dtype))
                    for k, v in vars(hits).items()
                }
            for k, v in vars(hits).items():
                if v is not None:
                    merged[k][rows] = v
        return type(hits)(**merged)


def _shadow_free(
    tracer: Tracer,
    start: np.ndarray,
    towards: np.ndarray,
    distance: np.ndarray,
    effects: Effects,
    reference=None,
    own_body: int = -1,
) -> np.ndarray:
    """(N,) True where the backward null ray from each start event along unit ``towards``
    meets no body before ``distance`` (m; inf for a distant lamp). ``reference``: the
    exposure's reference event (relview.geometry.trace). ``own_body``: the lamp's own
    glowing sphere (scene body index, -1: none), which does not shadow its own light: a
    ray meeting it first met nothing between the surface and the lamp."""
    if tracer is None or tracer.packed is None or len(start) == 0:
        return np.ones(len(start), bool)
    l, body = tracer.first_hits(start, towards, effects, SHADOW_OFFSET_M, reference)
    return ~((l < distance * (1.0 - 1e-9)) & (body != own_body))


def _disc_points(lamp: Lamp, k: np.ndarray) -> np.ndarray:
    """(S, N, 3) seeded offsets uniform over the lamp's disc as seen along k (N,3): the
    disc of radius ``lamp.radius`` perpendicular to the line of sight in S."""
    rng = np.random.default_rng(lamp.seed)
    n = len(k)
    s = lamp.shadow_samples
    r = lamp.radius * np.sqrt(rng.uniform(size=(s, 1)))
    phi = 2.0 * math.pi * rng.uniform(size=(s, 1))
    helper = np.where(np.abs(k[:, :1]) < 0.9, [[1.0, 0.0, 0.0]], [[0.0, 1.0, 0.0]])
    a = np.cross(k, helper)
    a /= np.linalg.norm(a, axis=1)[:, None]
    b = np.cross(k, a)
    return (
        (r * np.cos(phi))[:, :, None] * a[None] + (r * np.sin(phi))[:, :, None] * b[None]
    ).reshape(s, n, 3)


@dataclass
class LampTerm:
    """One lamp's light at N points: D_in, the factor A (unshadowed), the unshadowed
    fraction, and the bolometric irradiance (W/m^2) it would give without shadow."""

    d_in: np.ndarray
    weight: np.ndarray
    visible: np.ndarray
    irradiance: np.ndarray
    #: cos of the angle between the outgoing direction and the mirror direction of the
    #: lamp's light, rest frame (None without an outgoing direction)
    cos_alpha: np.ndarray | None = None


def _lamp_light(lamp: Lamp, events: np.ndarray, effects: Effects):
    """(k (N,3) unit S propagation, lamp-frame frequency k0_L (N,), lamp events (N,4) or
    None, distance (N,) m, inf for a distant lamp) of ``lamp``'s light reaching the (N,4)
    ``events``."""
    rel = bool(effects.contraction)
    n = len(events)
    if lamp.distant:
        # plane wave: propagation -direction in the lamp's frame F, carried into S
        k_f = -np.broadcast_to(np.asarray(lamp.direction, float), (n, 3))
        _, k = null_to_frame(k_f, -np.asarray(lamp.frame_beta, float), rel)
        k0_lamp, _ = null_to_frame(k, lamp.frame_beta, rel)
        return k, k0_lamp, None, np.full(n, np.inf)
    ev_l, beta_l = lamp_events(lamp, events, effects)
    if beta_l.strides[0] == 0:  # one velocity for every event
        beta_l = beta_l[:1]
    k, distance, k0_lamp = _rays_from(
        np.ascontiguousarray(events, np.float64),
        ev_l,
        np.ascontiguousarray(beta_l, np.float64),
        rel,
    )
    return k, k0_lamp, ev_l, distance


@njit(parallel=True, cache=True)
def _at_rest_source(events, x):
    """(N,4) events of a source at rest at ``x`` (3,) whose light reaches the ``events``
    (N,4): (ct_E - |x_E - x|, x) (light at c in S)."""
    n = events.shape[0]
    out = np.empty((n, 4))
    for i in prange(n):
        dx = events[i, 1] - x[0]
        dy = events[i, 2] - x[1]
        dz = events[i, 3] - x[2]
        out[i, 0] = events[i, 0] - math.sqrt(dx * dx + dy * dy + dz * dz)
        out[i, 1], out[i, 2], out[i, 3] = x[0], x[1], x[2]
    return out


@njit(parallel=True, cache=True)
def _rays_from(events, sources, beta_source, relativistic):
    """(unit propagation k (N,3), distance (N,) m, frequency ratio k0 (N,) in the frame of
    sources moving with beta (N,3) or (1,3)) of light from the ``sources`` events to the
    ``events`` (N,4): k0 = gamma (1 - beta.k) (no gamma with ``relativistic`` off), as
    in :func:`null_to_frame`."""
    n = events.shape[0]
    k = np.empty((n, 3))
    distance = np.empty(n)
    k0 = np.empty(n)
    step = 0 if beta_source.shape[0] == 1 else 1
    for i in prange(n):
        x = events[i, 1] - sources[i, 1]
        y = events[i, 2] - sources[i, 2]
        z = events[i, 3] - sources[i, 3]
        r = math.sqrt(x * x + y * y + z * z)
        distance[i] = r
        k[i, 0], k[i, 1], k[i, 2] = x / r, y / r, z / r
        j = i * step
        bx, by, bz = beta_source[j, 0], beta_source[j, 1], beta_source[j, 2]
        f = 1.0 - (bx * k[i, 0] + by * k[i, 1] + bz * k[i, 2])
        if relativistic:
            f /= math.sqrt(1.0 - (bx * bx + by * by + bz * bz))
        k0[i] = f
    return k, distance, k0


def lamp_term(
    lamp: Lamp,
    tracer: Tracer | None,
    events: np.ndarray,
    beta_s: np.ndarray,
    normals: np.ndarray,
    effects: Effects,
    reference=None,
    out_rest: np.ndarray | None = None,
) -> LampTerm:
    """The light of ``lamp`` at the surface events (N,4) moving with beta_s (N,3), whose
    rest-frame normals (N,3) face the camera; ``out_rest`` (N,3): the unit rest-frame
    direction towards the camera, for the glossy lobe's angle."""
    n = len(events)
    k, k0_lamp, ev_l, distance = _lamp_light(lamp, events, effects)
    d_in, cos_in, weight, irradiance, cos_alpha = _lamp_geometry(
        k,
        k0_lamp,
        distance,
        np.ascontiguousarray(beta_s, dtype=np.float64),
        np.ascontiguousarray(normals, dtype=np.float64),
        np.zeros((0, 3)) if out_rest is None else np.ascontiguousarray(out_rest, np.float64),
        bool(effects.contraction),
        bool(effects.aberration),
        bool(effects.beaming),
        bool(lamp.distant),
        float(lamp.irradiance if lamp.distant else lamp.power),
    )
    if out_rest is None:
        cos_alpha = None
    visible = np.zeros(n)
    lit = np.nonzero(cos_in > 0)[0]
    if len(lit) == n:  # every point faces the lamp: no gathering
        visible[:] = _unshadowed(lamp, tracer, events, k, distance, ev_l, effects, reference)
    elif len(lit):
        visible[lit] = _unshadowed(
            lamp,
            tracer,
            events[lit],
            k[lit],
            distance[lit],
            None if ev_l is None else ev_l[lit],
            effects,
            reference,
        )
    return LampTerm(d_in, weight, visible, irradiance, cos_alpha)


@njit(parallel=True, cache=True)
def _lamp_geometry(
    k, k0_lamp, distance, beta_s, normals, out_rest, rel, aberration, beaming, distant, source
):
    """Per hit, one lamp's light in the surface's rest frame R (module docstring, steps 3
    and 4): (D_in, cos theta', the factor A, the bolometric irradiance W/m^2, cos alpha'
    of the glossy lobe (when ``out_rest`` has rows)). ``source``: the lamp's power W, or
    a distant lamp's irradiance W/m^2. The photon (1, k) boosted into R: frequency ratio
    k0_s = gamma (1 - beta.k) and direction k' (:func:`_null_to_frame`'s formulas; k'
    = k with ``aberration`` off); r' = distance x k0_s (Galilean: |k - beta|)."""
    n = k.shape[0]
    d_in = np.empty(n)
    cos_in = np.empty(n)
    weight = np.empty(n)
    irradiance = np.empty(n)
    cos_alpha = np.zeros(n)
    lobe = out_rest.shape[0] == n
    for i in prange(n):
        kx, ky, kz = k[i, 0], k[i, 1], k[i, 2]
        k0, rx, ry, rz, stretch = _boost(kx, ky, kz, beta_s[i, 0], beta_s[i, 1], beta_s[i, 2], rel)
        if not aberration:
            rx, ry, rz = kx, ky, kz
        d = k0 / k0_lamp[i]
        d_in[i] = d
        kn = rx * normals[i, 0] + ry * normals[i, 1] + rz * normals[i, 2]
        c = max(-kn, 0.0)
        cos_in[i] = c
        if lobe:  # the law of reflection in R: k' - 2 (k'.n) n against the outgoing ray
            mx = rx - 2.0 * kn * normals[i, 0]
            my = ry - 2.0 * kn * normals[i, 1]
            mz = rz - 2.0 * kn * normals[i, 2]
            cos_alpha[i] = mx * out_rest[i, 0] + my * out_rest[i, 1] + mz * out_rest[i, 2]
        if distant:
            d_beam = d if beaming else 1.0
            irradiance[i] = source * d * d * c
            weight[i] = source * c / (math.pi * d_beam * d_beam)
        else:
            r = distance[i] * stretch
            irradiance[i] = d**4 * source * c / (4.0 * math.pi * r * r)
            weight[i] = source * c / (4.0 * math.pi**2 * r * r)
    return d_in, cos_in, weight, irradiance, cos_alpha


def _unshadowed(lamp: Lamp, tracer, events, k, distance, ev_l, effects: Effects, reference):
    """(N,) unshadowed fraction of ``lamp`` at the (N,4) ``events`` its light reaches along
    unit k (N,3) from the lamp events ``ev_l`` (N,4; None for a distant lamp) at
    ``distance`` (N,): one shadow ray, or ``shadow_samples`` to a sphere lamp's disc."""
    own = getattr(lamp, "glow_body", -1)  # set by the scene reader for sphere lamps
    if lamp.distant or lamp.radius == 0.0:
        return _shadow_free(tracer, events, -k, distance, effects, reference).astype(float)
    offsets = _disc_points(lamp, k)
    target = ev_l[:, 1:][None] + offsets  # (S, M, 3) points of the lamp's disc
    seg = target - events[:, 1:][None]
    dist = np.linalg.norm(seg, axis=2)
    free = _shadow_free(
        tracer,
        np.tile(events, (len(offsets), 1)),
        (seg / dist[:, :, None]).reshape(-1, 3),
        dist.reshape(-1),
        effects,
        reference,
        own,
    )
    return free.reshape(len(offsets), -1).mean(axis=0)


@dataclass
class LampSighting:
    """One lamp as a body point receives it (``relview probe``)."""

    lamp: str
    event_time: float  # s, scene time of the lamp event whose light arrives (NaN: distant)
    event_position: tuple[float, float, float]  # m, scene frame (NaN: distant)
    direction_rest: tuple[float, float, float]  # unit propagation of its light, point's frame
    doppler_in: float  # D_in = frequency in the point's rest frame / in the lamp's
    lit_fraction: float  # unshadowed fraction (1: lit, 0: in shadow)
    lit: bool  # any of its light arrives unshadowed


def lamp_sightings(
    lamps,
    tracer: Tracer | None,
    event: np.ndarray,
    beta: np.ndarray,
    effects: Effects,
    reference=None,
) -> list[LampSighting]:
    """Each lamp's light at one event (4,) of a point moving with ``beta`` (3,): the
    lamp event, the incident direction in the point's rest frame, D_in and the
    unshadowed fraction (shadow rays as for shading; a point inside a body, or on a
    face turned away from the lamp, is shadowed by that body itself)."""
    events = np.asarray(event, float).reshape(1, 4)
    beta_s = np.asarray(beta, float).reshape(1, 3)
    rel = bool(effects.contraction)
    out = []
    for lamp in lamps:
        k, k0_lamp, ev_l, distance = _lamp_light(lamp, events, effects)
        when, where = float("nan"), (float("nan"),) * 3
        if ev_l is not None:
            when, where = float(ev_l[0, 0] / C), tuple(map(float, ev_l[0, 1:]))
        k0_s, k_rest = null_to_frame(k, beta_s, rel)
        if not effects.aberration:
            k_rest = k
        free = _unshadowed(lamp, tracer, events, k, distance, ev_l, effects, reference)
        out.append(
            LampSighting(
                lamp.name,
                when,
                where,
                tuple(map(float, k_rest[0])),
                float(k0_s[0] / k0_lamp[0]),
                float(free[0]),
                bool(free[0] > 0.0),
            )
        )
    return out


class LampLayers:
    """The float layers of a lit scene's first exposure sample, filled batch by batch."""

    def __init__(self, n: int):
        self.values = {name: np.full(n, np.nan) for name in LAYER_NAMES}

    def images(self, height: int, width: int) -> dict[str, np.ndarray]:
        return {name: v.reshape(height, width) for name, v in self.values.items()}


def scene_lit(scene) -> bool:
    """Whether any body surface of ``scene`` takes light from its lamps."""
    return bool(scene.lamps) and any(takes_lamps(b.surface) for b in scene.bodies)


def takes_lamps(surface) -> bool:
    if getattr(surface, "scene_lit", False):
        return True
    return any(
        takes_lamps(getattr(surface, part, None))
        for part in ("first", "second")
        if getattr(surface, part, None) is not None
    )


def incident_light(
    scene,
    body_index: int,
    mesh,
    tracer: Tracer | None,
    hits,
    sel: np.ndarray,
    camera_event: np.ndarray,
    effects: Effects,
    reference=None,
):
    """(Incident, incident D of the brightest lamp (N,), shadowed fraction (N,)) at the
    hits ``sel`` of body ``body_index``: every lamp's light, for Surface.lit_xyz.
    ``camera_event``: where the rays were received, (4,) or one (N,4) event per hit (a
    mirror's hit events for surfaces seen in it)."""
    body = scene.bodies[body_index]
    events = hits.emit_event[sel]
    beta_s = hits.beta_emit[sel]
    normals = rest_normals(
        body, body_index, mesh, hits.face[sel], hits.bary[sel], events, beta_s, effects
    )
    # two-sided: the normal on the camera's side, judged in the surface's rest frame
    viewer = np.ascontiguousarray(np.asarray(camera_event, float).reshape(-1, 4))
    normals, out_rest = _facing(
        np.ascontiguousarray(normals, np.float64),
        viewer,
        np.ascontiguousarray(events, np.float64),
        np.ascontiguousarray(beta_s, np.float64),
        bool(effects.contraction),
        bool(effects.aberration),
    )
    terms = [
        lamp_term(lamp, tracer, events, beta_s, normals, effects, reference, out_rest)
        for lamp in scene.lamps
    ]
    d_in = np.stack([t.d_in for t in terms])
    weight = np.stack([t.weight * t.visible for t in terms])
    tables = [lit_table(lamp.spectrum) for lamp in scene.lamps]
    incident = Incident(tables, d_in, weight, np.stack([t.cos_alpha for t in terms]))
    if len(terms) == 1:  # one lamp: it is the brightest, its shadow the shadowed fraction
        lit = terms[0].irradiance > 0
        return (
            incident,
            np.where(lit, d_in[0], np.nan),
            np.where(lit, 1.0 - terms[0].visible, np.nan),
        )
    irr = np.stack([t.irradiance for t in terms])
    total = irr.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        shadowed = np.where(
            total > 0,
            1.0 - (irr * np.stack([t.visible for t in terms])).sum(axis=0) / total,
            np.nan,
        )
    brightest = np.take_along_axis(d_in, np.argmax(irr, axis=0)[None], 0)[0]
    brightest = np.where(total > 0, brightest, np.nan)
    return incident, brightest, shadowed


# --------------------------------------------------------------------------------------
# Mirrors: the reflected rays, and what tinted mirrors show, wavelength by wavelength
# --------------------------------------------------------------------------------------

#: wavelength step (nm) of the spectra of what tinted mirrors show: every 5th node of the
#: 1-nm CIE 1931 table (the 5-nm interval CIE 15 gives for colorimetric sums); lamp
#: spectra and emission lines enter as their energy in each 5-nm bin, so narrow lines
#: keep their power
SPECTRAL_STEP = 5
#: their wavelengths (nm), 360-830, and the colour-matching functions there
SPECTRAL_NM = CMF_WAVELENGTHS_NM[::SPECTRAL_STEP]
SPECTRAL_CMF = CMF_VALUES[::SPECTRAL_STEP] * float(
    CMF_WAVELENGTHS_NM[SPECTRAL_STEP] - CMF_WAVELENGTHS_NM[0]
)
#: hits whose spectra are held at once in a tinted mirror (x 95 wavelengths x 8 bytes:
#: about 3 MB per array)
SPECTRAL_CHUNK = 4096


def hit_uv(context, body_index: int, hits, sel: np.ndarray, surface):
    """(N, 2) texture coordinates of the hits ``sel`` on body ``body_index`` (barycentric
    interpolation of the mesh's UVs), or None when the mesh has none or the surface does
    not read them."""
    uvs = context.uv[body_index]
    if uvs is None or not getattr(surface, "uses_uv", True):
        return None
    faces = context.meshes[body_index][1][hits.face[sel]]
    w = hits.bary[sel]
    return (
        (1 - w[:, 0] - w[:, 1])[:, None] * uvs[faces[:, 0]]
        + w[:, :1] * uvs[faces[:, 1]]
        + w[:, 1:] * uvs[faces[:, 2]]
    )


def reflected_rays(scene, context, hits, body_index: int, sel, doppler, effects, viewer):
    """What the mirror hits ``sel`` of body ``body_index`` reflect (docs/physics.md,
    "Mirrors"): (start events (N,4), backward S directions d_r (N,3), mirror velocities
    beta_m (N,3), the hits of the reflected rays cast from the mirror's events through the
    exposure's tracer, and D = D_in D_out (N,) of what they meet, NaN on misses).
    ``doppler``: D_out of the mirror hits; ``viewer``: where the rays came from."""
    _, tracer, reference = context.exposure
    start = hits.emit_event[sel]
    d_r, beta_m = mirror_directions(
        scene.bodies[body_index], body_index, context.meshes[body_index], hits, sel, viewer, effects
    )
    seen = tracer.cast(start, d_r, effects, l_min=SHADOW_OFFSET_M, reference=reference)
    hit = seen.body >= 0
    d_total = np.full(len(start), np.nan)
    d_total[hit] = doppler[hit] * doppler_between(
        -d_r[hit], seen.beta_emit[hit], beta_m[hit], effects
    )
    return start, d_r, beta_m, seen, d_total


def spectra_xyz(spectra: np.ndarray) -> np.ndarray:
    """(N, 3) CIE 1931 XYZ (Y in cd/m^2) of spectral radiances (N, L) at SPECTRAL_NM:
    K_m sum xbar_k S dlambda (5-nm bins; CIE 15)."""
    return K_M_LM_PER_W * spectra @ SPECTRAL_CMF


def mirror_spectra(
    scene, context, hits, body_index, sel, doppler, effects, viewer, bounce, beta_cam
):
    """(N, L) spectral radiance the camera records at SPECTRAL_NM from the hits
    ``sel`` of a mirror: what its reflected rays meet (:func:`seen_spectra`) or the sky,
    times the mirror's reflectance at the wavelength the light has in the mirror's frame,
    D_out lambda (``doppler`` off: lambda). ``beta_cam``: the camera's velocity at the
    exposure (fixes the microwave sky's frame when given relative to the camera)."""
    lam = SPECTRAL_NM
    surface = scene.bodies[body_index].surface
    start, d_r, beta_m, seen, d_total = reflected_rays(
        scene, context, hits, body_index, sel, doppler, effects, viewer
    )
    out = seen_spectra(scene, context, seen, d_total, effects, start, bounce + 1, beta_cam)
    away = seen.body < 0
    if np.any(away) and sky.seen_in_mirrors(scene.background):
        out[away] = sky.spectrum_along(
            scene.background,
            lam,
            d_r[away],
            beta_cam,
            effects,
            beta_m[away],
            doppler[away],
        )
    d_mirror = doppler if effects.doppler else np.ones(len(doppler))
    return out * surface.reflectance(d_mirror[:, None] * lam[None, :])


def seen_spectra(
    scene, context, hits, doppler, effects, viewer, bounce: int, beta_cam
) -> np.ndarray:
    """(N, L) spectral radiance recorded at SPECTRAL_NM of every hit (zeros on
    misses), the spectral counterpart of relview.renderer.shade for what tinted mirrors
    show: each surface's Surface.spectrum_seen, lit surfaces with their lamps' light as
    received at their own events (turned towards ``viewer``, the mirror's events),
    mirrors by :func:`mirror_spectra` up to their ``bounces``."""
    out = np.zeros((len(doppler), len(SPECTRAL_NM)))
    lit_scene = scene_lit(scene)
    _, tracer, reference = context.exposure
    for i in np.unique(hits.body[hits.body >= 0]):
        sel = np.nonzero(hits.body == i)[0]
        body = scene.bodies[i]
        surface = body.surface
        if getattr(surface, "mirror", False):
            if bounce < surface.bounces:
                out[sel] = mirror_spectra(
                    scene,
                    context,
                    hits,
                    i,
                    sel,
                    doppler[sel],
                    effects,
                    viewer[sel],
                    bounce,
                    beta_cam,
                )
            continue
        incident = None
        if lit_scene and takes_lamps(surface):
            incident = incident_light(
                scene, i, context.meshes[i], tracer, hits, sel, viewer[sel], effects, reference
            )[0]
        clock = {}
        if getattr(surface, "uses_proper_time", False):
            clock["proper_time"] = reading_from_coordinate(
                body.motion, body.clock, hits.clock[sel], effects.contraction
            )
        out[sel] = surface.spectrum_seen(
            SPECTRAL_NM,
            doppler[sel],
            hits.rest_position[sel],
            hit_uv(context, i, hits, sel, surface),
            effects,
            incident,
            **clock,
        )
    return out


def tinted_mirror_xyz(
    scene, context, hits, body_index, sel, doppler, effects, viewer, bounce, beta_cam
):
    """(N, 3) XYZ a tinted mirror shows at its hits ``sel``: :func:`mirror_spectra`
    integrated with the CIE 1931 observer, SPECTRAL_CHUNK hits at a time."""
    out = np.zeros((len(sel), 3))
    viewer = np.asarray(viewer, float)
    for a in range(0, len(sel), SPECTRAL_CHUNK):
        part = slice(a, a + SPECTRAL_CHUNK)
        seen_by = viewer[part] if viewer.ndim == 2 else np.broadcast_to(viewer, (len(sel[part]), 4))
        out[part] = spectra_xyz(
            mirror_spectra(
                scene,
                context,
                hits,
                body_index,
                sel[part],
                doppler[part],
                effects,
                seen_by,
                bounce,
                beta_cam,
            )
        )
    return out
