"""Lorentz kinematics: boosts, aberration, velocity composition, Doppler factor.

Conventions (docs/physics.md, shared design contract):

* Events are 4-vectors ``(ct, x, y, z)`` in metres: time is carried as ``ct``
  so that c = 1 inside the program. Scene files and output layers use seconds;
  convert with :data:`C`.
* ``beta`` is a velocity divided by c, a 3-vector with ``|beta| < 1``.
* A *direction towards the source* ``d`` is a unit 3-vector pointing from the
  camera to what it sees; light propagates along ``n = -d``.

All functions take plain numpy arrays and broadcast over leading axes.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

#: Speed of light in vacuum, m/s (exact, SI definition since 1983).
C = 299_792_458.0


def lorentz_factor(beta) -> np.ndarray:
    """gamma = 1/sqrt(1 - |beta|^2) for (..., 3) beta."""
    beta = np.asarray(beta, dtype=float)
    b2 = np.sum(beta * beta, axis=-1)
    if np.any(b2 >= 1.0):
        raise ValueError(f"speed at or above c: |beta| = {np.sqrt(np.max(b2)):.6g}")
    return 1.0 / np.sqrt(1.0 - b2)


def boost_matrix(beta) -> np.ndarray:
    """4x4 matrix taking (ct, x) in frame S to the frame moving with ``beta``.

    Standard pure boost (e.g. Jackson, Classical Electrodynamics, eq. 11.98):
    ct' = gamma (ct - beta.x),
    x'  = x + ((gamma-1)/b^2)(beta.x) beta - gamma beta ct.
    """
    beta = np.asarray(beta, dtype=float).reshape(3)
    b2 = float(beta @ beta)
    g = float(lorentz_factor(beta))
    m = np.eye(4)
    m[0, 0] = g
    m[0, 1:] = -g * beta
    m[1:, 0] = -g * beta
    if b2 > 0.0:
        m[1:, 1:] += (g - 1.0) / b2 * np.outer(beta, beta)
    return m


def galilean_matrix(beta) -> np.ndarray:
    """4x4 Galilean map (ct, x) -> (ct, x - beta ct): the 'contraction off' kinematics."""
    beta = np.asarray(beta, dtype=float).reshape(3)
    m = np.eye(4)
    m[1:, 0] = -beta
    return m


def boost_event(beta, event) -> np.ndarray:
    """Boost (..., 4) events (ct, x) into the frame moving with ``beta``."""
    return np.asarray(event, dtype=float) @ boost_matrix(beta).T


def compose_velocities(beta_frame, beta_inside) -> np.ndarray:
    """Velocity in S of an object moving with ``beta_inside`` in a frame that moves with
    ``beta_frame`` in S (relativistic velocity addition; Jackson eq. 11.31, Rindler 2006 §3.6).

    Collinear case reduces to (u + v) / (1 + u v).
    """
    v = np.asarray(beta_frame, dtype=float).reshape(3)
    u = np.asarray(beta_inside, dtype=float)
    # Boost the object's 4-velocity out of the moving frame: S-frame = boost(-v).
    gu = lorentz_factor(u)
    four = np.concatenate([np.atleast_1d(gu)[..., None], u * np.atleast_1d(gu)[..., None]], -1)
    out = four @ boost_matrix(-v).T
    res = out[..., 1:] / out[..., :1]
    return res.reshape(u.shape)


def aberrate_to_scene(d_cam, beta_cam) -> np.ndarray:
    """Direction towards the source seen in the camera frame -> the same photon in S.

    The photon's 4-momentum in the camera frame is k' = (1, -d'); S moves with
    -beta_cam relative to the camera, so k = boost(-beta_cam) k'.  Equivalent to
    the textbook aberration formula (Einstein 1905, §7):
    cos(theta) = (cos(theta') - beta) / (1 - beta cos(theta')).
    """
    d_cam = np.asarray(d_cam, dtype=float)
    k = np.concatenate([np.ones(d_cam.shape[:-1] + (1,)), -d_cam], axis=-1)
    ks = k @ boost_matrix(-np.asarray(beta_cam, dtype=float)).T
    return -ks[..., 1:] / ks[..., :1]


def aberrate_to_camera(d_scene, beta_cam) -> np.ndarray:
    """Inverse of :func:`aberrate_to_scene`: S direction towards the source -> camera frame.

    cos(theta') = (cos(theta) + beta) / (1 + beta cos(theta)) (Einstein 1905, §7).
    """
    d_scene = np.asarray(d_scene, dtype=float)
    k = np.concatenate([np.ones(d_scene.shape[:-1] + (1,)), -d_scene], axis=-1)
    kc = k @ boost_matrix(np.asarray(beta_cam, dtype=float)).T
    return -kc[..., 1:] / kc[..., :1]


def doppler_factor(beta_emit, beta_cam, n) -> np.ndarray:
    """D = nu_observed / nu_emitted for light propagating along unit ``n`` (emitter -> camera).

    D = gamma_cam (1 - beta_cam.n) / (gamma_emit (1 - beta_emit.n))
    (ratio of k.u for the two 4-velocities; Rybicki & Lightman 1979, eq. 4.11).
    Broadcasts over leading axes; computed by :func:`doppler_at`, the one compiled source.
    """
    beta_emit, beta_cam, n = np.broadcast_arrays(
        np.asarray(beta_emit, dtype=float),
        np.asarray(beta_cam, dtype=float),
        np.asarray(n, dtype=float),
    )
    lorentz_factor(beta_cam)  # ValueError at or above c, as for the emitter below
    lorentz_factor(beta_emit)
    shape = n.shape[:-1]
    flat = [np.ascontiguousarray(a.reshape(-1, 3)) for a in (beta_emit, -n, beta_cam)]
    return _doppler_along(*flat, True).reshape(shape)


def contract(x_rest, beta) -> np.ndarray:
    """Rest-frame displacement -> S displacement between simultaneous (in S) events.

    The component along beta shrinks by 1/gamma (Lorentz-FitzGerald contraction);
    the perpendicular part is unchanged.
    """
    x_rest = np.asarray(x_rest, dtype=float)
    beta = np.asarray(beta, dtype=float).reshape(3)
    b2 = float(beta @ beta)
    if b2 == 0.0:
        return x_rest.copy()
    g = float(lorentz_factor(beta))
    along = (x_rest @ beta) / b2
    return x_rest - np.multiply.outer(along, beta) * (1.0 - 1.0 / g)


@njit(cache=True, inline="always")
def camera_gamma(beta_cam, relativistic):
    """gamma of the (3,) camera velocity, or 1 for Galilean kinematics (no time dilation)."""
    if not relativistic:
        return 1.0
    return 1.0 / np.sqrt(1.0 - (beta_cam[0] ** 2 + beta_cam[1] ** 2 + beta_cam[2] ** 2))


@njit(cache=True, inline="always")
def doppler_at(g_cam, beta_cam, beta_emit, e, d_scene, i, relativistic):
    """D of the light arriving along direction ``d_scene[i]`` (towards the source) from an
    emitter moving with ``beta_emit[e]``, seen by a camera moving with (3,) ``beta_cam``
    whose gamma is ``g_cam`` (:func:`camera_gamma`).

    The one source of D = gamma_cam (1 - beta_cam.n) / (gamma_emit (1 - beta_emit.n)) with
    n = -d (Rybicki & Lightman 1979, eq. 4.11); ``relativistic=False`` drops the gammas
    (Galilean kinematics: the classical Doppler factor of light moving at c in S).
    """
    num = 1.0 + (
        beta_cam[0] * d_scene[i, 0] + beta_cam[1] * d_scene[i, 1] + beta_cam[2] * d_scene[i, 2]
    )
    den = 1.0 + (
        beta_emit[e, 0] * d_scene[i, 0]
        + beta_emit[e, 1] * d_scene[i, 1]
        + beta_emit[e, 2] * d_scene[i, 2]
    )
    if relativistic:
        den = den / np.sqrt(
            1.0 - (beta_emit[e, 0] ** 2 + beta_emit[e, 1] ** 2 + beta_emit[e, 2] ** 2)
        )
    return g_cam * num / den


@njit(parallel=True, cache=True)
def _doppler_along(beta_emit, d_scene, beta_cam, relativistic):
    # beta_cam: (1, 3) for one camera (the renderer's case), or (N, 3) one per ray
    n = d_scene.shape[0]
    out = np.empty(n)
    if beta_cam.shape[0] == 1:
        bc = beta_cam[0]
        g_cam = camera_gamma(bc, relativistic)
        for i in prange(n):
            out[i] = doppler_at(g_cam, bc, beta_emit, i, d_scene, i, relativistic)
    else:
        for i in prange(n):
            bc = beta_cam[i]
            out[i] = doppler_at(
                camera_gamma(bc, relativistic), bc, beta_emit, i, d_scene, i, relativistic
            )
    return out


def doppler_along(beta_emit, d_scene, beta_cam, relativistic: bool = True) -> np.ndarray:
    """D for (N, 3) emitter velocities seen along (N, 3) unit S directions towards them.

    Same formula as :func:`doppler_factor` with n = -d; ``relativistic=False`` drops the
    gamma factors (classical Doppler factor of light moving at c in S). Compiled loop.
    """
    be = np.ascontiguousarray(np.broadcast_to(beta_emit, np.shape(d_scene)), dtype=np.float64)
    return _doppler_along(
        be,
        np.ascontiguousarray(d_scene, dtype=np.float64),
        np.asarray(beta_cam, dtype=np.float64).reshape(1, 3),
        bool(relativistic),
    )
