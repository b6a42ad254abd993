"""Constant proper acceleration (hyperbolic motion) of a Born-rigid body."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import read_position, read_time
from relview.kinematics.worldline import RigidKinematics, _vec3

#: Largest horizon distance c^2/a (m) the worldline arithmetic can square without overflow.
MAX_HORIZON_M = 1e150

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
        big = float(np.abs(self.acceleration).max())
        if big == 0.0:
            raise ValueError(
                "hyperbolic motion: acceleration must not be zero (use uniform motion)"
            )
        a = big * float(np.linalg.norm(self.acceleration / big))  # no underflow of squares
        # L = c^2/a is squared in the worldline (sqrt(L^2 + c^2 t^2)): beyond 1e150 m that
        # overflows float64, and the motion is uniform to far better than float precision
        if C * C / a > MAX_HORIZON_M:
            raise ValueError(
                f"hyperbolic motion: acceleration |a| = {a:.6g} m/s^2 is too small to compute "
                f"with (c^2/a = {C * C / a:.3g} m exceeds {MAX_HORIZON_M:.0e} m); use uniform motion"
            )
        self.direction = self.acceleration / a
        self.length = C * C / a  # L = c^2/a, m: distance from the origin to its horizon
        self.s0 = float(self.time) * C

    @classmethod
    def from_table(cls, table) -> HyperbolicMotion:
        """``kind = "hyperbolic"``: acceleration (m/s2, proper), position (m) and time (s)
        of the moment the origin is at rest."""
        table.check_keys(("kind", "acceleration", "position", "time"))
        acceleration = table.vector("acceleration", 3, nonzero=True, unit="m/s2")
        position = read_position(table)
        time = read_time(table)
        # the constructor refuses an acceleration whose magnitude underflows to zero
        with table.errors_at("acceleration"):
            return cls(acceleration=acceleration, position=position, time=time)

    def _shifted(self, dt_s, dx):
        return replace(self, position=self.position - dx, time=self.time - dt_s)

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
        return self.length * np.arcsinh(d / self.length), self.length / np.sqrt(
            self.length**2 + d * d
        )

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
