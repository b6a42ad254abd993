"""The bounding-volume hierarchy (relview.geometry.bvh): build invariants, and first hits
against a brute-force Moller-Trumbore loop and against trimesh's own ray queries.

Traversal is reached through the tracer's two cast kernels (single-ray and packet) with an
identity frame map, which is how the renderer calls it.
"""

import numpy as np
import pytest
import trimesh
from trimesh.ray.ray_triangle import RayMeshIntersector

from relview.geometry import bvh as bvh_mod
from relview.geometry import trace


def random_soup(seed, n_tri=300, spread=4.0, size=0.6):
    """Random triangles scattered in a box: overlapping, all orientations."""
    rng = np.random.default_rng(seed)
    centres = rng.uniform(-spread, spread, size=(n_tri, 1, 3))
    verts = (centres + rng.normal(scale=size, size=(n_tri, 3, 3))).reshape(-1, 3)
    return verts, np.arange(3 * n_tri).reshape(-1, 3)


def bumpy_sphere(seed, subdivisions=3):
    """A closed, non-convex mesh: an icosphere with each vertex pushed in or out."""
    mesh = trimesh.creation.icosphere(subdivisions=subdivisions, radius=2.0)
    rng = np.random.default_rng(seed)
    verts = mesh.vertices * rng.uniform(0.7, 1.3, size=(len(mesh.vertices), 1))
    return verts, np.asarray(mesh.faces)


def random_rays(seed, n=600, reach=6.0):
    """Rays from points around the meshes towards random points inside them."""
    rng = np.random.default_rng(seed)
    origins = rng.uniform(-reach, reach, size=(n, 3))
    targets = rng.uniform(-2.0, 2.0, size=(n, 3))
    d = targets - origins
    return origins, d / np.linalg.norm(d, axis=-1, keepdims=True)


def moller_trumbore(origins, dirs, tri, eps=1e-12):
    """Nearest (l, face) per ray by testing every triangle (Moller & Trumbore, J. Graphics
    Tools 2(1), 1997), written independently of relview; l = inf and face -1 for a miss."""
    v0, v1, v2 = tri[:, 0], tri[:, 1], tri[:, 2]
    e1, e2 = v1 - v0, v2 - v0
    best_l = np.full(len(origins), np.inf)
    best_f = np.full(len(origins), -1)
    for i, (o, d) in enumerate(zip(origins, dirs)):
        p = np.cross(d, e2)
        det = np.einsum("ij,ij->i", e1, p)
        ok = np.abs(det) > eps
        inv = np.where(ok, 1.0 / np.where(ok, det, 1.0), 0.0)
        s = o - v0
        u = np.einsum("ij,ij->i", s, p) * inv
        q = np.cross(s, e1)
        v = (q @ d) * inv
        t = np.einsum("ij,ij->i", e2, q) * inv
        hit = ok & (u >= 0) & (v >= 0) & (u + v <= 1) & (t > 1e-9)
        if hit.any():
            j = np.flatnonzero(hit)[np.argmin(t[hit])]
            best_l[i], best_f[i] = t[j], j
    return best_l, best_f


def cast(verts, faces, origins, dirs, packets=False, tree=None):
    """(l, input face index) of the first hits, through the tracer's kernels with an
    identity frame map (k_time = 0: the rays are purely spatial); ``tree``: this
    hierarchy over the triangles instead of a fresh build."""
    packed = bvh_mod.pack([bvh_mod.build_bvh(verts, faces) if tree is None else tree])
    origin = np.zeros((1, 4))
    matrix = np.eye(4)[None]
    if packets:
        ray_o = np.concatenate([[0.0], origins[0]])[None]  # one shared start
    else:
        ray_o = np.column_stack([np.zeros(len(origins)), origins])
    args = (
        np.ascontiguousarray(ray_o),
        np.ascontiguousarray(dirs),
        0.0,
        origin,
        matrix,
        packed.root,
        packed.nodes,
        packed.links,
        packed.tris,
        1e-9,
    )
    if packets:  # the packet kernel fills arrays the caller allocates
        l, tri, u, v = trace.packet_outputs(len(dirs))
        # no culling tree passed as the renderer passes it (None), so the suite compiles
        # the kernel's production signature instead of one of its own
        trace._cast_packets(*args, l, tri, u, v, None)
    else:
        l, tri, u, v = trace._cast(*args)
    face = np.where(tri >= 0, packed.tri_face[np.maximum(tri, 0)], -1)
    return l, face, u, v


# ------------------------------------------------------------------------ build invariants


@pytest.mark.parametrize("mesh", ["soup", "sphere"])
def test_build_invariants(mesh):
    verts, faces = random_soup(1) if mesh == "soup" else bumpy_sphere(2)
    b = bvh_mod.build_bvh(verts, faces)
    tri = verts[faces]
    # every input triangle stored exactly once, as (v0, e1, e2) of its input face
    assert np.array_equal(np.sort(b.face_id), np.arange(len(faces)))
    stored = tri[b.face_id]
    assert np.allclose(b.v0, stored[:, 0])
    assert np.allclose(b.e1, stored[:, 1] - stored[:, 0])
    assert np.allclose(b.e2, stored[:, 2] - stored[:, 0])
    leaf = b.node_left < 0
    # leaves hold a contiguous range of at most MAX_LEAF triangles, together all of them
    assert (b.node_count[leaf] >= 1).all() and (b.node_count[leaf] <= bvh_mod.MAX_LEAF).all()
    assert (b.node_count[~leaf] == 0).all()
    covered = np.zeros(len(faces), int)
    for s, c in zip(b.node_start[leaf], b.node_count[leaf]):
        covered[s : s + c] += 1
    assert (covered == 1).all()
    # a node's box holds its children's boxes and its triangles; each node has one parent
    parents = np.zeros(len(b.node_lo), int)
    depth = np.zeros(len(b.node_lo), int)
    for n in range(len(b.node_lo)):
        if leaf[n]:
            t = stored[b.node_start[n] : b.node_start[n] + b.node_count[n]].reshape(-1, 3)
            assert (t >= b.node_lo[n] - 1e-12).all() and (t <= b.node_hi[n] + 1e-12).all()
            continue
        for child in (b.node_left[n], b.node_right[n]):
            parents[child] += 1
            depth[child] = depth[n] + 1
            assert (b.node_lo[child] >= b.node_lo[n]).all()
            assert (b.node_hi[child] <= b.node_hi[n]).all()
    assert parents[0] == 0 and (parents[1:] == 1).all()  # node 0 is the root; a tree
    assert depth.max() <= bvh_mod.MAX_DEPTH


def test_empty_mesh_is_refused():
    with pytest.raises(ValueError, match="zero triangles"):
        bvh_mod.build_bvh(np.zeros((0, 3)), np.zeros((0, 3), int))


def test_pack_shifts_indices_of_the_second_hierarchy():
    a = bvh_mod.build_bvh(*random_soup(3, n_tri=20))
    b = bvh_mod.build_bvh(*random_soup(4, n_tri=30))
    p = bvh_mod.pack([a, b])
    assert p.root.tolist() == [0, len(a.node_lo)]
    assert p.tri_offset.tolist() == [0, 20]
    assert np.array_equal(p.tri_group, np.repeat([0, 1], [20, 30]))
    assert np.array_equal(p.v0[20:], b.v0)
    inner_b = b.node_left >= 0
    assert np.array_equal(
        p.node_left[len(a.node_lo) :][inner_b], b.node_left[inner_b] + len(a.node_lo)
    )
    # float32 node boxes are rounded outwards: they never cut into the float64 boxes
    assert (p.nodes[:, :3] <= p.node_lo).all() and (p.nodes[:, 3:] >= p.node_hi).all()


def test_refit_on_the_build_vertices_is_the_build():
    verts, faces = bumpy_sphere(5)
    b = bvh_mod.build_bvh(verts, faces)
    r = bvh_mod.refit_bvh(b, verts, faces)
    for name in ("node_lo", "node_hi", "v0", "e1", "e2", "face_id", "node_left", "node_count"):
        np.testing.assert_array_equal(getattr(r, name), getattr(b, name), err_msg=name)


@pytest.mark.parametrize("seed", [30, 31])
def test_refitted_hierarchy_finds_every_hit(seed):
    # A hierarchy built over one shape, refitted to the triangles moved elsewhere (a
    # smooth stretch and shift, as between exposures, plus random jitter that breaks
    # its spatial order): every node still bounds its triangles, and the first hits equal
    # a fresh build's and the brute-force loop's (Moller & Trumbore 1997).
    verts, faces = bumpy_sphere(seed)
    tree = bvh_mod.build_bvh(verts, faces)
    rng = np.random.default_rng(seed)
    moved = verts * np.array([0.4, 1.0, 1.3]) + np.array([0.5, -0.2, 0.1])
    moved = moved + rng.normal(scale=0.15, size=moved.shape)
    r = bvh_mod.refit_bvh(tree, moved, faces)
    assert np.array_equal(r.node_left, tree.node_left) and not np.array_equal(
        r.node_lo, tree.node_lo
    )
    stored = moved[faces][r.face_id]
    leaf = np.nonzero(r.node_left < 0)[0]
    for n in leaf:
        t = stored[r.node_start[n] : r.node_start[n] + r.node_count[n]].reshape(-1, 3)
        assert (t >= r.node_lo[n]).all() and (t <= r.node_hi[n]).all()
    inner = np.nonzero(r.node_left >= 0)[0]
    for child in (r.node_left[inner], r.node_right[inner]):
        assert (r.node_lo[child] >= r.node_lo[inner]).all()
        assert (r.node_hi[child] <= r.node_hi[inner]).all()
    assert bvh_mod.area_cost(r) > bvh_mod.area_cost(bvh_mod.build_bvh(moved, faces))
    origins, dirs = random_rays(seed + 200)
    want_l, _ = moller_trumbore(origins, dirs, moved[faces])
    fresh_l, _, _, _ = cast(moved, faces, origins, dirs)
    l, _, _, _ = cast(moved, faces, origins, dirs, tree=r)
    assert np.isfinite(l).sum() > 100
    np.testing.assert_array_equal(l, fresh_l)  # the same hit triangle: bit-equal l
    assert np.array_equal(np.isfinite(l), np.isfinite(want_l))
    hit = np.isfinite(want_l)
    assert l[hit] == pytest.approx(want_l[hit], rel=1e-9, abs=1e-9)
    # packets of rays from one start, aimed at the body
    start = np.array([[0.3, -7.0, 0.5]])
    aim = rng.uniform(-2.0, 2.0, size=(640, 3)) - start
    aim /= np.linalg.norm(aim, axis=1, keepdims=True)
    o = np.repeat(start, len(aim), 0)
    l, _, _, _ = cast(moved, faces, o, aim, packets=True, tree=r)
    assert np.isfinite(l).sum() > 200
    np.testing.assert_array_equal(l, cast(moved, faces, o, aim, packets=True)[0])
    single = cast(moved, faces, o, aim, tree=r)[0]  # the single-ray kernel: last bits differ
    np.testing.assert_allclose(l, single, rtol=1e-13)


# ------------------------------------------------------------------------------ first hits


@pytest.mark.parametrize("seed", [10, 11])
@pytest.mark.parametrize("mesh", ["soup", "sphere"])
def test_first_hit_equals_brute_force_moller_trumbore(mesh, seed):
    verts, faces = random_soup(seed) if mesh == "soup" else bumpy_sphere(seed)
    origins, dirs = random_rays(seed + 100)
    want_l, want_f = moller_trumbore(origins, dirs, verts[faces])
    l, face, _, _ = cast(verts, faces, origins, dirs)
    assert (face >= 0).sum() > 100
    assert np.array_equal(np.isfinite(l), np.isfinite(want_l))
    hit = np.isfinite(want_l)
    assert l[hit] == pytest.approx(want_l[hit], rel=1e-9, abs=1e-9)
    # the same face, unless two faces are hit at the same distance (a shared edge)
    same = face[hit] == want_f[hit]
    assert same.mean() > 0.99


@pytest.mark.parametrize("seed", [20, 21])
def test_first_hit_equals_trimesh_ray_queries(seed):
    # trimesh's pure-numpy ray/triangle queries (trimesh.ray.ray_triangle) as the reference
    verts, faces = bumpy_sphere(seed)
    mesh = trimesh.Trimesh(verts, faces, process=False)
    origins, dirs = random_rays(seed + 200, n=400)
    locations, index_ray, index_tri = RayMeshIntersector(mesh).intersects_location(
        origins, dirs, multiple_hits=True
    )
    want = np.full(len(origins), np.inf)
    dist = np.einsum("ij,ij->i", locations - origins[index_ray], dirs[index_ray])
    np.minimum.at(want, index_ray, np.where(dist > 1e-9, dist, np.inf))
    l, face, _, _ = cast(verts, faces, origins, dirs)
    assert np.array_equal(np.isfinite(l), np.isfinite(want))
    hit = np.isfinite(want)
    assert hit.sum() > 100
    assert l[hit] == pytest.approx(want[hit], rel=1e-9, abs=1e-9)


def test_packet_traversal_equals_single_ray_traversal():
    # rays from one shared start, as camera rays are (the packet kernel's case)
    verts, faces = bumpy_sphere(30)
    rng = np.random.default_rng(31)
    n = 16 * 50 + 7  # a short last packet too
    d = rng.normal(size=(n, 3)) * [0.3, 0.3, 1.0] + [0.0, 0.0, 1.0]
    d /= np.linalg.norm(d, axis=-1, keepdims=True)
    origins = np.broadcast_to([0.1, -0.2, -6.0], (n, 3)).copy()
    single = cast(verts, faces, origins, d)
    packet = cast(verts, faces, origins, d, packets=True)
    assert (single[1] >= 0).sum() > 300
    # the same faces; l, u, v to rounding (the kernels are compiled with fastmath)
    assert np.array_equal(single[1], packet[1])
    assert np.array_equal(np.isfinite(single[0]), np.isfinite(packet[0]))
    hit = single[1] >= 0
    for a, b in zip(single[::2] + single[3:], packet[::2] + packet[3:]):  # l, u, v
        assert a[hit] == pytest.approx(b[hit], rel=1e-12, abs=1e-12)
