"""Camera projections: pixels <-> directions in the camera's own rest frame.

A direction here is a unit vector *towards the source* with components along the
scene axes; the camera frame's axes are parallel to the scene frame's (a pure boost
links them). Pixel coordinates: x right, y down, from the image's top-left corner,
pixel centres at half-integers.

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

PROJECTIONS = ("pinhole", "panorama", "fisheye")


def pixel_grid(width: int, height: int, jitter: np.ndarray | None = None) -> np.ndarray:
    """(H*W, 2) pixel positions (x, y): centres, plus an optional (H*W, 2) offset in [-0.5, 0.5)."""
    ys, xs = np.mgrid[0:height, 0:width]
    px = np.stack([xs.ravel() + 0.5, ys.ravel() + 0.5], axis=-1).astype(float)
    if jitter is not None:
        px = px + jitter
    return px


def pixels_to_directions(camera: Camera, width: int, height: int, pixels: np.ndarray):
    """(N, 2) pixel positions -> ((N, 3) unit directions in the camera frame, (N,) valid)."""
    basis = camera.basis()  # rows: right, up, forward
    x = pixels[:, 0] - width / 2.0
    y = height / 2.0 - pixels[:, 1]
    valid = np.ones(len(pixels), bool)
    if camera.projection == "pinhole":
        f = (width / 2.0) / np.tan(np.radians(camera.fov) / 2.0)
        local = np.stack([x, y, np.full_like(x, f)], axis=-1)
        local /= np.linalg.norm(local, axis=-1, keepdims=True)
    elif camera.projection == "panorama":
        lon = x / width * 2.0 * np.pi
        lat = y / height * np.pi
        local = np.stack([np.cos(lat) * np.sin(lon), np.sin(lat), np.cos(lat) * np.cos(lon)], -1)
    elif camera.projection == "fisheye":
        half = np.radians(camera.fov) / 2.0
        r = np.hypot(x, y)
        theta = r / (width / 2.0) * half
        valid = theta <= min(half, np.pi)
        phi = np.arctan2(y, x)
        s = np.sin(theta)
        local = np.stack([s * np.cos(phi), s * np.sin(phi), np.cos(theta)], axis=-1)
    else:
        raise ValueError(f"unknown projection {camera.projection!r}")
    return local @ basis, valid


def directions_to_pixels(camera: Camera, width: int, height: int, directions: np.ndarray):
    """(N, 3) camera-frame directions -> ((N, 2) pixel positions, (N,) in front of the lens).

    Pixels may lie off the image; ``valid`` is False where the projection has no image
    of that direction (behind a pinhole camera, outside a fisheye's field).
    """
    basis = camera.basis()
    local = np.asarray(directions, float) @ basis.T  # components along right, up, forward
    lx, ly, lz = local[:, 0], local[:, 1], local[:, 2]
    if camera.projection == "pinhole":
        f = (width / 2.0) / np.tan(np.radians(camera.fov) / 2.0)
        valid = lz > 0
        with np.errstate(divide="ignore", invalid="ignore"):
            x = f * lx / lz
            y = f * ly / lz
    elif camera.projection == "panorama":
        lon = np.arctan2(lx, lz)
        lat = np.arcsin(np.clip(ly, -1.0, 1.0))
        x = lon / (2.0 * np.pi) * width
        y = lat / np.pi * height
        valid = np.ones(len(local), bool)
    elif camera.projection == "fisheye":
        half = np.radians(camera.fov) / 2.0
        theta = np.arccos(np.clip(lz, -1.0, 1.0))
        phi = np.arctan2(ly, lx)
        r = theta / half * (width / 2.0)
        x = r * np.cos(phi)
        y = r * np.sin(phi)
        valid = theta <= half
    else:
        raise ValueError(f"unknown projection {camera.projection!r}")
    px = np.stack([x + width / 2.0, height / 2.0 - y], axis=-1)
    return px, valid


def pixel_solid_angle(camera: Camera, width: int, height: int) -> np.ndarray:
    """(H, W) solid angle of each pixel in steradians (camera frame), for point-source splats."""
    px = pixel_grid(width, height)
    d, _ = pixels_to_directions(camera, width, height, px)
    basis = camera.basis()
    lz = d @ basis[2]
    if camera.projection == "pinhole":
        f = (width / 2.0) / np.tan(np.radians(camera.fov) / 2.0)
        om = lz**3 / f**2
    elif camera.projection == "panorama":
        lat = (height / 2.0 - px[:, 1]) / height * np.pi
        om = (2 * np.pi / width) * (np.pi / height) * np.cos(lat)
    else:
        half = np.radians(camera.fov) / 2.0
        k = half / (width / 2.0)  # radians per pixel along the radius
        theta = np.arccos(np.clip(lz, -1, 1))
        with np.errstate(invalid="ignore", divide="ignore"):
            om = np.where(theta > 1e-9, k * k * np.sin(theta) / np.maximum(theta, 1e-300), k * k)
    return om.reshape(height, width)


_PROJECTION_CODE = {"pinhole": 0, "panorama": 1, "fisheye": 2}


@njit(parallel=True, cache=True)
def _scene_directions(px, width, height, basis, code, fov_rad, to_scene, aberrate):
    n = px.shape[0]
    out = np.empty((n, 3))
    valid = np.ones(n, np.bool_)
    f = (width / 2.0) / np.tan(fov_rad / 2.0)
    half = fov_rad / 2.0
    for i in prange(n):
        x = px[i, 0] - width / 2.0
        y = height / 2.0 - px[i, 1]
        if code == 0:
            r = np.sqrt(x * x + y * y + f * f)
            lx, ly, lz = x / r, y / r, f / r
        elif code == 1:
            lon = x / width * 2.0 * np.pi
            lat = y / height * np.pi
            lx = np.cos(lat) * np.sin(lon)
            ly = np.sin(lat)
            lz = np.cos(lat) * np.cos(lon)
        else:
            th = np.sqrt(x * x + y * y) / (width / 2.0) * half
            if th > min(half, np.pi):
                valid[i] = False
            ph = np.arctan2(y, x)
            st = np.sin(th)
            lx, ly, lz = st * np.cos(ph), st * np.sin(ph), np.cos(th)
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


def scene_directions(camera: Camera, width: int, height: int, pixels: np.ndarray,
                     beta_cam=None):
    """(N, 2) pixel positions -> ((N, 3) unit S directions towards the source, (N,) valid).

    The same as :func:`pixels_to_directions` followed by
    :func:`relview.kinematics.lorentz.aberrate_to_scene` with ``beta_cam`` (None or zero: no
    aberration), fused into one compiled loop.
    """
    beta = np.zeros(3) if beta_cam is None else np.asarray(beta_cam, float)
    aberrate = bool(np.any(beta))
    to_scene = boost_matrix(-beta)
    return _scene_directions(np.ascontiguousarray(pixels, dtype=np.float64), float(width),
                             float(height), camera.basis(), _PROJECTION_CODE[camera.projection],
                             float(np.radians(camera.fov)), to_scene, aberrate)
