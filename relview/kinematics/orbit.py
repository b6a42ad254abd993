"""Uniform circular motion of a body that keeps its axes (boosted scene axes)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import read_position, read_time
from relview.kinematics.worldline import RigidKinematics, _perpendicular_basis, _unit, _vec3

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
            raise ValueError(
                f"orbit: radius must be a positive number of metres, got {self.radius!r}"
            )
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

    @classmethod
    def from_table(cls, table) -> OrbitMotion:
        """``kind = "orbit"``: center, radius (m), exactly one of period (s) or beta (speed
        / c), axis, phase (degrees) at time (s)."""
        table.check_keys(("kind", "center", "radius", "period", "beta", "axis", "phase", "time"))
        if table.has("period") == table.has("beta"):
            raise table.error("period", "give exactly one of 'period' (s) or 'beta' (speed / c)")
        radius = table.number("radius", positive=True, unit="m")
        period = beta = None
        if table.has("period"):
            period = table.number("period", positive=True, unit="s")
            speed = 2 * math.pi * radius / (period * C)
            if speed >= 1.0:
                raise table.error(
                    "period",
                    f"period = {period!r}: the orbital speed "
                    f"2 pi r/(c T) = {speed:.6g} must be below 1",
                    period,
                )
        else:
            beta = table.number("beta", positive=True)
            if beta >= 1.0:
                raise table.error(
                    "beta", f"beta = {beta!r}: the orbital speed must be below 1", beta
                )
        return cls(
            center=read_position(table, "center"),
            radius=radius,
            period=period,
            beta=beta,
            axis=table.vector("axis", 3, (0.0, 0.0, 1.0), nonzero=True),
            phase=table.number("phase", 0.0, unit="degrees"),
            time=read_time(table),
        )

    def _shifted(self, dt_s, dx):
        return replace(self, center=self.center - dx, time=self.time - dt_s)

    def _origin(self, s):
        phi = math.radians(self.phase) + self.omega_ct * (s - self.s0)
        c, sn = np.cos(phi)[:, None], np.sin(phi)[:, None]
        radial = c * self.e1 + sn * self.e2
        tangent = -sn * self.e1 + c * self.e2
        return (
            self.center + self.radius * radial,
            self.speed * tangent,
            -self.speed * self.omega_ct * radial,
        )

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
