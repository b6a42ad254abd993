"""Clocks carried by bodies and cameras: the readings a camera records, and how fast.

A body's clock is the proper time of its reference point (the body origin; docs/motion.md,
"The rigid-body model"), set to read ``clock.reading`` s at the reference point's event at
scene time ``clock.time`` (relview.scene.parts.Clock). The whole body shows one reading per
instant of the reference point's momentary rest frame: a body point's event E(s, p) is
tied to the reference event at reference time s, so the light a camera receives from p
carries the reading

    reading(p) = clock.reading + (tau_ref(s_emit) - tau_ref(s_set)) / c,

s_emit the reference time of p's emission event and s_set = c clock.time.

The rate at which a camera sees that reading advance, per second of its own proper time,
follows from the light-cone condition t_c - t = |x_c - x| along p's worldline:
dt_c (1 - n.beta_cam) = dt (1 - n.beta_p) (n the propagation direction, emitter ->
camera), so

    d reading / d tau_cam = (dtau_ref/ds) / (dt/ds) (1 - n.beta_cam) / (1 - n.beta_p) gamma_cam,

which for an inertial body is the Doppler factor D = gamma_cam (1 - n.beta_cam) /
(gamma (1 - n.beta)) (Einstein 1905, section 7; Rybicki & Lightman eq. 4.11).

With ``contraction`` off (Galilean kinematics) clocks keep absolute time: the clock
coordinate is scene time, counted from the motion's proper-time zero, and no gamma
factor enters.

Times are ct in metres here (c = 1) except readings, which are seconds.
"""

from __future__ import annotations

import numpy as np

from relview.kinematics.lorentz import C
from relview.kinematics.uniform import UniformMotion


def _galilean_zero(motion) -> float:
    """The reference time s (ct, m) at which the motion's proper time is zero (Newton on
    tau(s), which increases strictly along a timelike worldline)."""
    s = np.zeros(1)
    for _ in range(60):
        tau, rate = motion._proper_time(s)
        step = tau / rate
        s = s - step
        if abs(float(step[0])) <= 1e-15 * (1.0 + abs(float(s[0]))):
            break
    return float(s[0])


def clock_coordinate(motion, s_ct, relativistic: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """(value (N,) ct m, d value / ds (N,)) of the reference point's clock at reference
    times ``s_ct``: its proper time, counted from the motion's own zero
    (RigidKinematics.proper_time); Galilean: scene time since that zero."""
    s = np.atleast_1d(np.asarray(s_ct, dtype=float))
    if relativistic:
        tau, rate = motion._proper_time(s)
        return np.asarray(tau, float), np.broadcast_to(np.asarray(rate, float), s.shape).copy()
    return s - _galilean_zero(motion), np.ones(s.shape)


def reading_from_coordinate(motion, clock, value_ct, relativistic: bool = True) -> np.ndarray:
    """Clock readings (s) where the clock coordinate is ``value_ct`` (ct m; see
    :func:`clock_coordinate`), for a clock set by ``clock`` (relview.scene.parts.Clock)."""
    set_value = clock_coordinate(motion, C * float(clock.time), relativistic)[0][0]
    return float(clock.reading) + (np.asarray(value_ct, float) - set_value) / C


def body_readings(bodies, body_index, value_ct, relativistic: bool = True) -> np.ndarray:
    """(N,) clock readings (s) of hits on ``bodies`` (index -1: sky, NaN) from their
    clock coordinates (N,) ct m (relview.geometry.trace.Hits.clock).

    One vectorised pass: each body seen contributes its setting (reading and clock
    coordinate at the setting event, :func:`reading_from_coordinate`) once, gathered to
    its rows, so the cost does not grow with bodies x pixels; every row's arithmetic is
    the same as reading_from_coordinate's."""
    index = np.asarray(body_index)
    out = np.full(index.shape, np.nan)
    if value_ct is None:  # hits cast without clocks
        return out
    seen = index >= 0
    if not np.any(seen):
        return out
    # the bodies seen, ascending, and each row's place among them (np.unique's answer,
    # counted instead of sorted: one pass over the rows)
    seen_index = index[seen]
    present = np.flatnonzero(np.bincount(seen_index))
    place = np.zeros(present[-1] + 1, np.int64)
    place[present] = np.arange(len(present))
    rows_of = place[seen_index]
    setting = np.empty(len(present))  # the clock reading at its setting event, s
    set_value = np.empty(len(present))  # the clock coordinate there, ct m
    for k, i in enumerate(present.tolist()):
        body = bodies[i]
        setting[k] = float(body.clock.reading)
        s_set = C * float(body.clock.time)
        set_value[k] = (
            body.motion.proper_time_at(s_set)
            if relativistic
            else clock_coordinate(body.motion, s_set, relativistic)[0][0]
        )
    out[seen] = setting[rows_of] + (np.asarray(value_ct, float)[seen] - set_value[rows_of]) / C
    return out


def reference_times(motion, points, t_ct, contraction: bool = True) -> np.ndarray:
    """Reference time s (ct, m) of the events of body ``points`` (N, 3) (rest-frame axes) at
    scene times ``t_ct``: the rest-frame instant of the reference point they belong to."""
    return motion._reference_time(points, t_ct, contraction)


def tick_rates(
    motion, points, s_ct, propagation, beta_cam, relativistic: bool = True, delay: bool = True
):
    """d reading / d tau_cam (N,) of body ``points`` (N, 3) emitting at reference times
    ``s_ct`` (N,) along unit ``propagation`` directions (N, 3) (emitter -> camera, S)
    towards a camera moving with ``beta_cam`` (3,) (module docstring). ``delay`` off:
    light is instantaneous, emission and reception share their scene time (dt = dt_c)."""
    p = np.atleast_2d(np.asarray(points, float))
    s = np.broadcast_to(np.asarray(s_ct, float), (p.shape[0],))
    _, dev = motion.events(p, s, relativistic)
    _, rate = clock_coordinate(motion, s, relativistic)
    beta_p = dev[:, 1:] / dev[:, :1]
    n = np.atleast_2d(np.asarray(propagation, float))
    bc = np.asarray(beta_cam, float).reshape(3)
    ratio = (1.0 - n @ bc) / (1.0 - np.sum(n * beta_p, axis=1)) if delay else 1.0
    gamma_cam = 1.0 / np.sqrt(1.0 - float(bc @ bc)) if relativistic else 1.0
    return rate / dev[:, 0] * ratio * gamma_cam


def camera_motion(camera):
    """The camera's worldline: its motion, or uniform motion through ``position`` at
    ``time`` with ``beta`` (relview.scene.parts.Camera)."""
    if getattr(camera, "motion", None) is not None:
        return camera.motion
    return UniformMotion(
        beta=np.asarray(camera.beta, float),
        position=np.asarray(camera.position, float),
        time=float(camera.time),
    )


def camera_reading(camera, t_s: float, relativistic: bool = True) -> float:
    """The camera's own clock reading (s) at its exposure at scene time ``t_s``."""
    motion = camera_motion(camera)
    value = clock_coordinate(motion, C * float(t_s), relativistic)[0]
    return float(reading_from_coordinate(motion, camera.clock, value, relativistic)[0])
