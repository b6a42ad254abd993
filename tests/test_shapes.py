"""Rest-frame meshes (relview.geometry.shapes) against closed-form sizes and volumes.

Volumes are measured by trimesh (divergence theorem over the triangles), a
general-purpose reference library, and compared with elementary closed forms.
Curved shapes are polyhedra, so their checks carry the tessellation tolerance
stated beside each assertion.
"""

from __future__ import annotations

import math
import os
import time
from pathlib import Path

import numpy as np
import pytest
import trimesh

from relview.errors import MeshError, MeshWarning
from relview.geometry import shapes
from relview.scene.parts import Body

DATA = Path(__file__).parent / "data"


def body(shape: str, **kw) -> Body:
    return Body(name="b", shape=shape, motion=None, surface=None, **kw)


def volume(mesh: trimesh.Trimesh) -> float:
    return float(trimesh.Trimesh(mesh.vertices, mesh.faces, process=True).volume)


@pytest.fixture(autouse=True)
def fresh_cache():
    shapes.clear_cache()
    yield
    shapes.clear_cache()


# --------------------------------------------------------------------------- primitives


def test_box_size_and_volume():
    m = shapes.build_mesh(body("box", size=np.array([1.0, 2.0, 3.0])))
    assert m.is_watertight
    np.testing.assert_allclose(m.bounds, [[-0.5, -1.0, -1.5], [0.5, 1.0, 1.5]], atol=1e-15)
    assert volume(m) == pytest.approx(1.0 * 2.0 * 3.0, rel=1e-12)  # V = x y z


def test_sphere_radius_volume_and_outline_error():
    r = 0.7
    m = shapes.build_mesh(body("sphere", radius=r))
    assert len(m.faces) == 20 * 4**5  # icosphere at the default detail 5
    np.testing.assert_allclose(
        np.linalg.norm(m.vertices, axis=1), r, rtol=1e-12
    )  # vertices on the sphere
    # Inscribed polyhedron: the flat facets lie inside the sphere. The deepest point of a
    # facet (its centre, here) sets the outline error; the requirement is < 0.1 % of r.
    deficit = 1.0 - np.linalg.norm(m.triangles_center, axis=1).min() / r
    assert 0.0 < deficit < 1e-3
    # Volume 4/3 pi r^3, low by at most ~3x the radial deficit (tessellation tolerance).
    ratio = volume(m) / (4.0 / 3.0 * math.pi * r**3)
    assert 1.0 - 3.0 * deficit < ratio < 1.0


def test_sphere_detail_changes_tessellation():
    coarse = shapes.build_mesh(body("sphere", radius=1.0, detail=2))
    assert len(coarse.faces) == 20 * 4**2
    # coarser, so further below the true volume than the default
    assert volume(coarse) < volume(shapes.build_mesh(body("sphere", radius=1.0)))


@pytest.mark.parametrize("detail", [None, 2])
def test_cylinder_volume_is_the_regular_prism(detail):
    r, h = 0.3, 2.0
    m = shapes.build_mesh(body("cylinder", radius=r, height=h, detail=detail))
    n = shapes.cylinder_sections(5 if detail is None else detail)
    assert m.is_watertight
    np.testing.assert_allclose(m.bounds[:, 2], [-h / 2, h / 2], atol=1e-15)
    # A regular n-gon of circumradius r has area (n/2) r^2 sin(2 pi / n) (elementary geometry).
    assert volume(m) == pytest.approx(0.5 * n * r**2 * math.sin(2 * math.pi / n) * h, rel=1e-9)
    if detail is None:
        # default: within 0.1 % of the true cylinder pi r^2 h (tessellation tolerance)
        assert volume(m) == pytest.approx(math.pi * r**2 * h, rel=1e-3)
        radial = np.hypot(m.vertices[:, 0], m.vertices[:, 1])
        np.testing.assert_allclose(radial[radial > 0], r, rtol=1e-12)


def test_plane_is_a_two_sided_rectangle_with_uvs():
    sx, sy = 2.0, 0.5
    data = shapes.mesh_data(body("plane", size=np.array([sx, sy])))
    m = data.to_trimesh()
    assert np.all(m.vertices[:, 2] == 0.0)
    np.testing.assert_allclose(m.bounds[:, :2], [[-sx / 2, -sy / 2], [sx / 2, sy / 2]])
    assert m.area == pytest.approx(2 * sx * sy)  # both windings: each side is the whole rectangle
    normals = m.face_normals
    assert np.sum(normals[:, 2] > 0.999) == 2 and np.sum(normals[:, 2] < -0.999) == 2
    np.testing.assert_allclose(data.uv, (m.vertices[:, :2] / [sx, sy]) + 0.5)
    np.testing.assert_allclose(m.visual.uv, data.uv)


def test_rotation_turns_the_rest_frame_mesh():
    # A right-handed turn of +90 degrees about z takes +x to +y: the x and y extents swap.
    m = shapes.build_mesh(
        body("box", size=np.array([1.0, 2.0, 3.0]), rotation=np.array([0.0, 0.0, 90.0]))
    )
    np.testing.assert_allclose(m.extents, [2.0, 1.0, 3.0], atol=1e-12)
    # +90 degrees about x takes +y to +z: a plane in x-y stands up in x-z.
    p = shapes.build_mesh(
        body("plane", size=np.array([2.0, 1.0]), rotation=np.array([90.0, 0.0, 0.0]))
    )
    np.testing.assert_allclose(p.extents, [2.0, 0.0, 1.0], atol=1e-12)
    assert p.vertices[:, 2].max() == pytest.approx(0.5)


def test_body_bounds():
    assert shapes.body_bounds(body("box", size=np.array([1.0, 2.0, 2.0]))) == pytest.approx(1.5)
    assert shapes.body_bounds(body("sphere", radius=0.25)) == pytest.approx(0.25)
    assert shapes.body_bounds(body("cylinder", radius=0.3, height=0.8)) == pytest.approx(0.5)
    assert shapes.body_bounds(body("plane", size=np.array([6.0, 8.0]))) == pytest.approx(5.0)


def test_mesh_arrays_are_read_only():
    data = shapes.mesh_data(body("box", size=np.array([1.0, 1.0, 1.0])))
    with pytest.raises(ValueError):
        data.vertices[0, 0] = 5.0
    m = shapes.build_mesh(body("box", size=np.array([1.0, 1.0, 1.0])))
    m.vertices[0, 0] = 5.0  # a fresh Trimesh: changing it leaves the cache alone
    assert shapes.mesh_data(body("box", size=np.array([1.0, 1.0, 1.0]))).vertices[0, 0] == -0.5


# --------------------------------------------------------------------------- mesh files


@pytest.mark.parametrize("ext", ["obj", "ply", "stl", "glb"])
def test_mesh_file_formats_scale_and_centre(tmp_path, ext):
    source = trimesh.creation.box(extents=(1.0, 2.0, 3.0))
    source.apply_translation([5.0, 0.0, 0.0])
    path = tmp_path / f"crate.{ext}"
    source.export(path)

    m = shapes.build_mesh(body("mesh", file=path, scale=2.0))
    np.testing.assert_allclose(m.extents, [2.0, 4.0, 6.0], atol=1e-6)
    np.testing.assert_allclose(m.bounds.mean(axis=0), 0.0, atol=1e-6)  # centred on the body origin
    assert volume(m) == pytest.approx(6.0 * 2.0**3, rel=1e-6)  # volume scales as scale^3

    kept = shapes.build_mesh(body("mesh", file=path, scale=2.0, center=False))
    np.testing.assert_allclose(kept.bounds.mean(axis=0), [10.0, 0.0, 0.0], atol=1e-5)


def test_obj_texture_coordinates_are_kept():
    with pytest.warns(MeshWarning, match="not closed"):  # a lone rectangle has open edges
        data = shapes.mesh_data(body("mesh", file=DATA / "quad_uv.obj"))
    assert data.uv is not None and data.uv.shape == (len(data.vertices), 2)
    # the file gives u = (x + 1)/2, v = y + 0.5 at every corner
    np.testing.assert_allclose(
        data.uv, np.c_[(data.vertices[:, 0] + 1) / 2, data.vertices[:, 1] + 0.5]
    )


def test_glb_texture_coordinates_round_trip(tmp_path):
    src = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    uv = np.c_[src.vertices[:, 0] + 0.5, src.vertices[:, 2] * 0.5 + 0.25]
    src.visual = trimesh.visual.TextureVisuals(uv=uv)
    src.export(tmp_path / "cube.glb")
    data = shapes.mesh_data(body("mesh", file=tmp_path / "cube.glb"))
    assert data.uv is not None
    np.testing.assert_allclose(
        data.uv, np.c_[data.vertices[:, 0] + 0.5, data.vertices[:, 2] * 0.5 + 0.25], atol=1e-6
    )


def test_multi_object_file_is_flattened(tmp_path):
    a = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    b = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    b.apply_translation([3.0, 0.0, 0.0])
    trimesh.Scene([a, b]).export(tmp_path / "pair.glb")
    m = shapes.build_mesh(body("mesh", file=tmp_path / "pair.glb"))
    assert len(m.faces) == 24
    np.testing.assert_allclose(m.extents, [4.0, 1.0, 1.0], atol=1e-6)
    assert volume(m) == pytest.approx(2.0, rel=1e-6)


def test_degenerate_faces_removed_with_warning(tmp_path):
    path = tmp_path / "tetra.obj"
    path.write_text(
        "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\n"
        "f 1 3 2\nf 1 2 4\nf 1 4 3\nf 2 3 4\n"
        "f 1 2 2\n"  # zero area: a repeated vertex
        "f 2 3 3\n"
    )
    with pytest.warns(MeshWarning, match=r"tetra\.obj.*removed 2 degenerate"):
        m = shapes.build_mesh(body("mesh", file=path, center=False))
    assert len(m.faces) == 4
    assert volume(m) == pytest.approx(1.0 / 6.0)  # unit right tetrahedron: 1/6


def test_open_mesh_warns(tmp_path):
    open_box = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    open_box.update_faces(np.arange(len(open_box.faces)) != 0)
    open_box.export(tmp_path / "open.stl")
    with pytest.warns(MeshWarning, match=r"open\.stl.*not closed"):
        m = shapes.build_mesh(body("mesh", file=tmp_path / "open.stl"))
    assert len(m.faces) == 11


def test_closed_mesh_with_uv_seams_does_not_warn(tmp_path, recwarn):
    shapes.build_mesh(body("mesh", file=DATA / "quad_uv.obj"))  # open: warns
    assert any(issubclass(w.category, MeshWarning) for w in recwarn)
    recwarn.clear()
    src = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    # split every face's vertices, as texture seams do in OBJ files
    split = trimesh.Trimesh(
        src.triangles.reshape(-1, 3), np.arange(36).reshape(-1, 3), process=False
    )
    split.visual = trimesh.visual.TextureVisuals(uv=np.zeros((36, 2)))
    split.export(tmp_path / "seams.obj")
    shapes.build_mesh(body("mesh", file=tmp_path / "seams.obj"))
    assert not [w for w in recwarn if issubclass(w.category, MeshWarning)]


@pytest.mark.parametrize(
    "name, content, message",
    [
        ("missing.obj", None, "does not exist"),
        ("empty.stl", b"", "empty"),
        (
            "broken.ply",
            b"ply\nformat binary_little_endian 1.0\nelement vertex 9\nproperty float x\nend_header\n\x00",
            "cannot read mesh file",
        ),
        ("broken.glb", b"glTF not really", "cannot read mesh file"),
        (
            "points.ply",
            (
                b"ply\nformat ascii 1.0\nelement vertex 2\nproperty float x\nproperty float y\n"
                b"property float z\nend_header\n0 0 0\n1 1 1\n"
            ),
            "no triangles",
        ),
        ("model.blend", b"BLENDER", "unsupported mesh format '.blend'"),
    ],
)
def test_bad_mesh_files_name_the_file(tmp_path, name, content, message):
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(MeshError) as info:
        shapes.build_mesh(body("mesh", file=path))
    assert str(info.value).startswith(str(path)) and message in str(info.value)


def test_mesh_cache_per_file_mtime_and_scale(tmp_path):
    path = tmp_path / "crate.ply"
    trimesh.creation.box(extents=(1.0, 1.0, 1.0)).export(path)
    first = shapes.load_mesh_file(path)
    assert shapes.load_mesh_file(path) is first  # read once
    assert shapes.load_mesh_file(path, scale=2.0) is not first
    trimesh.creation.box(extents=(2.0, 1.0, 1.0)).export(path)
    later = time.time() + 5
    os.utime(path, (later, later))  # a new modification time
    np.testing.assert_allclose(
        np.ptp(shapes.load_mesh_file(path).vertices, axis=0), [2.0, 1.0, 1.0]
    )


def test_unknown_shape_is_a_programming_error():
    with pytest.raises(ValueError, match="unknown shape 'cone'"):
        shapes.build_mesh(body("cone"))


# --------------------------------------------------------------------------- native primitives
# The box, icosphere and cylinder are generated by relview itself (so that start-up does
# not import trimesh); trimesh, a general-purpose reference library, checks them.


@pytest.mark.parametrize("detail", [0, 2, 4])
def test_native_icosphere_matches_trimesh(detail):
    import trimesh

    from relview.geometry.shapes import _sphere

    ours = _sphere(1.5, detail).to_trimesh()
    ref = trimesh.creation.icosphere(subdivisions=detail, radius=1.5)
    assert len(ours.faces) == len(ref.faces) == 20 * 4**detail
    assert ours.is_watertight and ours.is_winding_consistent
    assert ours.volume > 0  # outward winding
    assert ours.volume == pytest.approx(ref.volume, rel=1e-9)
    assert ours.area == pytest.approx(ref.area, rel=1e-9)
    assert np.linalg.norm(ours.vertices, axis=1) == pytest.approx(1.5, rel=1e-12)


def test_native_box_and_cylinder_are_closed_and_outward():
    import trimesh

    from relview.geometry.shapes import _box, _cylinder

    box = _box(1.0, 2.0, 3.0).to_trimesh()
    assert box.is_watertight and box.is_winding_consistent
    assert box.volume == pytest.approx(6.0) and box.area == pytest.approx(22.0)
    cyl = _cylinder(0.5, 2.0, 3).to_trimesh()
    ref = trimesh.creation.cylinder(radius=0.5, height=2.0, sections=32)
    assert cyl.is_watertight and cyl.is_winding_consistent and cyl.volume > 0
    assert cyl.volume == pytest.approx(ref.volume, rel=1e-9)
    assert cyl.area == pytest.approx(ref.area, rel=1e-9)
