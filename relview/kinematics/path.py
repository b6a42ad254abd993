"""A body origin through given positions at given times (natural cubic spline)."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import refuse_unresolvable
from relview.kinematics.worldline import RigidKinematics

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
            raise ValueError(
                f"path: times must be a list of at least two numbers (s), got {self.times.tolist()!r}"
            )
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
                "speeds must stay below c (spread the times or move the points)"
            )
        # scipy.interpolate takes ~0.35 s to import: only scenes with a path pay it
        from scipy.interpolate import CubicSpline

        self.spline = CubicSpline(self.knots, self.positions, bc_type="natural")
        self.d1 = self.spline.derivative(1)
        self.d2 = self.spline.derivative(2)
        self._check_segment_speeds()
        self._build_proper_time()

    @classmethod
    def from_table(cls, table) -> PathMotion:
        """``kind = "path"``: times (s) and positions ([x, y, z] m), one position per time."""
        table.check_keys(("kind", "times", "positions"))
        times = table.number_list("times", unit="s")
        positions = table.vector_list("positions", 3, unit="m")
        refuse_unresolvable(table, "times", times, "s")
        refuse_unresolvable(table, "positions", positions, "m")
        # the constructor's checks (increasing times, matching counts, speeds below c) name
        # the key they concern
        with table.errors_at("times" if len(positions) == len(times) else "positions"):
            return cls(times=times, positions=positions)

    def _check_segment_speeds(self):
        """Exact maximum of |dx/d(ct)| per segment: the speed squared is a quartic in the
        local time, so its maximum is at an end or at a real root of its cubic derivative."""
        coeffs = self.spline.c  # (4, K-1, 3): x = c0 h^3 + c1 h^2 + c2 h + c3
        for i in range(self.knots.size - 1):
            width = self.knots[i + 1] - self.knots[i]
            v = [
                np.array([3 * coeffs[0, i, j], 2 * coeffs[1, i, j], coeffs[2, i, j]])
                for j in range(3)
            ]
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
            tau.append(
                tau[-1]
                + self._segment_tau(np.array([self.knots[i]]), np.array([self.knots[i + 1]]))[0]
            )
        self.knot_tau = np.array(tau)

    def _segment_tau(self, a, b):
        nodes, weights = self._gl
        mid, half = 0.5 * (a + b), 0.5 * (b - a)
        s = mid[:, None] + half[:, None] * nodes[None]
        v = self.d1(s.ravel())
        inv_g = np.sqrt(1.0 - np.sum(v * v, axis=1)).reshape(s.shape)
        return half * (inv_g @ weights)

    def _shifted(self, dt_s, dx):
        return replace(self, times=self.times - dt_s, positions=self.positions - dx)

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
        parts = [
            np.linspace(self.knots[i], self.knots[i + 1], 9) for i in range(self.knots.size - 1)
        ]
        return np.unique(np.concatenate(parts))
