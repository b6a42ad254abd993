"""Worldlines of rigid bodies under any motion, and the retarded-time solve.

Units
-----
Dataclass fields are in scene-file units (SI): metres, seconds, m/s^2, rad/s,
degrees for phases, ``beta`` = v/c.  Every method works in internal units:
lengths in metres and time as ct in metres (c = 1), so ``t_ct = t_s * C``.

The rigid-body model (docs/motion.md)
-------------------------------------
Each motion gives the worldline of a *reference point* (the body origin, or for
a spin the point the base motion carries), parametrised by its own scene-frame
time ``s`` (ct, metres): position ``X(s)``, velocity ``beta(s)`` and ``dbeta/ds``,
plus an orientation ``q = M(s) p + b(s)`` that places the body point with body
coordinates ``p`` at the rest-frame displacement ``q`` from the reference point.

*Rigid in the instantaneous rest frame of the reference point*: the event of
body point ``p`` that belongs to the reference event ``(s, X(s))`` is the one
simultaneous with it in the reference point's momentary rest frame (reached
from S by a pure boost), at displacement ``q`` there:

    E(s, p) = (s, X(s)) + Lambda(-beta(s)) (0, q(s, p))

so ``t = s + gamma beta.q`` and ``x = X + q + gamma^2/(gamma+1) (beta.q) beta``.
For uniform motion this is the Lorentz-contracted body
(``x = x0 + contract(p, beta) + beta (t - t0)``); for hyperbolic motion it is
exactly the Born-rigid body (each point at distance xi along the acceleration
has proper acceleration a / (1 + a xi / c^2); Rindler 2006, §3.8); a spinning
body's rim moves, in the rest frame, with ``omega x q`` and in S with that
velocity relativistically composed with the reference point's velocity.
The model needs every point's worldline to stay timelike (dt/ds > 0 and
|beta| < 1): ``validate(extent_m)`` checks that.

``contraction=False`` switches to Galilean kinematics: ``E = (s, X(s) + q)``,
spin angle from scene time, velocities added classically.  The reference
point's worldline itself is unchanged.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.interpolate import CubicSpline

from relview.kinematics.lorentz import C, contract, lorentz_factor
from relview.scene.parts import UniformMotion

_EPS = np.finfo(float).eps
#: Relative tolerance of the retarded-time and simultaneity solves (of the light-travel
#: distance, resp. of the time offset), plus a few ulp of the absolute time.
SOLVER_RTOL = 1e-12


# ----------------------------------------------------------------------------- helpers


def _vec3(value, name: str = "vector") -> np.ndarray:
    v = np.asarray(value, dtype=float)
    if v.shape != (3,) or not np.all(np.isfinite(v)):
        raise ValueError(f"{name} must be three finite numbers, got {value!r}")
    return v


def _unit(value, name: str) -> np.ndarray:
    v = _vec3(value, name)
    n = float(np.linalg.norm(v))
    if n == 0.0:
        raise ValueError(f"{name} must not be the zero vector, got {value!r}")
    return v / n


def _cross_matrix(axis: np.ndarray) -> np.ndarray:
    """K with K @ v = axis x v."""
    x, y, z = axis
    return np.array([[0.0, -z, y], [z, 0.0, -x], [-y, x, 0.0]])


def _rotation(axis: np.ndarray, angle: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rodrigues' rotation (N,3,3) about unit ``axis`` by ``angle`` (N,) rad, and K."""
    k = _cross_matrix(axis)
    s = np.sin(angle)[:, None, None]
    c = np.cos(angle)[:, None, None]
    r = np.eye(3)[None] + s * k[None] + (1.0 - c) * (k @ k)[None]
    return r, k


def _perpendicular_basis(axis: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """e1, e2 with (e1, e2, axis) right-handed; e1 = scene x projected off the axis
    (scene y if the axis is along x)."""
    ref = np.array([1.0, 0.0, 0.0])
    if np.linalg.norm(np.cross(axis, ref)) < 1e-6:
        ref = np.array([0.0, 1.0, 0.0])
    e1 = ref - (ref @ axis) * axis
    e1 /= np.linalg.norm(e1)
    return e1, np.cross(axis, e1)


def _fibonacci_sphere(n: int) -> np.ndarray:
    """n nearly uniform unit vectors (golden-angle spiral), plus the six axis directions."""
    i = np.arange(n) + 0.5
    z = 1.0 - 2.0 * i / n
    phi = math.pi * (3.0 - math.sqrt(5.0)) * i
    r = np.sqrt(1.0 - z * z)
    pts = np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)
    return np.concatenate([pts, np.eye(3), -np.eye(3)])


def _solve_increasing(
    fun: Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]],
    guess: np.ndarray,
    step: np.ndarray,
    tol: np.ndarray,
    max_expand: int = 120,
    max_iter: int = 200,
) -> np.ndarray:
    """Roots of strictly increasing functions h_i(s), vectorised over i.

    ``fun(s, idx)`` returns (h, dh/ds) for the entries ``idx``.  A bracket is found
    by stepping out from ``guess`` with doubling steps; then Newton's method runs,
    falling back to bisection whenever a Newton step leaves the bracket (safeguarded
    Newton, e.g. Press et al., Numerical Recipes, 3rd ed., §9.4 'rtsafe').
    Entries with no sign change within the expansion limit come back NaN.
    """
    n = guess.size
    everyone = np.arange(n)
    s = guess.astype(float).copy()
    lo = np.full(n, -np.inf)
    hi = np.full(n, np.inf)
    h, _ = fun(s, everyone)
    root = h == 0.0
    lo[h < 0] = s[h < 0]
    hi[h > 0] = s[h > 0]
    step = np.maximum(np.asarray(step, float).copy(), 1e-300)
    for _ in range(max_expand):
        idx = np.nonzero(~root & ~(np.isfinite(lo) & np.isfinite(hi)))[0]
        if idx.size == 0:
            break
        going_up = np.isfinite(lo[idx])
        trial = np.where(going_up, lo[idx] + step[idx], hi[idx] - step[idx])
        ht, _ = fun(trial, idx)
        lo[idx[ht < 0]] = trial[ht < 0]
        hi[idx[ht > 0]] = trial[ht > 0]
        hit = idx[ht == 0]
        s[hit] = trial[ht == 0]
        root[hit] = True
        step[idx] *= 2.0
    failed = ~root & ~(np.isfinite(lo) & np.isfinite(hi))
    with np.errstate(invalid="ignore"):
        mid = 0.5 * (lo + hi)
    x = np.where(root, s, np.where(failed, np.nan, mid))
    # Start Newton from the guess when it lies in the bracket (usually it is close).
    inside = ~root & ~failed & (guess >= lo) & (guess <= hi)
    x[inside] = guess[inside]
    active = ~root & ~failed
    for _ in range(max_iter):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        xi = x[idx]
        h, dh = fun(xi, idx)
        lo[idx] = np.where(h < 0, xi, lo[idx])
        hi[idx] = np.where(h > 0, xi, hi[idx])
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = xi - h / dh
            small = (dh > 0) & (np.abs(h / dh) <= tol[idx])
        ok = (dh > 0) & (newton >= lo[idx]) & (newton <= hi[idx])
        xn = np.where(ok | small, newton, 0.5 * (lo[idx] + hi[idx]))
        done = (h == 0) | small | (hi[idx] - lo[idx] <= tol[idx])
        x[idx] = np.where(h == 0, xi, xn)
        active[idx[done]] = False
    return x


def _as_points(points) -> np.ndarray:
    p = np.asarray(points, dtype=float)
    if p.ndim == 1:
        p = p.reshape(1, 3)
    if p.ndim != 2 or p.shape[1] != 3:
        raise ValueError(f"points must have shape (N, 3), got {p.shape}")
    return p


def _broadcast_time(t, n: int) -> np.ndarray:
    return np.broadcast_to(np.asarray(t, dtype=float), (n,)).astype(float)


def _points_and_times(points, t) -> tuple[np.ndarray, np.ndarray]:
    """Broadcast (N,3) points against scalar or (N,) times; one point may take (M,) times."""
    p = _as_points(points)
    t = np.asarray(t, dtype=float)
    if t.ndim == 1 and p.shape[0] == 1 and t.size != 1:
        p = np.repeat(p, t.size, axis=0)
    return p, _broadcast_time(t, p.shape[0])


# ----------------------------------------------------------------------------- base class


class RigidKinematics:
    """Shared machinery: events of body points, ``state``, ``retarded``, ``validate``.

    Subclasses implement ``_origin(s)`` -> (X (N,3) m, beta (N,3), dbeta/ds (N,3) 1/m)
    for the reference point at scene time ``s`` (ct, m), ``_proper_time(s)`` -> (tau,
    dtau/ds) of the reference point (ct, m), ``_sample_times()`` (ct, m; where
    ``validate`` looks), and optionally ``_attitude``.
    """

    # -- to implement
    def _origin(self, s: np.ndarray):  # pragma: no cover - interface
        raise NotImplementedError

    def _proper_time(self, s: np.ndarray):  # pragma: no cover - interface
        raise NotImplementedError

    def _sample_times(self) -> np.ndarray:  # pragma: no cover - interface
        raise NotImplementedError

    def _attitude(self, s: np.ndarray, relativistic: bool = True):
        """Affine placement q = M p + b of body points relative to the reference point,
        in the reference point's rest-frame axes: (M, dM/ds, b, db/ds)."""
        n = s.shape[0]
        eye = np.broadcast_to(np.eye(3), (n, 3, 3))
        zero = np.zeros((n, 3))
        return eye, np.zeros((n, 3, 3)), zero, zero

    # -- events
    def events(self, points, s, contraction: bool = True):
        """Event of each body point tied to the reference event at time ``s``.

        points (N,3) body coordinates, m; s (N,) or scalar, ct metres.
        Returns (event (N,4) [ct, x, y, z] m, d event / ds (N,4)).
        """
        p = _as_points(points)
        s = _broadcast_time(s, p.shape[0])
        x0, b, db = self._origin(s)
        m, dm, off, doff = self._attitude(s, relativistic=contraction)
        q = np.einsum("nij,nj->ni", m, p) + off
        dq = np.einsum("nij,nj->ni", dm, p) + doff
        ev = np.empty((p.shape[0], 4))
        dev = np.empty((p.shape[0], 4))
        if not contraction:
            ev[:, 0] = s
            ev[:, 1:] = x0 + q
            dev[:, 0] = 1.0
            dev[:, 1:] = b + dq
            return ev, dev
        # Lambda(-beta) (0, q): t = gamma beta.q, x = q + k (beta.q) beta, k = gamma^2/(gamma+1)
        # (the pure boost of Jackson eq. 11.98 with (gamma-1)/b^2 = gamma^2/(gamma+1)).
        # Far out on a worldline that approaches c (bracket search), |beta| may round to 1:
        # the results are then NaN/inf and the solver treats them as no sign change.
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            b2 = np.sum(b * b, axis=1)
            g = 1.0 / np.sqrt(1.0 - b2)
            k = g * g / (g + 1.0)
            bq = np.sum(b * q, axis=1)
            dbq = np.sum(db * q, axis=1) + np.sum(b * dq, axis=1)
            dg = g**3 * np.sum(b * db, axis=1)
            dk = (g * g + 2.0 * g) / (g + 1.0) ** 2 * dg
            ev[:, 0] = s + g * bq
            ev[:, 1:] = x0 + q + (k * bq)[:, None] * b
            dev[:, 0] = 1.0 + dg * bq + g * dbq
            dev[:, 1:] = b + dq + (dk * bq + k * dbq)[:, None] * b + (k * bq)[:, None] * db
        return ev, dev

    def _reference_time(self, points, t_ct, contraction: bool) -> np.ndarray:
        """Reference time s at which each point's event has scene time t (ct, m)."""
        p, t = _points_and_times(points, t_ct)
        if not contraction:
            return t.copy()
        ev, _ = self.events(p, t)
        offset = ev[:, 0] - t  # gamma beta.q at s = t: a first guess of t - s
        guess = t - offset

        def fun(s, idx):
            e, de = self.events(p[idx], s)
            return e[:, 0] - t[idx], de[:, 0]

        step = np.abs(offset) + 1e-9 * (1.0 + np.abs(t))
        tol = SOLVER_RTOL * np.abs(offset) + 4 * _EPS * (np.abs(t) + np.abs(offset)) + 1e-300
        return _solve_increasing(fun, guess, step, tol)

    def state(self, points, t_ct, contraction: bool = True):
        """Position (N,3) m and velocity beta (N,3) of each body point at scene time t_ct
        (ct, m; scalar or (N,))."""
        p, t = _points_and_times(points, t_ct)
        s = self._reference_time(p, t, contraction)
        ev, dev = self.events(p, s, contraction)
        return ev[:, 1:], dev[:, 1:] / dev[:, :1]

    def retarded(self, points, camera_event, delay: bool = True, contraction: bool = True):
        """Emission event (N,4) [ct, x, y, z] m and velocity beta (N,3) of each body point
        whose light reaches ``camera_event`` (4,) [ct, x, y, z]: the root of
        |x_c - X(p, t)| = t_c - t with t <= t_c.  ``delay=False``: t = t_c.
        NaN where the camera lies outside the point's causal future (possible only for
        worldlines that approach c asymptotically, e.g. hyperbolic motion)."""
        p = _as_points(points)
        cam = np.asarray(camera_event, dtype=float).reshape(4)
        tc, xc = cam[0], cam[1:]
        n = p.shape[0]
        if not delay:
            x, beta = self.state(p, tc, contraction)
            ev = np.concatenate([np.full((n, 1), tc), x], axis=1)
            return ev, beta
        # First guess: the light-travel time from where each point is at reference time t_c
        # (no inner solve needed; the bracket search absorbs the difference).
        ev_now, _ = self.events(p, np.full(n, tc), contraction)
        dist = np.linalg.norm(xc - ev_now[:, 1:], axis=1) + np.abs(ev_now[:, 0] - tc)
        guess = np.full(n, tc) - dist

        def fun(s, idx):
            # h(s) = |x_c - x| - (t_c - t): increasing along a timelike worldline.
            e, de = self.events(p[idx], s, contraction)
            r = xc - e[:, 1:]
            rn = np.linalg.norm(r, axis=1)
            h = rn - (tc - e[:, 0])
            with np.errstate(invalid="ignore", divide="ignore"):
                dr = np.where(rn > 0, -np.sum(r * de[:, 1:], axis=1) / rn, 0.0)
            return h, dr + de[:, 0]

        step = dist + 1e-9 * (1.0 + abs(tc))
        tol = SOLVER_RTOL * dist + 4 * _EPS * (abs(tc) + dist) + 1e-300
        s = _solve_increasing(fun, guess, step, tol)
        ev, dev = self.events(p, s, contraction)
        return ev, dev[:, 1:] / dev[:, :1]

    # -- validation
    def _closed_form_check(self, extent_m: float) -> None:
        """Kind-specific exact limits (raise ValueError); default none."""

    def max_speed(self, extent_m: float, times_ct=None) -> float:
        """Largest |beta| found over body points within ``extent_m`` of the body origin
        (sampled directions on that sphere, plus the origin) at the sample times (ct, m).
        Returns inf where a worldline stops being timelike (dt/ds <= 0)."""
        speed, _, _ = self._sampled_speeds(extent_m, times_ct)
        return float(np.max(speed))

    def _sampled_speeds(self, extent_m, times_ct=None):
        dirs = _fibonacci_sphere(194) * float(extent_m)
        pts = np.concatenate([np.zeros((1, 3)), dirs])
        times = self._sample_times() if times_ct is None else np.atleast_1d(times_ct)
        s = np.repeat(np.asarray(times, float), pts.shape[0])
        pp = np.tile(pts, (len(times), 1))
        _, dev = self.events(pp, s)
        with np.errstate(divide="ignore", invalid="ignore"):
            speed = np.where(dev[:, 0] > 0, np.linalg.norm(dev[:, 1:], axis=1) / dev[:, 0], np.inf)
        return speed, s, pp

    def validate(self, extent_m: float) -> None:
        """Raise ValueError if any point within ``extent_m`` (m) of the body origin moves
        at |beta| >= 1 (or leaves the model's range of validity)."""
        self._closed_form_check(float(extent_m))
        speed, s, pp = self._sampled_speeds(extent_m)
        worst = int(np.argmax(speed))
        if speed[worst] >= 1.0:
            where = ", ".join(f"{v:.4g}" for v in pp[worst])
            raise ValueError(
                f"{type(self).__name__}: the body point at ({where}) m moves at |beta| = "
                f"{speed[worst]:.6g} >= 1 at t = {s[worst] / C:.6g} s{self._describe_time(s[worst])}; "
                f"reduce the speed or the body size ({extent_m:g} m)"
            )

    def _describe_time(self, s: float) -> str:
        """Extra context for messages about reference time s (ct, m)."""
        return ""


# ----------------------------------------------------------------------------- uniform


class Uniform(RigidKinematics):
    """Thin wrapper giving a scene ``UniformMotion`` the shared interface, with closed forms."""

    def __init__(self, motion: UniformMotion):
        self.motion = motion
        self.beta = _vec3(motion.beta, "beta")
        if float(self.beta @ self.beta) >= 1.0:
            raise ValueError(f"uniform motion: speed |beta| = {np.linalg.norm(self.beta):.6g} >= 1")
        self.x0 = _vec3(motion.position, "position")
        self.s0 = float(motion.time) * C
        self.gamma = float(lorentz_factor(self.beta))

    def _origin(self, s):
        n = s.shape[0]
        x = self.x0 + np.multiply.outer(s - self.s0, self.beta)
        return x, np.broadcast_to(self.beta, (n, 3)).copy(), np.zeros((n, 3))

    def _proper_time(self, s):
        return (s - self.s0) / self.gamma, np.full(s.shape, 1.0 / self.gamma)

    def _sample_times(self):
        return np.array([self.s0])

    def _position_at(self, p, t, contraction):
        rest = contract(p, self.beta) if contraction else p.copy()
        return self.x0 + rest + np.multiply.outer(t - self.s0, self.beta)

    def state(self, points, t_ct, contraction: bool = True):
        """x = x0 + contract(p, beta) + beta (t - t0): the Lorentz-contracted body."""
        p, t = _points_and_times(points, t_ct)
        return self._position_at(p, t, contraction), np.broadcast_to(self.beta, p.shape).copy()

    def retarded(self, points, camera_event, delay: bool = True, contraction: bool = True):
        """Closed form: with R = x_c - x(t_c) and tau = t_c - t >= 0, |R + beta tau| = tau
        gives (1 - b^2) tau^2 - 2 (R.beta) tau - R^2 = 0 (e.g. Mueller & Boblest 2014,
        Eur. J. Phys. 35 065025); the non-negative root, in a cancellation-free form."""
        p = _as_points(points)
        cam = np.asarray(camera_event, dtype=float).reshape(4)
        tc, xc = cam[0], cam[1:]
        n = p.shape[0]
        x_now = self._position_at(p, np.full(n, tc), contraction)
        if not delay:
            return np.concatenate([np.full((n, 1), tc), x_now], 1), np.broadcast_to(self.beta, p.shape).copy()
        r = xc - x_now
        rb = r @ self.beta
        r2 = np.sum(r * r, axis=1)
        one_b2 = 1.0 - float(self.beta @ self.beta)
        root = np.sqrt(rb * rb + one_b2 * r2)
        with np.errstate(divide="ignore", invalid="ignore"):
            tau = np.where(rb >= 0, (rb + root) / one_b2, r2 / (root - rb))
        tau = np.where(r2 == 0, 0.0, tau)
        ev = np.concatenate([(tc - tau)[:, None], x_now - np.multiply.outer(tau, self.beta)], 1)
        return ev, np.broadcast_to(self.beta, p.shape).copy()

    def validate(self, extent_m: float) -> None:
        speed = float(np.linalg.norm(self.beta))
        if speed >= 1.0:
            raise ValueError(f"uniform motion: speed |beta| = {speed:.6g} >= 1")

    def max_speed(self, extent_m: float, times_ct=None) -> float:
        return float(np.linalg.norm(self.beta))


def as_kinematics(motion) -> RigidKinematics:
    """A scene motion (``UniformMotion`` or any motion of this module) -> the shared interface."""
    if isinstance(motion, RigidKinematics):
        return motion
    if isinstance(motion, UniformMotion):
        return Uniform(motion)
    raise TypeError(f"not a motion: {motion!r}")


# ----------------------------------------------------------------------------- hyperbolic


@dataclass
class HyperbolicMotion(RigidKinematics):
    """Constant proper acceleration (Rindler 2006, §3.8), Born-rigid body.

    The body origin is momentarily at rest at ``position`` (m) at ``time`` (s) and moves
    along the acceleration direction n:  X(t) = position + n (sqrt(L^2 + c^2 dt^2) - L),
    L = c^2/|a|, for all t (it comes in from far away and returns).
    """

    acceleration: np.ndarray  # (3,) m/s^2, proper acceleration of the body origin
    position: np.ndarray = field(default_factory=lambda: np.zeros(3))  # m, at rest here ...
    time: float = 0.0  # s, ... at this scene time
    kind: str = "hyperbolic"

    def __post_init__(self):
        self.acceleration = _vec3(self.acceleration, "acceleration")
        self.position = _vec3(self.position, "position")
        a = float(np.linalg.norm(self.acceleration))
        if a == 0.0:
            raise ValueError("hyperbolic motion: acceleration must not be zero (use uniform motion)")
        self.direction = self.acceleration / a
        self.length = C * C / a  # L = c^2/a, m: distance from the origin to its horizon
        self.s0 = float(self.time) * C

    def _origin(self, s):
        d = s - self.s0
        big_l = self.length
        root = np.sqrt(big_l * big_l + d * d)
        lift = d * d / (root + big_l)  # sqrt(L^2 + d^2) - L without cancellation
        x = self.position + np.multiply.outer(lift, self.direction)
        b = np.multiply.outer(d / root, self.direction)
        db = np.multiply.outer(big_l * big_l / root**3, self.direction)
        return x, b, db

    def _proper_time(self, s):
        d = s - self.s0
        return self.length * np.arcsinh(d / self.length), self.length / np.sqrt(self.length**2 + d * d)

    def _sample_times(self):
        return self.s0 + self.length * np.sinh(np.linspace(-3.0, 3.0, 13))

    def _closed_form_check(self, extent_m):
        # The point at distance xi against the acceleration has dt/ds = 1 - xi/L: at xi = L it
        # sits on the horizon (infinite proper acceleration; Rindler 2006, §3.8).
        if extent_m >= self.length:
            raise ValueError(
                f"hyperbolic motion: the body reaches {extent_m:g} m behind its origin, but a rigid "
                f"body accelerating at {np.linalg.norm(self.acceleration):g} m/s^2 ends at "
                f"c^2/a = {self.length:.6g} m (its rear would need infinite proper acceleration "
                "and reach c)"
            )

    def proper_acceleration(self, xi_m) -> np.ndarray:
        """Proper acceleration (m/s^2) of the point ``xi_m`` metres ahead of the origin along
        the acceleration: c^2 / (L + xi) (Born-rigid; Rindler 2006, §3.8)."""
        return C * C / (self.length + np.asarray(xi_m, float))


def hyperbolic_origin_retarded(motion: HyperbolicMotion, camera_event) -> np.ndarray:
    """Closed-form emission event (4,) [ct, x, y, z] m of the body origin seen at camera_event.

    With dt = t - t0, Z = x_c - position, T = t_c - t0, a = 1/L and n the acceleration
    direction, the worldline is (dt, h n), h = sqrt(L^2 + dt^2) - L.  Writing
    dt = L sinh u, h = L (cosh u - 1) and y = L (e^u - 1), the light-cone condition
    (T - dt)^2 = |Z - h n|^2 becomes the quadratic (docs/motion.md)
        (a (T - Z.n) - 1) y^2 + (2 T - a (T^2 - Z^2)) y - (T^2 - Z^2) = 0,
    and dt = y (2 + a y) / (2 (1 + a y)).  The retarded root has 1 + a y > 0, dt <= T.
    NaN if the camera is outside the origin's causal future.
    """
    cam = np.asarray(camera_event, dtype=float).reshape(4)
    big_t = cam[0] - motion.s0
    z = cam[1:] - motion.position
    zn = float(z @ motion.direction)
    z2 = float(z @ z)
    a = 1.0 / motion.length
    qa = a * (big_t - zn) - 1.0
    qb = 2.0 * big_t - a * (big_t * big_t - z2)
    qc = -(big_t * big_t - z2)
    roots = []
    disc = qb * qb - 4.0 * qa * qc
    if disc >= 0.0:
        sq = math.sqrt(disc)
        # Citardauq pairing avoids cancellation (Numerical Recipes, 3rd ed., §5.6).
        qq = -0.5 * (qb + math.copysign(sq, qb))
        if qq != 0.0:
            roots.append(qc / qq)
        if qa != 0.0:
            roots.append(qq / qa)
    best = None
    for y in roots:
        w = 1.0 + a * y
        if w <= 0.0:
            continue
        dt = y * (2.0 + a * y) / (2.0 * w)
        if dt <= big_t * (1 + 1e-12) + 1e-12 * abs(big_t) + 1e-300:
            if best is None or dt > best:  # the past cone meets the worldline once; keep the
                best = dt  # latest candidate if rounding produced two
    if best is None:
        return np.full(4, np.nan)
    x, _, _ = motion._origin(np.array([motion.s0 + best]))
    return np.concatenate([[motion.s0 + best], x[0]])


# ----------------------------------------------------------------------------- orbit


@dataclass
class OrbitMotion(RigidKinematics):
    """Uniform circular motion of the body origin about ``center`` in the plane normal to
    ``axis`` (counter-clockwise about the axis, right-hand rule).  At ``time`` the origin is
    at angle ``phase`` (deg) from e1, the scene x axis projected into the orbit plane (scene
    y if the axis is along x).  Give the speed either as ``period`` (s) or ``beta``.

    The body does not rotate: its rest-frame axes are the scene axes carried by the pure
    boost to the origin's momentary velocity (add a SpinMotion on top for a turning body;
    note this differs from a gyroscope's Fermi-Walker axes by the Thomas precession).
    """

    center: np.ndarray
    radius: float  # m
    period: float | None = None  # s
    beta: float | None = None  # orbital speed / c
    axis: np.ndarray = field(default_factory=lambda: np.array([0.0, 0.0, 1.0]))
    phase: float = 0.0  # degrees
    time: float = 0.0  # s
    kind: str = "orbit"

    def __post_init__(self):
        self.center = _vec3(self.center, "center")
        self.axis = _unit(self.axis, "axis")
        if not (self.radius > 0 and math.isfinite(self.radius)):
            raise ValueError(f"orbit: radius must be a positive number of metres, got {self.radius!r}")
        if (self.period is None) == (self.beta is None):
            raise ValueError("orbit: give exactly one of period (s) or beta (speed / c)")
        if self.period is not None:
            if not (self.period > 0):
                raise ValueError(f"orbit: period must be positive (s), got {self.period!r}")
            speed = 2.0 * math.pi * self.radius / (self.period * C)
        else:
            speed = float(self.beta)
            if not speed > 0:
                raise ValueError(f"orbit: beta must be positive, got {self.beta!r}")
        if speed >= 1.0:
            raise ValueError(
                f"orbit: the orbital speed |beta| = {speed:.6g} >= 1 (radius {self.radius:g} m"
                + (f", period {self.period:g} s" if self.period is not None else "")
                + "); the period must exceed 2 pi r / c = "
                f"{2 * math.pi * self.radius / C:.6g} s"
            )
        self.speed = speed
        self.omega_ct = speed / self.radius  # rad per metre of ct
        self.e1, self.e2 = _perpendicular_basis(self.axis)
        self.s0 = float(self.time) * C
        self.gamma = 1.0 / math.sqrt(1.0 - speed * speed)

    def _origin(self, s):
        phi = math.radians(self.phase) + self.omega_ct * (s - self.s0)
        c, sn = np.cos(phi)[:, None], np.sin(phi)[:, None]
        radial = c * self.e1 + sn * self.e2
        tangent = -sn * self.e1 + c * self.e2
        return self.center + self.radius * radial, self.speed * tangent, -self.speed * self.omega_ct * radial

    def _proper_time(self, s):
        return (s - self.s0) / self.gamma, np.full(s.shape, 1.0 / self.gamma)

    def _sample_times(self):
        return self.s0 + np.linspace(0.0, 2 * math.pi / self.omega_ct, 33)

    def outward_limit(self) -> float:
        """Largest distance (m) outward from the origin, along the orbit radius, at which a
        point of the rigid body (rigid in the origin's momentary rest frame) stays slower
        than light.  From the event map (docs/motion.md): with u = beta^2 xi / r that point
        moves at beta (1 - k u) / (1 - gamma u), k = gamma^2/(gamma+1), so |beta_point| < 1
        needs xi < r (1 - beta) / (beta^2 (gamma - beta k)).  For small beta this tends to
        r / beta^2 = c^2 / a, the Rindler-horizon distance of the centripetal acceleration."""
        b, g = self.speed, self.gamma
        k = g * g / (g + 1.0)
        denominator = b * b * (g - b * k)
        if denominator == 0.0:  # a speed so small that beta^2 underflows: no limit
            return math.inf
        return self.radius * (1.0 - b) / denominator

    def _closed_form_check(self, extent_m):
        limit = self.outward_limit()
        if extent_m >= limit:
            raise ValueError(
                f"orbit: a rigid body of extent {extent_m:g} m cannot follow this orbit (radius "
                f"{self.radius:g} m, |beta| = {self.speed:.6g}): its outermost points would reach c; "
                f"the extent must stay below {limit:.6g} m"
            )


# ----------------------------------------------------------------------------- path


@dataclass
class PathMotion(RigidKinematics):
    """Body origin through given positions (m) at given times (s): a natural cubic spline
    (scipy.interpolate.CubicSpline, bc_type='natural'), continued in straight lines with the
    end velocities before the first and after the last time (so the worldline is C2 and
    defined for all t).  The body keeps its orientation as in OrbitMotion."""

    times: np.ndarray  # (K,) s, strictly increasing
    positions: np.ndarray  # (K, 3) m
    kind: str = "path"

    def __post_init__(self):
        self.times = np.asarray(self.times, dtype=float)
        self.positions = np.asarray(self.positions, dtype=float)
        if self.times.ndim != 1 or self.times.size < 2:
            raise ValueError(f"path: times must be a list of at least two numbers (s), got {self.times.tolist()!r}")
        if self.positions.shape != (self.times.size, 3):
            raise ValueError(
                f"path: positions must be {self.times.size} points [x, y, z] (m), one per time; "
                f"got shape {self.positions.shape}"
            )
        if not (np.all(np.isfinite(self.times)) and np.all(np.isfinite(self.positions))):
            raise ValueError("path: times and positions must be finite numbers")
        bad = np.nonzero(np.diff(self.times) <= 0)[0]
        if bad.size:
            i = int(bad[0])
            raise ValueError(
                f"path: times must increase strictly; times[{i}] = {self.times[i]:g} s, "
                f"times[{i + 1}] = {self.times[i + 1]:g} s"
            )
        self.knots = self.times * C
        # A segment whose straight chord is far above c cannot be interpolated below c (the
        # curve's top speed is at least the chord's mean speed); rejecting it here keeps
        # absurd coordinates (overflowing squares) away from the spline arithmetic. Nearer
        # c, the exact check on the spline below reports the peak speed.
        with np.errstate(over="ignore", invalid="ignore"):
            chord = np.linalg.norm(np.diff(self.positions, axis=0), axis=1) / np.diff(self.knots)
        fast = np.nonzero(~(chord < 1e3))[0]
        if fast.size:
            i = int(fast[0])
            raise ValueError(
                f"path: segment {i} (t = {self.times[i]:g} s to {self.times[i + 1]:g} s) "
                f"needs a mean speed |beta| = {chord[i]:.6g} between its points, far above c; "
                "speeds must stay below c (spread the times or move the points)")
        self.spline = CubicSpline(self.knots, self.positions, bc_type="natural")
        self.d1 = self.spline.derivative(1)
        self.d2 = self.spline.derivative(2)
        self._check_segment_speeds()
        self._build_proper_time()

    def _check_segment_speeds(self):
        """Exact maximum of |dx/d(ct)| per segment: the speed squared is a quartic in the
        local time, so its maximum is at an end or at a real root of its cubic derivative."""
        coeffs = self.spline.c  # (4, K-1, 3): x = c0 h^3 + c1 h^2 + c2 h + c3
        for i in range(self.knots.size - 1):
            width = self.knots[i + 1] - self.knots[i]
            v = [np.array([3 * coeffs[0, i, j], 2 * coeffs[1, i, j], coeffs[2, i, j]]) for j in range(3)]
            speed2 = sum(np.convolve(vj, vj) for vj in v)  # degree-4 coefficients, highest first
            cand = [0.0, width]
            for r in np.roots(np.polyder(speed2)) if np.any(np.polyder(speed2)) else []:
                if abs(r.imag) <= 1e-9 * width and 0.0 < r.real < width:
                    cand.append(float(r.real))
            vals = [np.polyval(speed2, h) for h in cand]
            k = int(np.argmax(vals))
            top = math.sqrt(max(vals[k], 0.0))
            if top >= 1.0:
                raise ValueError(
                    f"path: segment {i} (t = {self.times[i]:g} s to {self.times[i + 1]:g} s) reaches "
                    f"|beta| = {top:.6g} at t = {(self.knots[i] + cand[k]) / C:.6g} s on the "
                    "interpolated curve; speeds must stay below c (spread the times or add points)"
                )

    def _build_proper_time(self):
        # Cumulative proper time at the knots by 32-point Gauss-Legendre per segment.
        nodes, weights = np.polynomial.legendre.leggauss(32)
        self._gl = (nodes, weights)
        tau = [0.0]
        for i in range(self.knots.size - 1):
            tau.append(tau[-1] + self._segment_tau(np.array([self.knots[i]]), np.array([self.knots[i + 1]]))[0])
        self.knot_tau = np.array(tau)

    def _segment_tau(self, a, b):
        nodes, weights = self._gl
        mid, half = 0.5 * (a + b), 0.5 * (b - a)
        s = mid[:, None] + half[:, None] * nodes[None]
        v = self.d1(s.ravel())
        inv_g = np.sqrt(1.0 - np.sum(v * v, axis=1)).reshape(s.shape)
        return half * (inv_g @ weights)

    def _origin(self, s):
        s_first, s_last = self.knots[0], self.knots[-1]
        sc = np.clip(s, s_first, s_last)
        x = self.spline(sc)
        b = self.d1(sc)
        db = self.d2(sc)
        out = (s < s_first) | (s > s_last)
        x = x + (s - sc)[:, None] * b  # straight continuation with the end velocity
        db[out] = 0.0
        return x, b, db

    def _proper_time(self, s):
        sc = np.clip(s, self.knots[0], self.knots[-1])
        seg = np.clip(np.searchsorted(self.knots, sc, side="right") - 1, 0, self.knots.size - 2)
        tau = self.knot_tau[seg] + self._segment_tau(self.knots[seg], sc)
        b = self.d1(sc)
        inv_g = np.sqrt(1.0 - np.sum(b * b, axis=1))
        return tau + (s - sc) * inv_g, inv_g

    def _describe_time(self, s):
        i = int(np.clip(np.searchsorted(self.knots, s, side="right") - 1, 0, self.knots.size - 2))
        return f" (path segment {i}, t = {self.times[i]:g} s to {self.times[i + 1]:g} s)"

    def _sample_times(self):
        parts = [np.linspace(self.knots[i], self.knots[i + 1], 9) for i in range(self.knots.size - 1)]
        return np.unique(np.concatenate(parts))


# ----------------------------------------------------------------------------- spin


@dataclass
class SpinMotion(RigidKinematics):
    """A spin on top of any base motion.

    The body turns about ``axis`` (unit, the base's rest-frame axes) through the body-frame
    point ``center_offset`` (m; 0 = through the body origin) at ``angular_velocity``
    (rad/s, right-hand rule) measured in the rest frame of the base motion's reference point,
    i.e. angle = omega * (proper time of the base reference point since ``time``) + phase.
    A rim point therefore moves at omega x q in that rest frame and, in S, at that velocity
    relativistically composed with the base velocity (Rindler 2006, §3.6).
    With contraction off the angle uses scene time and velocities add classically.
    """

    base: Any  # UniformMotion or any motion of this module
    axis: np.ndarray = field(default_factory=lambda: np.array([0.0, 0.0, 1.0]))
    angular_velocity: float = 0.0  # rad/s
    center_offset: np.ndarray = field(default_factory=lambda: np.zeros(3))  # m, body frame
    time: float = 0.0  # s: angle = phase at this scene time of the base reference point
    phase: float = 0.0  # degrees
    kind: str = "spin"

    def __post_init__(self):
        self.axis = _unit(self.axis, "axis")
        self.center_offset = _vec3(self.center_offset, "center_offset")
        if not math.isfinite(self.angular_velocity):
            raise ValueError(f"spin: angular_velocity must be a finite number (rad/s), got {self.angular_velocity!r}")
        self._base = as_kinematics(self.base)
        self.omega_ct = float(self.angular_velocity) / C  # rad per metre of proper ct
        self.tau0 = float(self._base._proper_time(np.array([float(self.time) * C]))[0][0])

    def _origin(self, s):
        return self._base._origin(s)

    def _proper_time(self, s):
        return self._base._proper_time(s)

    def _attitude(self, s, relativistic=True):
        mb, dmb, bb, dbb = self._base._attitude(s, relativistic)
        if relativistic:
            tau, dtau = self._proper_time(s)
            angle = self.omega_ct * (tau - self.tau0)
            rate = self.omega_ct * dtau
        else:
            angle = self.omega_ct * (s - float(self.time) * C)
            rate = np.full(s.shape, self.omega_ct)
        angle = angle + math.radians(self.phase)
        r, k = _rotation(self.axis, angle)
        dr = rate[:, None, None] * (k[None] @ r)
        c = self.center_offset
        shift = c - r @ c  # q_spin = R (p - c) + c = R p + (c - R c)
        dshift = -(dr @ c)
        m = mb @ r
        dm = dmb @ r + mb @ dr
        b = np.einsum("nij,nj->ni", mb, shift) + bb
        db = np.einsum("nij,nj->ni", dmb, shift) + np.einsum("nij,nj->ni", mb, dshift) + dbb
        return m, dm, b, db

    def _sample_times(self):
        base = self._base._sample_times()
        if self.omega_ct == 0.0:
            return base
        s_ref = float(self.time) * C
        _, dtau = self._proper_time(np.array([s_ref]))
        turn = 2 * math.pi / abs(self.omega_ct) / dtau[0]  # one revolution in scene ct near s_ref
        return np.unique(np.concatenate([base, s_ref + np.linspace(0.0, turn, 17)]))

    def rim_speed(self, extent_m: float) -> float:
        """Rest-frame speed (beta) of the fastest point within ``extent_m`` of the body origin:
        omega * (extent + distance of the axis from the body origin) / c."""
        c = self.center_offset
        lever = float(np.linalg.norm(c - (c @ self.axis) * self.axis))
        return abs(self.omega_ct) * (float(extent_m) + lever)

    def _closed_form_check(self, extent_m):
        rim = self.rim_speed(extent_m)
        base_speed = max(self._base.max_speed(0.0, self._base._sample_times()), 0.0)
        if rim >= 1.0:
            raise ValueError(
                f"spin: rim speed omega r / c = {rim:.6g} >= 1 (angular_velocity "
                f"{self.angular_velocity:g} rad/s, body extent {extent_m:g} m); the rim may not "
                "reach c in the rest frame"
            )
        composed = (rim + base_speed) / (1.0 + rim * base_speed)  # collinear worst case
        if composed >= 1.0:  # cannot happen for subluminal parts; guards rounding
            raise ValueError(f"spin: rim speed composed with the base motion reaches |beta| = {composed:.6g}")


@dataclass
class RollingMotion(RigidKinematics):
    """A wheel rolling without slipping: the axle moves uniformly with ``beta`` (3,) and the
    wheel turns about ``axis`` (the axle direction, perpendicular to beta) at omega = |v|/R in
    the axle's rest frame, so the contact point (R below the axle, on the side beta x axis
    points away from) is momentarily at rest in S and the top moves at 2v/(1+v^2).
    ``position`` (m): the axle centre (= body origin) at ``time`` (s).  Default axis: the
    horizontal direction z x beta, which puts the ground below the axle in z."""

    radius: float  # m
    beta: np.ndarray  # (3,) axle velocity / c
    axis: np.ndarray | None = None
    position: np.ndarray = field(default_factory=lambda: np.zeros(3))
    time: float = 0.0  # s
    kind: str = "rolling"

    def __post_init__(self):
        self.beta = _vec3(self.beta, "beta")
        self.position = _vec3(self.position, "position")
        speed = float(np.linalg.norm(self.beta))
        if not (self.radius > 0 and math.isfinite(self.radius)):
            raise ValueError(f"rolling: radius must be a positive number of metres, got {self.radius!r}")
        if speed == 0.0:
            raise ValueError("rolling: beta must not be zero")
        if speed >= 1.0:
            raise ValueError(f"rolling: axle speed |beta| = {speed:.6g} >= 1")
        direction = self.beta / speed
        if self.axis is None:
            axis = np.cross([0.0, 0.0, 1.0], direction)
            if np.linalg.norm(axis) < 1e-9:
                raise ValueError("rolling: beta is vertical; give the axle direction as axis")
            self.axis = axis / np.linalg.norm(axis)
        else:
            self.axis = _unit(self.axis, "axis")
            if abs(float(self.axis @ direction)) > 1e-9:
                raise ValueError(
                    f"rolling: axis {self.axis.tolist()} must be perpendicular to beta {self.beta.tolist()}"
                )
        self.up = np.cross(direction, self.axis)  # from the contact point towards the axle
        self._spin = SpinMotion(
            base=UniformMotion(beta=self.beta, position=self.position, time=self.time),
            axis=self.axis,
            angular_velocity=speed * C / self.radius,
            time=self.time,
        )

    def contact_point(self) -> np.ndarray:
        """Body coordinates (m) of the point touching the ground at ``time``."""
        return -self.radius * self.up

    def _origin(self, s):
        return self._spin._origin(s)

    def _proper_time(self, s):
        return self._spin._proper_time(s)

    def _attitude(self, s, relativistic=True):
        return self._spin._attitude(s, relativistic)

    def _sample_times(self):
        return self._spin._sample_times()

    def _closed_form_check(self, extent_m):
        self._spin._closed_form_check(extent_m)


# ----------------------------------------------------------------------------- conveniences


def state(motion, points, t_ct, contraction: bool = True):
    """Position (N,3) m and beta (N,3) of body points of any motion at scene time t_ct (ct, m)."""
    return as_kinematics(motion).state(points, t_ct, contraction)


def retarded(motion, points, camera_event, delay: bool = True, contraction: bool = True):
    """Emission events (N,4) and beta (N,3) of body points of any motion (see RigidKinematics)."""
    return as_kinematics(motion).retarded(points, camera_event, delay, contraction)


def camera_state(motion, t_ct) -> tuple[np.ndarray, np.ndarray]:
    """Position (3,) m and velocity beta (3,) of a camera carried by ``motion`` (its origin)
    at scene time t_ct (ct, m); the velocity sets the camera's aberration and Doppler."""
    x, b = as_kinematics(motion).state(np.zeros((1, 3)), float(t_ct))
    return x[0], b[0]


# ----------------------------------------------------------------------------- scene tables


class MotionTableError(ValueError):
    """A bad motion table entry; ``key`` and ``value`` say which (key None: the whole table)."""

    def __init__(self, message: str, key: str | None = None, value: Any = None):
        super().__init__(message)
        self.key = key
        self.value = value


def _key_error(where, key, value, why):
    return MotionTableError(f"{where}: {key} = {value!r}: {why}", key, value)


def _get_vec(table, key, where, default=None):
    if key not in table:
        if default is None:
            raise MotionTableError(f"{where}: missing key '{key}' (three numbers)", key)
        return np.array(default, float)
    value = table[key]
    try:
        return _vec3(value, key)
    except (ValueError, TypeError):
        raise _key_error(where, key, value, "expected three finite numbers [x, y, z]") from None


def _get_num(table, key, where, default=None, positive=False):
    if key not in table:
        if default is None:
            raise MotionTableError(f"{where}: missing key '{key}' (a number)", key)
        return default
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise _key_error(where, key, value, "expected a finite number")
    if positive and value <= 0:
        raise _key_error(where, key, value, "must be positive")
    return float(value)


#: Allowed keys per motion kind ('kind' itself is always allowed).
MOTION_KEYS = {
    "uniform": ("beta", "position", "time"),
    "hyperbolic": ("acceleration", "position", "time"),
    "orbit": ("center", "radius", "period", "beta", "axis", "phase", "time"),
    "path": ("times", "positions"),
    "spin": ("base", "axis", "angular_velocity", "center_offset", "time", "phase"),
    "rolling": ("radius", "beta", "axis", "position", "time"),
}


def _check_keys(kind, table, where):
    allowed = set(MOTION_KEYS[kind]) | {"kind"}
    for key in table:
        if key not in allowed:
            near = difflib.get_close_matches(key, sorted(allowed), n=1)
            hint = f"; did you mean '{near[0]}'?" if near else f"; allowed: {', '.join(sorted(allowed))}"
            raise MotionTableError(f"{where}: unknown key '{key}' for motion kind '{kind}'{hint}", key, table[key])


def motion_from_table(kind: str, table: dict, where: str = "motion"):
    """Build a motion from its scene-file table (a dict from tomllib); SI units.

    ``where`` names the table in messages (e.g. "scene.toml: body[0].motion").  Any
    problem raises ValueError naming the key and the value.
    """
    if kind not in MOTION_KEYS:
        near = difflib.get_close_matches(str(kind), sorted(MOTION_KEYS), n=1)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        raise MotionTableError(
            f"{where}: kind = {kind!r} is not a motion kind ({', '.join(sorted(MOTION_KEYS))}){hint}", "kind", kind
        )
    _check_keys(kind, table, where)
    try:
        if kind == "uniform":
            beta = _get_vec(table, "beta", where, [0.0, 0.0, 0.0])
            if float(beta @ beta) >= 1.0:
                raise _key_error(where, "beta", table.get("beta"), f"speed |beta| = {np.linalg.norm(beta):.6g} must be below 1")
            return UniformMotion(beta=beta, position=_get_vec(table, "position", where, [0.0, 0.0, 0.0]),
                                 time=_get_num(table, "time", where, 0.0))
        if kind == "hyperbolic":
            acc = _get_vec(table, "acceleration", where)
            if not np.any(acc):
                raise _key_error(where, "acceleration", table["acceleration"], "must not be zero")
            return HyperbolicMotion(acceleration=acc, position=_get_vec(table, "position", where, [0.0, 0.0, 0.0]),
                                    time=_get_num(table, "time", where, 0.0))
        if kind == "orbit":
            has_period, has_beta = "period" in table, "beta" in table
            if has_period == has_beta:
                raise MotionTableError(f"{where}: give exactly one of 'period' (s) or 'beta' (speed / c)", "period")
            period = _get_num(table, "period", where, None, positive=True) if has_period else None
            beta = _get_num(table, "beta", where, None, positive=True) if has_beta else None
            if beta is not None and beta >= 1.0:
                raise _key_error(where, "beta", beta, "the orbital speed must be below 1")
            radius = _get_num(table, "radius", where, None, positive=True)
            if period is not None and 2 * math.pi * radius / (period * C) >= 1.0:
                raise _key_error(where, "period", period, f"the orbital speed 2 pi r/(c T) = "
                                 f"{2 * math.pi * radius / (period * C):.6g} must be below 1")
            axis = _get_vec(table, "axis", where, [0.0, 0.0, 1.0])
            if not np.any(axis):
                raise _key_error(where, "axis", table["axis"], "must not be the zero vector")
            return OrbitMotion(center=_get_vec(table, "center", where, [0.0, 0.0, 0.0]), radius=radius,
                               period=period, beta=beta, axis=axis,
                               phase=_get_num(table, "phase", where, 0.0), time=_get_num(table, "time", where, 0.0))
        if kind == "path":
            for key in ("times", "positions"):
                if key not in table:
                    raise MotionTableError(f"{where}: missing key '{key}'", key)
            try:
                times = np.asarray(table["times"], float)
            except (ValueError, TypeError):
                raise _key_error(where, "times", table["times"], "expected a list of numbers (s)") from None
            try:
                positions = np.asarray(table["positions"], float)
            except (ValueError, TypeError):
                raise _key_error(where, "positions", table["positions"], "expected a list of [x, y, z] (m)") from None
            return PathMotion(times=times, positions=positions)
        if kind == "spin":
            base_table = table.get("base", {"kind": "uniform"})
            if not isinstance(base_table, dict):
                raise _key_error(where, "base", base_table, "expected a table with its own 'kind'")
            base_kind = base_table.get("kind", "uniform")
            if base_kind == "spin":
                raise _key_error(where + ".base", "kind", base_kind, "a spin cannot carry another spin")
            base = motion_from_table(base_kind, base_table, where + ".base")
            omega = _get_num(table, "angular_velocity", where)
            axis = _get_vec(table, "axis", where, [0.0, 0.0, 1.0])
            if not np.any(axis):
                raise _key_error(where, "axis", table["axis"], "must not be the zero vector")
            return SpinMotion(base=base, axis=axis, angular_velocity=omega,
                              center_offset=_get_vec(table, "center_offset", where, [0.0, 0.0, 0.0]),
                              time=_get_num(table, "time", where, 0.0), phase=_get_num(table, "phase", where, 0.0))
        if kind == "rolling":
            beta = _get_vec(table, "beta", where)
            speed = float(np.linalg.norm(beta))
            if not 0.0 < speed < 1.0:
                raise _key_error(where, "beta", table["beta"], f"axle speed |beta| = {speed:.6g} must lie in (0, 1)")
            axis = _get_vec(table, "axis", where) if "axis" in table else None
            return RollingMotion(radius=_get_num(table, "radius", where, None, positive=True), beta=beta, axis=axis,
                                 position=_get_vec(table, "position", where, [0.0, 0.0, 0.0]),
                                 time=_get_num(table, "time", where, 0.0))
    except MotionTableError:
        raise
    except ValueError as err:  # from a constructor's own checks: name the key it mentions
        msg = str(err)
        found = [(m.start(), k) for k in MOTION_KEYS[kind] if (m := re.search(rf"\b{k}\b", msg))]
        key = min(found)[1] if found else None  # the key named first
        raise MotionTableError(f"{where}: {msg}", key, table.get(key) if key else None) from None
    raise AssertionError(kind)  # unreachable: every kind above returns


#: Parser per kind, for the scene loader: MOTION_PARSERS[kind](table, where) -> motion.
MOTION_PARSERS = {kind: (lambda table, where, _k=kind: motion_from_table(_k, table, where)) for kind in MOTION_KEYS}


def _register_with_loader() -> None:
    """Register every kind except 'uniform' (the loader's own) in relview.scene.reader.MOTION_KINDS.

    The loader hands a ``relview.scene.reader.Table``; its raw dict goes through
    :func:`motion_from_table` and errors come back as the loader's SceneError (file, line,
    key, value)."""
    try:
        from relview.scene.reader import register_motion
    except ImportError:  # loader not present: the parsers above remain usable directly
        return

    def make(kind):
        def parse(table):
            where = "motion"
            try:
                return motion_from_table(kind, dict(table.data), where)
            except MotionTableError as err:
                if err.key is None:
                    raise table.error(None, str(err)) from None
                raise table.error(err.key, str(err), err.value) from None

        parse.__doc__ = f"kind = '{kind}': keys {', '.join(MOTION_KEYS[kind])} (relview.kinematics.motion)."
        return parse

    for kind in MOTION_KEYS:
        if kind != "uniform":
            register_motion(kind, make(kind))


_register_with_loader()
