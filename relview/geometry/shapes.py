"""Rest-frame triangle meshes for the body shapes of a scene.

Every body is a triangle mesh in its own rest frame, in metres, around the body
origin (the point whose worldline the body's motion describes):

* ``box``      -- ``size = [x, y, z]``, centred on the origin.
* ``sphere``   -- ``radius``; an icosphere. ``detail`` = subdivision level
  (default 5: 20 480 triangles, the flat facets lie at most 0.028 % of the radius
  inside the true sphere, so outlines are within 0.1 % of the radius).
* ``cylinder`` -- ``radius``, ``height`` along the rest-frame z axis, centred on
  the origin; ``4 * 2**detail`` sections around the axis (default detail 5: 128
  sections, outline error 1 - cos(pi/128) = 0.030 % of the radius).
* ``plane``    -- ``size = [x, y]``, a finite rectangle in the body's x-y plane,
  two-sided: each half carries both windings, so it is hit from either side even
  by a tracer that culls back faces. UVs run 0..1 along x and y.
* ``mesh``     -- ``file``: any format trimesh reads (OBJ, PLY, STL, OFF, glTF/GLB).
  Multi-object files are flattened to one mesh with their node transforms applied.
  Coordinates are taken as metres in the file's own axes (glTF is y-up by its
  standard; use ``rotation = [90, 0, 0]`` to stand such a model on z), multiplied
  by ``scale``, and by default (``center = true``) shifted so the centre of the
  bounding box lies on the body origin. UVs are kept when every part has them.

Then ``Body.rotation_matrix()`` turns the mesh (x, then y, then z turns about
the body origin).

Mesh files that are missing, unreadable, empty or corrupt raise
:class:`relview.errors.MeshError` naming the file. Degenerate triangles (zero
area) are removed and meshes that are not closed are accepted; both give a
:class:`relview.errors.MeshWarning` naming the file. Built meshes are cached in
memory per (file, modification time, size, scale, centering), so an animation
reads each file once.
"""

from __future__ import annotations

import functools
import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from relview.errors import MeshError, MeshWarning

# trimesh is imported inside the functions that read mesh files: importing it costs
# about 0.7 s of every command's start-up, and the primitives below do not need it.

#: shapes a body may have
SHAPES = ("box", "sphere", "cylinder", "plane", "mesh")

#: tessellation level used when a body gives no ``detail`` (see the module docstring)
DEFAULT_DETAIL = 5
#: largest accepted ``detail`` (sphere level 7: 327 680 triangles)
MAX_DETAIL = 7


@dataclass(frozen=True)
class MeshData:
    """A triangle mesh as plain arrays (read-only views; copy before changing them).

    vertices: (V, 3) float64, m, body rest frame.
    faces:    (F, 3) int64 indices into vertices, counter-clockwise seen from outside
              where the source defines an outside.
    uv:       (V, 2) float64 texture coordinates, or None.
    source:   what the mesh came from (file path or shape description), for messages.
    """

    vertices: np.ndarray
    faces: np.ndarray
    uv: np.ndarray | None
    source: str = ""

    def to_trimesh(self):
        """A new trimesh.Trimesh (process=False: vertex order kept, UVs in ``visual.uv``)."""
        import trimesh

        visual = None
        if self.uv is not None:
            visual = trimesh.visual.TextureVisuals(uv=np.array(self.uv))
        return trimesh.Trimesh(
            vertices=np.array(self.vertices),
            faces=np.array(self.faces),
            visual=visual,
            process=False,
        )


def _frozen(a: np.ndarray | None, dtype) -> np.ndarray | None:
    if a is None:
        return None
    a = np.ascontiguousarray(a, dtype=dtype)
    a.setflags(write=False)
    return a


def _mesh(vertices, faces, uv=None, source="") -> MeshData:
    return MeshData(
        _frozen(vertices, np.float64), _frozen(faces, np.int64), _frozen(uv, np.float64), source
    )


# --------------------------------------------------------------------------- primitives


def sphere_subdivisions(detail: int) -> int:
    """Icosphere subdivision level used for a sphere of the given detail."""
    return int(detail)


def cylinder_sections(detail: int) -> int:
    """Number of sections around a cylinder's axis for the given detail level."""
    return 4 * 2 ** int(detail)


@functools.lru_cache(maxsize=64)
def _box(sx: float, sy: float, sz: float) -> MeshData:
    hx, hy, hz = sx / 2.0, sy / 2.0, sz / 2.0
    corners = np.array([[x, y, z] for x in (-hx, hx) for y in (-hy, hy) for z in (-hz, hz)])
    # two counter-clockwise triangles (seen from outside) per face; corner i has bits x y z
    faces = np.array(
        [
            [0, 1, 3],
            [0, 3, 2],  # -x
            [4, 6, 7],
            [4, 7, 5],  # +x
            [0, 4, 5],
            [0, 5, 1],  # -y
            [2, 3, 7],
            [2, 7, 6],  # +y
            [0, 2, 6],
            [0, 6, 4],  # -z
            [1, 5, 7],
            [1, 7, 3],  # +z
        ]
    )
    return _mesh(corners, faces, source=f"box {sx} x {sy} x {sz} m")


def _icosahedron() -> tuple[np.ndarray, np.ndarray]:
    """Unit icosahedron: 12 vertices (cyclic permutations of (0, +-1, +-phi)), 20 faces."""
    t = (1.0 + 5.0**0.5) / 2.0
    v = np.array(
        [
            [-1, t, 0],
            [1, t, 0],
            [-1, -t, 0],
            [1, -t, 0],
            [0, -1, t],
            [0, 1, t],
            [0, -1, -t],
            [0, 1, -t],
            [t, 0, -1],
            [t, 0, 1],
            [-t, 0, -1],
            [-t, 0, 1],
        ],
        float,
    )
    f = np.array(
        [
            [0, 11, 5],
            [0, 5, 1],
            [0, 1, 7],
            [0, 7, 10],
            [0, 10, 11],
            [1, 5, 9],
            [5, 11, 4],
            [11, 10, 2],
            [10, 7, 6],
            [7, 1, 8],
            [3, 9, 4],
            [3, 4, 2],
            [3, 2, 6],
            [3, 6, 8],
            [3, 8, 9],
            [4, 9, 5],
            [2, 4, 11],
            [6, 2, 10],
            [8, 6, 7],
            [9, 8, 1],
        ]
    )
    return v / np.linalg.norm(v, axis=1, keepdims=True), f


def _subdivide_to_sphere(v: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Split each triangle into four at its edge midpoints, pushed out onto the unit sphere."""
    edges = np.sort(np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]]), axis=1)
    unique, inverse = np.unique(edges, axis=0, return_inverse=True)
    mid = v[unique[:, 0]] + v[unique[:, 1]]
    mid /= np.linalg.norm(mid, axis=1, keepdims=True)
    m = inverse.reshape(3, -1).T + len(v)  # midpoint of edges (0-1), (1-2), (2-0) per face
    a, b, c = f[:, 0], f[:, 1], f[:, 2]
    ab, bc, ca = m[:, 0], m[:, 1], m[:, 2]
    faces = np.concatenate(
        [
            np.stack([a, ab, ca], 1),
            np.stack([b, bc, ab], 1),
            np.stack([c, ca, bc], 1),
            np.stack([ab, bc, ca], 1),
        ]
    )
    return np.concatenate([v, mid]), faces


@functools.lru_cache(maxsize=64)
def _sphere(radius: float, detail: int) -> MeshData:
    v, f = _icosahedron()
    for _ in range(sphere_subdivisions(detail)):
        v, f = _subdivide_to_sphere(v, f)
    return _mesh(v * radius, f, source=f"sphere r = {radius} m")


@functools.lru_cache(maxsize=64)
def _cylinder(radius: float, height: float, detail: int) -> MeshData:
    n = cylinder_sections(detail)
    a = 2.0 * np.pi * np.arange(n) / n
    ring = np.stack([radius * np.cos(a), radius * np.sin(a)], 1)
    h = height / 2.0
    bottom = np.column_stack([ring, np.full(n, -h)])
    top = np.column_stack([ring, np.full(n, h)])
    v = np.concatenate([bottom, top, [[0.0, 0.0, -h], [0.0, 0.0, h]]])
    i = np.arange(n)
    j = (i + 1) % n
    cb, ct = 2 * n, 2 * n + 1  # cap centres
    faces = np.concatenate(
        [
            np.stack([i, j, n + j], 1),
            np.stack([i, n + j, n + i], 1),  # side, outward
            np.stack([np.full(n, cb), j, i], 1),  # bottom cap, normal -z
            np.stack([np.full(n, ct), n + i, n + j], 1),  # top cap, normal +z
        ]
    )
    return _mesh(v, faces, source=f"cylinder r = {radius} m, h = {height} m")


@functools.lru_cache(maxsize=64)
def _plane(sx: float, sy: float) -> MeshData:
    hx, hy = sx / 2.0, sy / 2.0
    vertices = np.array([[-hx, -hy, 0.0], [hx, -hy, 0.0], [hx, hy, 0.0], [-hx, hy, 0.0]])
    front = [[0, 1, 2], [0, 2, 3]]  # normal +z
    back = [[0, 2, 1], [0, 3, 2]]  # normal -z: the same rectangle seen from below
    uv = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])
    return _mesh(vertices, np.array(front + back), uv, source=f"plane {sx} x {sy} m")


# --------------------------------------------------------------------------- mesh files

_FILE_CACHE: dict[tuple, MeshData] = {}
_FILE_CACHE_LIMIT = 32


def _supported_formats() -> str:
    import trimesh

    return ", ".join(sorted(trimesh.available_formats()))


def _parts(loaded, path: Path) -> list:
    """Triangle meshes (trimesh.Trimesh) in what trimesh loaded, with scene-graph
    transforms applied."""
    import trimesh

    if isinstance(loaded, trimesh.Scene):
        geoms = loaded.dump(concatenate=False)
    elif isinstance(loaded, (list, tuple)):
        geoms = list(loaded)
    else:
        geoms = [loaded]
    return [g for g in geoms if isinstance(g, trimesh.Trimesh) and len(g.faces) > 0]


def _unreadable(path: Path, ext: str, exc: Exception) -> str:
    """Why trimesh could not read a mesh file, in the user's terms."""
    if isinstance(exc, ImportError):
        # trimesh guesses the encoding of text that is not UTF-8 with an optional
        # package; without it the real cause is the file's encoding.
        raw = path.read_bytes()
        try:
            raw.decode("utf-8")
        except UnicodeDecodeError as bad:
            line = raw[: bad.start].count(b"\n") + 1
            return (
                f"cannot read mesh file: line {line} is not UTF-8 text "
                f"(byte 0x{raw[bad.start]:02x}); save the file as UTF-8"
            )
    return (
        f"cannot read mesh file (corrupt or not a valid .{ext} file?): {type(exc).__name__}: {exc}"
    )


#: Peak memory per triangle of a mesh body, from reading the file to a rendered frame
#: (trimesh's arrays, our cleaned copy, the BVH and the trace's buffers): measured as
#: (peak RSS with 1,310,720 faces - with 81,920 faces) / difference in faces = 545 bytes
#: (binary PLY icospheres, a 48x27 frame, Linux, Python 3.11); 600 leaves some margin.
BYTES_PER_FACE = 600
#: Share of the free memory a mesh may be estimated to take (the frame check uses the same).
MEMORY_SHARE = 0.8


def free_memory() -> int | None:
    """Bytes of memory free now, or None where the OS does not say (checks are skipped)."""
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_AVPHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return None


def mesh_bytes(faces: int) -> int:
    """Estimated peak memory of a mesh body with ``faces`` triangles (see BYTES_PER_FACE)."""
    return int(faces) * BYTES_PER_FACE


def _face_count_from_header(path: Path, ext: str) -> int | None:
    """The triangle count a mesh file declares, read cheaply before trimesh loads it.

    Binary STL stores it at byte 80 (a uint32); PLY and OFF declare it in their
    headers; an OBJ file has one ``f`` line per polygon (counted as one triangle, a
    lower bound). None for other formats: they are checked after loading.
    """
    try:
        with open(path, "rb") as fh:
            if ext == "stl":
                head = fh.read(84)
                size = path.stat().st_size
                n = int.from_bytes(head[80:84], "little") if len(head) == 84 else 0
                # a binary STL is exactly 84 + 50 n bytes; anything else is ASCII STL
                return n if size == 84 + 50 * n else None
            if ext == "ply":
                for raw in fh.read(65536).split(b"\n")[:200]:
                    words = raw.split()
                    if words[:2] == [b"element", b"face"] and len(words) == 3:
                        return int(words[2])
                    if words[:1] == [b"end_header"]:
                        return None
                return None
            if ext == "off":  # "OFF" then "vertices faces edges", or all on one line
                lines = [
                    w.split()
                    for w in fh.read(65536).split(b"\n")
                    if w.strip() and not w.lstrip().startswith(b"#")
                ]
                counts = (
                    lines[0][1:]
                    if lines and len(lines[0]) > 1
                    else (lines[1] if len(lines) > 1 else [])
                )
                return int(counts[1]) if len(counts) >= 2 else None
            if ext == "obj":
                # chunks overlap by 2 bytes so a "\nf " across a boundary counts once
                n, prev = 0, b"\n"
                while chunk := fh.read(1 << 22):
                    n += (prev + chunk).count(b"\nf ")
                    prev = chunk[-2:]
                return n
    except (OSError, ValueError):
        return None
    return None


def check_mesh_memory(faces: int, path: Path) -> None:
    """Refuse a mesh whose estimated memory exceeds MEMORY_SHARE of the free memory."""
    need = mesh_bytes(faces)
    free = free_memory()
    if free is not None and need > MEMORY_SHARE * free:
        budget = int(MEMORY_SHARE * free // BYTES_PER_FACE)
        raise MeshError(
            f"mesh file has {faces:,} triangles, which need about {need / 2**30:.1f} GiB "
            f"({BYTES_PER_FACE} bytes each) but only {free / 2**30:.1f} GiB is free "
            f"(room for about {budget:,}); simplify the mesh",
            file=path,
            value=str(path),
        )


def _read_mesh_file(path: Path) -> MeshData:
    """Read a mesh file as it is (no scaling), flattening multi-part files."""
    import trimesh

    if not path.exists():
        raise MeshError("mesh file does not exist", file=path, value=str(path))
    if not path.is_file():
        raise MeshError("mesh path is not a file", file=path, value=str(path))
    if not os.access(path, os.R_OK):
        raise MeshError("mesh file is not readable (permission denied)", file=path, value=str(path))
    if path.stat().st_size == 0:
        raise MeshError("mesh file is empty (0 bytes)", file=path, value=str(path))
    ext = path.suffix.lower().lstrip(".")
    if ext not in trimesh.available_formats():
        what = f"unsupported mesh format '.{ext}'" if ext else "mesh file name has no extension"
        raise MeshError(
            f"{what}; readable formats: {_supported_formats()}",
            file=path,
            value=str(path),
        )
    declared = _face_count_from_header(path, ext)
    if declared is not None:
        check_mesh_memory(declared, path)  # before trimesh holds the whole file
    try:
        # process=False: keep the file's vertices as they are, so UVs stay aligned.
        loaded = trimesh.load(str(path), process=False)
    except Exception as exc:  # trimesh raises many types on corrupt input
        raise MeshError(_unreadable(path, ext, exc), file=path, value=str(path)) from exc
    parts = _parts(loaded, path)
    if not parts:
        raise MeshError("mesh file contains no triangles", file=path, value=str(path))

    vertices, faces, uvs = [], [], []
    offset = 0
    for part in parts:
        v = np.asarray(part.vertices, np.float64)
        f = np.asarray(part.faces, np.int64)
        vertices.append(v)
        faces.append(f + offset)
        offset += len(v)
        uv = getattr(part.visual, "uv", None)
        uvs.append(np.asarray(uv, np.float64) if uv is not None and len(uv) == len(v) else None)
    vertices = np.concatenate(vertices)
    faces = np.concatenate(faces)
    check_mesh_memory(len(faces), path)  # formats without a declared count, polygons split
    uv = None
    if all(u is not None for u in uvs):
        uv = np.concatenate(uvs)
    elif any(u is not None for u in uvs):
        warnings.warn(
            f"{path}: only some parts of the mesh have texture coordinates; UVs dropped",
            MeshWarning,
            stacklevel=3,
        )

    if not np.all(np.isfinite(vertices)):
        raise MeshError(
            "mesh file has non-finite (NaN or infinite) vertex coordinates",
            file=path,
            value=str(path),
        )
    _check_magnitude(vertices, path, "mesh file has vertex coordinates")
    if faces.min() < 0 or faces.max() >= len(vertices):
        raise MeshError(
            "mesh file has faces that index missing vertices", file=path, value=str(path)
        )

    return _clean(vertices, faces, uv, path)


#: largest coordinate (m) accepted in a mesh: squares of lengths (areas, distances)
#: must stay finite in float64, whose maximum is 1.8e308 (IEEE 754).
MAX_COORDINATE = 1e150


def _check_magnitude(vertices: np.ndarray, path: Path, what: str) -> None:
    biggest = float(np.abs(vertices).max()) if vertices.size else 0.0
    if not biggest <= MAX_COORDINATE:
        raise MeshError(
            f"{what} up to {biggest:.3g} m; the largest usable is {MAX_COORDINATE:.0e} m",
            file=path,
            value=str(path),
        )


def _clean(vertices: np.ndarray, faces: np.ndarray, uv: np.ndarray | None, path: Path) -> MeshData:
    """Drop zero-area triangles (with a warning) and warn about open meshes."""
    import trimesh

    tri = vertices[faces]
    doubled_area = np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    extent = float(np.ptp(vertices, axis=0).max()) or 1.0
    # Zero area up to rounding of the coordinates (relative tolerance a few hundred
    # float64 epsilons of the squared extent: common practice).
    degenerate = doubled_area <= 1e-14 * extent**2
    if degenerate.all():
        raise MeshError(
            "mesh file has only degenerate (zero-area) triangles", file=path, value=str(path)
        )
    if degenerate.any():
        warnings.warn(
            f"{path}: removed {int(degenerate.sum())} degenerate (zero-area) triangle(s) "
            f"of {len(faces)}",
            MeshWarning,
            stacklevel=4,
        )
        faces = faces[~degenerate]
        used = np.unique(faces)
        remap = np.full(len(vertices), -1, np.int64)
        remap[used] = np.arange(len(used))
        vertices, faces = vertices[used], remap[faces]
        uv = uv[used] if uv is not None else None

    # Watertightness on a copy merged by position: UV seams split vertices in the
    # file without opening the surface.
    merged = trimesh.Trimesh(vertices=vertices, faces=faces, process=False)
    merged.merge_vertices(merge_tex=True, merge_norm=True)
    if not merged.is_watertight:
        warnings.warn(
            f"{path}: mesh is not closed (has open edges); it is rendered as a surface "
            f"seen from both sides",
            MeshWarning,
            stacklevel=4,
        )
    return _mesh(vertices, faces, uv, source=str(path))


def load_mesh_file(path: str | Path, scale: float = 1.0, center: bool = True) -> MeshData:
    """Read a mesh file into the rest frame (no rotation): scaled, optionally centred.

    ``center``: shift the mesh so the centre of its bounding box is at the origin.
    Cached per (path, modification time, file size, scale, center).
    """
    path = Path(path)
    try:
        st = path.stat()
        stamp = (st.st_mtime_ns, st.st_size)
    except OSError:
        stamp = None  # _read_mesh_file reports the problem
    key = (str(path.resolve()), stamp, float(scale), bool(center))
    cached = _FILE_CACHE.get(key) if stamp is not None else None
    if cached is not None:
        return cached
    raw = _read_mesh_file(path)
    with np.errstate(over="ignore"):
        vertices = raw.vertices * float(scale)
    _check_magnitude(vertices, path, f"scale = {float(scale):.6g} gives vertex coordinates")
    if center:
        lo, hi = vertices.min(axis=0), vertices.max(axis=0)
        vertices = vertices - (lo + hi) / 2.0
    result = _mesh(vertices, raw.faces, raw.uv, source=raw.source)
    if len(_FILE_CACHE) >= _FILE_CACHE_LIMIT:
        _FILE_CACHE.pop(next(iter(_FILE_CACHE)))
    _FILE_CACHE[key] = result
    return result


def clear_cache() -> None:
    """Forget cached meshes (files and primitives)."""
    _FILE_CACHE.clear()
    for f in (_box, _sphere, _cylinder, _plane):
        f.cache_clear()


# --------------------------------------------------------------------------- bodies


def _detail(body) -> int:
    return DEFAULT_DETAIL if getattr(body, "detail", None) is None else int(body.detail)


def _unrotated(body) -> MeshData:
    shape = body.shape
    if shape == "box":
        sx, sy, sz = (float(s) for s in body.size)
        return _box(sx, sy, sz)
    if shape == "sphere":
        return _sphere(float(body.radius), _detail(body))
    if shape == "cylinder":
        return _cylinder(float(body.radius), float(body.height), _detail(body))
    if shape == "plane":
        sx, sy = (float(s) for s in body.size)
        return _plane(sx, sy)
    if shape == "mesh":
        return load_mesh_file(body.file, scale=body.scale, center=getattr(body, "center", True))
    raise ValueError(f"unknown shape {shape!r}; expected one of {', '.join(SHAPES)}")


def mesh_data(body) -> MeshData:
    """The body's triangle mesh in its rest frame (m), rotation applied, UVs if any."""
    base = _unrotated(body)
    rotation = np.asarray(getattr(body, "rotation", np.zeros(3)), float)
    if not np.any(rotation):
        return base
    r = body.rotation_matrix()
    return _mesh(base.vertices @ r.T, base.faces, base.uv, source=base.source)


def build_mesh(body):
    """The body's rest-frame mesh as a trimesh.Trimesh (UVs in ``visual.uv`` when present)."""
    return mesh_data(body).to_trimesh()


def body_bounds(body) -> float:
    """Radius (m) of the smallest origin-centred sphere holding the body's rest-frame mesh."""
    return float(np.sqrt((mesh_data(body).vertices ** 2).sum(axis=1).max()))
