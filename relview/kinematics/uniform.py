"""Uniform (inertial) motion, with closed forms for every solve."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from relview.kinematics.lorentz import C, contract
from relview.kinematics.magnitudes import read_position, read_time
from relview.kinematics.solvers import inertial_light_delay
from relview.kinematics.worldline import RigidKinematics, _as_points, _points_and_times, _vec3


@dataclass
class UniformMotion(RigidKinematics):
    """Inertial worldline: the body origin is at ``position`` (m) at scene time ``time``
    (s) and moves with constant ``beta`` (velocity / c, scene frame); at rest by default.

    Every solve has a closed form; ``is_inertial`` lets the tracer boost rays into the
    body's rest frame exactly (relview.geometry.trace).
    """

    beta: np.ndarray = field(default_factory=lambda: np.zeros(3))
    position: np.ndarray = field(default_factory=lambda: np.zeros(3))  # m
    time: float = 0.0  # s
    kind: str = "uniform"

    is_inertial = True

    def __post_init__(self):
        self.beta = _vec3(self.beta, "beta")
        self.position = _vec3(self.position, "position")
        speed = float(np.linalg.norm(self.beta))
        if speed >= 1.0:
            raise ValueError(f"uniform motion: speed |beta| = {speed:.6g} >= 1")

    @classmethod
    def from_table(cls, table) -> UniformMotion:
        """``kind = "uniform"``: beta (velocity / c), position (m) at time (s)."""
        table.check_keys(("kind", "beta", "position", "time"))
        return cls(
            beta=table.beta("beta"),
            position=read_position(table),
            time=read_time(table),
        )

    # Derived from the fields on every use, so a motion edited in a script stays consistent.
    @property
    def s0(self) -> float:
        return float(self.time) * C

    @property
    def gamma(self) -> float:
        return 1.0 / float(np.sqrt(1.0 - float(self.beta @ self.beta)))

    def _shifted(self, dt_s, dx):
        return replace(self, position=self.position - dx, time=self.time - dt_s)

    def inertial_frame(self) -> tuple[np.ndarray, np.ndarray]:
        return self.beta, np.concatenate([[self.s0], self.position])

    def _origin(self, s):
        n = s.shape[0]
        x = self.position + np.multiply.outer(s - self.s0, self.beta)
        return x, np.broadcast_to(self.beta, (n, 3)).copy(), np.zeros((n, 3))

    def _proper_time(self, s):
        return (s - self.s0) / self.gamma, np.full(s.shape, 1.0 / self.gamma)

    def proper_time_at(self, s_ct):
        # the arithmetic of _proper_time on one float, so the same bits
        return (float(s_ct) - self.s0) / self.gamma

    def _sample_times(self):
        return np.array([self.s0])

    def _position_at(self, p, t, contraction):
        rest = contract(p, self.beta) if contraction else p.copy()
        return self.position + rest + np.multiply.outer(t - self.s0, self.beta)

    def state(self, points, t_ct, contraction: bool = True):
        """x = x0 + contract(p, beta) + beta (t - t0): the Lorentz-contracted body."""
        p, t = _points_and_times(points, t_ct)
        return self._position_at(p, t, contraction), np.broadcast_to(self.beta, p.shape).copy()

    def retarded(self, points, camera_event, delay: bool = True, contraction: bool = True):
        """Closed form: the light delay of each point from
        :func:`relview.kinematics.solvers.inertial_light_delay`."""
        p = _as_points(points)
        cam = np.asarray(camera_event, dtype=float).reshape(4)
        tc, xc = cam[0], cam[1:]
        n = p.shape[0]
        x_now = self._position_at(p, np.full(n, tc), contraction)
        if not delay:
            return np.concatenate([np.full((n, 1), tc), x_now], 1), np.broadcast_to(
                self.beta, p.shape
            ).copy()
        tau = inertial_light_delay(xc - x_now, self.beta)
        ev = np.concatenate([(tc - tau)[:, None], x_now - np.multiply.outer(tau, self.beta)], 1)
        return ev, np.broadcast_to(self.beta, p.shape).copy()

    def validate(self, extent_m: float) -> None:
        speed = float(np.linalg.norm(self.beta))
        if speed >= 1.0:
            raise ValueError(f"uniform motion: speed |beta| = {speed:.6g} >= 1")

    def max_speed(self, extent_m: float, times_ct=None) -> float:
        return float(np.linalg.norm(self.beta))
