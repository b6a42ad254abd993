"""Retarded-time solve and light-cone snapshot benchmark (relview.kinematics, relview.geometry.lightcone).

Run (not part of pytest):

    /tmp/venv/bin/python benchmarks/bench_motion.py [--points 100000] [--repeats 3]

For each motion kind: wall time of ``retarded`` for N random body points within 1 m of
the origin (camera about 9 m away), and the accuracy seen: the largest light-cone
residual |(t_c - t) - |x_c - x|| / (t_c - t) over all points, and the largest
difference from scipy.optimize.brentq (an independent root finder) over 20 points.
Then: time, triangle count and measured error of light-cone snapshots of a rolling
wheel (256-face cylinder) at three tolerances. Times are median [min-max] over the
repeats after one warm-up, with the load average before and after (shared machine).
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np
import trimesh
from scipy.optimize import brentq

from relview.geometry.lightcone import snapshot
from relview.kinematics.lorentz import C
from relview.kinematics.hyperbolic import HyperbolicMotion
from relview.kinematics.orbit import OrbitMotion
from relview.kinematics.path import PathMotion
from relview.kinematics.spin import RollingMotion, SpinMotion
from relview.kinematics.uniform import UniformMotion
from relview.kinematics.worldline import RigidKinematics
from relview.scene.parts import Effects


def timed(fn, repeats):
    fn()  # warm-up
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return out, times


def fmt(times):
    return f"{statistics.median(times):.3f} s [{min(times):.3f}-{max(times):.3f}]"


def brentq_time(kin, point, cam):
    def f(t):
        x, _ = kin.state(point[None], t)
        return (cam[0] - t) - np.linalg.norm(cam[1:] - x[0])

    lo = cam[0] - 1.0
    while f(lo) <= 0:
        lo = cam[0] - 2 * (cam[0] - lo)
    return brentq(f, lo, cam[0], xtol=1e-15, rtol=4 * np.finfo(float).eps)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=100_000)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    print(f"load average before: {os.getloadavg()}")
    rng = np.random.default_rng(1)
    pts = rng.uniform(-1, 1, size=(args.points, 3))
    cam = np.array([5.0, 3.0, -8.0, 2.0])
    uniform = UniformMotion(beta=np.array([0.9, 0.2, 0.0]))
    orbit = OrbitMotion(center=np.zeros(3), radius=10.0, beta=0.6)
    kinds = {
        "uniform (closed form)": (uniform, uniform.retarded),
        "uniform (generic Newton)": (uniform, lambda p, c: RigidKinematics.retarded(uniform, p, c)),
        "hyperbolic": HyperbolicMotion(acceleration=[1e16, 0, 0]),
        "orbit": orbit,
        "path": PathMotion(
            times=[0, 1e-8, 2e-8, 4e-8], positions=[[0, 0, 0], [2, 0, 0], [2, 2, 0], [0, 3, 1]]
        ),
        "spin on orbit": SpinMotion(base=orbit, axis=[0, 1, 1], angular_velocity=0.5 * C),
        "rolling": RollingMotion(radius=1.0, beta=[0.9, 0, 0]),
    }
    print(f"\nretarded(), {args.points} points")
    print(f"{'motion':26s} {'time':28s} {'max residual':>13s} {'max vs brentq':>14s}")
    for name, entry in kinds.items():
        kin, solve = entry if isinstance(entry, tuple) else (entry, entry.retarded)
        (ev, _), times = timed(lambda: solve(pts, cam), args.repeats)
        travel = cam[0] - ev[:, 0]
        residual = np.abs(np.linalg.norm(cam[1:] - ev[:, 1:], axis=1) - travel) / travel
        errs = [
            abs(brentq_time(kin, pts[i], cam) - ev[i, 0]) / travel[i]
            for i in range(0, args.points, max(1, args.points // 20))
        ]
        print(f"{name:26s} {fmt(times):28s} {residual.max():13.2e} {max(errs):14.2e}")

    wheel = trimesh.creation.cylinder(radius=0.5, height=0.2, sections=64)
    wheel.apply_transform(trimesh.transformations.rotation_matrix(np.pi / 2, [1, 0, 0]))
    verts, faces = np.asarray(wheel.vertices, float), np.asarray(wheel.faces, np.int64)
    rolling = RollingMotion(
        radius=0.5, beta=np.array([0.7, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
    )
    cam = np.array([4.0, 0.0, -4.0, 0.5])
    print(f"\nlight-cone snapshot of a rolling wheel ({len(faces)} faces, beta = 0.7)")
    print(f"{'tolerance':>10s} {'time':28s} {'triangles':>10s} {'measured error':>15s}")
    for tol in (1e-2, 1e-3, 1e-4):
        snap, times = timed(
            lambda: snapshot(rolling, verts, faces, cam, Effects(), tolerance=tol), args.repeats
        )
        print(f"{tol:10.0e} {fmt(times):28s} {len(snap.faces):10d} {snap.error:15.3e}")
    print(f"\nload average after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
