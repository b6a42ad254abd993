"""Camera projections: pixels <-> directions in the camera's own rest frame.

A direction here is a unit vector *towards the source* with components along the
scene axes; the camera frame's axes are parallel to the scene frame's (a pure boost
links them). Pixel coordinates: x right, y down, from the image's top-left corner,
pixel centres at half-integers.

Each projection is one class in :data:`PROJECTIONS` holding its maths once, as
compiled functions of *centred* image coordinates (x right, y up, in pixels, from the
image centre) and camera-local direction components (along right, up, forward):

* ``setup(width, height, fov_rad)``: the per-image constants, a 4-tuple;
* ``direction(x, y, p)``: pixel -> (lx, ly, lz, valid);
* ``pixel(lx, ly, lz, p)``: direction -> (x, y, valid), valid False where the
  projection has no image of that direction;
* ``solid_angle(x, y, p)``: the pixel's solid angle (steradians).

Every caller (the fused ray-generation kernel, :func:`pixels_to_directions`,
:func:`directions_to_pixels`, :func:`pixel_solid_angle`) reaches them through the
compiled dispatchers ``_setup``, ``_direction``, ``_pixel`` and ``_solid_angle``, which
switch on the projection's integer ``code`` (numba cannot call through a Python
registry, and passing the functions as arguments defeats ``cache=True``).

Adding a projection: one :class:`Projection` subclass with the four functions and its
field-of-view rule, :func:`register` it, and one branch per dispatcher below.

Projections:

* ``pinhole``: rectilinear, horizontal field of view ``fov``;
* ``panorama``: equirectangular full sphere, longitude across the width (centred
  on the view direction), latitude +90 deg (top) to -90 deg (bottom);
* ``fisheye``: equidistant (angle from the axis proportional to the radius), ``fov``
  across the image width, up to 360 deg.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from relview.kinematics.lorentz import boost_matrix
from relview.scene.parts import Camera


class Projection:
    """One camera projection: its name, dispatch code, field-of-view rule and maths.

    ``fov_default`` is used when a scene gives none; ``fov_max`` bounds it (inclusive
    when ``fov_max_inclusive``); ``fov_fixed`` (if not None) is the only field of view
    the projection has, and a scene may not give one.
    """

    name: str
    code: int
    fov_default: float
    fov_max: float
    fov_max_inclusive: bool = False
    fov_fixed: float | None = None
    setup = direction = pixel = solid_angle = None  # compiled functions, see module doc


#: projection name -> its class; codes are the registration order
PROJECTIONS: dict[str, type[Projection]] = {}


def register(cls: type[Projection]) -> type[Projection]:
    """Add a projection class to :data:`PROJECTIONS` (its code must be the next free one)."""
    if cls.code != len(PROJECTIONS) or cls.name in PROJECTIONS:
        raise ValueError(
            f"projection {cls.name!r}: code {cls.code} is not the next free "
            f"one ({len(PROJECTIONS)}) or the name is taken"
        )
    PROJECTIONS[cls.name] = cls
    return cls


def projection(name: str) -> type[Projection]:
    """The registered projection called ``name`` (ValueError naming the known ones)."""
    try:
        return PROJECTIONS[name]
    except KeyError:
        raise ValueError(f"unknown projection {name!r}; known: {', '.join(PROJECTIONS)}") from None


@register
class Pinhole(Projection):
    """Rectilinear: focal length f = (width/2) / tan(fov/2) in pixels."""

    name = "pinhole"
    code = 0
    fov_default = 60.0
    fov_max = 180.0

    @staticmethod
    @njit(cache=True, inline="always")
    def setup(width, height, fov_rad):
        return width, height, (width / 2.0) / np.tan(fov_rad / 2.0), 0.0

    @staticmethod
    @njit(cache=True, inline="always")
    def direction(x, y, p):
        f = p[2]
        r = np.sqrt(x * x + y * y + f * f)
        return x / r, y / r, f / r, True

    @staticmethod
    @njit(cache=True, inline="always", error_model="numpy")
    def pixel(lx, ly, lz, p):
        f = p[2]
        return f * lx / lz, f * ly / lz, lz > 0  # behind the lens: no image

    @staticmethod
    @njit(cache=True, inline="always")
    def solid_angle(x, y, p):
        # dOmega = cos(angle off axis)^3 dA / f^2 for a flat image at distance f
        # (projected area over distance squared, dA cos / R^2 with R = f / cos)
        f = p[2]
        lz = f / np.sqrt(x * x + y * y + f * f)
        return lz * lz * lz / (f * f)


@register
class Panorama(Projection):
    """Equirectangular full sphere: longitude and latitude linear in x and y."""

    name = "panorama"
    code = 1
    fov_default = 360.0
    fov_max = 360.0
    fov_max_inclusive = True
    fov_fixed = 360.0

    @staticmethod
    @njit(cache=True, inline="always")
    def setup(width, height, fov_rad):
        return width, height, 0.0, 0.0

    @staticmethod
    @njit(cache=True, inline="always")
    def direction(x, y, p):
        lon = x / p[0] * 2.0 * np.pi
        lat = y / p[1] * np.pi
        return np.cos(lat) * np.sin(lon), np.sin(lat), np.cos(lat) * np.cos(lon), True

    @staticmethod
    @njit(cache=True, inline="always")
    def pixel(lx, ly, lz, p):
        lon = np.arctan2(lx, lz)
        lat = np.arcsin(min(max(ly, -1.0), 1.0))
        return lon / (2.0 * np.pi) * p[0], lat / np.pi * p[1], True

    @staticmethod
    @njit(cache=True, inline="always")
    def solid_angle(x, y, p):
        # dOmega = cos(lat) dlon dlat (area element of the unit sphere)
        lat = y / p[1] * np.pi
        return (2 * np.pi / p[0]) * (np.pi / p[1]) * np.cos(lat)


@register
class Fisheye(Projection):
    """Equidistant: the angle from the axis grows linearly with the radius in the image."""

    name = "fisheye"
    code = 2
    fov_default = 180.0
    fov_max = 360.0
    fov_max_inclusive = True

    @staticmethod
    @njit(cache=True, inline="always")
    def setup(width, height, fov_rad):
        half = fov_rad / 2.0
        return width, height, half, min(half, np.pi)

    @staticmethod
    @njit(cache=True, inline="always")
    def direction(x, y, p):
        th = np.sqrt(x * x + y * y) / (p[0] / 2.0) * p[2]
        ph = np.arctan2(y, x)
        st = np.sin(th)
        return st * np.cos(ph), st * np.sin(ph), np.cos(th), not th > p[3]

    @staticmethod
    @njit(cache=True, inline="always")
    def pixel(lx, ly, lz, p):
        theta = np.arccos(min(max(lz, -1.0), 1.0))
        phi = np.arctan2(ly, lx)
        r = theta / p[2] * (p[0] / 2.0)
        return r * np.cos(phi), r * np.sin(phi), theta <= p[2]

    @staticmethod
    @njit(cache=True, inline="always")
    def solid_angle(x, y, p):
        # dOmega = sin(theta) dtheta dphi and theta = k r: dOmega = k^2 sin(theta)/theta dA
        # Corners beyond theta = pi (a field near 360 deg) map to no direction: 0 there.
        k = p[2] / (p[0] / 2.0)  # radians per pixel along the radius
        th = np.sqrt(x * x + y * y) * k
        if th > np.pi:
            return 0.0
        if th > 1e-9:
            return k * k * np.sin(th) / th
        return k * k


# The compiled dispatchers: numba resolves module-level names, not class attributes.
_pinhole_setup, _pinhole_direction = Pinhole.setup, Pinhole.direction
_pinhole_pixel, _pinhole_solid_angle = Pinhole.pixel, Pinhole.solid_angle
_panorama_setup, _panorama_direction = Panorama.setup, Panorama.direction
_panorama_pixel, _panorama_solid_angle = Panorama.pixel, Panorama.solid_angle
_fisheye_setup, _fisheye_direction = Fisheye.setup, Fisheye.direction
_fisheye_pixel, _fisheye_solid_angle = Fisheye.pixel, Fisheye.solid_angle


@njit(cache=True, inline="always")
def _setup(code, width, height, fov_rad):
    if code == 0:
        return _pinhole_setup(width, height, fov_rad)
    if code == 1:
        return _panorama_setup(width, height, fov_rad)
    if code == 2:
        return _fisheye_setup(width, height, fov_rad)
    return np.nan, np.nan, np.nan, np.nan  # unknown code: NaN rather than another projection


@njit(cache=True, inline="always")
def _direction(code, x, y, p):
    if code == 0:
        return _pinhole_direction(x, y, p)
    if code == 1:
        return _panorama_direction(x, y, p)
    if code == 2:
        return _fisheye_direction(x, y, p)
    return np.nan, np.nan, np.nan, False


@njit(cache=True, inline="always")
def _pixel(code, lx, ly, lz, p):
    if code == 0:
        return _pinhole_pixel(lx, ly, lz, p)
    if code == 1:
        return _panorama_pixel(lx, ly, lz, p)
    if code == 2:
        return _fisheye_pixel(lx, ly, lz, p)
    return np.nan, np.nan, False


@njit(cache=True, inline="always")
def _solid_angle(code, x, y, p):
    if code == 0:
        return _pinhole_solid_angle(x, y, p)
    if code == 1:
        return _panorama_solid_angle(x, y, p)
    if code == 2:
        return _fisheye_solid_angle(x, y, p)
    return np.nan


def _constants(camera: Camera, width: int, height: int):
    """(code, width, height, fov in radians) as the kernels take them."""
    return (
        projection(camera.projection).code,
        float(width),
        float(height),
        float(np.radians(camera.fov)),
    )


def pixel_grid(width: int, height: int, jitter: np.ndarray | None = None) -> np.ndarray:
    """(H*W, 2) pixel positions (x, y): centres, plus an optional (H*W, 2) offset in [-0.5, 0.5)."""
    ys, xs = np.mgrid[0:height, 0:width]
    px = np.stack([xs.ravel() + 0.5, ys.ravel() + 0.5], axis=-1).astype(float)
    if jitter is not None:
        px = px + jitter
    return px


def pixels_to_directions(camera: Camera, width: int, height: int, pixels: np.ndarray):
    """(N, 2) pixel positions -> ((N, 3) unit directions in the camera frame, (N,) valid)."""
    return scene_directions(camera, width, height, pixels, None)


@njit(parallel=True, cache=True, error_model="numpy")  # a pinhole divides by lz = 0 at 90 deg
def _local_pixels(local, code, width, height, fov_rad):
    n = local.shape[0]
    out = np.empty((n, 2))
    valid = np.empty(n, np.bool_)
    p = _setup(code, width, height, fov_rad)
    for i in prange(n):
        x, y, ok = _pixel(code, local[i, 0], local[i, 1], local[i, 2], p)
        out[i, 0] = x + width / 2.0
        out[i, 1] = height / 2.0 - y
        valid[i] = ok
    return out, valid


def directions_to_pixels(camera: Camera, width: int, height: int, directions: np.ndarray):
    """(N, 3) camera-frame directions -> ((N, 2) pixel positions, (N,) in front of the lens).

    Pixels may lie off the image; ``valid`` is False where the projection has no image
    of that direction (behind a pinhole camera, outside a fisheye's field).
    """
    local = np.asarray(directions, float) @ camera.basis().T  # along right, up, forward
    return _local_pixels(np.ascontiguousarray(local), *_constants(camera, width, height))


@njit(parallel=True, cache=True)
def _pixel_solid_angles(px, code, width, height, fov_rad):
    n = px.shape[0]
    out = np.empty(n)
    p = _setup(code, width, height, fov_rad)
    for i in prange(n):
        out[i] = _solid_angle(code, px[i, 0] - width / 2.0, height / 2.0 - px[i, 1], p)
    return out


def pixel_solid_angle(camera: Camera, width: int, height: int) -> np.ndarray:
    """(H, W) solid angle of each pixel in steradians (camera frame), for point-source splats."""
    om = _pixel_solid_angles(pixel_grid(width, height), *_constants(camera, width, height))
    return om.reshape(height, width)


@njit(parallel=True, cache=True)
def _scene_directions(px, width, height, basis, code, fov_rad, to_scene, aberrate):
    n = px.shape[0]
    out = np.empty((n, 3))
    valid = np.empty(n, np.bool_)
    p = _setup(code, width, height, fov_rad)
    for i in prange(n):
        lx, ly, lz, ok = _direction(code, px[i, 0] - width / 2.0, height / 2.0 - px[i, 1], p)
        valid[i] = ok
        dx = lx * basis[0, 0] + ly * basis[1, 0] + lz * basis[2, 0]
        dy = lx * basis[0, 1] + ly * basis[1, 1] + lz * basis[2, 1]
        dz = lx * basis[0, 2] + ly * basis[1, 2] + lz * basis[2, 2]
        if aberrate:
            # photon 4-momentum (1, -d) in the camera frame, boosted into S
            k0 = to_scene[0, 0] - to_scene[0, 1] * dx - to_scene[0, 2] * dy - to_scene[0, 3] * dz
            k1 = to_scene[1, 0] - to_scene[1, 1] * dx - to_scene[1, 2] * dy - to_scene[1, 3] * dz
            k2 = to_scene[2, 0] - to_scene[2, 1] * dx - to_scene[2, 2] * dy - to_scene[2, 3] * dz
            k3 = to_scene[3, 0] - to_scene[3, 1] * dx - to_scene[3, 2] * dy - to_scene[3, 3] * dz
            dx, dy, dz = -k1 / k0, -k2 / k0, -k3 / k0
        out[i, 0] = dx
        out[i, 1] = dy
        out[i, 2] = dz
    return out, valid


def scene_directions(camera: Camera, width: int, height: int, pixels: np.ndarray, beta_cam=None):
    """(N, 2) pixel positions -> ((N, 3) unit S directions towards the source, (N,) valid).

    The same as :func:`pixels_to_directions` followed by
    :func:`relview.kinematics.lorentz.aberrate_to_scene` with ``beta_cam`` (None or zero: no
    aberration), fused into one compiled loop.
    """
    beta = np.zeros(3) if beta_cam is None else np.asarray(beta_cam, float)
    aberrate = bool(np.any(beta))
    to_scene = boost_matrix(-beta)
    code, w, h, fov_rad = _constants(camera, width, height)
    return _scene_directions(
        np.ascontiguousarray(pixels, dtype=np.float64),
        w,
        h,
        camera.basis(),
        code,
        fov_rad,
        to_scene,
        aberrate,
    )
