"""Bodies in any motion as seen on the camera's past light cone (snapshot meshes).

For one exposure event E = (ct_c, x_c), every point p of a body is seen where it was
when the light reaching E left it: the retarded event of p
(:meth:`relview.kinematics.worldline.RigidKinematics.retarded`). Replacing each vertex of the body's
rest-frame mesh by its retarded position gives a static triangle mesh in the scene
frame S, the *snapshot*. A backward null ray from E that meets the snapshot at path
length l meets it at the event (ct_c - l, x_c + l d), which for a vertex is exactly its
emission event; so the snapshot is ray-cast by :mod:`relview.geometry.trace` as a frame group
at rest (identity map), with per-vertex velocities for the Doppler factor and per-
vertex body coordinates for the surface (physics.md, "Any other motion").

Straight edges and flat faces do not stay straight or flat on the light cone, so the
mesh is refined where the *measured* interpolation error exceeds a tolerance. For each
edge, the exact retarded image of its midpoint is compared with the midpoint of the
chord between its imaged ends,

    error = max( |x_exact - x_chord| / |x_exact - x_c|,   (radians seen from E)
                 |beta_exact - beta_chord| )                (velocity / c)

and edges above the tolerance are split at that midpoint (red-green refinement: a face
with 1, 2 or 3 split edges becomes 2, 3 or 4 faces), round after round, until every
edge passes or a triangle budget is reached. Faces sharing an edge split it the same
way, so the snapshot stays watertight. The achieved error is reported
(:class:`Snapshot`.error); docs/motion.md gives the checks and costs.
"""

from __future__ import annotations

import math
import weakref
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from relview.errors import SceneError
from relview.geometry import bvh as bvh_mod
from relview.geometry.trace import FrameGroup
from relview.kinematics.clocks import clock_coordinate, reference_times
from relview.kinematics.lorentz import C

#: Default interpolation tolerance (radians as seen from the camera, and beta) when no
#: scene is at hand. A 960-pixel-wide 60 degree image has 1.1e-3 rad pixels.
DEFAULT_TOLERANCE = 1e-4
#: With a scene, the default tolerance is this fraction of one pixel's angular width
#: (common practice: sub-pixel geometric error is invisible).
PIXEL_FRACTION = 0.25
#: Largest number of snapshot triangles per body.
DEFAULT_MAX_TRIANGLES = 2_000_000
#: Sub-edges checked per round at most (a seeded random sample beyond that).
MAX_CHECKED_EDGES = 50_000
#: A snapshot hierarchy refitted from an earlier exposure's is rebuilt when its area
#: cost (relview.geometry.bvh.area_cost) exceeds its build's by this factor (common
#: practice for refitted hierarchies: rebuild once traversal gets markedly dearer).
REBUILD_COST_RATIO = 1.5


@dataclass
class Snapshot:
    """One body's mesh on the past light cone of a camera event."""

    vertices: np.ndarray  # (V, 3) m, retarded positions in S
    faces: np.ndarray  # (F, 3) indices into vertices
    parent_face: np.ndarray  # (F,) face of the original mesh each triangle comes from
    body_coords: np.ndarray  # (V, 3) m, rest-frame position of each vertex (mesh axes)
    # (V, 2) (u, v) of each vertex in its original face; None when every snapshot face is
    # its whole original face (no refinement: faces and vertices are the rest mesh's)
    bary: np.ndarray | None
    emit_event: np.ndarray  # (V, 4) [ct, x, y, z] m
    beta: np.ndarray  # (V, 3) velocity / c at emission
    segments: int  # n for uniform n^2 splitting; 0 for adaptive refinement
    error: float  # measured interpolation error (see module docstring)
    # (V, 2): the body clock (relview.kinematics.clocks.clock_coordinate, ct m) along each
    # vertex's worldline near its emission, as a line in the emission time t (ct m):
    # clock = c0 + r t, columns (c0, r) (see _vertex_clock)
    clock: np.ndarray | None = None


def _vertex_clock(kin, points, ev, effects) -> np.ndarray:
    """(V, 2) (c0, r): the clock coordinate of the reference point at the rest-frame
    instant of each vertex's events, to first order in their time t about the emission,
    clock = c0 + r t, r = d clock/dt along the vertex's worldline (NaN: no emission).

    The tracer blends c0 + r t_hit over the hit triangle with the hit's own emission time:
    blending the vertices' clocks themselves would miss that a flat face's emission times
    are not linear across it (the path lengths from the camera are not), an error of
    about (face size)^2 / (2 distance c) whatever the tolerance."""
    out = np.full((len(points), 2), np.nan)
    ok = np.isfinite(ev[:, 0])
    if np.any(ok):
        s = reference_times(kin, points[ok], ev[ok, 0], effects.contraction)
        value, rate = clock_coordinate(kin, s, effects.contraction)
        r = rate / kin.time_rate(points[ok], s, effects.contraction)
        out[ok, 0] = value - r * ev[ok, 0]
        out[ok, 1] = r
    return out


def _tessellation(n: int):
    """Integer barycentrics (j, k) of the (n+1)(n+2)/2 points of one face split into n^2
    triangles, and those triangles (local indices, same orientation as the face)."""
    jk = [(j, k) for j in range(n + 1) for k in range(n + 1 - j)]
    index = {p: i for i, p in enumerate(jk)}
    tris = []
    for j in range(n):
        for k in range(n - j):
            tris.append((index[(j, k)], index[(j + 1, k)], index[(j, k + 1)]))
            if k < n - j - 1:
                tris.append((index[(j + 1, k)], index[(j + 1, k + 1)], index[(j, k + 1)]))
    return np.array(jk, dtype=np.int64), np.array(tris, dtype=np.int64)


def _split_faces(vertices: np.ndarray, faces: np.ndarray, n: int):
    """Every face split into n^2 triangles with its own copy of its points.

    Points are ((i A + j B) + k C) / n with integer weights; a point on a shared edge has
    a zero weight on the third corner and so comes out bit-identical in both faces
    (x + 0 = x and addition commutes in IEEE arithmetic)."""
    jk, tris = _tessellation(n)
    j = jk[:, 0].astype(float)
    k = jk[:, 1].astype(float)
    i = n - j - k
    a, b, c = (vertices[faces[:, m]] for m in range(3))  # (F, 3) each
    pts = (
        (i[None, :, None] * a[:, None] + j[None, :, None] * b[:, None])
        + k[None, :, None] * c[:, None]
    ) / n
    per_face = jk.shape[0]
    f = faces.shape[0]
    points = pts.reshape(f * per_face, 3)
    sub_faces = (tris[None] + per_face * np.arange(f)[:, None, None]).reshape(-1, 3)
    parent = np.repeat(np.arange(f), tris.shape[0])
    bary = np.tile(np.stack([j, k], 1) / n, (f, 1))
    return points, sub_faces, parent, bary


def _unique_rows(points):
    """(distinct rows in lexicographic order, index of each row among them): what
    ``np.unique(points, axis=0, return_inverse=True)`` gives, through one lexsort of the
    columns (np.unique sorts the rows as structured records, several times slower)."""
    order = np.lexsort((points[:, 2], points[:, 1], points[:, 0]))
    ordered = points[order]
    first = np.empty(len(ordered), bool)
    first[:1] = True
    np.any(ordered[1:] != ordered[:-1], axis=1, out=first[1:])
    inverse = np.empty(len(ordered), np.int64)
    inverse[order] = np.cumsum(first) - 1
    return ordered[first], inverse


def _solve_unique(kin, points, camera_event, effects):
    """Retarded events and velocities of points, solving each distinct point once."""
    uniq, inverse = _unique_rows(points)
    ev, beta = kin.retarded(
        uniq, camera_event, delay=effects.delay, contraction=effects.contraction
    )
    return ev[inverse], beta[inverse]


def _chord_errors(kin, points, ev, beta, a, b, camera_event, effects, solve=True):
    """Chord error (module docstring) of edges a-b, with the exact midpoint images.
    NaN where an end has no retarded event. ``solve`` False: the edges are known to be
    distinct, so their midpoints are solved as they are, without looking for repeats."""
    mid = _midpoints(
        np.ascontiguousarray(points, dtype=float),
        np.ascontiguousarray(a, dtype=np.int64),
        np.ascontiguousarray(b, dtype=np.int64),
    )
    if solve:
        ev_mid, beta_mid = _solve_unique(kin, mid, camera_event, effects)
    else:
        ev_mid, beta_mid = kin.retarded(
            mid, camera_event, delay=effects.delay, contraction=effects.contraction
        )
    err = _edge_errors(
        np.ascontiguousarray(ev),
        np.ascontiguousarray(beta),
        np.ascontiguousarray(a, dtype=np.int64),
        np.ascontiguousarray(b, dtype=np.int64),
        np.ascontiguousarray(ev_mid),
        np.ascontiguousarray(beta_mid),
        np.asarray(camera_event, float),
    )
    return err, mid, ev_mid, beta_mid


@njit(cache=True, parallel=True)
def _midpoints(points, a, b):
    """0.5 (points[a] + points[b]), (E, 3), in one pass."""
    mid = np.empty((a.shape[0], 3))
    for i in prange(a.shape[0]):
        for ax in range(3):
            mid[i, ax] = 0.5 * (points[a[i], ax] + points[b[i], ax])
    return mid


@njit(cache=True, parallel=True, error_model="numpy")
def _edge_errors(ev, beta, a, b, ev_mid, beta_mid, cam):
    """Chord error (module docstring) of each edge a-b from its ends' and its midpoint's
    events and velocities; NaN where one is NaN."""
    err = np.empty(a.shape[0])
    for i in prange(a.shape[0]):
        j, k = a[i], b[i]
        dist = 0.0
        off = 0.0
        for ax in range(1, 4):
            d = ev_mid[i, ax] - cam[ax]
            dist += d * d
            c = ev_mid[i, ax] - 0.5 * (ev[j, ax] + ev[k, ax])
            off += c * c
        dbeta = 0.0
        for ax in range(3):
            d = beta_mid[i, ax] - 0.5 * (beta[j, ax] + beta[k, ax])
            dbeta += d * d
        angle = math.sqrt(off) / math.sqrt(dist)
        dbeta = math.sqrt(dbeta)
        if angle != angle or dbeta != dbeta:
            err[i] = np.nan
        else:
            err[i] = max(angle, dbeta)
    return err


def _uniform_error(kin, points, ev, beta, faces, camera_event, effects, rng) -> float:
    """Largest chord error over the sub-edges of ``faces`` (a seeded sample if many)."""
    edges = np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
    edges = np.unique(np.sort(edges, axis=1), axis=0)
    if edges.shape[0] > MAX_CHECKED_EDGES:
        edges = edges[rng.choice(edges.shape[0], MAX_CHECKED_EDGES, replace=False)]
    err, _, _, _ = _chord_errors(
        kin, points, ev, beta, edges[:, 0], edges[:, 1], camera_event, effects
    )
    err = err[np.isfinite(err)]
    return float(err.max()) if err.size else 0.0


def _split_marked(tri, mid, parent):
    """One red-green refinement step. ``mid`` (F, 3) holds the new vertex on edge j
    (vertex j to j+1) or -1. Faces keep their orientation; faces sharing an edge split it
    the same way, so the mesh stays conforming."""
    marked = mid >= 0
    count = marked.sum(axis=1)
    # rotate each face so that a single marked edge is edge 0, or the single unmarked
    # edge of a two-marked face is edge 2
    shift = np.zeros(len(tri), np.int64)
    one = count == 1
    shift[one] = np.argmax(marked[one], axis=1)
    two = count == 2
    shift[two] = (np.argmin(marked[two], axis=1) + 1) % 3
    order = (np.arange(3)[None] + shift[:, None]) % 3
    v = np.take_along_axis(tri, order, axis=1)
    m = np.take_along_axis(mid, order, axis=1)
    v0, v1, v2 = v[:, 0], v[:, 1], v[:, 2]
    m0, m1, m2 = m[:, 0], m[:, 1], m[:, 2]
    parts, owners = [], []

    def add(sel, *corners):
        parts.append(np.stack([c[sel] for c in corners], axis=1))
        owners.append(parent[sel])

    keep = count == 0
    add(keep, v0, v1, v2)
    add(one, v0, m0, v2)
    add(one, m0, v1, v2)
    add(two, m0, v1, m1)
    add(two, v0, m0, m1)
    add(two, v0, m1, v2)
    three = count == 3
    add(three, v0, m0, m2)
    add(three, m0, v1, m1)
    add(three, m2, m1, v2)
    add(three, m0, m1, m2)
    return np.concatenate(parts), np.concatenate(owners)


def _distinct_edges(vid, a, b):
    """The distinct edges among per-face edges a-b (indices of per-face points whose
    distinct points are ``vid``): (index of one per-face edge of each, index of each
    per-face edge's distinct edge). An edge shared by two faces is one distinct edge."""
    da, db = vid[a], vid[b]
    key = np.minimum(da, db) * (1 << 32) + np.maximum(da, db)
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    return first, inverse


def _solve_vertices(kin, vertices, used, cam, effects):
    """(events (V, 4), velocities (V, 3)) of the mesh vertices ``used`` by faces (the
    others NaN)."""
    if len(used) == len(vertices):  # every vertex is used (used is sorted and distinct)
        return kin.retarded(vertices, cam, delay=effects.delay, contraction=effects.contraction)
    ev = np.full((len(vertices), 4), np.nan)
    beta = np.full((len(vertices), 3), np.nan)
    ev[used], beta[used] = kin.retarded(
        vertices[used], cam, delay=effects.delay, contraction=effects.contraction
    )
    return ev, beta


#: Topology of the rest meshes snapshotted in this process, keyed by the faces array's
#: identity and checked against a copy of it (an array edited in place is not mistaken
#: for the old one): its distinct edges, the vertices faces use, and the hierarchy last
#: built over its snapshot (refitted for the next exposures). An entry goes with its
#: faces array (the scene geometry cache, renderer.scene_geometry, holds the meshes),
#: and at most MESH_TOPOLOGY_SIZE are kept.
_MESH_TOPOLOGY: dict[int, dict] = {}
MESH_TOPOLOGY_SIZE = 16


def _mesh_topology(faces: np.ndarray) -> dict:
    key = id(faces)
    entry = _MESH_TOPOLOGY.get(key)
    if entry is not None and entry["faces"].shape == faces.shape:
        if np.array_equal(entry["faces"], faces):
            return entry
    edges = np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
    pair = np.unique(np.minimum(edges[:, 0], edges[:, 1]) * (1 << 32) + np.max(edges, axis=1))
    entry = {
        "faces": faces.copy(),
        "edges": np.stack([pair >> 32, pair & 0xFFFFFFFF], axis=1),
        "used": np.unique(faces),
        "hierarchy": None,
    }
    _MESH_TOPOLOGY.pop(key, None)
    _MESH_TOPOLOGY[key] = entry
    weakref.finalize(faces, _forget_topology, key, entry)
    while len(_MESH_TOPOLOGY) > MESH_TOPOLOGY_SIZE:
        _MESH_TOPOLOGY.pop(next(iter(_MESH_TOPOLOGY)))
    return entry


def _forget_topology(key: int, entry: dict) -> None:
    """Drop the entry of a faces array that no longer exists (not a newer one at its id)."""
    if _MESH_TOPOLOGY.get(key) is entry:
        del _MESH_TOPOLOGY[key]


def _whole_mesh(kin, vertices, faces, cam, effects, tolerance):
    """The first round of the refinement on the mesh's own vertices and distinct edges
    (shared vertices, topology cached per mesh): the Snapshot when every edge passes the
    tolerance, with the rest mesh's faces and vertices (``bary`` None: each snapshot
    triangle is its whole original face, so a hit's own (u, v) are its face's), else
    None and what was solved (the vertices, the edges' midpoint checks) for
    :func:`_adaptive`. The same mesh, events and
    measured error as the refinement's when it stops after its first round; only the
    per-face copies are left out."""
    topology = _mesh_topology(faces)
    ev, beta = _solve_vertices(kin, vertices, topology["used"], cam, effects)
    edges = topology["edges"]
    checked = _chord_errors(
        kin, vertices, ev, beta, edges[:, 0], edges[:, 1], cam, effects, solve=False
    )
    err = checked[0]
    finite = np.isfinite(err)
    if np.any(err[finite] > tolerance):
        return None, ((ev, beta), checked)
    error = float(err[finite].max()) if np.any(finite) else 0.0
    if np.all(np.isfinite(ev[:, 0])):  # every vertex seen: nothing to drop (the usual case)
        keep = np.ones(len(faces), bool)
        positions = ev[:, 1:]
    else:
        keep = np.all(np.isfinite(ev[faces, 0]), axis=1)
        positions = np.where(np.isfinite(ev[:, 1:]), ev[:, 1:], 0.0)  # unused where NaN
    clock = _vertex_clock(kin, vertices, ev, effects)
    if keep.all():
        kept_faces, parent = faces.copy(), np.arange(len(faces))
    else:
        kept_faces, parent = faces[keep], np.nonzero(keep)[0]
    snap = Snapshot(positions, kept_faces, parent, vertices, None, ev, beta, 0, error, clock)
    return snap, None


def _adaptive(
    kin, vertices, faces, cam, effects, tolerance, max_triangles, max_rounds=14, solved=None
):
    """Red-green refinement of every edge whose chord error exceeds the tolerance; the
    exact midpoint images computed for the test become the new vertices.

    Each face owns copies of its corners (their barycentrics are per face), but every
    retarded solve is made once per *distinct* point: ``vid`` maps each per-face point to
    its distinct point (at first the mesh's own vertex, then one new point per split
    distinct edge), and the solved events live in arrays over distinct points. The copies
    get identical values (the solves work point by point, and a midpoint's coordinates
    do not depend on the order of its ends), so the mesh is the one that solving every
    copy would give. Returns the per-face arrays and ``vid`` with the distinct points.
    ``solved``: ((events, velocities) of the vertices, the chord checks of the mesh's
    distinct edges in key order) from :func:`_whole_mesh`, which the first round reuses."""
    f0 = len(faces)
    points = vertices[faces].reshape(-1, 3)  # each face owns its corners (per-face bary)
    vid = faces.reshape(-1).astype(np.int64)
    tri = np.arange(3 * f0, dtype=np.int64).reshape(f0, 3)
    parent = np.arange(f0, dtype=np.int64)
    bary = np.tile(np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]), (f0, 1))
    distinct = vertices.copy()  # (D, 3) body coordinates of the distinct points
    first_checks = None
    if solved is None:
        ev_d, beta_d = _solve_vertices(kin, vertices, np.unique(vid), cam, effects)
    else:
        (ev_d, beta_d), first_checks = solved
    # Only the faces made in the previous round can hold unchecked edges: a face whose
    # edges all passed is final (none of its edges is split later, so no neighbour splits
    # it), and is set aside instead of being sorted again every round.
    done_tri, done_parent = [], []
    done_count = 0
    good = np.empty(0, np.int64)  # keys of the active faces' edges measured within tolerance
    error = 0.0
    for _ in range(max_rounds):
        ends = np.stack([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [2, 0]]], axis=1)  # (F, 3, 2)
        key = np.minimum(ends[..., 0], ends[..., 1]) * (1 << 32) + np.maximum(
            ends[..., 0], ends[..., 1]
        )
        ukey, inverse = np.unique(key.ravel(), return_inverse=True)
        todo = np.nonzero(~np.isin(ukey, good, assume_unique=True))[0]
        if todo.size == 0:
            break
        a, b = ukey[todo] >> 32, ukey[todo] & 0xFFFFFFFF
        first, edge_of = _distinct_edges(vid, a, b)
        if first_checks is not None and len(first_checks[0]) == len(first):
            # round one: the distinct edges of the mesh itself, in the same key order
            err_d, mid_d, ev_mid_d, beta_mid_d = first_checks
        else:
            err_d, mid_d, ev_mid_d, beta_mid_d = _chord_errors(
                kin, points, ev_d[vid], beta_d[vid], a[first], b[first], cam, effects, solve=False
            )
        first_checks = None
        err = err_d[edge_of]
        bad = np.isfinite(err) & (err > tolerance)
        ok = ~bad
        if np.any(ok & np.isfinite(err)):
            error = max(error, float(np.max(err[ok & np.isfinite(err)])))
        if not np.any(bad):
            break
        mid_of = np.full(len(ukey), -1, np.int64)
        new = len(points) + np.arange(int(bad.sum()))
        mid_of[todo[bad]] = new
        mid = mid_of[inverse.reshape(-1)].reshape(-1, 3)
        if done_count + len(tri) + int((mid >= 0).sum()) > max_triangles:  # budget reached
            error = max(error, float(np.max(err[bad])))
            break
        # the next round's faces are children of this round's: their edges that are not
        # new are this round's unsplit edges, all measured within tolerance
        good = ukey[mid_of < 0]
        bad_d = np.isfinite(err_d) & (err_d > tolerance)
        rank = np.cumsum(bad_d) - 1  # new distinct point of each split distinct edge
        points = np.concatenate([points, mid_d[edge_of[bad]]])
        vid = np.concatenate([vid, len(distinct) + rank[edge_of[bad]]])
        distinct = np.concatenate([distinct, mid_d[bad_d]])
        ev_d = np.concatenate([ev_d, ev_mid_d[bad_d]])
        beta_d = np.concatenate([beta_d, beta_mid_d[bad_d]])
        bary = np.concatenate([bary, 0.5 * (bary[a[bad]] + bary[b[bad]])])
        final = ~np.any(mid >= 0, axis=1)
        done_tri.append(tri[final])
        done_parent.append(parent[final])
        done_count += int(final.sum())
        tri, parent = _split_marked(tri[~final], mid[~final], parent[~final])
    else:
        error = max(error, tolerance)  # rounds exhausted: not verified below the tolerance
    tri = np.concatenate(done_tri + [tri])
    parent = np.concatenate(done_parent + [parent])
    return points, tri, parent, bary, vid, (distinct, ev_d, beta_d), error


def snapshot(
    motion,
    vertices,
    faces,
    camera_event,
    effects,
    tolerance: float = DEFAULT_TOLERANCE,
    max_triangles: int = DEFAULT_MAX_TRIANGLES,
    segments: int | None = None,
) -> Snapshot:
    """The mesh (rest-frame vertices (V,3) m, faces (F,3)) of a body moving with ``motion``,
    placed on the past light cone of ``camera_event`` (4,) [ct, x, y, z] m.

    Default: adaptive red-green refinement until every edge's measured chord error is
    within ``tolerance`` (or the mesh reaches ``max_triangles``). ``segments`` instead
    splits every face uniformly into segments^2 triangles. The measured error is in the
    result (``segments`` is 0 for the adaptive mesh). Faces with a vertex that no light
    from reaches the camera (NaN) are dropped.
    """
    kin = motion
    vertices = np.asarray(vertices, float)
    faces = np.asarray(faces, np.int64)
    cam = np.asarray(camera_event, float).reshape(4)
    if segments is None:
        whole, solved = _whole_mesh(kin, vertices, faces, cam, effects, tolerance)
        if whole is not None:
            return whole
        pts, sub, parent, bary, vid, (distinct, ev_d, beta_d), err = _adaptive(
            kin, vertices, faces, cam, effects, tolerance, max_triangles, solved=solved
        )
        ev, beta = ev_d[vid], beta_d[vid]
        n = 0
    else:
        n = int(segments)
        pts, sub, parent, bary = _split_faces(vertices, faces, n)
        ev, beta = _solve_unique(kin, pts, cam, effects)
        err = _uniform_error(kin, pts, ev, beta, sub, cam, effects, np.random.default_rng(0))
        distinct, vid = _unique_rows(pts)
        ev_d = np.empty((len(distinct), 4))
        ev_d[vid] = ev
    keep = np.all(np.isfinite(ev[sub, 0]), axis=1)
    positions = np.where(np.isfinite(ev[:, 1:]), ev[:, 1:], 0.0)  # unused where NaN (faces dropped)
    # the clock once per distinct point (it depends on the point and its event only)
    clock = _vertex_clock(kin, distinct, ev_d, effects)[vid]
    return Snapshot(positions, sub[keep], parent[keep], pts, bary, ev, beta, n, err, clock)


def _snapshot_hierarchy(faces, snap: Snapshot):
    """The hierarchy over a snapshot that kept the rest mesh's faces (no refinement, no
    face dropped): the one held for that mesh refitted to the new vertex positions
    (bvh.refit_bvh: exact boxes, so no hit is lost), rebuilt when the refit's area cost
    has grown beyond REBUILD_COST_RATIO times its build's. None (the tracer builds one)
    for refined snapshots."""
    if snap.bary is not None or len(snap.faces) != len(faces) or len(faces) == 0:
        return None
    topology = _mesh_topology(faces)
    held = topology["hierarchy"]
    if held is not None:
        tree = bvh_mod.refit_bvh(held[0], snap.vertices, faces)
        if bvh_mod.area_cost(tree) <= REBUILD_COST_RATIO * held[1]:
            return tree
    tree = bvh_mod.build_bvh(snap.vertices, faces)
    topology["hierarchy"] = (tree, bvh_mod.area_cost(tree))
    return tree


def check_body_speed(scene, index: int, vertices) -> None:
    """Reject a body some point of which would move at or above c under its motion
    (:meth:`relview.kinematics.worldline.RigidKinematics.validate` over the mesh's radius), as a
    SceneError naming the scene file and the body."""
    body = scene.bodies[index]
    extent = (
        float(np.sqrt((np.asarray(vertices, float) ** 2).sum(axis=1).max()))
        if len(vertices)
        else 0.0
    )
    kin = body.motion
    if getattr(kin, "_validated_extent", -1.0) >= extent:  # done for an earlier frame
        return
    try:
        kin.validate(extent)
    except ValueError as err:
        source = getattr(scene, "source_path", None)
        raise SceneError(str(err), file=source, key=f'[body.motion] (body "{body.name}")') from None
    kin._validated_extent = extent


def pixel_tolerance(scene, width: int | None = None) -> float:
    """PIXEL_FRACTION of the angular width (rad) of one pixel of the scene's camera
    (horizontal field of view / width; the panorama spans 2 pi). ``width``: the width
    actually rendered, when it is not the scene file's (render(resolution=...))."""
    try:
        width = float(scene.render.resolution[0] if width is None else width)
        fov = 360.0 if scene.camera.projection == "panorama" else float(scene.camera.fov)
    except AttributeError:
        return DEFAULT_TOLERANCE
    return PIXEL_FRACTION * math.radians(fov) / width


def snapshot_groups(
    scene,
    meshes,
    indices,
    camera_event,
    effects,
    tolerance: float | None = None,
    max_triangles: int = DEFAULT_MAX_TRIANGLES,
    reference=None,
) -> list[FrameGroup]:
    """Frame groups (one per body in ``indices``) of light-cone snapshots, for
    :class:`relview.geometry.trace.Tracer`. ``meshes[i]`` is body i's rest-frame mesh (vertices
    along the rest-frame axes, rotation applied). ``tolerance`` (rad and beta) defaults to
    :func:`pixel_tolerance`. Each group has ``.snapshot`` attached (segments, measured
    error).

    ``reference`` = (t_R s, x_R (3,) m), normally the exposure event: the motions are
    solved in coordinates centred on it (RigidKinematics.shifted), so the snapshot does not
    depend on where the scene sits in time or space; its vertices and events are then
    relative to that event, and the group's origin is that event. Default: the scene's
    own origin (t = 0, x = 0)."""
    if tolerance is None:
        tolerance = pixel_tolerance(scene)
    groups = []
    t_ref, x_ref = (
        (0.0, np.zeros(3))
        if reference is None
        else (float(reference[0]), np.asarray(reference[1], float).reshape(3))
    )
    ref_event = np.concatenate([[C * t_ref], x_ref])
    cam = np.asarray(camera_event, float).reshape(4) - ref_event
    for i in indices:
        body = scene.bodies[i]
        verts, faces = meshes[i]
        check_body_speed(scene, i, verts)
        motion = body.motion.shifted(t_ref, x_ref)
        snap = snapshot(motion, verts, faces, cam, effects, tolerance, max_triangles)
        rot = body.rotation_matrix()
        group = FrameGroup(
            beta=np.zeros(3),
            origin_event=ref_event,
            matrix=np.eye(4),
            bodies=[i],
            body_offset=[np.zeros(3)],
            body_rotation=[rot],
            face_body=np.full(len(snap.faces), i, np.int64),
            face_local=snap.parent_face,
            vertices=snap.vertices,
            faces=snap.faces,
            vertex_body_coords=snap.body_coords @ rot,  # rest-frame axes -> body axes (R^T p)
            vertex_beta=snap.beta,
            vertex_bary=snap.bary,
            vertex_clock=snap.clock,
            origin_time=t_ref,
        )
        group.bvh = _snapshot_hierarchy(faces, snap)
        group.snapshot = snap
        groups.append(group)
    return groups
