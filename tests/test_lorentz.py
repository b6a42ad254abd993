"""Lorentz kinematics against textbook formulas and worked values."""

import numpy as np
import pytest

from relview.kinematics.lorentz import (
    C,
    aberrate_to_camera,
    aberrate_to_scene,
    boost_event,
    boost_matrix,
    compose_velocities,
    contract,
    doppler_factor,
    lorentz_factor,
)


def test_speed_of_light_is_the_si_value():
    # SI definition of the metre (CGPM 1983): c = 299 792 458 m/s exactly.
    assert C == 299_792_458.0


def test_lorentz_factor_at_0_8_is_five_thirds():
    # physics.md check value: beta = 0.8 gives gamma = 5/3 exactly (3-4-5 triangle).
    assert lorentz_factor([0.8, 0, 0]) == pytest.approx(5 / 3, rel=1e-15)


def test_boost_of_event_matches_textbook_form():
    # t' = gamma (t - beta.x), x' = x + ((gamma-1)/b^2)(beta.x) beta - gamma beta t
    # (Jackson, Classical Electrodynamics 3rd ed., eq. 11.19); check with beta = 0.6 along x:
    # gamma = 1.25, event (ct, x) = (1, 2) -> (1.25*(1-1.2), 1.25*(2-0.6)) = (-0.25, 1.75).
    ev = boost_event([0.6, 0, 0], [1.0, 2.0, 5.0, -3.0])
    assert ev == pytest.approx([-0.25, 1.75, 5.0, -3.0], abs=1e-14)


def test_boost_preserves_interval_and_inverts():
    # The Minkowski interval is invariant under any boost (Jackson ch. 11).
    rng = np.random.default_rng(3)
    beta = np.array([0.3, -0.5, 0.6])
    ev = rng.normal(size=(50, 4))
    out = boost_event(beta, ev)
    s = -(ev[:, 0] ** 2) + np.sum(ev[:, 1:] ** 2, 1)
    s2 = -(out[:, 0] ** 2) + np.sum(out[:, 1:] ** 2, 1)
    assert s2 == pytest.approx(s, rel=1e-12, abs=1e-12)
    assert boost_matrix(-beta) @ boost_matrix(beta) == pytest.approx(np.eye(4), abs=1e-12)


def test_aberration_90_degrees_at_0_8():
    # Einstein 1905 aberration: cos th' = (cos th + b)/(1 + b cos th); th = 90 deg, b = 0.8
    # gives th' = arccos(0.8) = 36.87 deg (physics.md check value).
    d = aberrate_to_camera([0.0, 1.0, 0.0], [0.8, 0.0, 0.0])
    assert np.degrees(np.arccos(d[0])) == pytest.approx(36.869897645844, abs=1e-9)


@pytest.mark.parametrize("theta_deg", [0.0, 30.0, 90.0, 135.0, 179.0])
@pytest.mark.parametrize("beta", [0.1, 0.6, 0.95])
def test_aberration_formula_general(theta_deg, beta):
    # Einstein 1905, section 7; th measured from the direction of motion to the source.
    th = np.radians(theta_deg)
    d = np.array([np.cos(th), np.sin(th), 0.0])
    dc = aberrate_to_camera(d, [beta, 0, 0])
    expect = (np.cos(th) + beta) / (1 + beta * np.cos(th))
    assert dc[0] == pytest.approx(expect, abs=1e-12)
    assert np.linalg.norm(dc) == pytest.approx(1.0, abs=1e-12)
    assert aberrate_to_scene(dc, [beta, 0, 0]) == pytest.approx(d, abs=1e-12)


@pytest.mark.parametrize("beta,approach,recede", [(0.8, 3.0, 1 / 3), (0.6, 2.0, 0.5)])
def test_doppler_head_on_and_receding(beta, approach, recede):
    # Relativistic Doppler factor sqrt((1+b)/(1-b)) head-on (physics.md check values:
    # 0.8 -> 3 and 1/3, 0.6 -> 2 and 1/2). n is the propagation direction (emitter -> camera).
    assert doppler_factor([beta, 0, 0], [0, 0, 0], [1, 0, 0]) == pytest.approx(approach)
    assert doppler_factor([beta, 0, 0], [0, 0, 0], [-1, 0, 0]) == pytest.approx(recede)
    # the same photon seen by a camera moving towards a source at rest
    assert doppler_factor([0, 0, 0], [-beta, 0, 0], [1, 0, 0]) == pytest.approx(approach)


def test_transverse_doppler_is_one_over_gamma():
    # Light emitted perpendicular to the velocity in S: D = 1/gamma (transverse Doppler shift,
    # e.g. Rindler, Relativity: Special, General and Cosmological, 2006, sec. 4.3).
    for beta in (0.3, 0.8, 0.99):
        d = doppler_factor([beta, 0, 0], [0, 0, 0], [0, 1, 0])
        assert d == pytest.approx(np.sqrt(1 - beta**2), rel=1e-12)


@pytest.mark.parametrize("u,v", [(0.5, 0.5), (0.9, 0.9), (0.6, -0.3), (0.999, 0.5)])
def test_collinear_velocity_composition(u, v):
    # Einstein velocity addition, collinear: w = (u + v)/(1 + u v) (Rindler 2006, eq. 3.13).
    w = compose_velocities([u, 0, 0], [v, 0, 0])
    assert w[0] == pytest.approx((u + v) / (1 + u * v), rel=1e-12)
    assert w[1:] == pytest.approx([0, 0], abs=1e-15)


def test_general_composition_gamma_identity():
    # gamma_w = gamma_u gamma_v (1 + u.v) for composed velocities (Jackson eq. 11.32 family).
    u = np.array([0.4, 0.3, 0.0])
    v = np.array([0.1, -0.5, 0.6])
    w = compose_velocities(u, v)
    assert lorentz_factor(w) == pytest.approx(
        lorentz_factor(u) * lorentz_factor(v) * (1 + u @ v), rel=1e-12
    )


def test_length_contraction_along_motion_only():
    # Lorentz-FitzGerald contraction: L = L0/gamma along beta, unchanged across.
    x = contract(np.array([[1.0, 0, 0], [0, 1.0, 0]]), [0.8, 0, 0])
    assert x[0] == pytest.approx([0.6, 0, 0])
    assert x[1] == pytest.approx([0, 1.0, 0])


def test_superluminal_speed_rejected():
    with pytest.raises(ValueError, match="at or above c"):
        lorentz_factor([1.0, 0, 0])


def test_compiled_doppler_matches_reference_formula():
    # The per-pixel kernel must agree with doppler_factor (Rybicki & Lightman eq. 4.11).
    from relview.kinematics.lorentz import doppler_along

    rng = np.random.default_rng(5)
    d = rng.normal(size=(200, 3))
    d /= np.linalg.norm(d, axis=1)[:, None]
    be = rng.uniform(-0.5, 0.5, size=(200, 3))
    bc = np.array([0.2, -0.6, 0.3])
    got = doppler_along(be, d, bc)
    want = np.array([doppler_factor(be[i], bc, -d[i]) for i in range(200)])
    assert got == pytest.approx(want, rel=1e-12)
    # both go through lorentz.doppler_at; check them against the formula written out here,
    # D = gamma_cam (1 - beta_cam.n) / (gamma_emit (1 - beta_emit.n)) with n = -d
    # (Rybicki & Lightman 1979, eq. 4.11, as physics.md states it)
    n = -d
    g_cam = 1.0 / np.sqrt(1.0 - bc @ bc)
    g_emit = 1.0 / np.sqrt(1.0 - np.sum(be * be, 1))
    written_out = g_cam * (1.0 - n @ bc) / (g_emit * (1.0 - np.sum(be * n, 1)))
    assert got == pytest.approx(written_out, rel=1e-12)
    # doppler_factor broadcasts: one emitter velocity per ray and a camera velocity per ray
    bcs = rng.uniform(-0.5, 0.5, size=(200, 3))
    g_cams = 1.0 / np.sqrt(1.0 - np.sum(bcs * bcs, 1))
    per_ray = g_cams * (1.0 - np.sum(bcs * n, 1)) / (g_emit * (1.0 - np.sum(be * n, 1)))
    assert doppler_factor(be, bcs, n) == pytest.approx(per_ray, rel=1e-12)
    assert doppler_factor(be.reshape(20, 10, 3), bc, n.reshape(20, 10, 3)).shape == (20, 10)
    classical = doppler_along(be, d, bc, relativistic=False)
    assert classical == pytest.approx((1 + d @ bc) / (1 + np.sum(be * d, 1)), rel=1e-12)
