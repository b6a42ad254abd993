"""Bounding-volume hierarchy over triangles: binned-SAH build and first-hit traversal.

The build follows the binned surface-area heuristic over all three axes (Wald, "On fast Construction of
SAH-based Bounding Volume Hierarchies", IEEE Symp. Interactive Ray Tracing 2007);
the traversal is the usual ordered stack walk with slab tests (Kay & Kajiya 1986)
and the Moeller-Trumbore ray/triangle test (J. Graphics Tools 2(1), 1997).

Rays need not be unit length: the hit parameter ``l`` is in units of the ray's
direction vector, which lets the tracer use the S-frame path length directly while
intersecting in a body's rest frame.

Several hierarchies (one per rest frame) are packed into one :class:`BVHSet` of flat
arrays so that one numba kernel can walk all of them for every ray.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

MAX_LEAF = 4
N_BINS = 16
STACK_SIZE = 128
MAX_DEPTH = 100  # keeps the traversal stack (STACK_SIZE) from overflowing


@njit(cache=True)
def _sah_split(
    order,
    start,
    count,
    axis,
    c_lo,
    scale,
    centroid,
    tri_lo,
    tri_hi,
    n_bins,
    bin_lo,
    bin_hi,
    bin_n,
    right_area,
    right_n,
):
    """Cheapest binned-SAH split of order[start:start+count] along ``axis``:
    (cost = sum over both sides of triangles x surface area, last bin of the left side)."""
    for b in range(n_bins):
        bin_n[b] = 0
        for a in range(3):
            bin_lo[b, a] = np.inf
            bin_hi[b, a] = -np.inf
    for k in range(start, start + count):
        i = order[k]
        b = int((centroid[i, axis] - c_lo) * scale)
        if b >= n_bins:
            b = n_bins - 1
        bin_n[b] += 1
        for a in range(3):
            bin_lo[b, a] = min(bin_lo[b, a], tri_lo[i, a])
            bin_hi[b, a] = max(bin_hi[b, a], tri_hi[i, a])
    # sweep from the right
    rlo = np.full(3, np.inf)
    rhi = np.full(3, -np.inf)
    rn = 0
    for b in range(n_bins - 1, 0, -1):
        rn += bin_n[b]
        for a in range(3):
            rlo[a] = min(rlo[a], bin_lo[b, a])
            rhi[a] = max(rhi[a], bin_hi[b, a])
        right_n[b] = rn
        if rn > 0:
            d = rhi - rlo
            right_area[b] = d[0] * d[1] + d[1] * d[2] + d[2] * d[0]
        else:
            right_area[b] = 0.0
    llo = np.full(3, np.inf)
    lhi = np.full(3, -np.inf)
    ln = 0
    best_cost = np.inf
    best_b = -1
    for b in range(0, n_bins - 1):
        ln += bin_n[b]
        for a in range(3):
            llo[a] = min(llo[a], bin_lo[b, a])
            lhi[a] = max(lhi[a], bin_hi[b, a])
        if ln == 0 or right_n[b + 1] == 0:
            continue
        d = lhi - llo
        la = d[0] * d[1] + d[1] * d[2] + d[2] * d[0]
        cost = ln * la + right_n[b + 1] * right_area[b + 1]
        if cost < best_cost:
            best_cost = cost
            best_b = b
    return best_cost, best_b


@njit(cache=True)
def _build(tri_lo, tri_hi, centroid, max_leaf, n_bins):
    n = tri_lo.shape[0]
    max_nodes = 2 * n + 1
    node_lo = np.empty((max_nodes, 3))
    node_hi = np.empty((max_nodes, 3))
    node_left = np.full(max_nodes, -1, np.int64)
    node_right = np.full(max_nodes, -1, np.int64)
    node_start = np.zeros(max_nodes, np.int64)
    node_count = np.zeros(max_nodes, np.int64)
    order = np.arange(n)

    stack = np.empty((n + 64, 2), np.int64)  # (node, depth) pairs
    n_nodes = 1
    node_start[0] = 0
    node_count[0] = n
    stack[0, 0] = 0
    stack[0, 1] = 0
    sp = 1
    bin_lo = np.empty((n_bins, 3))
    bin_hi = np.empty((n_bins, 3))
    bin_n = np.zeros(n_bins, np.int64)
    right_area = np.empty(n_bins)
    right_n = np.empty(n_bins, np.int64)
    while sp > 0:
        sp -= 1
        node = stack[sp, 0]
        depth = stack[sp, 1]
        start = node_start[node]
        count = node_count[node]
        lo = np.full(3, np.inf)
        hi = np.full(3, -np.inf)
        clo = np.full(3, np.inf)
        chi = np.full(3, -np.inf)
        for k in range(start, start + count):
            i = order[k]
            for a in range(3):
                lo[a] = min(lo[a], tri_lo[i, a])
                hi[a] = max(hi[a], tri_hi[i, a])
                clo[a] = min(clo[a], centroid[i, a])
                chi[a] = max(chi[a], centroid[i, a])
        node_lo[node] = lo
        node_hi[node] = hi
        if count <= max_leaf or depth >= MAX_DEPTH:
            continue
        ext = chi - clo
        axis = 0
        if ext[1] > ext[axis]:
            axis = 1
        if ext[2] > ext[axis]:
            axis = 2
        if ext[axis] <= 0.0:
            if count <= 64:
                continue
            # all centroids coincide: split in the middle of the list
            mid = start + count // 2
        else:
            # binned SAH over every axis with spread-out centroids; keep the cheapest split
            best_cost = np.inf
            best_b = -1
            for ax in range(3):
                if ext[ax] <= 0.0:
                    continue
                cost, b = _sah_split(
                    order,
                    start,
                    count,
                    ax,
                    clo[ax],
                    n_bins / ext[ax],
                    centroid,
                    tri_lo,
                    tri_hi,
                    n_bins,
                    bin_lo,
                    bin_hi,
                    bin_n,
                    right_area,
                    right_n,
                )
                if cost < best_cost:
                    best_cost = cost
                    best_b = b
                    axis = ax
            scale = n_bins / ext[axis]
            d = hi - lo
            parent_area = d[0] * d[1] + d[1] * d[2] + d[2] * d[0]
            # leaf if splitting does not pay (traversal cost ~ 1 triangle test)
            if best_b < 0 or (best_cost >= count * parent_area and count <= 16):
                continue
            # partition order[start:start+count] by bin <= best_b
            i0 = start
            i1 = start + count - 1
            while i0 <= i1:
                b = int((centroid[order[i0], axis] - clo[axis]) * scale)
                if b >= n_bins:
                    b = n_bins - 1
                if b <= best_b:
                    i0 += 1
                else:
                    tmp = order[i0]
                    order[i0] = order[i1]
                    order[i1] = tmp
                    i1 -= 1
            mid = i0
            if mid == start or mid == start + count:
                mid = start + count // 2
        left = n_nodes
        right = n_nodes + 1
        n_nodes += 2
        node_left[node] = left
        node_right[node] = right
        node_start[left] = start
        node_count[left] = mid - start
        node_start[right] = mid
        node_count[right] = start + count - mid
        node_count[node] = 0
        stack[sp, 0] = left
        stack[sp, 1] = depth + 1
        sp += 1
        stack[sp, 0] = right
        stack[sp, 1] = depth + 1
        sp += 1
    return (
        node_lo[:n_nodes].copy(),
        node_hi[:n_nodes].copy(),
        node_left[:n_nodes].copy(),
        node_right[:n_nodes].copy(),
        node_start[:n_nodes].copy(),
        node_count[:n_nodes].copy(),
        order,
    )


@dataclass
class BVH:
    """One hierarchy; triangles stored in traversal order as (v0, e1, e2)."""

    node_lo: np.ndarray  # (M, 3)
    node_hi: np.ndarray  # (M, 3)
    node_left: np.ndarray  # (M,) child index, -1 for a leaf
    node_right: np.ndarray  # (M,)
    node_start: np.ndarray  # (M,) first triangle (traversal order) of a leaf
    node_count: np.ndarray  # (M,) triangles in a leaf, 0 for inner nodes
    v0: np.ndarray  # (F, 3)
    e1: np.ndarray  # (F, 3)
    e2: np.ndarray  # (F, 3)
    face_id: np.ndarray  # (F,) index of each stored triangle in the input face list


def build_bvh(vertices: np.ndarray, faces: np.ndarray) -> BVH:
    """Build a BVH over triangles ``vertices[faces]`` ((V,3) float metres, (F,3) int)."""
    tri = np.asarray(vertices, dtype=np.float64)[np.asarray(faces, dtype=np.int64)]
    if len(tri) == 0:
        raise ValueError("cannot build a hierarchy over zero triangles")
    tri_lo = tri.min(axis=1)
    tri_hi = tri.max(axis=1)
    centroid = tri.mean(axis=1)
    lo, hi, left, right, start, count, order = _build(tri_lo, tri_hi, centroid, MAX_LEAF, N_BINS)
    t = tri[order]
    return BVH(
        lo,
        hi,
        left,
        right,
        start,
        count,
        t[:, 0].copy(),
        (t[:, 1] - t[:, 0]).copy(),
        (t[:, 2] - t[:, 0]).copy(),
        order.astype(np.int64),
    )


@njit(cache=True, parallel=True)
def _refit(vertices, faces, order, node_left, node_right, node_start, node_count):
    """Triangles (v0, e1, e2) in traversal order and every node's box, for new vertex
    positions under a fixed topology. Leaves take the min/max of their triangles'
    corners, as the build does; inner nodes the union of their children, bottom-up (the
    build numbers children after their parents, so descending indices visit children
    first). The boxes are therefore exactly those the build computes for the same
    topology: no triangle ever lies outside its leaf's box."""
    n = order.shape[0]
    v0 = np.empty((n, 3))
    e1 = np.empty((n, 3))
    e2 = np.empty((n, 3))
    for k in prange(n):
        f = order[k]
        a = faces[f, 0]
        b = faces[f, 1]
        c = faces[f, 2]
        for ax in range(3):
            v0[k, ax] = vertices[a, ax]
            e1[k, ax] = vertices[b, ax] - vertices[a, ax]
            e2[k, ax] = vertices[c, ax] - vertices[a, ax]
    m = node_left.shape[0]
    lo = np.empty((m, 3))
    hi = np.empty((m, 3))
    for node in prange(m):
        if node_left[node] < 0:
            for ax in range(3):
                lo[node, ax] = np.inf
                hi[node, ax] = -np.inf
            for k in range(node_start[node], node_start[node] + node_count[node]):
                f = order[k]
                for corner in range(3):
                    vi = faces[f, corner]
                    for ax in range(3):
                        lo[node, ax] = min(lo[node, ax], vertices[vi, ax])
                        hi[node, ax] = max(hi[node, ax], vertices[vi, ax])
    for node in range(m - 1, -1, -1):
        left = node_left[node]
        if left >= 0:
            right = node_right[node]
            for ax in range(3):
                lo[node, ax] = min(lo[left, ax], lo[right, ax])
                hi[node, ax] = max(hi[left, ax], hi[right, ax])
    return lo, hi, v0, e1, e2


def refit_bvh(tree: BVH, vertices: np.ndarray, faces: np.ndarray) -> BVH:
    """The hierarchy ``tree`` (built over ``faces``) for triangles ``vertices[faces]`` at
    new positions: same topology and triangle order, boxes recomputed bottom-up. Every
    hit a fresh build would find is found (the boxes bound their triangles exactly as a
    build's do); only the traversal cost can grow when the triangles have moved far
    relative to each other (see :func:`area_cost`). ``tree`` is left unchanged."""
    lo, hi, v0, e1, e2 = _refit(
        np.ascontiguousarray(vertices, dtype=np.float64),
        np.ascontiguousarray(faces, dtype=np.int64),
        tree.face_id,
        tree.node_left,
        tree.node_right,
        tree.node_start,
        tree.node_count,
    )
    return BVH(
        lo,
        hi,
        tree.node_left,
        tree.node_right,
        tree.node_start,
        tree.node_count,
        v0,
        e1,
        e2,
        tree.face_id,
    )


def area_cost(tree: BVH) -> float:
    """Surface-area-heuristic cost of a hierarchy relative to its root box: the sum over
    nodes of (box area / root area) x (1 for an inner node, its triangles for a leaf)
    (the expected work of a random ray that meets the root; Wald 2007, as in the build).
    A refitted hierarchy whose cost has grown well beyond its build's is worth rebuilding."""
    return _area_cost(tree.node_lo, tree.node_hi, tree.node_left, tree.node_count)


@njit(cache=True)
def _area_cost(lo, hi, left, count):
    total = 0.0
    root = 0.0
    for node in range(lo.shape[0]):
        dx = hi[node, 0] - lo[node, 0]
        dy = hi[node, 1] - lo[node, 1]
        dz = hi[node, 2] - lo[node, 2]
        area = dx * dy + dy * dz + dz * dx
        if node == 0:
            root = area
        total += area * (1.0 if left[node] >= 0 else count[node])
    if not root > 0.0:
        return float(count.sum())
    return total / root


@dataclass
class BVHSet:
    """Several hierarchies packed into flat arrays; group g's root is ``root[g]``."""

    root: np.ndarray  # (G,)
    node_lo: np.ndarray
    node_hi: np.ndarray
    node_left: np.ndarray
    node_right: np.ndarray
    node_start: np.ndarray
    node_count: np.ndarray
    v0: np.ndarray
    e1: np.ndarray
    e2: np.ndarray
    tri_group: np.ndarray  # (F_total,) group of each packed triangle
    tri_face: np.ndarray  # (F_total,) face index within the group's input list
    tri_offset: np.ndarray  # (G,) first packed triangle of each group
    # interleaved copies for the traversal kernel (one cache line per node / triangle)
    nodes: np.ndarray = None  # (M, 6) float32: lo xyz, hi xyz
    links: np.ndarray = None  # (M, 4) int64: left, right, first triangle, count
    tris: np.ndarray = None  # (F, 9) float64: v0, e1, e2


def pack(bvhs: list[BVH]) -> BVHSet:
    """Concatenate hierarchies, shifting child and triangle indices (one hierarchy is
    taken as it is: nothing to shift)."""
    if len(bvhs) == 1:
        b = bvhs[0]
        return _interleaved(
            BVHSet(
                np.zeros(1, np.int64),
                b.node_lo,
                b.node_hi,
                b.node_left,
                b.node_right,
                b.node_start,
                b.node_count,
                b.v0,
                b.e1,
                b.e2,
                np.zeros(len(b.v0), np.int64),
                b.face_id,
                np.zeros(1, np.int64),
            )
        )
    roots, lo, hi, left, right, start, count = [], [], [], [], [], [], []
    v0, e1, e2, grp, face, toff = [], [], [], [], [], []
    n_off = 0
    t_off = 0
    for g, b in enumerate(bvhs):
        roots.append(n_off)
        lo.append(b.node_lo)
        hi.append(b.node_hi)
        left.append(np.where(b.node_left >= 0, b.node_left + n_off, -1))
        right.append(np.where(b.node_right >= 0, b.node_right + n_off, -1))
        start.append(b.node_start + t_off)
        count.append(b.node_count)
        v0.append(b.v0)
        e1.append(b.e1)
        e2.append(b.e2)
        grp.append(np.full(len(b.v0), g, np.int64))
        face.append(b.face_id)
        toff.append(t_off)
        n_off += len(b.node_lo)
        t_off += len(b.v0)
    cat = np.concatenate
    out = BVHSet(
        np.array(roots, np.int64),
        cat(lo),
        cat(hi),
        cat(left),
        cat(right),
        cat(start),
        cat(count),
        cat(v0),
        cat(e1),
        cat(e2),
        cat(grp),
        cat(face),
        np.array(toff, np.int64),
    )
    return _interleaved(out)


def _interleaved(out: BVHSet) -> BVHSet:
    """``out`` with the traversal kernel's interleaved arrays added."""
    # Node boxes in float32, rounded outwards so that no float64 hit is ever culled.
    lo32 = np.nextafter(out.node_lo.astype(np.float32), np.float32(-np.inf))
    hi32 = np.nextafter(out.node_hi.astype(np.float32), np.float32(np.inf))
    out.nodes = np.ascontiguousarray(np.concatenate([lo32, hi32], axis=1))
    out.links = np.ascontiguousarray(
        np.stack([out.node_left, out.node_right, out.node_start, out.node_count], axis=1)
    )
    out.tris = np.ascontiguousarray(np.concatenate([out.v0, out.e1, out.e2], axis=1))
    return out


#: reciprocal used for a zero direction component: huge but finite, so that a slab
#: bound exactly at the ray origin gives 0 * big = 0 instead of NaN
_BIG = 1e300


@njit(cache=True, inline="always")
def _entry(node, ox, oy, oz, ix, iy, iz, l_min, l_max, nodes):
    """Entry parameter of the ray into a node's box within [l_min, l_max], or inf."""
    t0 = (nodes[node, 0] - ox) * ix
    t1 = (nodes[node, 3] - ox) * ix
    tn = min(t0, t1)
    tf = max(t0, t1)
    t0 = (nodes[node, 1] - oy) * iy
    t1 = (nodes[node, 4] - oy) * iy
    tn = max(tn, min(t0, t1))
    tf = min(tf, max(t0, t1))
    t0 = (nodes[node, 2] - oz) * iz
    t1 = (nodes[node, 5] - oz) * iz
    tn = max(tn, min(t0, t1))
    tf = min(tf, max(t0, t1))
    tn = max(tn, l_min)
    tf = min(tf, l_max)
    if tn <= tf:
        return tn
    return np.inf


@njit(cache=True, inline="always")
def first_hit(ox, oy, oz, dx, dy, dz, l_min, l_max, root, nodes, links, tris, stack, stack_t):
    """Nearest triangle hit with l in (l_min, l_max); returns (l, packed triangle, u, v).

    ``stack`` (int64) and ``stack_t`` (float64) are scratch arrays of length STACK_SIZE
    owned by the caller. Children are entered nearest first; a postponed child is skipped
    when a hit nearer than its entry point has been found meanwhile.
    """
    ix = 1.0 / dx if dx != 0.0 else _BIG
    iy = 1.0 / dy if dy != 0.0 else _BIG
    iz = 1.0 / dz if dz != 0.0 else _BIG
    best = l_max
    best_tri = -1
    best_u = 0.0
    best_v = 0.0
    if _entry(root, ox, oy, oz, ix, iy, iz, l_min, best, nodes) == np.inf:
        return best, best_tri, best_u, best_v
    node = root
    sp = 0
    while True:
        cnt = links[node, 3]
        if cnt > 0:
            s = links[node, 2]
            for k in range(s, s + cnt):
                # Moeller-Trumbore
                ax_ = tris[k, 3]
                ay_ = tris[k, 4]
                az_ = tris[k, 5]
                bx_ = tris[k, 6]
                by_ = tris[k, 7]
                bz_ = tris[k, 8]
                px = dy * bz_ - dz * by_
                py = dz * bx_ - dx * bz_
                pz = dx * by_ - dy * bx_
                det = ax_ * px + ay_ * py + az_ * pz
                if det == 0.0:
                    continue
                inv = 1.0 / det
                tx = ox - tris[k, 0]
                ty = oy - tris[k, 1]
                tz = oz - tris[k, 2]
                u = (tx * px + ty * py + tz * pz) * inv
                if u < 0.0 or u > 1.0:
                    continue
                qx = ty * az_ - tz * ay_
                qy = tz * ax_ - tx * az_
                qz = tx * ay_ - ty * ax_
                v = (dx * qx + dy * qy + dz * qz) * inv
                if v < 0.0 or u + v > 1.0:
                    continue
                t = (bx_ * qx + by_ * qy + bz_ * qz) * inv
                if t > l_min and t < best:
                    best = t
                    best_tri = k
                    best_u = u
                    best_v = v
            node = -1
        else:
            a = links[node, 0]
            b = links[node, 1]
            ta = _entry(a, ox, oy, oz, ix, iy, iz, l_min, best, nodes)
            tb = _entry(b, ox, oy, oz, ix, iy, iz, l_min, best, nodes)
            if ta <= tb:
                if ta == np.inf:
                    node = -1
                else:
                    node = a
                    if tb != np.inf:
                        stack[sp] = b
                        stack_t[sp] = tb
                        sp += 1
            else:
                node = b
                if ta != np.inf:
                    stack[sp] = a
                    stack_t[sp] = ta
                    sp += 1
        if node < 0:
            # pop the nearest postponed node that can still hold a nearer hit
            while sp > 0:
                sp -= 1
                if stack_t[sp] <= best:
                    node = stack[sp]
                    break
            if node < 0:
                break
    return best, best_tri, best_u, best_v


#: rays traversed together by :func:`packet_first_hits` (coherent camera rays from one
#: shared start event): one node fetch serves them all, and the per-ray loops below are
#: simple enough for the compiler to vectorise. 16 was fastest on the benchmark view
#: (8: 25 % faster than single rays, 16 and 32: 2.4x).
PACKET = 16


@njit(cache=True, inline="always")
def packet_first_hits(
    ox, oy, oz, dx, dy, dz, l_min, best, best_tri, best_u, best_v, root, nodes, links, tris, stack
):
    """Nearest hits of PACKET rays sharing one origin (ox, oy, oz); directions dx, dy, dz
    (PACKET,) each. ``best`` etc. (PACKET,) hold each ray's nearest hit so far and are
    updated in place (so several hierarchies can be walked one after the other).

    Classic packet traversal: a node is entered when any ray of the packet meets its box
    before its own nearest hit; children are ordered by the first ray's direction.
    """
    ix = np.empty(PACKET)
    iy = np.empty(PACKET)
    iz = np.empty(PACKET)
    for r in range(PACKET):
        ix[r] = 1.0 / dx[r] if dx[r] != 0.0 else _BIG
        iy[r] = 1.0 / dy[r] if dy[r] != 0.0 else _BIG
        iz[r] = 1.0 / dz[r] if dz[r] != 0.0 else _BIG
    sp = 1
    stack[0] = root
    while sp > 0:
        sp -= 1
        node = stack[sp]
        lx = nodes[node, 0] - ox
        ly = nodes[node, 1] - oy
        lz = nodes[node, 2] - oz
        hx = nodes[node, 3] - ox
        hy = nodes[node, 4] - oy
        hz = nodes[node, 5] - oz
        any_hit = 0
        for r in range(PACKET):
            t0 = lx * ix[r]
            t1 = hx * ix[r]
            tn = min(t0, t1)
            tf = max(t0, t1)
            t0 = ly * iy[r]
            t1 = hy * iy[r]
            tn = max(tn, min(t0, t1))
            tf = min(tf, max(t0, t1))
            t0 = lz * iz[r]
            t1 = hz * iz[r]
            tn = max(tn, min(t0, t1))
            tf = min(tf, max(t0, t1))
            tn = max(tn, l_min)
            tf = min(tf, best[r])
            any_hit |= tn <= tf
        if any_hit == 0:
            continue
        cnt = links[node, 3]
        if cnt > 0:
            s = links[node, 2]
            for k in range(s, s + cnt):
                # Moeller-Trumbore, the ray-independent half hoisted out of the ray loop
                ax_ = tris[k, 3]
                ay_ = tris[k, 4]
                az_ = tris[k, 5]
                bx_ = tris[k, 6]
                by_ = tris[k, 7]
                bz_ = tris[k, 8]
                tx = ox - tris[k, 0]
                ty = oy - tris[k, 1]
                tz = oz - tris[k, 2]
                qx = ty * az_ - tz * ay_
                qy = tz * ax_ - tx * az_
                qz = tx * ay_ - ty * ax_
                tq = bx_ * qx + by_ * qy + bz_ * qz
                for r in range(PACKET):
                    px = dy[r] * bz_ - dz[r] * by_
                    py = dz[r] * bx_ - dx[r] * bz_
                    pz = dx[r] * by_ - dy[r] * bx_
                    det = ax_ * px + ay_ * py + az_ * pz
                    inv = 1.0 / det
                    u = (tx * px + ty * py + tz * pz) * inv
                    v = (dx[r] * qx + dy[r] * qy + dz[r] * qz) * inv
                    t = tq * inv
                    if (
                        (det != 0.0)
                        & (u >= 0.0)
                        & (v >= 0.0)
                        & (u + v <= 1.0)
                        & (t > l_min)
                        & (t < best[r])
                    ):
                        best[r] = t
                        best_tri[r] = k
                        best_u[r] = u
                        best_v[r] = v
        else:
            a = links[node, 0]
            b = links[node, 1]
            ca = (
                (nodes[a, 0] + nodes[a, 3]) * dx[0]
                + (nodes[a, 1] + nodes[a, 4]) * dy[0]
                + (nodes[a, 2] + nodes[a, 5]) * dz[0]
            )
            cb = (
                (nodes[b, 0] + nodes[b, 3]) * dx[0]
                + (nodes[b, 1] + nodes[b, 4]) * dy[0]
                + (nodes[b, 2] + nodes[b, 5]) * dz[0]
            )
            if ca <= cb:  # nearer child on top of the stack
                stack[sp] = b
                stack[sp + 1] = a
            else:
                stack[sp] = a
                stack[sp + 1] = b
            sp += 2


# ------------------------------------------------------------------ trees over boxes


def box_tree(lo: np.ndarray, hi: np.ndarray):
    """A hierarchy over (K, 3) boxes [lo, hi] for overlap queries (:func:`boxes_overlapping`):
    (nodes (M, 6) float64 lo xyz hi xyz, links (M, 4) int64 left, right, first item,
    count, order (K,) item of each leaf slot). Built by the same binned SAH as the
    triangle hierarchies, on the boxes' centres."""
    lo = np.ascontiguousarray(lo, dtype=np.float64)
    hi = np.ascontiguousarray(hi, dtype=np.float64)
    n_lo, n_hi, left, right, start, count, order = _build(lo, hi, 0.5 * (lo + hi), MAX_LEAF, N_BINS)
    nodes = np.ascontiguousarray(np.concatenate([n_lo, n_hi], axis=1))
    links = np.ascontiguousarray(np.stack([left, right, start, count], axis=1))
    return nodes, links, order.astype(np.int64)


@njit(cache=True, inline="always")
def boxes_overlapping(qlx, qly, qlz, qhx, qhy, qhz, nodes, links, order, items, out, stack):
    """Items of a :func:`box_tree` whose boxes ``items`` (K, 6: lo xyz, hi xyz) overlap the
    query box [ql, qh] (closed intervals, so touching counts), written to ``out`` in tree
    order; returns how many. ``stack``: int64 scratch of STACK_SIZE (the tree is at most
    MAX_DEPTH deep)."""
    k = 0
    sp = 1
    stack[0] = 0
    while sp > 0:
        sp -= 1
        node = stack[sp]
        if (
            nodes[node, 0] > qhx
            or nodes[node, 3] < qlx
            or nodes[node, 1] > qhy
            or nodes[node, 4] < qly
            or nodes[node, 2] > qhz
            or nodes[node, 5] < qlz
        ):
            continue
        cnt = links[node, 3]
        if cnt > 0:
            s = links[node, 2]
            for j in range(s, s + cnt):
                i = order[j]
                if (
                    items[i, 0] > qhx
                    or items[i, 3] < qlx
                    or items[i, 1] > qhy
                    or items[i, 4] < qly
                    or items[i, 2] > qhz
                    or items[i, 5] < qlz
                ):
                    continue
                out[k] = i
                k += 1
        else:
            stack[sp] = links[node, 0]
            stack[sp + 1] = links[node, 1]
            sp += 2
    return k
