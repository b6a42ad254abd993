"""Retarded-time ray casting: the heart of relview.

Every pixel's light arrived at the camera's exposure event E = (ct_c, x_c) along a
backward null ray in the scene frame S,

    P(l) = (ct_c - l, x_c + l d),   l >= 0,

with d the unit direction towards the source (after aberration). The first surface
met along that ray (smallest l) is what the pixel sees, and P(l_hit) is the emission
event: where and when the surface point was as the light left it.

Exact method for uniform motion (physics.md): map E and the ray's 4-direction
k = (-1, d) into the body's rest frame with the Lorentz boost; there the body is
static and one ordinary ray/mesh intersection gives the hit. The map is linear, so
the rest-frame ray keeps the S-frame parameter l and hits of bodies in different
frames are compared directly by l: occlusion between bodies of different velocities
is exact.

Effect switches change only the map and the 4-direction:

* ``delay`` off: k = (0, d), light instantaneous, every hit is at time t_c;
* ``contraction`` off: the Galilean map (ct, x) -> (ct, x - beta ct) replaces the boost.

Every cast works relative to a reference event R, the exposure event (``reference`` =
(t_R in s, x_R in m)): start events and frame-group origins are passed to the kernels as
E - R and e0 - R, so the kernels see small numbers wherever the scene sits in time and
space, and R is added back only to the reported emission events. Light-cone snapshots
are built in the same coordinates (their vertices are x - x_R).

Bodies with equal velocity share a rest frame and one bounding-volume hierarchy.
Bodies whose motion is not uniform are handed to :mod:`relview.geometry.lightcone`, which
turns them into static meshes on the camera's past light cone; those join here as a
frame with beta = 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from relview.geometry import bvh as bvh_mod
from relview.kinematics.clocks import clock_coordinate
from relview.kinematics.lorentz import (
    C,
    boost_matrix,
    camera_gamma,
    doppler_along,
    doppler_at,
    galilean_matrix,
)
from relview.scene.parts import Effects


@dataclass
class FrameGroup:
    """Bodies that share one inertial rest frame, and the map of S events into it."""

    beta: np.ndarray  # (3,) velocity of the frame in S
    origin_event: np.ndarray  # (4,) S event (ct, x) mapped to the frame's origin
    matrix: np.ndarray  # (4, 4) S displacement -> frame (ct', x') (boost or Galilean)
    bodies: list[int]  # scene body indices
    body_offset: list[np.ndarray]  # (3,) each body origin's position in the frame
    body_rotation: list[np.ndarray]  # (3, 3) body axes -> frame axes
    face_body: np.ndarray  # (F,) scene body index of each group face
    face_local: np.ndarray  # (F,) face index within its body's mesh
    vertices: np.ndarray  # (V, 3) group mesh in frame coordinates (metres)
    faces: np.ndarray  # (F, 3)
    # For light-cone snapshots (non-uniform motion) the hit's body-frame point is
    # interpolated from these per-vertex body coordinates instead of a rigid map.
    vertex_body_coords: np.ndarray | None = None
    # Light-cone snapshots also carry per-vertex velocities (S, beta) and each vertex's
    # barycentric (u, v) in its original mesh face, interpolated the same way.
    vertex_beta: np.ndarray | None = None
    vertex_bary: np.ndarray | None = None
    # Light-cone snapshots: per-vertex body clock (relview.kinematics.clocks) as a line in
    # emission time, (V, 2) (c0, r): clock = c0 + r t; blended at the hit's own t (ct m,
    # relative to the cast's reference event; relview.geometry.lightcone._vertex_clock).
    vertex_clock: np.ndarray | None = None
    # Rigid bodies: rest-frame time (ct' m, the time row of the frame map) at which each
    # body's clock coordinate is zero, relative to origin_event; a hit's ct' minus this is
    # the body's clock coordinate at emission. None: unknown (NaN clocks).
    body_clock_offset: list[float] | None = None
    bvh: bvh_mod.BVH | None = None  # built on first use, kept while the group lives
    # Scene time (s) of origin_event when known: then the frame's origin is placed relative
    # to a cast's reference event as (origin_time - t_ref) c, which keeps its precision
    # where both times are large (relview.kinematics.magnitudes).
    origin_time: float | None = None


@dataclass
class Hits:
    """First hits of N rays (flat arrays)."""

    body: np.ndarray  # (N,) scene body index, -1 where the ray met nothing
    face: np.ndarray  # (N,) face index within the body's mesh, -1 on a miss
    bary: np.ndarray  # (N, 2) barycentric (u, v) on that face
    l: np.ndarray  # (N,) metres along the backward ray (inf on a miss)
    emit_event: np.ndarray  # (N, 4) (ct, x) in S, metres
    rest_position: np.ndarray  # (N, 3) hit point in the body's own frame, metres
    # (N, 3) velocity of the emitting point in S (at emission): see beta_emit; None until
    # first read when every hit moves with its frame group (then it is group_beta's row)
    _beta_emit: np.ndarray | None
    group: np.ndarray  # (N,) frame group index, -1 on a miss
    doppler: np.ndarray | None = None  # (N,) D (NaN on a miss), when cast with beta_cam
    # (N,) ct m: the body clock's coordinate at the emission's rest-frame instant
    # (relview.kinematics.clocks; readings from relview.kinematics.clocks.body_readings)
    clock: np.ndarray | None = None
    group_beta: np.ndarray | None = None  # (G, 3) each frame group's velocity in S

    @property
    def hit(self) -> np.ndarray:
        return self.body >= 0

    @property
    def beta_emit(self) -> np.ndarray:
        """(N, 3) velocity of the emitting point in S at emission (NaN on a miss). Made
        on first read from the groups' velocities when the cast left it out (a frame's
        camera rays need it only for lamps and mirrors: 12 MB less per 960x540 frame)."""
        if self._beta_emit is None:
            self._beta_emit = _group_rows(
                np.ascontiguousarray(self.group, dtype=np.int64),
                np.ascontiguousarray(self.group_beta, dtype=np.float64).reshape(-1, 3),
            )
        return self._beta_emit

    @beta_emit.setter
    def beta_emit(self, value: np.ndarray) -> None:
        self._beta_emit = value


@njit(parallel=True, cache=True)
def _group_rows(group, values):
    """(N, 3): row group[i] of ``values`` (G, 3), NaN where group[i] < 0."""
    out = np.empty((group.shape[0], 3))
    for i in prange(group.shape[0]):
        g = group[i]
        for a in range(3):
            out[i, a] = values[g, a] if g >= 0 else np.nan
    return out


def frame_matrix(beta: np.ndarray, effects: Effects) -> np.ndarray:
    return boost_matrix(beta) if effects.contraction else galilean_matrix(beta)


#: IEEE-safe fast-math: fused multiply-add and reassociation, but NaN/inf kept exact
_FAST = {"contract", "arcp", "nsz", "reassoc"}


@njit(cache=True, inline="always")
def _spatial(m, c0, c1, c2, c3):
    """Spatial rows of the 4x4 frame map m applied to the 4-vector (c0, c1, c2, c3)."""
    return (
        m[1, 0] * c0 + m[1, 1] * c1 + m[1, 2] * c2 + m[1, 3] * c3,
        m[2, 0] * c0 + m[2, 1] * c1 + m[2, 2] * c2 + m[2, 3] * c3,
        m[3, 0] * c0 + m[3, 1] * c1 + m[3, 2] * c2 + m[3, 3] * c3,
    )


@njit(cache=True, inline="always")
def _frame_origin(m, origin, ray_o, io):
    """o' = M (E - e0): a ray's start event ray_o[io] in a frame group's rest frame."""
    return _spatial(
        m,
        ray_o[io, 0] - origin[0],
        ray_o[io, 1] - origin[1],
        ray_o[io, 2] - origin[2],
        ray_o[io, 3] - origin[3],
    )


#: rays handled together by one thread: neighbouring pixels share traversal paths
RAY_CHUNK = 256
#: frame groups from which a cast from one start event culls groups by direction
#: (:func:`group_direction_boxes`); with fewer the packets simply walk them all
CULL_MIN_GROUPS = 2


@njit(parallel=True, cache=True, fastmath=_FAST)
def _cast(ray_o, ray_d, k_time, g_origin, g_matrix, roots, nodes, links, tris, l_min):
    """For every ray, the nearest hit over all frame groups (l, packed triangle, u, v).

    ray_o: (N, 4) or (1, 4) start events (shared when one row); ray_d: (N, 3) unit S
    directions; the backward 4-direction is (k_time, d) with k_time = -1 (light delay) or 0.
    """
    n = ray_d.shape[0]
    o_step = 0 if ray_o.shape[0] == 1 else 1  # one shared start event, or one per ray
    n_groups = roots.shape[0]
    out_l = np.full(n, np.inf)
    out_tri = np.full(n, -1, np.int64)
    out_u = np.zeros(n)
    out_v = np.zeros(n)
    n_chunks = (n + RAY_CHUNK - 1) // RAY_CHUNK
    for c in prange(n_chunks):
        stack = np.empty(bvh_mod.STACK_SIZE, np.int64)
        stack_t = np.empty(bvh_mod.STACK_SIZE)
        for i in range(c * RAY_CHUNK, min(n, (c + 1) * RAY_CHUNK)):
            best = np.inf
            best_tri = -1
            bu = 0.0
            bv = 0.0
            for g in range(n_groups):
                # rest-frame ray: o' = M (E - e0), d' = M k (spatial rows only)
                m = g_matrix[g]
                ox, oy, oz = _frame_origin(m, g_origin[g], ray_o, i * o_step)
                dx, dy, dz = _spatial(m, k_time, ray_d[i, 0], ray_d[i, 1], ray_d[i, 2])
                l, tri, u, v = bvh_mod.first_hit(
                    ox,
                    oy,
                    oz,
                    dx,
                    dy,
                    dz,
                    l_min,
                    best,
                    roots[g],
                    nodes,
                    links,
                    tris,
                    stack,
                    stack_t,
                )
                if tri >= 0:
                    best = l
                    best_tri = tri
                    bu = u
                    bv = v
            out_l[i] = best
            out_tri[i] = best_tri
            out_u[i] = bu
            out_v[i] = bv
    return out_l, out_tri, out_u, out_v


#: Slack added to the direction boxes of frame groups (radians and unit-vector
#: components) and, relatively, to each group's bounding radius: far above float64
#: rounding of the hits, so culling never drops a hit the full loop would find.
CULL_SLACK = 1e-7


@njit(cache=True, inline="always")
def _packet_groups(
    ray_d, base, m_rays, cull_nodes, cull_links, cull_order, cull_boxes, candidates, stack
):
    """Groups whose direction box overlaps the box of the packet's directions, sorted
    ascending into ``candidates``; returns how many."""
    lx = ly = lz = np.inf
    hx = hy = hz = -np.inf
    for r in range(m_rays):
        i = base + r
        lx = min(lx, ray_d[i, 0])
        ly = min(ly, ray_d[i, 1])
        lz = min(lz, ray_d[i, 2])
        hx = max(hx, ray_d[i, 0])
        hy = max(hy, ray_d[i, 1])
        hz = max(hz, ray_d[i, 2])
    k = bvh_mod.boxes_overlapping(
        lx, ly, lz, hx, hy, hz, cull_nodes, cull_links, cull_order, cull_boxes, candidates, stack
    )
    for a in range(1, k):  # insertion sort: few groups per packet
        g = candidates[a]
        b = a - 1
        while b >= 0 and candidates[b] > g:
            candidates[b + 1] = candidates[b]
            b -= 1
        candidates[b + 1] = g
    return k


def group_direction_boxes(event, k_time, g_origin, g_matrix, root_lo, root_hi):
    """(G, 6) boxes (lo xyz, hi xyz) in the space of unit S directions d: a backward ray
    from ``event`` (4,) along a unit d outside group g's box cannot meet that group's
    hierarchy (root box [root_lo, root_hi] (G, 3) in the group's frame). Coordinates are
    the kernels' (centred on the cast's reference event).

    The root box lies in the ball B(c', r) at rest in the group's frame. At every S time
    the ball is a ball of radius r (Galilean map) or an ellipsoid inside it (boost:
    contraction along beta only), around the centre's S worldline p(t) = p + beta (t - t_E)
    with velocity beta. A backward ray (t_E - l, x_E + l d) meets it only if
    |l (d + beta) - q| <= r for some l >= 0 (q = p - x_E; beta -> 0 without light delay),
    i.e. d + beta lies in the cone of half-angle alpha = asin(r/|q|) around q. Writing
    d = -beta + s u with u a unit vector in that cone, |d| = 1 gives
    s = u.beta + sqrt((u.beta)^2 + 1 - beta^2), increasing in u.beta; each component of u
    and u.beta range over exact intervals on the cone's cap (angle to the axis +- alpha),
    so d_i = -beta_i + s u_i lies in the product of the intervals. A group whose ball
    holds x_E gets the whole sphere.
    """
    minv = np.linalg.inv(g_matrix)  # frame (ct', x') -> S displacement
    centre = 0.5 * (root_lo + root_hi)
    radius = 0.5 * np.linalg.norm(root_hi - root_lo, axis=1)
    u4 = minv[:, :, 0]  # S displacement per unit ct' at fixed x': the frame's 4-velocity
    c4 = np.concatenate([np.zeros((len(centre), 1)), centre], axis=1)
    x0 = g_origin + np.einsum("gij,gj->gi", minv, c4)  # centre's event at ct' = 0
    tau = (event[0] - x0[:, 0]) / u4[:, 0]
    p = x0[:, 1:] + tau[:, None] * u4[:, 1:]  # centre at the ray's start time
    beta = u4[:, 1:] / u4[:, :1] if k_time != 0.0 else np.zeros_like(p)
    q = p - event[1:]
    dist = np.linalg.norm(q, axis=1)
    r = radius * (1.0 + CULL_SLACK) + CULL_SLACK * dist
    everywhere = ~(dist > r)  # NaN-safe: unknown geometry is never culled
    with np.errstate(invalid="ignore", divide="ignore"):
        alpha = np.arcsin(np.clip(r / dist, 0.0, 1.0)) + CULL_SLACK
        axis = q / dist[:, None]

        def cap_range(cos_to_axis):
            """Range of cos(angle to a fixed vector) over the cap, given the cap axis'."""
            theta = np.arccos(np.clip(cos_to_axis, -1.0, 1.0))
            return (
                np.cos(np.minimum(np.pi, theta + alpha)),
                np.cos(np.maximum(0.0, theta - alpha)),
            )

        u_lo, u_hi = cap_range(axis.T)  # (3, G) each: the components of u
        b = np.linalg.norm(beta, axis=1)
        x_lo, x_hi = cap_range(np.einsum("gi,gi->g", axis, beta) / np.where(b > 0, b, 1.0))
        x_lo, x_hi = b * x_lo, b * x_hi  # u.beta
        s_lo = x_lo + np.sqrt(x_lo * x_lo + 1.0 - b * b)
        s_hi = x_hi + np.sqrt(x_hi * x_hi + 1.0 - b * b)
        corners = np.stack([s_lo * u_lo, s_lo * u_hi, s_hi * u_lo, s_hi * u_hi])
        lo = (corners.min(axis=0) - beta.T).T - CULL_SLACK
        hi = (corners.max(axis=0) - beta.T).T + CULL_SLACK
    bad = everywhere | ~np.all(np.isfinite(lo) & np.isfinite(hi), axis=1)
    lo[bad] = -2.0
    hi[bad] = 2.0
    return np.concatenate([lo, hi], axis=1)


@njit(parallel=True, cache=True, fastmath=_FAST)
def _cast_packets(
    ray_o,
    ray_d,
    k_time,
    g_origin,
    g_matrix,
    roots,
    nodes,
    links,
    tris,
    l_min,
    out_l,
    out_tri,
    out_u,
    out_v,
    cull=None,
):
    """:func:`_cast` for rays from one shared start event ray_o (1, 4), traversed in packets
    of bvh.PACKET neighbouring rays (camera rays are coherent): same results, faster.

    With ``cull`` = (nodes, links, order, boxes), a bvh.box_tree over the (G, 6) boxes of
    :func:`group_direction_boxes`, a packet walks only the groups whose box overlaps the
    box of its own directions, in ascending group order as without it (so ties resolve
    the same); without, every group. The results go to out_l, out_tri, out_u, out_v (N,),
    allocated by the caller: numpy backs large arrays with huge pages, so writing them
    fresh costs far fewer page faults than arrays allocated here."""
    n = ray_d.shape[0]
    n_groups = roots.shape[0]
    P = bvh_mod.PACKET
    n_packets = (n + P - 1) // P
    for p in prange(n_packets):
        stack = np.empty(bvh_mod.STACK_SIZE, np.int64)
        candidates = np.arange(n_groups)
        dx = np.empty(P)
        dy = np.empty(P)
        dz = np.empty(P)
        best = np.full(P, np.inf)
        best_tri = np.full(P, -1, np.int64)
        best_u = np.zeros(P)
        best_v = np.zeros(P)
        base = p * P
        m_rays = min(P, n - base)
        n_cand = n_groups
        if cull is not None:
            n_cand = _packet_groups(
                ray_d, base, m_rays, cull[0], cull[1], cull[2], cull[3], candidates, stack
            )
        for c in range(n_cand):
            g = candidates[c]
            m = g_matrix[g]
            ox, oy, oz = _frame_origin(m, g_origin[g], ray_o, 0)
            for r in range(P):
                i = base + (r if r < m_rays else 0)  # a short last packet repeats its first ray
                dx[r], dy[r], dz[r] = _spatial(m, k_time, ray_d[i, 0], ray_d[i, 1], ray_d[i, 2])
            bvh_mod.packet_first_hits(
                ox,
                oy,
                oz,
                dx,
                dy,
                dz,
                l_min,
                best,
                best_tri,
                best_u,
                best_v,
                roots[g],
                nodes,
                links,
                tris,
                stack,
            )
        for r in range(m_rays):
            out_l[base + r] = best[r]
            out_tri[base + r] = best_tri[r]
            out_u[base + r] = best_u[r]
            out_v[base + r] = best_v[r]
    return out_l, out_tri, out_u, out_v


@njit(parallel=True, cache=True)
def _resolve(
    ray_o,
    ray_d,
    k_time,
    l,
    tri,
    ref,
    keep_t_rel,
    tri_group,
    tri_body,
    tri_local,
    tri_slot,
    g_origin,
    g_matrix,
    g_beta,
    slot_offset,
    slot_rotation,
    slot_clock,
    beta_cam,
    relativistic,
    body,
    face,
    group,
    emit,
    rest,
    doppler,
    clock,
    t_rel,
):
    """Per ray: body, face, frame group, emission event, body-frame hit point, Doppler
    factor and the body clock's coordinate at emission.

    Rigid (uniform-motion) bodies map the frame hit point back to body axes through their
    slot's offset and rotation; the clock coordinate is the hit's rest-frame time minus
    that of the body's proper-time zero event (slot_clock): an inertial body's proper
    time is its rest-frame time. Triangles with slot -1 (light-cone snapshots) leave the
    body-frame point and the clock to the caller.

    The kernel coordinates are centred on the reference event ``ref`` (4,); the emission
    events are written in scene coordinates (relative event + ref, the same two roundings
    as adding ref afterwards) and, with ``keep_t_rel``, the relative emission times (N,) the snapshots' clocks need (else an
    empty array): one pass over the rays instead of a pass per array. The results go to
    the arrays body ... t_rel (:func:`_resolve_outputs`, allocated by numpy: see
    :func:`_cast_packets`).
    """
    n = ray_d.shape[0]
    o_step = 0 if ray_o.shape[0] == 1 else 1  # one shared start event, or one per ray
    # filled in the parallel loop below (misses included), not pre-filled: one pass over
    # memory instead of two
    g_cam = camera_gamma(beta_cam, relativistic)
    for i in prange(n):
        t = tri[i]
        if t < 0:
            body[i] = -1
            face[i] = -1
            group[i] = -1
            doppler[i] = np.nan
            clock[i] = np.nan
            if keep_t_rel:
                t_rel[i] = np.nan
            for a in range(4):
                emit[i, a] = np.nan
            for a in range(3):
                rest[i, a] = np.nan
            continue
        g = tri_group[t]
        group[i] = g
        body[i] = tri_body[t]
        face[i] = tri_local[t]
        io = i * o_step
        # the emission event relative to the reference event, then in scene coordinates
        e0 = ray_o[io, 0] + l[i] * k_time
        e1 = ray_o[io, 1] + l[i] * ray_d[i, 0]
        e2 = ray_o[io, 2] + l[i] * ray_d[i, 1]
        e3 = ray_o[io, 3] + l[i] * ray_d[i, 2]
        emit[i, 0] = e0 + ref[0]
        emit[i, 1] = e1 + ref[1]
        emit[i, 2] = e2 + ref[2]
        emit[i, 3] = e3 + ref[3]
        if keep_t_rel:
            t_rel[i] = e0
        doppler[i] = doppler_at(g_cam, beta_cam, g_beta, g, ray_d, i, relativistic)
        s = tri_slot[t]
        if s < 0:
            for a in range(3):  # a light-cone snapshot: the caller interpolates
                rest[i, a] = np.nan
            clock[i] = np.nan
            continue
        # hit point in the group frame (the emission event mapped like a start event),
        # relative to the body's origin there
        m = g_matrix[g]
        q0 = e0 - g_origin[g, 0]
        q1 = e1 - g_origin[g, 1]
        q2 = e2 - g_origin[g, 2]
        q3 = e3 - g_origin[g, 3]
        fx, fy, fz = _spatial(m, q0, q1, q2, q3)
        clock[i] = m[0, 0] * q0 + m[0, 1] * q1 + m[0, 2] * q2 + m[0, 3] * q3 - slot_clock[s]
        rx = fx - slot_offset[s, 0]
        ry = fy - slot_offset[s, 1]
        rz = fz - slot_offset[s, 2]
        for a in range(3):  # R^T rel: frame axes -> body axes
            rest[i, a] = (
                slot_rotation[s, 0, a] * rx
                + slot_rotation[s, 1, a] * ry
                + slot_rotation[s, 2, a] * rz
            )


def packet_outputs(n: int) -> tuple:
    """The arrays :func:`_cast_packets` fills and returns: l, packed triangle (N,), and
    u, v as the two columns of one (N, 2) array (the hits' barycentrics, kept as such)."""
    bary = np.empty((n, 2))
    return np.empty(n), np.empty(n, np.int64), bary[:, 0], bary[:, 1]


def _resolve_outputs(n: int, keep_t_rel: bool) -> tuple:
    """The arrays :func:`_resolve` fills: body, face, group (N,) int64, emission events
    (N, 4), body-frame points (N, 3), Doppler factors, clock coordinates (N,) and relative
    emission times ((N,) or (0,))."""
    return (
        np.empty(n, np.int64),
        np.empty(n, np.int64),
        np.empty(n, np.int64),
        np.empty((n, 4)),
        np.empty((n, 3)),
        np.empty(n),
        np.empty(n),
        np.empty(n if keep_t_rel else 0),
    )


class Tracer:
    """Frame groups and their packed hierarchies, ready to cast rays.

    Build once per exposure (uniform bodies do not change between exposures, so an
    animation reuses the hierarchies; light-cone snapshots are rebuilt per exposure).
    """

    def __init__(self, groups: list[FrameGroup]):
        # a group can be empty: a light-cone snapshot of a body none of whose light
        # reaches the camera event (e.g. beyond a hyperbolic worldline's horizon)
        groups = [g for g in groups if len(g.faces)]
        self.groups = groups
        for g in groups:
            if g.bvh is None:
                g.bvh = bvh_mod.build_bvh(g.vertices, g.faces)
        self.packed = bvh_mod.pack([g.bvh for g in groups]) if groups else None
        if not groups:
            return
        # per packed triangle: scene body, face in the body's mesh, rigid-transform slot
        p = self.packed
        body, local, slot, offs, rots, clocks = [], [], [], [], [], []
        for g in groups:
            gface = g.bvh.face_id
            body.append(g.face_body[gface])
            local.append(g.face_local[gface])
            if g.vertex_body_coords is not None:
                slot.append(np.full(len(gface), -1, np.int64))
                continue
            # one slot per body of the group; map body index -> slot
            first = len(offs)
            lookup = {b: first + j for j, b in enumerate(g.bodies)}
            offs.extend(g.body_offset)
            rots.extend(g.body_rotation)
            clocks.extend(
                g.body_clock_offset if g.body_clock_offset is not None else [np.nan] * len(g.bodies)
            )
            slot.append(np.array([lookup[b] for b in g.face_body[gface]], np.int64))
        self.tri_body = np.concatenate(body)
        self.tri_local = np.concatenate(local)
        self.tri_slot = np.concatenate(slot)
        self.slot_offset = np.array(offs, float).reshape(-1, 3)
        self.slot_rotation = np.array(rots, float).reshape(-1, 3, 3)
        self.slot_clock = np.array(clocks, float).reshape(-1)
        self.g_origin = np.stack([np.asarray(g.origin_event, float) for g in groups])
        self.g_time = np.array(
            [np.nan if g.origin_time is None else float(g.origin_time) for g in groups]
        )
        self.g_matrix = np.stack([g.matrix for g in groups])
        self.g_beta = np.stack([np.asarray(g.beta, float) for g in groups])
        assert len(self.tri_body) == len(p.v0)

    def _kernel_rays(self, ray_origin, d_scene, effects: Effects, reference):
        """(reference event R (4,), start events - R (N or 1, 4), directions (N, 3),
        k_time, group origins - R): a cast's rays as the kernels take them."""
        ray_abs = np.atleast_2d(np.asarray(ray_origin, dtype=np.float64))
        ref, g_origin = self._centred_origins(ray_abs[0], reference)
        ray_o = np.ascontiguousarray(ray_abs - ref)
        ray_d = np.ascontiguousarray(d_scene, dtype=np.float64)
        return ref, ray_o, ray_d, (-1.0 if effects.delay else 0.0), g_origin

    def _cast_each(self, ray_o, ray_d, k_time, g_origin, l_min):
        """The per-ray kernel :func:`_cast` over this tracer's packed hierarchies."""
        p = self.packed
        return _cast(
            ray_o, ray_d, k_time, g_origin, self.g_matrix, p.root, p.nodes, p.links, p.tris, l_min
        )

    def first_hits(
        self,
        ray_origin: np.ndarray,
        d_scene: np.ndarray,
        effects: Effects,
        l_min: float = 1e-9,
        reference=None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """(l (N,), body (N,), -1 where nothing is met): the nearest hits of rays with
        their own (N, 4) start events, as :meth:`cast` finds them, without resolving
        them (what a shadow ray needs)."""
        n = len(d_scene)
        if self.packed is None:
            return np.full(n, np.inf), np.full(n, -1, np.int64)
        _, ray_o, ray_d, k_time, g_origin = self._kernel_rays(
            ray_origin, d_scene, effects, reference
        )
        l, tri, _, _ = self._cast_each(ray_o, ray_d, k_time, g_origin, l_min)
        return l, np.where(tri >= 0, self.tri_body[np.maximum(tri, 0)], -1)

    def cast(
        self,
        ray_origin: np.ndarray,
        d_scene: np.ndarray,
        effects: Effects,
        l_min: float = 1e-9,
        beta_cam=None,
        reference=None,
        lazy_beta: bool = False,
    ) -> Hits:
        """Cast backward null rays along (N, 3) unit S directions from (N, 4) start events,
        or from one shared (4,) event. With ``beta_cam`` the hits carry their Doppler
        factor as seen by a camera of that velocity. ``reference`` = (t_R s, x_R (3,) m)
        is the event the kernels' coordinates are centred on (module docstring; the
        exposure event); by default the first start event. ``lazy_beta``: leave the
        emitter velocities to be made on first read (Hits.beta_emit), when every hit moves
        with its frame group."""
        if self.packed is None:
            return _empty_hits(len(d_scene))
        p = self.packed
        ref, ray_o, ray_d, k_time, g_origin = self._kernel_rays(
            ray_origin, d_scene, effects, reference
        )
        l, tri, u, v = packet_outputs(len(ray_d))  # u, v: the columns of the barycentrics
        bary = u.base
        # one or no ray: numba types a 1-element column as contiguous, which would compile
        # the packet kernel once more (~8 s on a fresh install); the per-ray kernel gives
        # the same hits
        if len(ray_o) == 1 and len(ray_d) >= 2:
            _cast_packets(
                ray_o,
                ray_d,
                k_time,
                g_origin,
                self.g_matrix,
                p.root,
                p.nodes,
                p.links,
                p.tris,
                l_min,
                l,
                tri,
                u,
                v,
                self._group_culling(ray_o[0], ray_d, k_time, g_origin),
            )
        else:
            l, tri, u[:], v[:] = self._cast_each(ray_o, ray_d, k_time, g_origin, l_min)
        bc = np.zeros(3) if beta_cam is None else np.asarray(beta_cam, np.float64).reshape(3)
        # the snapshots' clocks take the emission times relative to the reference event
        keep_t_rel = any(g.vertex_clock is not None for g in self.groups)
        out = _resolve_outputs(len(ray_d), keep_t_rel)
        body, face, group, emit, rest, doppler, clock, t_rel = out
        _resolve(
            ray_o,
            ray_d,
            k_time,
            l,
            tri,
            ref,
            keep_t_rel,
            p.tri_group,
            self.tri_body,
            self.tri_local,
            self.tri_slot,
            g_origin,
            self.g_matrix,
            self.g_beta,
            self.slot_offset,
            self.slot_rotation,
            self.slot_clock,
            bc,
            bool(effects.contraction),
            *out,
        )
        # emitter velocities: each hit's group velocity, made when first read, unless a
        # snapshot has per-vertex velocities to blend in
        lazy_beta = lazy_beta and all(g.vertex_beta is None for g in self.groups)
        beta = None if lazy_beta else _group_rows(group, self.g_beta)
        for gi, g in enumerate(self.groups):
            if g.vertex_body_coords is None:
                continue
            sel = np.nonzero(group == gi)[0]
            if len(sel) == 0:
                continue
            # light-cone snapshot: interpolate per-vertex data over the hit triangle
            tri_v = g.faces[p.tri_face[tri[sel]]]
            w = np.stack([1.0 - u[sel] - v[sel], u[sel], v[sel]], -1)
            rest[sel] = _interpolate(w, tri_v, g.vertex_body_coords)
            if g.vertex_beta is not None:  # velocity of the emitting point
                beta[sel] = _interpolate(w, tri_v, g.vertex_beta)
                doppler[sel] = doppler_along(beta[sel], ray_d[sel], bc, effects.contraction)
            if g.vertex_clock is not None:  # the body clock at the emission's instant
                line = _interpolate(w, tri_v, g.vertex_clock)
                clock[sel] = line[:, 0] + line[:, 1] * t_rel[sel]
            if g.vertex_bary is not None:  # (u, v) in the original face, for UV lookups
                face_uv = _interpolate(w, tri_v, g.vertex_bary)
                bary[sel, 0], bary[sel, 1] = face_uv[:, 0], face_uv[:, 1]
        return Hits(
            body,
            face,
            bary,
            l,
            emit,
            rest,
            beta,
            group,
            doppler if beta_cam is not None else None,
            clock,
            self.g_beta if lazy_beta else None,
        )

    def _group_culling(self, event, ray_d, k_time, g_origin):
        """The direction-box tree over the frame groups for rays from one start event
        (``cull`` of :func:`_cast_packets`), or None, which walks every group: with fewer
        than CULL_MIN_GROUPS groups, or directions not of unit length (the bound holds for
        unit directions)."""
        n_groups = len(self.groups)
        if n_groups >= CULL_MIN_GROUPS and len(ray_d):
            norm2 = np.einsum("ij,ij->i", ray_d, ray_d)
            if np.all(np.abs(norm2 - 1.0) <= 1e-12):
                p = self.packed
                roots = p.root
                boxes = group_direction_boxes(
                    event, k_time, g_origin, self.g_matrix, p.node_lo[roots], p.node_hi[roots]
                )
                nodes, links, order = bvh_mod.box_tree(boxes[:, :3], boxes[:, 3:])
                return nodes, links, order, np.ascontiguousarray(boxes)
        return None

    def _centred_origins(self, first_event: np.ndarray, reference):
        """(R (4,), group origins e0 - R (G, 4)): R is ``reference`` as an event, or the
        first start event. Origins with a known scene time take their time offset from the
        times in seconds, (t0 - t_R) c, exact for equal times however large."""
        if reference is None:
            ref = first_event.copy()
            return ref, np.ascontiguousarray(self.g_origin - ref)
        t_ref, x_ref = float(reference[0]), np.asarray(reference[1], float).reshape(3)
        ref = np.concatenate([[C * t_ref], x_ref])
        g_origin = self.g_origin - ref
        timed = np.isfinite(self.g_time)
        g_origin[timed, 0] = (self.g_time[timed] - t_ref) * C
        return ref, np.ascontiguousarray(g_origin)


def _interpolate(weights: np.ndarray, tri_vertices: np.ndarray, values: np.ndarray):
    """Barycentric blend of per-vertex ``values`` over each hit's triangle: (N, C)."""
    return np.einsum("nk,nkc->nc", weights, values[tri_vertices])


@njit(cache=True)
def _bodies_hit(body, n_bodies):
    seen = np.zeros(n_bodies, np.bool_)
    for i in range(body.shape[0]):
        if body[i] >= 0:
            seen[body[i]] = True
    return seen


def bodies_hit(body: np.ndarray, n_bodies: int) -> np.ndarray:
    """(n_bodies,) bool: which scene bodies the hits' ``body`` (N,) indices (-1: none)
    name; one pass, no sort."""
    return _bodies_hit(np.ascontiguousarray(body, dtype=np.int64), int(n_bodies))


def _empty_hits(n: int) -> Hits:
    return Hits(
        np.full(n, -1, np.int64),
        np.full(n, -1, np.int64),
        np.zeros((n, 2)),
        np.full(n, np.inf),
        np.full((n, 4), np.nan),
        np.full((n, 3), np.nan),
        np.full((n, 3), np.nan),
        np.full(n, -1, np.int64),
        np.full(n, np.nan),
        np.full(n, np.nan),
    )


def uniform_groups(bodies, meshes, effects: Effects, indices=None) -> list[FrameGroup]:
    """Group uniformly moving bodies by velocity and build each group's frame mesh.

    ``meshes[i]`` is body i's rest-frame mesh (vertices (V,3) relative to the body origin,
    along the rest-frame axes, i.e. with the body rotation already applied; faces (F,3)).
    ``indices`` restricts to those bodies (default: every body whose motion is inertial).
    Hit points are reported in body axes.
    """
    if indices is None:
        indices = [i for i, b in enumerate(bodies) if b.motion.is_inertial]
    frames = {i: bodies[i].motion.inertial_frame() for i in indices}  # (beta, origin event)
    by_beta: dict[tuple, list[int]] = {}
    for i in indices:
        key = tuple(float(x) for x in np.asarray(frames[i][0], float))
        by_beta.setdefault(key, []).append(i)
    groups = []
    for key, members in by_beta.items():
        beta = np.array(key)
        m = frame_matrix(beta, effects)
        e0 = np.asarray(frames[members[0]][1], float)
        verts, faces, fbody, flocal, offs, rots, clocks = [], [], [], [], [], [], []
        nv = 0
        for i in members:
            eb = np.asarray(frames[i][1], float)
            placed = m @ (eb - e0)
            off = placed[1:]  # body origin, static in the frame
            rot = bodies[i].rotation_matrix()
            v, f = meshes[i]
            verts.append(off + np.asarray(v, float))
            faces.append(np.asarray(f, np.int64) + nv)
            fbody.append(np.full(len(f), i, np.int64))
            flocal.append(np.arange(len(f), dtype=np.int64))
            offs.append(off)
            rots.append(rot)
            # ct' of the clock's zero: the origin event's ct' less its clock coordinate there
            zero = clock_coordinate(bodies[i].motion, eb[0], effects.contraction)[0][0]
            clocks.append(float(placed[0] - zero))
            nv += len(v)
        group = FrameGroup(
            beta,
            e0,
            m,
            members,
            offs,
            rots,
            np.concatenate(fbody),
            np.concatenate(flocal),
            np.concatenate(verts),
            np.concatenate(faces),
            body_clock_offset=clocks,
        )
        t0 = getattr(bodies[members[0]].motion, "time", None)  # s, when e0 is at that time
        group.origin_time = float(t0) if t0 is not None and C * float(t0) == e0[0] else None
        groups.append(group)
    return groups
