"""A spin on top of any motion, and the wheel rolling without slipping."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import read_position, read_time
from relview.kinematics.uniform import UniformMotion
from relview.kinematics.worldline import RigidKinematics, _rotation, _unit, _vec3

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
