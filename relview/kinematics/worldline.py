"""The one interface of every motion kind: rigid bodies on worldlines, their retarded solves.

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

import math

import numpy as np

from relview.kinematics.lorentz import C
from relview.kinematics.solvers import _EPS, SOLVER_RTOL, _solve_increasing

# ----------------------------------------------------------------------------- helpers


# ----------------------------------------------------------------------------- helpers


def _vec3(value, name: str = "vector") -> np.ndarray:
    v = np.asarray(value, dtype=float)
    if v.shape != (3,) or not np.all(np.isfinite(v)):
        raise ValueError(f"{name} must be three finite numbers, got {value!r}")
    return v


def _unit(value, name: str) -> np.ndarray:
    v = _vec3(value, name)
    big = float(np.abs(v).max())
    if big == 0.0:
        raise ValueError(f"{name} must not be the zero vector, got {value!r}")
    v = v / big  # a direction given by tiny (or huge) numbers: no underflow of squares
    return v / float(np.linalg.norm(v))


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
    """The one interface of every motion kind (uniform, hyperbolic, orbit, path, spin,
    rolling, and kinds registered later; relview.kinematics.kinds).

    Public: ``state`` (place and velocity of body points at a scene time), ``retarded``
    (emission events on a camera event's past light cone), ``proper_time`` (of the
    reference point), ``is_inertial`` with ``inertial_frame`` (the exact fast path of the
    tracer: a body whose motion is inertial is traced in its rest frame by one boost),
    ``validate`` (every body point below c) and ``from_table`` (the kind's scene-file
    schema, read through the scene reader's validated table).

    Subclasses implement ``_origin(s)`` -> (X (N,3) m, beta (N,3), dbeta/ds (N,3) 1/m)
    for the reference point at scene time ``s`` (ct, m), ``_proper_time(s)`` -> (tau,
    dtau/ds) of the reference point (ct, m), ``_sample_times()`` (ct, m; where
    ``validate`` looks), and optionally ``_attitude``; inertial kinds override
    ``is_inertial`` and ``inertial_frame`` (and may give closed forms).
    """

    kind: str = ""
    #: True when every point moves with one constant velocity: the tracer then maps rays
    #: into the body's rest frame exactly instead of building light-cone snapshots.
    is_inertial: bool = False

    def inertial_frame(self) -> tuple[np.ndarray, np.ndarray]:
        """(beta (3,), event (4,) [ct, x] m): the rest frame's velocity and the S event at
        which the body origin sits at that frame's spatial origin. Inertial motions only."""
        raise TypeError(f"{type(self).__name__} is not inertial; it has no single rest frame")

    def proper_time(self, t_ct) -> np.ndarray:
        """Proper time (ct, m) of the reference point at scene times ``t_ct`` (ct, m),
        counted from zero at the motion's own ``time``; for a path, from its first time."""
        s = np.atleast_1d(np.asarray(t_ct, dtype=float))
        return self._proper_time(s)[0]

    def proper_time_at(self, s_ct: float) -> float:
        """The reference point's proper time (ct, m) at one reference time ``s_ct``, as
        ``_proper_time``; a kind may give a scalar closed form (a clock's setting is read
        once per body and frame, where the array call's overhead dominates)."""
        return float(self._proper_time(np.array([float(s_ct)]))[0][0])

    def shifted(self, dt_s: float, dx_m) -> RigidKinematics:
        """The same motion in coordinates whose origin is the scene event (dt_s s, dx_m m):
        its event (t, x) becomes (t - dt_s, x - dx_m). The renderer solves each exposure in
        coordinates centred on the exposure event, so that the result does not depend on
        where the scene sits in time or space (relview.kinematics.magnitudes). Kinds shift
        their own time and position fields (the subtraction of nearby values is exact);
        this default wraps the motion instead, which keeps the meaning but not the
        precision far from the origin."""
        dx = np.asarray(dx_m, dtype=float).reshape(3)
        if float(dt_s) == 0.0 and not np.any(dx):
            return self
        return self._shifted(float(dt_s), dx)

    def _shifted(self, dt_s: float, dx: np.ndarray) -> RigidKinematics:
        return _Translated(self, dt_s * C, dx)

    @classmethod
    def from_table(cls, table):
        """Build the motion from its scene-file table (a relview.scene.table.Table)."""
        raise NotImplementedError  # pragma: no cover - every registered kind defines it

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
        if type(self)._attitude is RigidKinematics._attitude:
            q, dq = p, np.zeros_like(p)  # no attitude: q = p (skips (N, 3, 3) identities)
        else:
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

    def time_rate(self, points, s, contraction: bool = True) -> np.ndarray:
        """dt/ds (N,): how fast each body point's event time advances with the reference
        time ``s`` (ct, m; scalar or (N,)), the time component of :meth:`events`'
        derivative (kinds with a closed form override it)."""
        return self.events(points, s, contraction)[1][:, 0]

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


class _Translated(RigidKinematics):
    """A motion seen from coordinates shifted by (dt_ct, dx): the fallback of
    :meth:`RigidKinematics.shifted` for kinds that do not shift their own fields."""

    def __init__(self, inner: RigidKinematics, dt_ct: float, dx: np.ndarray):
        self.inner, self.dt_ct, self.dx = inner, dt_ct, dx
        self.kind = inner.kind
        self.is_inertial = inner.is_inertial

    def inertial_frame(self):
        beta, event = self.inner.inertial_frame()
        return beta, np.asarray(event, float) - np.concatenate([[self.dt_ct], self.dx])

    def _origin(self, s):
        x, b, db = self.inner._origin(s + self.dt_ct)
        return x - self.dx, b, db

    def _proper_time(self, s):
        return self.inner._proper_time(s + self.dt_ct)

    def _attitude(self, s, relativistic=True):
        return self.inner._attitude(s + self.dt_ct, relativistic)

    def _sample_times(self):
        return self.inner._sample_times() - self.dt_ct
