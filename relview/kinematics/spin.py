"""A spin on top of any motion, and the wheel rolling without slipping."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from numba import njit, prange

from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import read_position, read_time
from relview.kinematics.solvers import SOLVER_RTOL
from relview.kinematics.uniform import UniformMotion
from relview.kinematics.worldline import (
    RigidKinematics,
    _as_points,
    _points_and_times,
    _rotation,
    _unit,
    _vec3,
)

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

    base: Any  # any motion kind but a spin (relview.kinematics.kinds)
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
            raise ValueError(
                f"spin: angular_velocity must be a finite number (rad/s), got {self.angular_velocity!r}"
            )
        self._base = self.base
        self.omega_ct = float(self.angular_velocity) / C  # rad per metre of proper ct
        self.tau0 = float(self._base._proper_time(np.array([float(self.time) * C]))[0][0])

    @classmethod
    def from_table(cls, table) -> SpinMotion:
        """``kind = "spin"``: a base motion table (any kind but spin; default uniform at
        rest), axis, angular_velocity (rad/s), center_offset (m), time (s), phase (deg)."""
        table.check_keys(
            ("kind", "base", "axis", "angular_velocity", "center_offset", "time", "phase")
        )
        base = (
            table.motion("base", exclude={"spin": "a spin cannot carry another spin"})
            if table.has("base")
            else UniformMotion()
        )
        return cls(
            base=base,
            axis=table.vector("axis", 3, (0.0, 0.0, 1.0), nonzero=True),
            angular_velocity=table.number("angular_velocity", unit="rad/s"),
            center_offset=table.vector("center_offset", 3, (0.0, 0.0, 0.0), unit="m"),
            time=read_time(table),
            phase=table.number("phase", 0.0, unit="degrees"),
        )

    def _shifted(self, dt_s, dx):
        return replace(self, base=self._base.shifted(dt_s, dx), time=self.time - dt_s)

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

    # -- compiled solves for a spin carried by uniform motion (spins and rolling wheels)
    #
    # The light-cone and simultaneity conditions are those of RigidKinematics.retarded and
    # _reference_time, solved by the same safeguarded Newton iteration
    # (relview.kinematics.solvers, Numerical Recipes §9.4) point by point in compiled code:
    # with a uniform base the event of body point p at reference time s has the closed
    # form of :func:`_spin_event` (the rigid-body model of worldline.py with the Rodrigues
    # rotation of _attitude), so nothing needs (N, 3, 3) matrices.

    def _compiled_parameters(self, relativistic: bool):
        """The float parameters of :func:`_spin_event`, or None when the base motion is not
        uniform (the generic solver then serves)."""
        base = self._base
        if not isinstance(base, UniformMotion):
            return None
        return np.concatenate(
            [
                base.position,
                base.beta,
                [base.s0, base.gamma, self.omega_ct, self.tau0, math.radians(self.phase)],
                self.axis,
                self.center_offset,
                [float(self.time) * C, 1.0 if relativistic else 0.0],
            ]
        )

    def retarded(self, points, camera_event, delay: bool = True, contraction: bool = True):
        prm = self._compiled_parameters(contraction)
        if prm is None or not delay:
            return super().retarded(points, camera_event, delay, contraction)
        return _spin_retarded(
            # writable and contiguous: a read-only view would compile the kernel again
            np.require(_as_points(points), np.float64, ["C", "W"]),
            np.asarray(camera_event, dtype=float).reshape(4),
            prm,
            SOLVER_RTOL,
        )

    def _reference_time(self, points, t_ct, contraction: bool) -> np.ndarray:
        prm = self._compiled_parameters(contraction)
        if prm is None or not contraction:
            return super()._reference_time(points, t_ct, contraction)
        p, t = _points_and_times(points, t_ct)
        return _spin_reference_times(
            np.ascontiguousarray(p), np.ascontiguousarray(t), prm, SOLVER_RTOL
        )

    def time_rate(self, points, s, contraction: bool = True) -> np.ndarray:
        prm = self._compiled_parameters(contraction)
        if prm is None:
            return super().time_rate(points, s, contraction)
        p, s = _points_and_times(points, s)
        return _spin_time_rates(np.ascontiguousarray(p), np.ascontiguousarray(s), prm)

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
            raise ValueError(
                f"spin: rim speed composed with the base motion reaches |beta| = {composed:.6g}"
            )


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
            raise ValueError(
                f"rolling: radius must be a positive number of metres, got {self.radius!r}"
            )
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

    @classmethod
    def from_table(cls, table) -> RollingMotion:
        """``kind = "rolling"``: radius (m), beta (axle velocity / c, nonzero), axis (the
        axle direction, across beta), position (m) of the axle at time (s)."""
        table.check_keys(("kind", "radius", "beta", "axis", "position", "time"))
        table.vector("beta", 3)  # required
        beta = table.beta("beta")
        if not np.any(beta):
            raise table.error(
                "beta",
                f"beta = {table.data['beta']!r}: the axle speed must not be zero",
                table.data["beta"],
            )
        axis = table.vector("axis", 3, None, nonzero=True)
        with table.errors_at("axis"):  # the constructor checks the axis against beta
            return cls(
                radius=table.number("radius", positive=True, unit="m"),
                beta=beta,
                axis=axis,
                position=read_position(table),
                time=read_time(table),
            )

    def _shifted(self, dt_s, dx):
        return replace(self, position=self.position - dx, time=self.time - dt_s)

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

    def retarded(self, points, camera_event, delay: bool = True, contraction: bool = True):
        return self._spin.retarded(points, camera_event, delay, contraction)

    def _reference_time(self, points, t_ct, contraction: bool) -> np.ndarray:
        return self._spin._reference_time(points, t_ct, contraction)

    def time_rate(self, points, s, contraction: bool = True) -> np.ndarray:
        return self._spin.time_rate(points, s, contraction)


# ----------------------------------------------------------------------------- kernels


@njit(cache=True, inline="always")
def _spin_event(px, py, pz, s, prm):
    """Event (t, x, y, z) of body point p at reference time s, and its derivative in s, for
    a spin on uniform motion (parameters: SpinMotion._compiled_parameters). As
    RigidKinematics.events with SpinMotion._attitude: q = R (p - c) + c (Rodrigues'
    rotation by omega (tau - tau0) + phase, tau = (s - s0) / gamma; Galilean: omega (s -
    t_spin) + phase), dq/ds = rate axis x R (p - c); E = (s + gamma beta.q, X(s) + q +
    gamma^2/(gamma+1) (beta.q) beta) (Jackson eq. 11.98); Galilean E = (s, X(s) + q)."""
    bx, by, bz = prm[3], prm[4], prm[5]
    g = prm[7]
    rel = prm[18] > 0.5
    if rel:
        angle = prm[8] * ((s - prm[6]) / g - prm[9]) + prm[10]
        rate = prm[8] / g
    else:
        angle = prm[8] * (s - prm[17]) + prm[10]
        rate = prm[8]
    ax, ay, az = prm[11], prm[12], prm[13]
    vx, vy, vz = px - prm[14], py - prm[15], pz - prm[16]
    co = math.cos(angle)
    si = math.sin(angle)
    av = ax * vx + ay * vy + az * vz
    cx, cy, cz = ay * vz - az * vy, az * vx - ax * vz, ax * vy - ay * vx
    rx = vx * co + cx * si + ax * av * (1.0 - co)
    ry = vy * co + cy * si + ay * av * (1.0 - co)
    rz = vz * co + cz * si + az * av * (1.0 - co)
    qx, qy, qz = rx + prm[14], ry + prm[15], rz + prm[16]
    dqx = rate * (ay * rz - az * ry)
    dqy = rate * (az * rx - ax * rz)
    dqz = rate * (ax * ry - ay * rx)
    d = s - prm[6]
    xx, xy, xz = prm[0] + bx * d, prm[1] + by * d, prm[2] + bz * d
    if rel:
        bq = bx * qx + by * qy + bz * qz
        bdq = bx * dqx + by * dqy + bz * dqz
        k = g * g / (g + 1.0)
        return (
            s + g * bq,
            xx + qx + k * bq * bx,
            xy + qy + k * bq * by,
            xz + qz + k * bq * bz,
            1.0 + g * bdq,
            bx + dqx + k * bdq * bx,
            by + dqy + k * bdq * by,
            bz + dqz + k * bdq * bz,
        )
    return s, xx + qx, xy + qy, xz + qz, 1.0, bx + dqx, by + dqy, bz + dqz


@njit(cache=True, inline="always")
def _light_cone(px, py, pz, s, cam, prm):
    """h(s) = |x_c - x| - (t_c - t) and dh/ds (RigidKinematics.retarded's function)."""
    t, x, y, z, dt, dx, dy, dz = _spin_event(px, py, pz, s, prm)
    rx, ry, rz = cam[1] - x, cam[2] - y, cam[3] - z
    rn = math.sqrt(rx * rx + ry * ry + rz * rz)
    slope = dt
    if rn > 0.0:
        slope -= (rx * dx + ry * dy + rz * dz) / rn
    return rn - (cam[0] - t), slope


@njit(cache=True, inline="always")
def _simultaneity(px, py, pz, s, target, prm):
    """t(s) - target and dt/ds (RigidKinematics._reference_time's function)."""
    t, _, _, _, dt, _, _, _ = _spin_event(px, py, pz, s, prm)
    return t - target, dt


@njit(cache=True, inline="always")
def _rtsafe(px, py, pz, guess, step, tol, cam, target, prm, cone):
    """The root of the increasing function (the light cone if ``cone``, else simultaneity)
    by solvers._solve_increasing's iteration for one point: doubling steps out from the
    guess to a bracket (NaN without one), then Newton, bisecting when a step leaves it."""
    lo = -np.inf
    hi = np.inf
    if cone:
        h, _ = _light_cone(px, py, pz, guess, cam, prm)
    else:
        h, _ = _simultaneity(px, py, pz, guess, target, prm)
    if h == 0.0:
        return guess
    if h < 0.0:
        lo = guess
    elif h > 0.0:
        hi = guess
    step = max(step, 1e-300)
    for _ in range(120):
        if lo > -np.inf and hi < np.inf:
            break
        trial = lo + step if lo > -np.inf else hi - step
        if cone:
            ht, _ = _light_cone(px, py, pz, trial, cam, prm)
        else:
            ht, _ = _simultaneity(px, py, pz, trial, target, prm)
        if ht == 0.0:
            return trial
        if ht < 0.0:
            lo = trial
        elif ht > 0.0:
            hi = trial
        step *= 2.0
    if not (lo > -np.inf and hi < np.inf):
        return np.nan
    x = guess if lo <= guess <= hi else 0.5 * (lo + hi)
    for _ in range(200):
        if cone:
            h, dh = _light_cone(px, py, pz, x, cam, prm)
        else:
            h, dh = _simultaneity(px, py, pz, x, target, prm)
        if h == 0.0:
            return x
        if h < 0.0:
            lo = x
        elif h > 0.0:
            hi = x
        newton = x - h / dh if dh > 0.0 else np.nan
        small = dh > 0.0 and abs(h / dh) <= tol
        if (dh > 0.0 and lo <= newton <= hi) or small:
            x = newton
        else:
            x = 0.5 * (lo + hi)
        if small or hi - lo <= tol:
            break
    return x


@njit(cache=True, parallel=True)
def _spin_retarded(points, cam, prm, rtol):
    """Emission events (N, 4) and velocities (N, 3): RigidKinematics.retarded's guess,
    step and tolerance (the light-travel distance from where each point is at reference
    time t_c), for a spin on uniform motion."""
    n = points.shape[0]
    ev = np.empty((n, 4))
    beta = np.empty((n, 3))
    eps = np.finfo(np.float64).eps
    for i in prange(n):
        px, py, pz = points[i, 0], points[i, 1], points[i, 2]
        t, x, y, z, _, _, _, _ = _spin_event(px, py, pz, cam[0], prm)
        dist = math.sqrt((cam[1] - x) ** 2 + (cam[2] - y) ** 2 + (cam[3] - z) ** 2)
        dist += abs(t - cam[0])
        step = dist + 1e-9 * (1.0 + abs(cam[0]))
        tol = rtol * dist + 4 * eps * (abs(cam[0]) + dist) + 1e-300
        s = _rtsafe(px, py, pz, cam[0] - dist, step, tol, cam, 0.0, prm, True)
        t, x, y, z, dt, dx, dy, dz = _spin_event(px, py, pz, s, prm)
        ev[i, 0], ev[i, 1], ev[i, 2], ev[i, 3] = t, x, y, z
        beta[i, 0], beta[i, 1], beta[i, 2] = dx / dt, dy / dt, dz / dt
    return ev, beta


@njit(cache=True, parallel=True)
def _spin_reference_times(points, times, prm, rtol):
    """Reference time s of each point's event at scene time t (RigidKinematics.
    _reference_time's guess, step and tolerance)."""
    n = points.shape[0]
    out = np.empty(n)
    cam = np.zeros(4)
    eps = np.finfo(np.float64).eps
    for i in prange(n):
        px, py, pz = points[i, 0], points[i, 1], points[i, 2]
        t = times[i]
        t0, _, _, _, _, _, _, _ = _spin_event(px, py, pz, t, prm)
        offset = t0 - t
        step = abs(offset) + 1e-9 * (1.0 + abs(t))
        tol = rtol * abs(offset) + 4 * eps * (abs(t) + abs(offset)) + 1e-300
        out[i] = _rtsafe(px, py, pz, t - offset, step, tol, cam, t, prm, False)
    return out


@njit(cache=True, parallel=True)
def _spin_time_rates(points, s, prm):
    """dt/ds of each point's event at reference time s."""
    out = np.empty(points.shape[0])
    for i in prange(points.shape[0]):
        out[i] = _spin_event(points[i, 0], points[i, 1], points[i, 2], s[i], prm)[4]
    return out
