"""Worldlines and the retarded-time solve (relview.kinematics) against outside references.

Sources: Rindler, Relativity: Special, General and Cosmological (2006): §3.6 velocity
addition, §3.8 hyperbolic motion; the Doppler factor and its transverse value 1/gamma
(physics.md, Rybicki & Lightman 1979, ch. 4); scipy.optimize.brentq as an independent
root finder; scipy.integrate.quad for proper time.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

from relview.errors import SceneError
from relview.kinematics.hyperbolic import HyperbolicMotion, hyperbolic_origin_retarded
from relview.kinematics.kinds import MOTION_KINDS
from relview.kinematics.lorentz import (
    C,
    boost_event,
    compose_velocities,
    doppler_factor,
    lorentz_factor,
)
from relview.kinematics.orbit import OrbitMotion
from relview.kinematics.path import PathMotion
from relview.kinematics.spin import RollingMotion, SpinMotion
from relview.kinematics.uniform import UniformMotion
from relview.kinematics.worldline import RigidKinematics
from relview.scene.model import scene_from_dict

RNG = np.random.default_rng(20261202)


def brentq_emission(kin, point, camera_event, contraction=True):
    """Emission time (ct, m) of one body point by scipy's brentq on
    f(t) = (t_c - t) - |x_c - X(p, t)|, X from ``state`` (an independent root finder)."""
    tc, xc = camera_event[0], np.asarray(camera_event[1:])

    def f(t):
        x, _ = kin.state(point[None], t, contraction)
        return (tc - t) - np.linalg.norm(xc - x[0])

    span = 1.0 + np.linalg.norm(xc - kin.state(point[None], tc, contraction)[0][0])
    lo = tc - span
    while f(lo) <= 0:
        span *= 2
        lo = tc - span
    return brentq(f, lo, tc, xtol=1e-14, rtol=4 * np.finfo(float).eps, maxiter=500)


def check_retarded_against_brentq(kin, pts, cam, every=2, rtol=1e-11):
    """kin.retarded on the light cone, and equal to scipy's brentq for every ``every``-th point."""
    ev, beta = kin.retarded(pts, cam)
    assert_on_light_cone(ev, cam)
    for i in range(0, len(pts), every):
        t_ref = brentq_emission(kin, pts[i], cam)
        assert abs(ev[i, 0] - t_ref) <= rtol * (cam[0] - t_ref + 1.0)
    return ev, beta


def assert_on_light_cone(ev, camera_event, rtol=1e-11):
    """Residual of |x_c - x_e| = t_c - t_e relative to the light-travel distance."""
    dist = np.linalg.norm(camera_event[1:] - ev[:, 1:], axis=1)
    travel = camera_event[0] - ev[:, 0]
    assert np.all(travel >= -1e-12)
    np.testing.assert_allclose(dist, travel, rtol=rtol, atol=1e-12)


# ----------------------------------------------------------------------------- uniform


def test_uniform_closed_form_matches_generic_solver_and_brentq():
    kin = UniformMotion(
        beta=np.array([0.6, -0.5, 0.3]), position=np.array([1.0, 2.0, -1.0]), time=3e-9
    )
    pts = RNG.normal(size=(40, 3))
    cam = np.array([2.0, 4.0, -3.0, 1.5])
    ev, beta = kin.retarded(pts, cam)
    # the base class solves the same equation by safeguarded Newton in the reference time
    ev_n, beta_n = RigidKinematics.retarded(kin, pts, cam)
    np.testing.assert_allclose(ev, ev_n, rtol=0, atol=1e-13)
    np.testing.assert_allclose(beta_n, np.broadcast_to(kin.beta, beta_n.shape), atol=1e-14)
    assert_on_light_cone(ev, cam, rtol=1e-13)
    for i in range(0, 40, 8):  # scipy brentq, independent root finder
        t_ref = brentq_emission(kin, pts[i], cam)
        assert abs(ev[i, 0] - t_ref) <= 1e-12 * (cam[0] - t_ref + 1.0)


def test_uniform_body_is_at_rest_with_rest_shape_in_its_own_frame():
    # Boost S-events of the body into its rest frame (Jackson eq. 11.98 via lorentz.boost_event):
    # every point must be at rest, at its rest-frame position relative to the origin.
    beta = np.array([0.8, 0.1, 0.0])
    kin = UniformMotion(beta=beta, position=np.array([0.5, 0.0, 0.0]), time=0.0)
    pts = RNG.normal(size=(10, 3))
    rest = []
    for t in (0.0, 1.0):
        x, _ = kin.state(np.vstack([np.zeros(3), pts]), t)
        ev = np.concatenate([np.full((x.shape[0], 1), t), x], axis=1)
        rest.append(boost_event(beta, ev)[:, 1:])
    for r in rest:
        np.testing.assert_allclose(r[1:] - r[0], pts, atol=1e-13)
    # the same point at two S times: same rest-frame position (at rest there)
    np.testing.assert_allclose(rest[0], rest[1], atol=1e-13)


def test_delay_off_gives_camera_time_and_galilean_positions():
    kin = UniformMotion(beta=np.array([0.9, 0.0, 0.0]), position=np.zeros(3), time=0.0)
    pts = RNG.normal(size=(6, 3))
    cam = np.array([1.25, 0.0, -4.0, 0.0])
    ev, _ = kin.retarded(pts, cam, delay=False)
    np.testing.assert_array_equal(ev[:, 0], 1.25)
    # contraction off: the body is carried rigidly, uncontracted: x = x0 + p + beta t
    ev, _ = kin.retarded(pts, cam, delay=False, contraction=False)
    np.testing.assert_allclose(ev[:, 1:], pts + np.array([0.9 * 1.25, 0.0, 0.0]), atol=1e-15)
    # and the generic (Newton) path agrees for another kind with contraction off
    orbit = OrbitMotion(center=np.zeros(3), radius=3.0, beta=0.5)
    ev, _ = orbit.retarded(pts * 0.1, cam, delay=False, contraction=False)
    np.testing.assert_array_equal(ev[:, 0], 1.25)
    x0, _ = orbit.state(np.zeros((1, 3)), 1.25)
    np.testing.assert_allclose(ev[:, 1:], x0 + pts * 0.1, atol=1e-15)


# ----------------------------------------------------------------------------- hyperbolic


def test_hyperbolic_origin_follows_rindler_hyperbola():
    # Rindler 2006, §3.8: x(t) = sqrt(c^4/a^2 + c^2 t^2) - c^2/a from rest at t = 0.
    a = 3.0e15  # m/s^2, L = c^2/a ~ 30 m
    mot = HyperbolicMotion(
        acceleration=np.array([0.0, a, 0.0]), position=np.array([1.0, 2.0, 3.0]), time=1e-7
    )
    t = 1e-7 + np.array([-4e-7, -1e-8, 0.0, 3e-9, 2e-7])  # s
    x, beta = mot.state(np.zeros((1, 3)), t * C)
    dt = t - 1e-7
    rindler = np.sqrt(C**4 / a**2 + C**2 * dt**2) - C**2 / a
    np.testing.assert_allclose(x[:, 1] - 2.0, rindler, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(x[:, [0, 2]], np.tile([1.0, 3.0], (5, 1)), atol=0)
    # velocity: dx/dt = c^2 t / sqrt(c^4/a^2 + c^2 t^2)
    np.testing.assert_allclose(
        beta[:, 1], C * dt / np.sqrt(C**4 / a**2 + C**2 * dt**2), rtol=1e-12, atol=1e-15
    )
    # a gentle 9.81 m/s^2 over one year (no cancellation: compare with the series-free formula)
    g = HyperbolicMotion(acceleration=np.array([9.81, 0.0, 0.0]))
    year = 3.15576e7
    xg, _ = g.state(np.zeros((1, 3)), year * C)
    L = C**2 / 9.81
    np.testing.assert_allclose(xg[0, 0], L * (math.sqrt(1 + (C * year / L) ** 2) - 1), rtol=1e-12)


@pytest.mark.parametrize("accel", [[2.0e16, 0.0, 0.0], [0.0, -5.0e15, 5.0e15], [9.81, 0.0, 0.0]])
def test_hyperbolic_retarded_origin_matches_closed_form(accel):
    mot = HyperbolicMotion(
        acceleration=np.array(accel), position=np.array([0.5, -1.0, 0.0]), time=2e-8
    )
    L = mot.length
    cams = [
        np.array([2e-8 * C + 5.0, 3.0, 4.0, -1.0]),
        np.array([2e-8 * C - 2.0, -6.0, 0.5, 2.0]),
        np.array([2e-8 * C + 40.0, 10.0, -30.0, 5.0]),
        np.array([2e-8 * C + 0.1, 0.5 + 2 * L / 3**0.5, -1.0, 0.0]),
    ]
    seen = 0
    for cam in cams:
        closed = hyperbolic_origin_retarded(mot, cam)
        # the generic safeguarded Newton solver of the base class (HyperbolicMotion's own
        # retarded is the closed form for every body point, checked below)
        ev, beta = RigidKinematics.retarded(mot, np.zeros((1, 3)), cam)
        np.testing.assert_allclose(
            mot.retarded(np.zeros((1, 3)), cam)[0][0], closed, rtol=1e-15, atol=1e-15
        )
        # Behind the horizon (c T + Z.n + L <= 0 from the resting event; Rindler 2006, §3.8)
        # no light arrives: both must say so.
        T, Zn = cam[0] - mot.s0, (cam[1:] - mot.position) @ mot.direction
        if T + Zn + L <= 0:
            assert np.all(np.isnan(closed)) and np.all(np.isnan(ev))
            continue
        seen += 1
        # apparent position and emission time: numeric solver vs the closed form
        scale = cam[0] - closed[0] + 1.0
        np.testing.assert_allclose(
            ev[0], closed, rtol=0, atol=2e-12 * scale + 8e-16 * np.abs(closed).max()
        )
        assert_on_light_cone(closed[None], cam, rtol=1e-11)
        t_ref = brentq_emission(mot, np.zeros(3), cam)  # scipy, independent
        assert abs(t_ref - closed[0]) <= 1e-11 * scale
    assert seen >= 3


def test_hyperbolic_camera_beyond_horizon_sees_nothing():
    # The worldline of constant proper acceleration has an event horizon (Rindler 2006, §3.8):
    # an event with c t + (x . n) <= 0 relative to the hyperbola's centre gets no light from it.
    mot = HyperbolicMotion(acceleration=np.array([C * C / 10.0, 0.0, 0.0]))  # L = 10 m
    cam = np.array([-20.0, -40.0, 0.0, 0.0])  # relative to the centre (-10, 0, 0): t + x = -50
    assert np.all(np.isnan(hyperbolic_origin_retarded(mot, cam)))
    ev, _ = mot.retarded(np.zeros((1, 3)), cam)
    assert np.all(np.isnan(ev))


def test_hyperbolic_born_rigid_proper_acceleration():
    # Born-rigid body: the point xi ahead along the acceleration has proper acceleration
    # c^2 / (c^2/a + xi) (Rindler 2006, §3.8). Measure it as the magnitude of the
    # 4-acceleration, by finite differences of the 4-velocity over proper time.
    L = 4.0  # m
    mot = HyperbolicMotion(acceleration=np.array([0.0, 0.0, C * C / L]))
    for xi in (-2.5, 0.0, 3.0):
        for side in (0.0, 1.5):
            p = np.array([[side, 0.0, xi]])
            t = 1.7  # ct, m
            h = 1e-4
            ts = t + h * np.arange(-2, 3)
            _, beta = mot.state(np.repeat(p, 5, 0), ts)
            g = lorentz_factor(beta)
            u = np.concatenate([g[:, None], g[:, None] * beta], 1)  # 4-velocity (1/m units)
            du_dt = (-u[4] + 8 * u[3] - 8 * u[1] + u[0]) / (12 * h)  # 5-point stencil
            acc4 = g[2] * du_dt  # d/dtau = gamma d/dt
            magnitude = math.sqrt(acc4[1:] @ acc4[1:] - acc4[0] ** 2)
            assert magnitude == pytest.approx(1.0 / (L + xi), rel=1e-7)
            # proper_acceleration reports the same in m/s^2
            assert mot.proper_acceleration(xi) == pytest.approx(C * C / (L + xi), rel=1e-14)


def test_hyperbolic_points_match_brentq():
    mot = HyperbolicMotion(
        acceleration=np.array([1.0e16, 3.0e15, 0.0]), position=np.zeros(3), time=0.0
    )
    pts = RNG.uniform(-2, 2, size=(12, 3))
    cam = np.array([3.0, -4.0, 5.0, 1.0])
    check_retarded_against_brentq(mot, pts, cam, every=3)  # scipy brentq, independent


@pytest.mark.parametrize("contraction", [True, False])
def test_hyperbolic_body_points_closed_form_matches_generic_solver(contraction):
    # Born-rigid: the body point xi ahead along the acceleration moves on its own hyperbola
    # of horizon distance c^2/a + xi, at rest with the origin at the same scene time
    # (Rindler 2006, §3.8), so the origin's closed form serves every point. Against the
    # base class's safeguarded Newton solve of the same equation, scipy's brentq, the
    # light-cone condition, and the worldline model's own events (RigidKinematics.events).
    rng = np.random.default_rng(7)
    for accel, cam in (
        ([C * C / 10.0, 0.0, 0.0], [5.0, 3.0, 4.0, -1.0]),
        ([0.0, -C * C / 6.0, C * C / 5.0], [40.0, 10.0, -30.0, 5.0]),
        ([2.0e16, 1.0e16, -3.0e15], [1.5, -4.0, 0.5, 2.0]),
    ):
        mot = HyperbolicMotion(
            acceleration=np.array(accel), position=np.array([0.3, -1.0, 2.0]), time=1e-8
        )
        cam = np.array(cam) + np.array([mot.s0, 0.0, 0.0, 0.0])
        pts = rng.uniform(-1.5, 1.5, size=(400, 3))
        ev, beta = mot.retarded(pts, cam, contraction=contraction)
        ev_n, beta_n = RigidKinematics.retarded(mot, pts, cam, contraction=contraction)
        scale = cam[0] - ev_n[:, 0] + 1.0
        assert np.all(np.isfinite(ev))
        np.testing.assert_array_less(np.abs(ev - ev_n).max(axis=1), 1e-12 * scale)
        np.testing.assert_allclose(beta, beta_n, rtol=0, atol=1e-13)
        assert_on_light_cone(ev, cam, rtol=1e-13)
        # the events lie on the model's worldlines, at the closed-form reference times
        s = mot._reference_time(pts, ev[:, 0], contraction)
        s_n = RigidKinematics._reference_time(mot, pts, ev[:, 0], contraction)
        np.testing.assert_array_less(np.abs(s - s_n), 1e-12 * (1.0 + np.abs(s_n)))
        on, dev = mot.events(pts, s, contraction)
        np.testing.assert_array_less(np.abs(on - ev).max(axis=1), 1e-12 * scale)
        np.testing.assert_allclose(dev[:, 1:] / dev[:, :1], beta, rtol=0, atol=1e-13)
        # (the generic derivative carries ~1e-14 of rounding; the closed form (L + xi) / L less)
        np.testing.assert_allclose(mot.time_rate(pts, s, contraction), dev[:, 0], rtol=1e-12)
        for i in range(0, 400, 100):  # scipy brentq, independent root finder
            t_ref = brentq_emission(mot, pts[i], cam, contraction)
            assert abs(ev[i, 0] - t_ref) <= 1e-11 * (cam[0] - t_ref + 1.0)


def test_hyperbolic_body_shares_the_origins_horizon():
    # A Born-rigid accelerated body has one horizon (Rindler 2006, §3.8): the camera event
    # with c T + Z.n + c^2/a <= 0 (relative to the origin's resting event) gets light from
    # no point of it. The closed form says NaN for every point; where light does arrive,
    # the light-cone condition holds.
    mot = HyperbolicMotion(acceleration=np.array([C * C / 10.0, 0.0, 0.0]))  # L = 10 m
    pts = np.random.default_rng(3).uniform(-2.0, 2.0, size=(200, 3))
    behind = np.array([-8.0, -2.5, 1.0, 0.0])  # c T + Z.n + L = -0.5 m
    ev, beta = mot.retarded(pts, behind)
    assert np.all(np.isnan(ev)) and np.all(np.isnan(beta))
    ahead = np.array([-7.0, -2.5, 1.0, 0.0])  # c T + Z.n + L = +0.5 m: seen, from far back
    ev, _ = mot.retarded(pts, ahead)
    assert np.all(np.isfinite(ev))
    assert_on_light_cone(ev, ahead, rtol=1e-12)
    # Galilean kinematics carries every point on the origin's hyperbola shifted by p:
    # each has its own horizon, c T + (Z - p).n + L
    ev, _ = mot.retarded(pts, ahead, contraction=False)
    seen = -7.0 + (ahead[1:] - pts) @ mot.direction + mot.length > 0
    assert 0 < seen.sum() < len(pts)
    np.testing.assert_array_equal(np.isfinite(ev[:, 0]), seen)


def test_hyperbolic_rejects_body_beyond_horizon():
    mot = HyperbolicMotion(acceleration=np.array([C * C / 2.0, 0.0, 0.0]))  # c^2/a = 2 m
    mot.validate(1.9)
    with pytest.raises(ValueError, match=r"c\^2/a = 2 m"):
        mot.validate(2.0)


# ----------------------------------------------------------------------------- orbit


def test_orbit_transverse_doppler():
    # Velocity perpendicular to the line of sight at emission: D = 1/gamma (transverse
    # Doppler shift; physics.md, Rybicki & Lightman 1979, ch. 4 with beta.n = 0).
    beta = 0.8
    mot = OrbitMotion(
        center=np.array([1.0, 2.0, 0.0]),
        radius=5.0,
        beta=beta,
        axis=np.array([0.0, 0.0, 1.0]),
        phase=30.0,
        time=0.0,
    )
    gamma = 1 / math.sqrt(1 - beta**2)
    # camera at rest on the axis, 7 m above the centre: every line of sight is perpendicular
    cam = np.array([11.0, 1.0, 2.0, 7.0])
    ev, b = mot.retarded(np.zeros((1, 3)), cam)
    n = (cam[1:] - ev[0, 1:]) / np.linalg.norm(cam[1:] - ev[0, 1:])
    assert abs(b[0] @ n) < 1e-13
    assert float(doppler_factor(b[0], np.zeros(3), n)) == pytest.approx(1 / gamma, rel=1e-12)
    # camera off the axis: choose an emission event, send light off perpendicular to the
    # velocity there, place the camera on that ray; the solver must find that event back.
    t_e = 2.3
    x_e, b_e = mot.state(np.zeros((1, 3)), t_e)
    radial = (x_e[0] - mot.center) / 5.0
    d = 0.6 * radial + 0.8 * np.array([0.0, 0.0, 1.0])  # perpendicular to the tangent velocity
    cam = np.concatenate([[t_e + 9.0], x_e[0] + 9.0 * d])
    ev, b = mot.retarded(np.zeros((1, 3)), cam)
    assert ev[0, 0] == pytest.approx(t_e, abs=1e-12)
    assert float(doppler_factor(b[0], np.zeros(3), d)) == pytest.approx(1 / gamma, rel=1e-12)


def test_orbit_camera_state_and_brentq():
    mot = OrbitMotion(
        center=np.zeros(3),
        radius=2.0,
        period=2 * math.pi * 2.0 / (0.6 * C),
        axis=np.array([1.0, 1.0, 1.0]),
    )
    for t in (0.0, 1.0, 7.0):
        x, b = origin_state(mot, t)
        assert np.linalg.norm(x) == pytest.approx(2.0, rel=1e-14)
        assert np.linalg.norm(b) == pytest.approx(0.6, rel=1e-14)
        assert abs(b @ x) < 1e-13 and abs(b @ np.ones(3)) < 1e-13
    pts = RNG.uniform(-0.3, 0.3, size=(9, 3))
    cam = np.array([4.0, 3.0, -1.0, 2.0])
    check_retarded_against_brentq(mot, pts, cam, every=2)  # scipy brentq, independent


def test_orbit_rejects_superluminal():
    with pytest.raises(ValueError, match=r"\|beta\| = 1 >= 1"):
        OrbitMotion(center=np.zeros(3), radius=1.0, beta=1.0)
    period = 2 * math.pi * 10.0 / C * 0.99  # 10 m radius, slightly too fast
    with pytest.raises(ValueError, match=r"\|beta\| = 1\.0101.*radius 10 m"):
        OrbitMotion(center=np.zeros(3), radius=10.0, period=period)
    # a rigid body too big for the orbit: outer points would reach c
    mot = OrbitMotion(center=np.zeros(3), radius=1.0, beta=0.9)
    limit = mot.outward_limit()
    assert 0.14 < limit < 0.15  # 0.1 (1 - 0.9)/(0.81 (gamma - 0.9 k)), see docs/motion.md
    # the closed form against the sampled speed of the outward point just inside/outside
    inside = mot.events(np.array([[limit * 0.999, 0.0, 0.0]]), 0.0)[1]
    outside = mot.events(np.array([[limit * 1.001, 0.0, 0.0]]), 0.0)[1]
    assert (
        np.linalg.norm(inside[0, 1:]) / inside[0, 0]
        < 1
        < np.linalg.norm(outside[0, 1:]) / outside[0, 0]
    )
    mot.validate(0.1)
    with pytest.raises(
        ValueError, match="extent 0.2 m cannot follow this orbit.*must stay below 0.14"
    ):
        mot.validate(0.2)
    # small beta: the limit approaches c^2/a = r/beta^2 (Rindler horizon of the acceleration)
    slow = OrbitMotion(center=np.zeros(3), radius=1.0, beta=1e-3)
    assert slow.outward_limit() == pytest.approx(1e6, rel=2e-3)


# ----------------------------------------------------------------------------- path


def test_path_interpolates_and_matches_brentq():
    times = np.array([0.0, 1e-8, 2e-8, 3.5e-8])
    pos = np.array([[0.0, 0.0, 0.0], [1.5, 0.2, 0.0], [2.0, 1.8, 0.5], [1.0, 3.0, 1.0]])
    mot = PathMotion(times=times, positions=pos)
    x, _ = mot.state(np.zeros((4, 3)), times * C)
    np.testing.assert_allclose(x, pos, atol=1e-13)
    # velocity against a finite difference of positions (central, 4th order)
    t = 1.3e-8 * C
    h = 1e-5
    xs, _ = mot.state(np.zeros((4, 3)), t + h * np.array([-2, -1, 1, 2]))
    fd = (xs[0] - 8 * xs[1] + 8 * xs[2] - xs[3]) / (12 * h)
    _, b = mot.state(np.zeros((1, 3)), t)
    np.testing.assert_allclose(b[0], fd, atol=1e-9)
    # beyond the ends: straight continuation with the end velocity
    xa, ba = mot.state(np.zeros((1, 3)), -2.0)
    _, b0 = mot.state(np.zeros((1, 3)), 0.0)
    np.testing.assert_allclose(xa[0], pos[0] - 2.0 * b0[0], atol=1e-13)
    pts = RNG.uniform(-0.2, 0.2, size=(8, 3))
    cam = np.array([3.0 * C * 1e-8, 0.0, -3.0, 1.0])
    check_retarded_against_brentq(mot, pts, cam, every=2)  # scipy brentq, independent


def test_path_proper_time_matches_quad():
    mot = PathMotion(times=[0.0, 1e-8, 3e-8], positions=[[0, 0, 0], [2.0, 0, 0], [2.0, 3.0, 0]])
    s = np.array([0.4e-8, 2.2e-8, 4e-8]) * C
    tau, _ = mot._proper_time(s)

    def inv_gamma(x):
        _, b = mot.state(np.zeros((1, 3)), x)
        return math.sqrt(1 - b[0] @ b[0])

    for si, ti in zip(s, tau):
        ref = sum(
            quad(inv_gamma, a, min(bnd, si), epsabs=1e-13, epsrel=1e-13)[0]
            for a, bnd in ((0.0, 1e-8 * C), (1e-8 * C, 3e-8 * C), (3e-8 * C, np.inf))
            if si > a
        )
        assert ti == pytest.approx(ref, rel=1e-11)


def test_path_rejects_superluminal_segment():
    # 4 m in 1e-8 s (1.33 c on the straight line) between the 4th and 5th points
    times = np.arange(7) * 1e-8
    xs = np.array([0.0, 1.0, 2.0, 3.0, 7.0, 8.0, 9.0])
    with pytest.raises(
        ValueError, match=r"segment 3 \(t = 3e-08 s to 4e-08 s\) reaches \|beta\| = ([\d.]+)"
    ) as err:
        PathMotion(times=times, positions=np.stack([xs, 0 * xs, 0 * xs], 1))
    # the reported peak speed against a dense sampling of scipy's own natural spline
    reported = float(str(err.value).split("|beta| = ")[1].split()[0])
    dense = np.linspace(3e-8, 4e-8, 200001)
    spline_speed = np.abs(CubicSpline(times, xs, bc_type="natural")(dense, 1)) / C
    assert reported == pytest.approx(spline_speed.max(), rel=1e-5)
    assert (
        np.abs(CubicSpline(times, xs, bc_type="natural")(np.linspace(0, 3e-8, 3001), 1)).max() / C
        < 1
    )
    with pytest.raises(ValueError, match="increase strictly"):
        PathMotion(times=[0.0, 1.0, 1.0], positions=np.zeros((3, 3)))


def test_path_rejects_body_too_large_for_its_turns():
    # A subluminal path whose sharp turns would drive the far side of a 0.6 m body past c
    # (rigid in the origin's rest frame); the message names the segment and its times.
    mot = PathMotion(
        times=[0, 1e-8, 2e-8, 3e-8], positions=[[0, 0, 0], [2.3, 0, 0], [2.3, 2.3, 0], [0, 2.3, 0]]
    )
    assert mot.max_speed(0.0) < 1
    mot.validate(0.1)
    with pytest.raises(
        ValueError,
        match=r"\|beta\| = [\d.]+ >= 1 at t = .* s \(path segment \d, t = .* s to .* s\)",
    ):
        mot.validate(0.6)


# ----------------------------------------------------------------------------- spin and rolling


def test_spin_rim_velocity_is_composed_with_base():
    # In the base's rest frame a rim point moves at omega x q; in S its velocity is that
    # composed relativistically with the base velocity (Rindler 2006, §3.6).
    base_beta = np.array([0.5, 0.3, 0.0])
    omega = 0.4 * C  # rad/s: rim speed 0.4 c at 1 m
    mot = SpinMotion(
        base=UniformMotion(beta=base_beta), axis=np.array([0.0, 0.0, 1.0]), angular_velocity=omega
    )
    pts = np.array([[1.0, 0.0, 0.0], [0.0, -0.7, 0.2], [0.3, 0.3, -1.0]])
    ev, dev = mot.events(pts, np.zeros(3))  # events tied to the base origin at s = 0: angle 0
    beta = dev[:, 1:] / dev[:, :1]
    inner = np.cross([0.0, 0.0, omega / C], pts)
    for i in range(3):
        np.testing.assert_allclose(beta[i], compose_velocities(base_beta, inner[i]), atol=1e-14)
    # the same through state(): the point at the S time of its event
    x, b = mot.state(pts, ev[:, 0])
    np.testing.assert_allclose(x, ev[:, 1:], atol=1e-13)
    np.testing.assert_allclose(b, beta, atol=1e-13)


def test_spin_matches_brentq_and_galilean_mode():
    base = OrbitMotion(center=np.zeros(3), radius=4.0, beta=0.3)
    mot = SpinMotion(
        base=base,
        axis=np.array([1.0, 0.0, 1.0]),
        angular_velocity=0.5 * C,
        center_offset=np.array([0.1, 0.0, 0.0]),
    )
    mot.validate(1.0)
    pts = RNG.uniform(-0.8, 0.8, size=(8, 3))
    cam = np.array([6.0, 2.0, -7.0, 3.0])
    check_retarded_against_brentq(mot, pts, cam, every=2)  # scipy brentq, independent
    # Galilean: rigid turn by omega t about the offset axis, carried by the orbit position
    t = 2.0
    x, _ = mot.state(pts, t, contraction=False)
    x0, _ = base.state(np.zeros((1, 3)), t, contraction=False)
    ang = 0.5 * t
    ax = np.array([1.0, 0.0, 1.0]) / math.sqrt(2)
    c = np.array([0.1, 0.0, 0.0])
    rel = pts - c
    rot = (
        rel * math.cos(ang)
        + np.cross(ax, rel) * math.sin(ang)
        + np.outer(rel @ ax, ax) * (1 - math.cos(ang))
    )  # Rodrigues' formula
    np.testing.assert_allclose(x, x0 + c + rot, atol=1e-13)


def test_spin_on_path_matches_brentq():
    base = PathMotion(
        times=[0.0, 1e-8, 2e-8], positions=[[0, 0, 0], [1.5, 0.5, 0], [2.0, 2.0, 0.5]]
    )
    mot = SpinMotion(
        base=base, axis=np.array([0.0, 0.0, 1.0]), angular_velocity=0.3 * C, time=0.5e-8, phase=20.0
    )
    pts = RNG.uniform(-0.5, 0.5, size=(6, 3))
    check_retarded_against_brentq(
        mot, pts, np.array([4.0, 1.0, -3.0, 0.5])
    )  # scipy brentq, independent


def test_spin_on_hyperbolic_matches_brentq():
    base = HyperbolicMotion(
        acceleration=np.array([0.0, 2.0e16, 0.0]), position=np.array([0.0, 1.0, 0.0]), time=0.0
    )
    mot = SpinMotion(base=base, axis=np.array([0.0, 1.0, 0.0]), angular_velocity=0.6 * C)
    mot.validate(1.0)
    pts = RNG.uniform(-0.6, 0.6, size=(6, 3))
    check_retarded_against_brentq(
        mot, pts, np.array([3.0, 2.0, -2.0, 0.5])
    )  # scipy brentq, independent


@pytest.mark.parametrize("contraction", [True, False])
def test_spin_on_uniform_compiled_solves_match_generic_solver(contraction):
    # Spins carried by uniform motion (and rolling wheels) solve the light cone and the
    # simultaneity condition in compiled code: the same equations and iteration as the
    # base class's vectorised solver, checked against it, scipy's brentq and the light-cone
    # condition itself.
    rng = np.random.default_rng(11)
    motions = [
        RollingMotion(
            radius=0.5, beta=np.array([0.8, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
        ),
        SpinMotion(
            base=UniformMotion(
                beta=np.array([0.3, -0.5, 0.2]), position=np.array([1.0, 2.0, 3.0]), time=2e-9
            ),
            axis=np.array([0.3, 0.4, 1.0]),
            angular_velocity=0.5 * C,
            center_offset=np.array([0.1, 0.0, -0.2]),
            time=1e-9,
            phase=33.0,
        ),
    ]
    cam = np.array([3.0, 1.0, -3.0, 1.2])
    for mot in motions:
        pts = rng.uniform(-0.5, 0.5, size=(300, 3))
        ev, beta = mot.retarded(pts, cam, contraction=contraction)
        ev_n, beta_n = RigidKinematics.retarded(mot, pts, cam, contraction=contraction)
        scale = cam[0] - ev_n[:, 0] + 1.0
        np.testing.assert_array_less(np.abs(ev - ev_n).max(axis=1), 1e-12 * scale)
        np.testing.assert_allclose(beta, beta_n, rtol=0, atol=1e-12)
        assert_on_light_cone(ev, cam, rtol=1e-11)
        s = mot._reference_time(pts, ev[:, 0], contraction)
        s_n = RigidKinematics._reference_time(mot, pts, ev[:, 0], contraction)
        np.testing.assert_array_less(np.abs(s - s_n), 1e-12 * (1.0 + np.abs(s_n)))
        np.testing.assert_allclose(
            mot.time_rate(pts, s, contraction),
            RigidKinematics.time_rate(mot, pts, s, contraction),
            rtol=1e-13,
        )
        for i in range(0, 300, 100):  # scipy brentq, independent root finder
            t_ref = brentq_emission(mot, pts[i], cam, contraction)
            assert abs(ev[i, 0] - t_ref) <= 1e-11 * (cam[0] - t_ref + 1.0)


def test_spin_rejects_rim_at_light_speed():
    mot = SpinMotion(
        base=UniformMotion(beta=np.array([0.5, 0, 0])), angular_velocity=0.5 * C
    )  # 0.5 c at 1 m
    mot.validate(1.9)
    with pytest.raises(ValueError, match=r"rim speed omega r / c = 1 >= 1"):
        mot.validate(2.0)


@pytest.mark.parametrize("v", [0.5, 0.9])
def test_rolling_wheel_contact_at_rest_and_top_speed(v):
    mot = RollingMotion(
        radius=0.35, beta=np.array([0.0, v, 0.0]), position=np.array([0.0, 0.0, 0.35]), time=1e-9
    )
    t0 = 1e-9 * C
    contact = mot.contact_point()
    np.testing.assert_allclose(contact, [0.0, 0.0, -0.35], atol=1e-15)
    x, b = mot.state(np.array([contact, -contact]), t0)
    # contact point momentarily at rest in S (rolling without slipping)
    assert np.linalg.norm(b[0]) < 1e-14
    np.testing.assert_allclose(x[0], [0.0, 0.0, 0.0], atol=1e-15)
    # top: Einstein velocity addition of v and v: 2v/(1+v^2) (Rindler 2006, §3.6), not 2v
    assert np.linalg.norm(b[1]) == pytest.approx(2 * v / (1 + v * v), rel=1e-13)
    # later: the point at the bottom when the axle has turned by omega tau, tau = dt/gamma
    dt = 0.8
    angle = (v / 0.35) * dt * math.sqrt(1 - v * v)
    rot_x = np.array(
        [[1, 0, 0], [0, math.cos(angle), -math.sin(angle)], [0, math.sin(angle), math.cos(angle)]]
    )
    p_bottom = rot_x @ contact  # the spin axis is z x y = -x: undo the turn by turning about +x
    xb, bb = mot.state(p_bottom[None], t0 + dt)
    assert np.linalg.norm(bb[0]) < 1e-13
    np.testing.assert_allclose(xb[0], [0.0, v * dt, 0.0], atol=1e-13)
    # Galilean: classical addition, top at 2v
    _, bg = mot.state(np.array([contact, -contact]), t0, contraction=False)
    assert np.linalg.norm(bg[0]) < 1e-15
    assert np.linalg.norm(bg[1]) == pytest.approx(2 * v, rel=1e-14)


def test_rolling_contact_point_doppler_from_camera_alone():
    # A photon leaving the momentarily resting contact point: its Doppler factor is that
    # of a source at rest, D = gamma_cam (1 - beta_cam.n) (physics.md Doppler factor).
    mot = RollingMotion(
        radius=0.5, beta=np.array([0.7, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
    )
    contact = mot.contact_point()
    d = np.array([0.3, -0.9, 0.3])
    d /= np.linalg.norm(d)
    cam = np.concatenate([[6.0], 6.0 * d])  # the contact event (0, 0) sends light to here
    ev, b = mot.retarded(contact[None], cam)
    assert ev[0, 0] == pytest.approx(0.0, abs=1e-12)
    beta_cam = np.array([0.0, 0.6, 0.0])
    expected = doppler_factor(np.zeros(3), beta_cam, d)
    assert float(doppler_factor(b[0], beta_cam, d)) == pytest.approx(float(expected), rel=1e-13)


def test_rolling_axis_checks():
    with pytest.raises(ValueError, match="perpendicular"):
        RollingMotion(radius=1.0, beta=np.array([0.5, 0.0, 0.0]), axis=np.array([1.0, 0.0, 0.0]))
    with pytest.raises(ValueError, match=r"\|beta\| = 1 >= 1"):
        RollingMotion(radius=1.0, beta=np.array([1.0, 0.0, 0.0]))
    # given axis (0, 0, 1) and beta along x, the ground is on the -(x cross z) = +y side
    m = RollingMotion(radius=1.0, beta=np.array([0.5, 0.0, 0.0]), axis=np.array([0.0, 0.0, 1.0]))
    np.testing.assert_allclose(m.contact_point(), [0.0, 1.0, 0.0], atol=1e-15)
    _, b = m.state(m.contact_point()[None], 0.0)
    assert np.linalg.norm(b) < 1e-15


# ----------------------------------------------------------------------------- module functions, tables


def origin_state(motion, t_ct):
    """Place (3,) and beta (3,) of a motion's reference point (body origin) at t_ct."""
    x, b = motion.state(np.zeros((1, 3)), t_ct)
    return x[0], b[0]


def test_uniform_motion_has_the_common_interface():
    um = UniformMotion(beta=np.array([0.0, 0.6, 0.0]), position=np.zeros(3), time=0.0)
    assert isinstance(um, RigidKinematics) and um.is_inertial
    x, b = origin_state(um, 2.0)
    np.testing.assert_allclose(x, [0.0, 1.2, 0.0])
    ev, _ = um.retarded(np.zeros((1, 3)), np.array([5.0, 0.0, 0.0, 0.0]))
    # head-on approach at 0.6 toward a camera 5 - ... : closed-form check of (t_c - t) = |x_c - x|
    assert_on_light_cone(ev, np.array([5.0, 0.0, 0.0, 0.0]))
    x, _ = um.state(np.zeros((2, 3)), np.array([0.0, 1.0]))
    np.testing.assert_allclose(x[:, 1], [0.0, 0.6])
    # proper time runs at 1/gamma (time dilation; Einstein 1905, section 4)
    assert um.proper_time(1.0)[0] == pytest.approx(0.8, rel=1e-15)
    beta, event = um.inertial_frame()
    np.testing.assert_array_equal(beta, [0.0, 0.6, 0.0])
    np.testing.assert_array_equal(event, [0.0, 0.0, 0.0, 0.0])


def test_only_uniform_motion_is_inertial():
    assert not HyperbolicMotion(acceleration=np.array([9.81, 0.0, 0.0])).is_inertial
    orbit = OrbitMotion(center=np.zeros(3), radius=1.0, beta=0.5)
    assert not orbit.is_inertial
    with pytest.raises(TypeError, match="not inertial"):
        orbit.inertial_frame()


def _scene_with(motion):
    return {
        "camera": {"position": [0.0, -5.0, 0.0], "look_at": [0.0, 0.0, 0.0]},
        "body": [
            {
                "name": "probe",
                "shape": "sphere",
                "radius": 0.1,
                "motion": motion,
                "surface": {"blackbody": 5800.0},
            }
        ],
    }


def read_motion(motion):
    """The motion the scene reader builds from a [body.motion] table."""
    return scene_from_dict(_scene_with(motion)).bodies[0].motion


def motion_error(motion) -> SceneError:
    with pytest.raises(SceneError) as err:
        read_motion(motion)
    return err.value


def test_motion_tables():
    m = read_motion({"kind": "orbit", "center": [0, 0, 1], "radius": 2.0, "beta": 0.5})
    assert isinstance(m, OrbitMotion) and m.speed == 0.5
    m = read_motion(
        {
            "kind": "spin",
            "angular_velocity": 10.0,
            "base": {"kind": "hyperbolic", "acceleration": [9.81, 0, 0]},
        }
    )
    assert isinstance(m, SpinMotion) and isinstance(m.base, HyperbolicMotion)
    m = read_motion({"kind": "rolling", "radius": 0.3, "beta": [0.2, 0, 0]})
    assert isinstance(m, RollingMotion)
    m = read_motion({"kind": "path", "times": [0, 1], "positions": [[0, 0, 0], [1, 0, 0]]})
    assert isinstance(m, PathMotion)
    # every kind's keys go through the reader's table: the same messages (key, value) for all
    err = motion_error({"kind": "orbit", "radus": 2.0, "beta": 0.5})
    assert 'unknown key "radus"' in err.message and 'did you mean "radius"' in err.message
    assert "radus" in err.key and err.value == 2.0
    err = motion_error({"kind": "hyperbolic", "acceleration": "fast"})
    assert 'acceleration = "fast"' in err.message and "expected a list of 3 numbers" in err.message
    err = motion_error({"kind": "orbit", "radius": 1.0, "beta": 1.2})
    assert "beta = 1.2: the orbital speed must be below 1" in err.message and "beta" in err.key
    err = motion_error({"kind": "path", "times": [0, 1e-9], "positions": [[0, 0, 0], [1, 0, 0]]})
    assert err.message.count("segment 0") == 1 and "|beta| = " in err.message
    err = motion_error({"kind": "path", "times": [0, 1, 2], "positions": [[0, 0, 0], [1, 0, 0]]})
    assert "positions must be 3 points" in err.message and "positions" in err.key
    err = motion_error({"kind": "rolling", "radius": 1.0, "beta": [0.5, 0, 0], "axis": [1, 0, 0]})
    assert "perpendicular" in err.message and "axis" in err.key
    err = motion_error({"kind": "orbitt"})
    assert 'did you mean "orbit"' in err.message and "kind" in err.key
    err = motion_error({"kind": "spin", "angular_velocity": 1.0, "base": {"kind": "spin"}})
    assert "a spin cannot carry another spin" in err.message and "base" in err.key


def test_loader_builds_registered_kinds_and_names_bad_keys():
    assert {"hyperbolic", "orbit", "path", "spin", "rolling"} <= set(MOTION_KINDS)
    s = scene_from_dict(_scene_with({"kind": "rolling", "radius": 0.3, "beta": [0.5, 0.0, 0.0]}))
    assert isinstance(s.bodies[0].motion, RollingMotion)
    s = scene_from_dict(
        _scene_with(
            {
                "kind": "spin",
                "angular_velocity": 1e6,
                "base": {"kind": "hyperbolic", "acceleration": [0.0, 0.0, 9.81]},
            }
        )
    )
    assert isinstance(s.bodies[0].motion.base, HyperbolicMotion)
    with pytest.raises(SceneError, match=r"period.*-2.*must be > 0|must be > 0.*period = -2"):
        scene_from_dict(_scene_with({"kind": "orbit", "radius": 1.0, "period": -2.0}))
    with pytest.raises(SceneError, match=r'accelleration.*did you mean "acceleration"'):
        scene_from_dict(_scene_with({"kind": "hyperbolic", "accelleration": [1.0, 0.0, 0.0]}))


def test_path_with_absurd_coordinates_is_a_clear_error():
    # 1e300 m in 1e-8 s: hopelessly faster than light; the message names the segment
    # instead of leaking an overflow from the spline arithmetic.
    xs = np.array([0.0, 1.0, 1e300])
    with pytest.raises(ValueError, match=r"segment 1 .* mean speed"):
        PathMotion(times=np.array([0.0, 1e-8, 2e-8]), positions=np.stack([xs, 0 * xs, 0 * xs], 1))


def test_directions_given_by_tiny_numbers_are_still_directions():
    # found by the scaled-demo fuzz run: an orbit axis [0, 0, 1e-300] squared underflowed
    # to the zero vector; a direction is scale-free
    orbit = OrbitMotion(center=np.zeros(3), radius=3.0, beta=0.6, axis=np.array([0, 0, 1e-300]))
    np.testing.assert_array_equal(orbit.axis, [0.0, 0.0, 1.0])
    spin = SpinMotion(base=UniformMotion(), axis=np.array([1e-310, 0.0, 0.0]), angular_velocity=1.0)
    np.testing.assert_array_equal(spin.axis, [1.0, 0.0, 0.0])
