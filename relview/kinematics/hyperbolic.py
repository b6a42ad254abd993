"""Constant proper acceleration (hyperbolic motion) of a Born-rigid body."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from numba import njit, prange

from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import read_position, read_time
from relview.kinematics.worldline import RigidKinematics, _as_points, _points_and_times, _vec3

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

    # -- closed forms for every body point (Born-rigid; Rindler 2006, §3.8)
    #
    # The body point p = xi n + p_perp is tied to the origin's event at rapidity u
    # (s - s0 = L sinh u) by E = (s, X(s)) + Lambda(-beta) (0, p) (worldline.py): with
    # gamma beta = sinh u and gamma = cosh u this is t - s0 = (L + xi) sinh u,
    # (x - position).n = (L + xi) cosh u - L, transverse part p_perp: the point moves on
    # its own hyperbola of horizon distance L + xi, at rest at position + p at time s0
    # (the family of hyperbolae of a Born-rigid accelerated body, Rindler 2006, §3.8).
    # Galilean kinematics (contraction off) moves every point with the origin: the
    # origin's hyperbola (L) translated by p. So each point's retarded event is the
    # origin's closed form (retarded_offsets) with its own L and resting place, and its
    # reference time is s - s0 = L (t - s0) / (L + xi).

    def _point_lengths(self, points, contraction: bool) -> np.ndarray:
        """Horizon distance (m) of each body point's own hyperbola."""
        if not contraction:
            return np.full(points.shape[0], self.length)
        return self.length + points @ self.direction

    def retarded(self, points, camera_event, delay: bool = True, contraction: bool = True):
        """As :meth:`RigidKinematics.retarded`, in closed form (see above): the emission
        event of every body point on its own hyperbola, without iterating."""
        if not delay:
            return super().retarded(points, camera_event, delay, contraction)
        return _retarded_points(
            np.ascontiguousarray(_as_points(points)),
            np.asarray(camera_event, dtype=float).reshape(4),
            float(self.s0),
            self.position,
            self.direction,
            float(self.length),
            bool(contraction),
        )

    def _reference_time(self, points, t_ct, contraction: bool) -> np.ndarray:
        # closed form (see above): s - s0 = L (t - s0) / (L + xi); Galilean: s = t
        p, t = _points_and_times(points, t_ct)
        if not contraction:
            return t.copy()
        return self.s0 + (t - self.s0) * (self.length / self._point_lengths(p, True))

    def time_rate(self, points, s, contraction: bool = True) -> np.ndarray:
        # closed form (see above): t - s0 = (L + xi) / L (s - s0); Galilean: t = s
        p = _as_points(points)
        return self._point_lengths(p, contraction) / self.length

    def proper_acceleration(self, xi_m) -> np.ndarray:
        """Proper acceleration (m/s^2) of the point ``xi_m`` metres ahead of the origin along
        the acceleration: c^2 / (L + xi) (Born-rigid; Rindler 2006, §3.8)."""
        return C * C / (self.length + np.asarray(xi_m, float))


def hyperbolic_origin_retarded(motion: HyperbolicMotion, camera_event) -> np.ndarray:
    """Closed-form emission event (4,) [ct, x, y, z] m of the body origin seen at camera_event
    (NaN if the camera is outside the origin's causal future); :func:`retarded_offsets`
    gives the derivation."""
    cam = np.asarray(camera_event, dtype=float).reshape(4)
    dt = retarded_offsets(
        np.array([cam[0] - motion.s0]),
        (cam[1:] - motion.position)[None],
        motion.direction,
        np.array([motion.length]),
    )
    if not np.isfinite(dt[0]):
        return np.full(4, np.nan)
    x, _, _ = motion._origin(np.array([motion.s0 + dt[0]]))
    return np.concatenate([[motion.s0 + dt[0]], x[0]])


def retarded_offsets(big_t, z, direction, length) -> np.ndarray:
    """Emission times dt (N,) (ct, m, after the resting event) of points on the hyperbolae
    (dt, h n + rest place), h = sqrt(L^2 + dt^2) - L, seen from camera events at (T, Z)
    relative to each point's resting event: T (N,), Z (N, 3), unit n (3,), L (N,) m.
    NaN where the camera is outside the point's causal future (beyond its horizon).
    The derivation is at :func:`_offset`."""
    big_t = np.ascontiguousarray(big_t, dtype=float)
    z = np.ascontiguousarray(z, dtype=float)
    length = np.ascontiguousarray(length, dtype=float)
    return _offsets(big_t, z, np.asarray(direction, float), length)


@njit(cache=True, error_model="numpy")
def _offset(big_t, zx, zy, zz, nx, ny, nz, length):
    """Emission time dt (ct, m, after the resting event) of the point on the hyperbola
    (dt, h n), h = sqrt(L^2 + dt^2) - L, seen from the camera event (T, Z) relative to
    its resting event; NaN beyond its horizon.

    Writing dt = L sinh u, h = L (cosh u - 1) and y = L (e^u - 1), a = 1/L, the light-cone
    condition (T - dt)^2 = |Z - h n|^2 becomes the quadratic (docs/motion.md)
        (a (T - Z.n) - 1) y^2 + (2 T - a (T^2 - Z^2)) y - (T^2 - Z^2) = 0,
    and dt = y (2 + a y) / (2 (1 + a y)). The retarded root has 1 + a y > 0, dt <= T; the
    past light cone meets a timelike worldline once, so the latest such root is kept.
    Two Newton steps on f(dt) = |Z - h n| - (T - dt) (increasing: f' = 1 - beta.e > 0)
    then remove the rounding the quadratic's coefficients carry (T^2 - Z^2 cancels for a
    camera near the point's light cone)."""
    zn = zx * nx + zy * ny + zz * nz
    z2 = zx * zx + zy * zy + zz * zz
    a = 1.0 / length
    interval = big_t * big_t - z2
    qa = a * (big_t - zn) - 1.0
    qb = 2.0 * big_t - a * interval
    qc = -interval
    disc = qb * qb - 4.0 * qa * qc
    if not disc >= 0.0:
        return np.nan
    # Citardauq pairing avoids cancellation (Numerical Recipes, 3rd ed., §5.6).
    qq = -0.5 * (qb + math.copysign(math.sqrt(disc), qb))
    limit = big_t * (1 + 1e-12) + 1e-12 * abs(big_t) + 1e-300
    best = -np.inf
    for k in range(2):
        if k == 0:
            if qq == 0.0:
                continue
            y = qc / qq
        else:
            if qa == 0.0:
                continue
            y = qq / qa
        w = 1.0 + a * y
        if not w > 0.0:
            continue
        dt = y * (2.0 + a * y) / (2.0 * w)
        if dt <= limit and dt > best:
            best = dt
    if best == -np.inf:
        return np.nan
    dt = best
    for _ in range(2):
        root = math.sqrt(length * length + dt * dt)
        lift = dt * dt / (root + length)  # sqrt(L^2 + dt^2) - L without cancellation
        rx = zx - lift * nx
        ry = zy - lift * ny
        rz = zz - lift * nz
        rn = math.sqrt(rx * rx + ry * ry + rz * rz)
        slope = 1.0
        if rn > 0.0:
            slope -= (rx * nx + ry * ny + rz * nz) / rn * (dt / root)
        dt -= (rn - (big_t - dt)) / slope
    return dt


@njit(cache=True, parallel=True)
def _offsets(big_t, z, direction, length):
    out = np.empty(big_t.shape[0])
    for i in prange(big_t.shape[0]):
        out[i] = _offset(
            big_t[i], z[i, 0], z[i, 1], z[i, 2], direction[0], direction[1], direction[2], length[i]
        )
    return out


@njit(cache=True, parallel=True, error_model="numpy")
def _retarded_points(points, cam, s0, position, direction, length, rigid):
    """Emission events (N, 4) and velocities (N, 3) of body points of a hyperbolic motion
    (HyperbolicMotion, 'closed forms for every body point'); ``rigid`` False: Galilean."""
    n = points.shape[0]
    ev = np.empty((n, 4))
    beta = np.empty((n, 3))
    nx, ny, nz = direction[0], direction[1], direction[2]
    for i in prange(n):
        px, py, pz = points[i, 0], points[i, 1], points[i, 2]
        own = length + (px * nx + py * ny + pz * nz) if rigid else length
        rx = position[0] + px  # the point's place at rest (time s0)
        ry = position[1] + py
        rz = position[2] + pz
        dt = _offset(cam[0] - s0, cam[1] - rx, cam[2] - ry, cam[3] - rz, nx, ny, nz, own)
        root = math.sqrt(own * own + dt * dt)
        lift = dt * dt / (root + own)
        ev[i, 0] = s0 + dt
        ev[i, 1] = rx + lift * nx
        ev[i, 2] = ry + lift * ny
        ev[i, 3] = rz + lift * nz
        speed = dt / root
        beta[i, 0] = speed * nx
        beta[i, 1] = speed * ny
        beta[i, 2] = speed * nz
    return ev, beta
