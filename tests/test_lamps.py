"""Lamps on worldlines: reading, irradiance, colour, shadows (relview.light.lamps,
relview.illumination), each check against a source outside the project."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import assert_scene_errors, camera_scene

from relview import illumination
from relview.geometry.trace import Tracer, uniform_groups
from relview.kinematics.hyperbolic import HyperbolicMotion
from relview.kinematics.uniform import UniformMotion
from relview.light.lamps import LampSpectrum, lit_table
from relview.light.materials import Reflective
from relview.renderer import render
from relview.scene.parts import Body, Effects, Lamp


def _colour():
    import colour  # slow import: only for the tests that compare with colour-science

    return colour


def grey(value: float = 0.5) -> Reflective:
    """A grey surface lit by the scene's lamps (what a ``color`` without ``lamp`` reads as)."""
    s = Reflective((value, value, value))
    s.scene_lit = True
    return s


def plate(
    name="plate",
    size=(8.0, 8.0),
    beta=(0.0, 0.0, 0.0),
    position=(0.0, 0.0, 0.0),
    surface=None,
    time=0.0,
) -> Body:
    return Body(
        name=name,
        shape="plane",
        size=np.array(size, float),
        surface=surface or grey(),
        motion=UniformMotion(
            beta=np.array(beta, float), position=np.array(position, float), time=time
        ),
    )


def point_lamp(position, power=500.0, temperature=3000.0, beta=(0.0, 0.0, 0.0), **keys) -> Lamp:
    return Lamp(
        name="lamp",
        spectrum=LampSpectrum.blackbody(temperature),
        power=power,
        motion=UniformMotion(beta=np.array(beta, float), position=np.array(position, float)),
        **keys,
    )


def luminous_efficacy_colour_science(temperature: float) -> float:
    """K = 683 lm/W * integral(B ybar) / integral(B) for a Planckian lamp (CIE 15), with
    colour-science's Planck spectrum and CIE 1931 observer; the denominator by
    Stefan-Boltzmann (integral of B_lambda over all lambda = sigma T^4 / pi)."""
    colour = _colour()
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    sd = colour.sd_blackbody(temperature, cmfs.shape)  # W/(sr m2 nm)
    w = sd.wavelengths
    ybar = cmfs.values[:, 1]
    num = np.trapezoid(sd.values * ybar, w)
    sigma = 5.670374419e-8  # W m^-2 K^-4 (CODATA 2018)
    return 683.0 * num / (sigma * temperature**4 / math.pi)


# ------------------------------------------------------------------------ reading scenes


SCENE = """
[render]
resolution = [32, 18]
[camera]
position = [0.0, -5.0, 1.0]
look_at = [0.0, 0.0, 0.0]
[[body]]
name = "floor"
shape = "plane"
size = [6.0, 6.0]
[body.surface]
color = [0.5, 0.5, 0.5]
"""


def test_lamp_sections_are_read(tmp_path):
    from relview.scene.model import load_scene

    path = tmp_path / "s.toml"
    path.write_text(
        SCENE
        + """
[[lamp]]
name = "mast"
blackbody = 3000.0
power = 500.0
radius = 0.2
[lamp.motion]
kind = "uniform"
position = [0.0, 4.0, 3.0]
beta = [0.1, 0.0, 0.0]

[[lamp]]
name = "sun"
illuminant = "D65"
direction = [0.0, -1.0, 1.0]
irradiance = 800.0
frame_beta = [0.0, 0.0, 0.0]
"""
    )
    scene = load_scene(path)
    mast, sun = scene.lamps
    assert mast.power == 500.0 and mast.radius == 0.2 and not mast.distant
    assert np.allclose(mast.motion.beta, [0.1, 0.0, 0.0])
    assert sun.distant and np.allclose(sun.direction, np.array([0, -1, 1]) / math.sqrt(2))
    assert scene.bodies[0].surface.scene_lit


@pytest.mark.parametrize(
    "extra, message",
    [
        ('name = "a"\nblackbody = 3000.0\npowr = 1.0\n', "powr"),
        (
            'name = "a"\nblackbody = 3000.0\ndirection = [0.0, 0.0, 1.0]\nirradiance = 5.0\npower = 1.0\n',
            "distant lamp",
        ),
        ('name = "a"\npower = 1.0\n', "exactly one spectrum key"),
        ('name = "a"\nblackbody = 3000.0\nblackbody_k = 1\npower = 1.0\n', "blackbody_k"),
        ('name = "a"\nblackbody = 3000.0\npower = -1.0\n', "> 0"),
    ],
)
def test_bad_lamp_keys_are_named(tmp_path, extra, message):
    from relview.errors import SceneError
    from relview.scene.model import load_scene

    path = tmp_path / "s.toml"
    path.write_text(SCENE + "[[lamp]]\n" + extra)
    with pytest.raises(SceneError, match=message) as info:
        load_scene(path)
    assert "s.toml" in str(info.value)


def test_co_moving_lamp_surfaces_ignore_scene_lamps():
    # a colour with its own lamp keeps it: the picture is the same with or without [[lamp]]
    own = Reflective((0.5, 0.4, 0.3), lamp=5800.0, luminance=100.0)
    scene = camera_scene([plate(surface=own)], position=(0.0, -5.0, 1.0), resolution=(24, 16))
    bare = render(scene)
    lit = render(scene.replace(lamps=[point_lamp((0.0, 0.0, 3.0))]))
    assert np.array_equal(bare.layers["xyz"], lit.layers["xyz"])
    assert set(bare.layers) == set(lit.layers)  # no lamp layers without lit surfaces


# ------------------------------------------------------------------- at rest: photometry


def test_lambert_and_inverse_square_at_rest():
    """Lamp and plate at rest: L_v = rho / pi * E_v with E_v = I_v cos(theta) / r^2 and
    I_v = K P / (4 pi) (Lambert's cosine law, inverse-square law; K, the luminous efficacy
    of the 3000 K Planckian lamp, per CIE 15 from colour-science's tables)."""
    rho, power, temp = 0.5, 500.0, 3000.0
    lamp_at = np.array([0.7, -0.4, 2.0])
    scene = camera_scene(
        [plate(surface=grey(rho))],
        position=(0.0, -4.0, 3.0),
        look_at=(0.0, 0.0, 0.0),
        resolution=(40, 30),
    )
    frame = render(scene.replace(lamps=[point_lamp(lamp_at, power, temp)]))
    hit = frame.layers["body"] == 0
    x = frame.layers["emit_position"][hit]
    sep = lamp_at - x
    r = np.linalg.norm(sep, axis=1)
    cos = sep[:, 2] / r
    k = luminous_efficacy_colour_science(temp)
    expected = rho / math.pi * (k * power / (4 * math.pi)) * cos / r**2
    got = frame.layers["xyz"][hit][:, 1]
    # table interpolation 1e-3 and Mallett-Yuksel grey = 0.5 to 1e-5 (measured)
    assert np.max(np.abs(got / expected - 1)) < 2e-3
    assert np.all(frame.layers["shadowed_fraction"][hit] == 0.0)
    assert np.allclose(frame.layers["incident_doppler"][hit], 1.0)


def test_distant_lamp_at_rest():
    """A distant lamp of irradiance E0 (W/m2) at 45 degrees: L_v = rho / pi * K E0 cos 45
    (Lambert; K of CIE D65 from colour-science, CIE 15)."""
    colour = _colour()
    rho, e0 = 0.4, 600.0
    sun = Lamp(
        name="sun",
        spectrum=LampSpectrum.illuminant("D65"),
        direction=np.array([0.0, 1.0, 1.0]) / math.sqrt(2),
        irradiance=e0,
    )
    scene = camera_scene([plate(surface=grey(rho))], position=(0.0, -4.0, 3.0), resolution=(20, 12))
    frame = render(scene.replace(lamps=[sun]))
    hit = frame.layers["body"] == 0
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    # colour-science's D65 table (CIE 15) inside 360-780 nm, scaled to the share of the
    # lamp's power our declared extension leaves there (ybar beyond 780 nm < 1e-4 of peak)
    d65 = colour.SDS_ILLUMINANTS["D65"]
    w = np.arange(360.0, 781.0)
    s65 = np.interp(w, d65.wavelengths, d65.values)
    share = sun.spectrum.energy_below(780.0) - sun.spectrum.energy_below(360.0)
    ybar = np.interp(w, cmfs.wavelengths, cmfs.values[:, 1])
    k = 683.0 * share * np.trapezoid(s65 * ybar, w) / np.trapezoid(s65, w)
    expected = rho / math.pi * k * e0 * math.cos(math.radians(45.0))
    assert np.allclose(frame.layers["xyz"][hit][:, 1], expected, rtol=3e-3)


# -------------------------------------------------------------- moving: double Doppler


def test_grey_body_shows_lamp_spectrum_shifted_by_d_in_times_d_out():
    """A lamp at rest lights a grey plate receding at 0.5c; the camera records the lamp's
    Planck spectrum shifted by D_in x D_out, i.e. a blackbody at D_in D_out T (Planck's
    law with L_nu / nu^3 invariant, Rybicki & Lightman ch. 4): its chromaticity from
    colour-science's Planck spectrum and CIE 1931 observer."""
    colour = _colour()
    temp = 4000.0
    wall = plate(beta=(0.0, 0.5, 0.0), position=(0.0, 3.0, 0.0), size=(30.0, 30.0))
    wall.rotation = np.array([90.0, 0.0, 0.0])  # facing the camera and the lamp (along y)
    scene = camera_scene(
        [wall], position=(0.0, -3.0, 0.0), look_at=(0.0, 10.0, 0.0), resolution=(16, 12), fov=20.0
    )
    frame = render(scene.replace(lamps=[point_lamp((0.0, -2.0, 0.5), 5e4, temp)]))
    hit = frame.layers["body"] == 0
    assert hit.sum() > 50
    d_tot = frame.layers["total_doppler"][hit]
    d_in = frame.layers["incident_doppler"][hit]
    # receding at 0.5c from a lamp behind the camera: D_in near sqrt(1/3) (head-on
    # Doppler factor sqrt((1 - b)/(1 + b)), Einstein 1905)
    assert np.all(np.abs(d_in - math.sqrt(1 / 3)) < 0.05)
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    xyz = frame.layers["xyz"][hit]
    got = xyz[:, :2] / xyz.sum(axis=1)[:, None]
    for g, dt in zip(got[::7], d_tot[::7], strict=False):
        ref = colour.XYZ_to_xy(
            colour.sd_to_XYZ(colour.sd_blackbody(temp * dt, cmfs.shape), cmfs, method="Integration")
        )
        assert np.max(np.abs(g - ref)) < 2e-3  # grey basis and 1-nm bins (measured 1e-3)


def test_lit_table_matches_its_direct_sum():
    # the table's interpolation error against the exact bin sum at random (D_in, D_out)
    table = lit_table(LampSpectrum.blackbody(3000.0))
    rng = np.random.default_rng(2)
    for span, tolerance in ((1.0, 2e-3), (1.5, 2e-2)):  # measured 9e-4 and 1.0e-2
        a = np.exp(rng.uniform(-span, span, 150))
        b = np.exp(rng.uniform(-span, span, 150))
        q = table.lookup(a, b)
        ref = np.array([table.direct(x, y) for x, y in zip(a, b, strict=True)])
        scale = np.abs(ref).max(axis=(1, 2))[:, None, None]
        assert np.max(np.abs(q - ref) / scale) < tolerance


def test_narrow_line_lamp_keeps_its_power():
    # a 0.01 nm line: the bin energies still hold all of it (C(hi) - C(lo))
    from relview.light.materials import EmissionLines

    spec = LampSpectrum.from_surface(EmissionLines([(589.0, 0.01, 1.0)]))
    assert spec.energy_below(588.5) < 1e-9 and abs(spec.energy_below(589.5) - 1) < 1e-9
    # luminous efficacy 683 ybar(589 nm) lm/W (CIE 1931 ybar from colour-science)
    ybar = _colour().MSDS_CMFS["CIE 1931 2 Degree Standard Observer"][589.0][1]
    q = lit_table(spec).direct(1.0, 1.0)
    assert abs(q.sum(axis=0)[1] / (683.0 * ybar) - 1) < 1e-3


# ------------------------------------------------------------------------- lamp events


def test_lamp_events_of_an_accelerated_lamp_match_the_retarded_solve():
    # vectorised over receiving events, against RigidKinematics.retarded one event at a time
    lamp = Lamp(
        name="l",
        spectrum=LampSpectrum.blackbody(3000.0),
        power=1.0,
        motion=HyperbolicMotion(
            acceleration=np.array([3e15, 0.0, 0.0]), position=np.array([0.0, 2.0, 1.0])
        ),
    )
    rng = np.random.default_rng(3)
    events = np.column_stack([rng.uniform(0, 10, 6), rng.uniform(-3, 3, (6, 3))])
    ev, beta = illumination.lamp_events(lamp, events, Effects())
    for e, got, b in zip(events, ev, beta, strict=True):
        ref, ref_beta = lamp.motion.retarded(np.zeros((1, 3)), e)
        assert np.allclose(got, ref[0], rtol=0, atol=1e-9)
        assert np.allclose(b, ref_beta[0], atol=1e-9)


# -------------------------------------------------------------------------- shadows


def test_shadow_of_a_moving_bar_on_a_wall_at_rest():
    """A thin bar (rest length L along x, at height h) moving at beta along x between a
    point lamp at rest at height H and a floor at rest. Closed form: the floor point
    (X, 0, 0) at time t is dark when the light ray from the lamp (0, 0, H), which crosses
    height h at x = f X (f = (H - h)/H) at time t - (1 - f) sqrt(X^2 + H^2), meets the
    bar there: |f X - beta (t - (1 - f) r)| <= L / (2 gamma) (straight light paths, the
    Lorentz-FitzGerald contraction, Einstein 1905). Edges found by scipy's brentq."""
    from scipy.optimize import brentq

    big_h, h, length, beta = 4.0, 2.0, 1.0, 0.8
    gamma = 1.0 / math.sqrt(1 - beta**2)
    bar = Body(
        name="bar",
        shape="box",
        size=np.array([length, 0.4, 1e-4]),
        surface=grey(),
        motion=UniformMotion(beta=np.array([beta, 0, 0]), position=np.array([0, 0, h])),
    )
    meshes = [(np.array(v), np.array(f)) for v, f in [_box_mesh(bar)]]
    tracer = Tracer(uniform_groups([bar], meshes, Effects()))
    lamp = point_lamp((0.0, 0.0, big_h))
    t = 1.5  # ct, m: the bar's centre is at x = 1.2 then
    xs = np.linspace(-2.0, 6.0, 16001)
    events = np.column_stack([np.full(xs.size, t), xs, np.zeros(xs.size), np.zeros(xs.size)])
    up = np.tile([0.0, 0.0, 1.0], (xs.size, 1))
    term = illumination.lamp_term(lamp, tracer, events, np.zeros((xs.size, 3)), up, Effects())
    dark = xs[term.visible == 0]
    f = (big_h - h) / big_h

    def edge(sign):
        return brentq(
            lambda x: (
                f * x - beta * (t - (1 - f) * math.hypot(x, big_h)) - sign * length / (2 * gamma)
            ),
            -5.0,
            10.0,
        )

    step = xs[1] - xs[0]
    assert abs(dark.min() - edge(-1)) < 2 * step
    assert abs(dark.max() - edge(+1)) < 2 * step
    # the shadow of the bar where it is now (no delay) would be elsewhere: it lags
    assert edge(+1) < (beta * t + length / (2 * gamma)) / f


@pytest.mark.slow  # about 10 s: snapshots on the shading points' own light cones
def test_shadow_of_an_accelerating_bar_on_a_wall_at_rest():
    """As above, with the bar on a Born-rigid hyperbolic worldline, momentarily at rest at
    x = 0 at t = 0: the point at rest-frame offset p along x follows x_p(t) = -L +
    sqrt((L + p)^2 + (ct)^2), L = c^2 / a (Rindler 2006, section 3.8: Born-rigid
    hyperbolic motion). The floor point X at ct is dark when the lamp's ray crosses height
    h at x = f X within [x_-L/2, x_+L/2] at ct - (1 - f) r; edges by scipy's brentq. The
    shadow rays meet the bar on light-cone snapshots of the shading points' own event
    clusters (illumination.RetardedOccluders): the edge error is bounded by the cluster
    spread times beta / f; the camera's snapshot (where the camera sees the bar) puts the
    shadow elsewhere."""
    from types import SimpleNamespace

    from scipy.optimize import brentq

    from relview.geometry import lightcone
    from relview.kinematics.lorentz import C

    big_h, h, length, rindler = 4.0, 2.0, 1.0, 2.0
    bar = Body(
        name="bar",
        shape="box",
        size=np.array([length, 0.4, 1e-4]),
        surface=grey(),
        motion=HyperbolicMotion(
            acceleration=np.array([C**2 / rindler, 0, 0]), position=np.array([0.0, 0.0, h])
        ),
    )
    meshes = [tuple(np.array(a) for a in _box_mesh(bar))]
    scene = SimpleNamespace(bodies=[bar])
    lamp = point_lamp((0.0, 0.0, big_h))
    t = 2.5  # ct, m: the bar's centre is at x = 1.2 m, beta = 0.78 then
    f = (big_h - h) / big_h

    def end(p, ct):
        return -rindler + math.sqrt((rindler + p) ** 2 + ct * ct)

    def edge(sign):
        return brentq(
            lambda x: f * x - end(sign * length / 2, t - (1 - f) * math.hypot(x, big_h)), -5.0, 10.0
        )

    camera = np.array([t + 6.0, 1.0, -6.0, 1.0])  # ct, x: an exposure event seeing the floor
    exposure_tracer = Tracer(lightcone.snapshot_groups(scene, meshes, [0], camera, Effects(), 1e-5))
    occluders = illumination.RetardedOccluders(
        scene,
        meshes,
        [0],
        [],
        exposure_tracer,
        camera,
        tolerance=1e-5,
        cluster_angle=2e-4,
        max_clusters=32,
    )

    def dark_edges(tracer, lo, hi, n=401):
        xs = np.linspace(lo, hi, n)
        events = np.column_stack([np.full(n, t), xs, np.zeros(n), np.zeros(n)])
        term = illumination.lamp_term(
            lamp, tracer, events, np.zeros((n, 3)), np.tile([0.0, 0.0, 1.0], (n, 1)), Effects()
        )
        return xs[term.visible == 0], xs[1] - xs[0]

    beta_max = t / math.hypot(rindler + length / 2, t)  # the front end, the fastest point
    for sign in (-1, +1):
        ref = edge(sign)
        dark, step = dark_edges(occluders, ref - 0.04, ref + 0.04)
        got = dark.min() if sign < 0 else dark.max()
        bound = 2 * step + beta_max * occluders.spread / f
        # measured: errors 2.2e-3 and 1.0e-3 m, spread 5.3e-3 m, bound 8.0e-3 m
        print(
            f"edge {sign:+d}: error {got - ref:.2e} m, spread {occluders.spread:.2e} m, "
            f"bound {bound:.2e} m"
        )
        assert abs(got - ref) <= bound, (sign, got, ref, bound)
        old, _ = dark_edges(exposure_tracer, -2.0, 6.0, 401)
        old_edge = old.min() if sign < 0 else old.max()
        assert abs(old_edge - ref) > 50 * bound  # the camera's snapshot is far off


def _box_mesh(body):
    from relview.geometry.shapes import mesh_data

    md = mesh_data(body)
    return md.vertices, md.faces


def test_direct_lighting_at_rest_matches_a_classical_ray_tracer():
    """beta = 0 everywhere: each pixel's luminance equals a classical direct-lighting
    computation: first hits and shadow rays by trimesh's ray queries, Lambert's law
    rho/pi E with E = K P cos / (4 pi r^2) (K from colour-science per CIE 15)."""
    import trimesh

    from relview.geometry import camera as cam_mod

    rho, power, temp = 0.6, 2000.0, 3500.0
    floor = plate(size=(10.0, 10.0), surface=grey(rho))
    cube = Body(
        name="cube",
        shape="box",
        size=np.array([1.0, 1.0, 1.0]),
        surface=grey(rho),
        motion=UniformMotion(position=np.array([0.3, 0.5, 0.5])),
    )
    lamp_at = np.array([-1.5, -0.5, 3.0])
    scene = camera_scene(
        [floor, cube], position=(2.0, -5.0, 3.0), look_at=(0.0, 0.5, 0.3), resolution=(64, 40)
    )
    frame = render(scene.replace(lamps=[point_lamp(lamp_at, power, temp)]))
    meshes = []
    for b in (floor, cube):
        v, f = _box_mesh(b)
        meshes.append(trimesh.Trimesh(v + b.motion.position, f, process=False))
    world = trimesh.util.concatenate(meshes)
    w, h = scene.render.resolution
    d, _ = cam_mod.scene_directions(scene.camera, w, h, cam_mod.pixel_grid(w, h), None)
    origin = np.tile(scene.camera.position, (len(d), 1))
    loc, ray, tri = world.ray.intersects_location(origin, d, multiple_hits=False)
    x = loc
    normal = world.face_normals[tri]
    normal *= np.where(np.sum(normal * d[ray], axis=1) > 0, -1.0, 1.0)[:, None]
    sep = lamp_at - x
    r = np.linalg.norm(sep, axis=1)
    cos = np.maximum(np.sum(normal * sep, axis=1) / r, 0.0)
    start = x + 1e-5 * normal  # off the surface, on the lit side (common practice)
    blocked = np.zeros(len(x), bool)
    s_loc, s_ray, _ = world.ray.intersects_location(start, sep / r[:, None], multiple_hits=False)
    blocked[s_ray] = np.linalg.norm(s_loc - start[s_ray], axis=1) < r[s_ray]
    k = luminous_efficacy_colour_science(temp)
    expected = np.zeros(len(d))
    expected[ray] = rho / math.pi * k * power * cos * ~blocked / (4 * math.pi * r**2)
    got = frame.layers["xyz"].reshape(-1, 3)[:, 1]
    close = np.isclose(got, expected, rtol=3e-3, atol=1e-9 * expected.max())
    # pixels whose ray grazes an edge may differ between the two tracers (common practice)
    assert close.mean() > 0.99
    assert (frame.layers["shadowed_fraction"] == 1).sum() > 20  # the cube casts a shadow


def test_sphere_lamp_gives_a_soft_penumbra():
    bar = Body(
        name="bar",
        shape="box",
        size=np.array([0.5, 4.0, 1e-3]),
        surface=grey(),
        motion=UniformMotion(position=np.array([0.0, 0.0, 1.0])),
    )
    tracer = Tracer(uniform_groups([bar], [_box_mesh(bar)], Effects()))
    lamp = point_lamp((0.0, 0.0, 3.0), radius=0.3, shadow_samples=64)
    xs = np.linspace(-1.5, 1.5, 301)
    events = np.column_stack([np.zeros(xs.size), xs, np.zeros(xs.size), np.zeros(xs.size)])
    term = illumination.lamp_term(
        lamp,
        tracer,
        events,
        np.zeros((xs.size, 3)),
        np.tile([0.0, 0.0, 1.0], (xs.size, 1)),
        Effects(delay=False),
    )
    v = term.visible
    assert v[np.abs(xs) < 0.1].max() == 0.0 and v[np.abs(xs) > 1.0].min() == 1.0
    partial = (v > 0) & (v < 1)
    # penumbra between the umbra and full light, by similar triangles (lamp radius 0.3,
    # lamp height 3, bar at 1): edges at x = 0.25 * 1.5 -/+ 0.3 * 0.5
    assert partial.any()
    assert np.all(np.abs(np.abs(xs[partial]) - 0.375) <= 0.15 + 0.011)


# ------------------------------------------------------------------ the probe's lamp rows


def test_probe_reports_each_lamps_event_direction_doppler_and_shadow():
    """A plate point probed under a lamp at rest: the lamp event is r/c before the point's
    emission event (light at c in S), and for a plate moving at beta along x the light
    arrives with D_in = gamma (1 - beta cos theta) (Einstein 1905, section 7, the
    Doppler principle for an observer moving at angle theta to the light) from the
    rest-frame angle cos theta' = (cos theta - beta) / (1 - beta cos theta) (section 7,
    aberration); a box between them puts the point in shadow."""
    from relview.kinematics.lorentz import C
    from relview.probes import probe

    beta = 0.5
    lamp_at = np.array([-3.0, 0.0, 4.0])
    moving = plate(beta=(beta, 0.0, 0.0), size=(200.0, 200.0))
    scene = camera_scene([moving], position=(0.0, -5.0, 3.0), resolution=(32, 18))
    scene = scene.replace(lamps=[point_lamp(lamp_at)])
    r = probe(scene, "plate", (0.0, 0.0, 0.0))
    (seen,) = r.lamps
    event = np.array(r.emit_position)
    sep = event - lamp_at
    dist = np.linalg.norm(sep)
    assert abs((r.emit_time - seen.event_time) * C / dist - 1.0) < 1e-9
    assert np.allclose(seen.event_position, lamp_at, atol=1e-9)
    cos = sep[0] / dist  # the light's propagation against the plate's motion
    gamma = 1.0 / math.sqrt(1.0 - beta**2)
    assert abs(seen.doppler_in - gamma * (1.0 - beta * cos)) < 1e-12
    assert abs(seen.direction_rest[0] - (cos - beta) / (1.0 - beta * cos)) < 1e-12
    assert seen.lit and seen.lit_fraction == 1.0
    # a box at rest across the light path (halfway, where the path is then)
    mid = 0.5 * (lamp_at + event)
    box = Body(
        name="box",
        shape="box",
        size=np.array([0.6, 0.6, 0.6]),
        surface=grey(),
        motion=UniformMotion(position=mid),
    )
    shaded = probe(scene.replace(bodies=[moving, box]), "plate", (0.0, 0.0, 0.0))
    assert not shaded.lamps[0].lit and shaded.lamps[0].lit_fraction == 0.0


def test_probe_shadow_of_an_accelerating_bar_uses_the_points_own_light_cone():
    """``relview probe`` on a floor at rest under a point lamp, shadowed by a bar on a
    Born-rigid hyperbolic worldline (x_p(t) = -L + sqrt((L + p)^2 + (ct)^2), L = c^2/a;
    Rindler 2006, section 3.8). The floor point X, whose light leaves it at
    ct_E = ct_cam - |x_cam - X| towards the camera, is dark when the lamp's ray crosses the
    bar's height h at x = f X inside [x_-L/2, x_+L/2] at ct_E - (1 - f) r (straight light
    paths); its edges by scipy's brentq. The probe's edges, found by bisecting its ``lit``
    answer, must agree to the bar's light-cone snapshot error (PROBE_TOLERANCE rad seen
    from E, 2 m away) over f; the camera's own light-cone snapshot of the bar (where the
    camera sees it) would put the shadow elsewhere."""
    from scipy.optimize import brentq

    from relview.kinematics.lorentz import C
    from relview.probes import PROBE_TOLERANCE, probe_many
    from relview.renderer import RenderContext, camera_state

    big_h, h, length, rindler = 4.0, 2.0, 1.0, 2.0
    bar = Body(
        name="bar",
        shape="box",
        size=np.array([length, 0.4, 1e-4]),
        surface=grey(),
        motion=HyperbolicMotion(
            acceleration=np.array([C**2 / rindler, 0, 0]), position=np.array([0.0, 0.0, h])
        ),
    )
    cam = np.array([1.0, -6.0, 1.0])
    ct_cam = 8.6  # m
    scene = camera_scene(
        [plate(size=(30.0, 30.0)), bar],
        position=tuple(cam),
        look_at=(1.0, 0.0, 0.0),
        time=ct_cam / C,
        resolution=(32, 18),
    ).replace(lamps=[point_lamp((0.0, 0.0, big_h))])
    f = (big_h - h) / big_h

    def end(p, ct):
        return -rindler + math.sqrt((rindler + p) ** 2 + ct * ct)

    def ct_emit(x):
        return ct_cam - math.dist(cam, (x, 0.0, 0.0))

    def edge(sign):
        return brentq(
            lambda x: f * x - end(sign * length / 2, ct_emit(x) - (1 - f) * math.hypot(x, big_h)),
            -2.0,
            5.0,
        )

    context = RenderContext(scene)

    def lit(x):
        return probe_many(scene, "plate", [(x, 0.0, 0.0)], context=context)[0].lamps[0].lit

    for sign in (-1, +1):
        ref = edge(sign)
        dark, light = ref - 0.05 * sign, ref + 0.05 * sign
        assert not lit(dark) and lit(light)
        for _ in range(14):  # bisection to 0.1 m / 2^14 = 6e-6 m
            mid = 0.5 * (dark + light)
            if lit(mid):
                light = mid
            else:
                dark = mid
        got = 0.5 * (dark + light)
        bound = 2.0 * PROBE_TOLERANCE * (1 - f) * math.hypot(ref, big_h) / f + abs(dark - light)
        # measured: errors -4.0e-5 and +9.2e-6 m, bound 8.3e-4 m
        print(f"edge {sign:+d}: error {got - ref:.2e} m, bound {bound:.2e} m")
        assert abs(got - ref) <= bound, (sign, got, ref, bound)
    # the camera's snapshot of the bar (seen from the exposure event) lights the middle of
    # the true shadow: what the probe reported before it cast on the point's own light cone
    mid = 0.5 * (edge(-1) + edge(+1))
    (inside,) = probe_many(scene, "plate", [(mid, 0.0, 0.0)], context=context)
    assert not inside.lamps[0].lit
    event, _ = camera_state(scene, scene.camera.time)
    reference = (scene.camera.time, event[1:])
    camera_tracer = context.tracer(event, reference, tolerance=PROBE_TOLERANCE)
    emit = np.concatenate([[inside.emit_time * C], inside.emit_position])
    (old,) = illumination.lamp_sightings(
        scene.lamps, camera_tracer, emit, np.zeros(3), Effects(), reference
    )
    assert old.lit


def test_probe_command_prints_the_lamp_rows(tmp_path, capsys):
    from relview.cli.app import main

    path = tmp_path / "s.toml"
    path.write_text(
        SCENE + '[[lamp]]\nname = "mast"\nblackbody = 3000.0\npower = 500.0\n'
        "[lamp.motion]\nposition = [0.0, 1.0, 3.0]\n"
    )
    assert main(["probe", str(path), "--body", "floor", "--point", "0,0,0"]) == 0
    out = capsys.readouterr().out
    assert "lamp mast: D_in" in out and "lamp mast: lit" in out and "yes" in out


# --------------------------------------------------------------------- sphere lamps seen


SPHERE_LAMP = """
[[lamp]]
name = "globe"
blackbody = {temperature}
power = 2000.0
radius = 0.5
[lamp.motion]
kind = "uniform"
position = [0.0, 0.0, 1.2]
beta = [0.0, {beta}, 0.0]
"""


@pytest.mark.parametrize("beta", [0.0, -0.4])
def test_sphere_lamp_is_seen_as_a_glowing_sphere_of_its_power(beta):
    """A sphere lamp (P, R, blackbody T) is drawn as a sphere of radiance L = P / (4 pi^2
    R^2) (Lambertian sphere: exitance pi L over 4 pi R^2; Rybicki & Lightman 1979, section
    1.3, from memory). Each of its pixels records 683 lm/W L p(lambda) shifted by the
    pixel's D: L pi / (sigma T^4) times Planck's law at D T (the spectral Doppler rule
    L_obs(lambda) = D^5 L(D lambda) of a Planckian), integrated with the CIE 1931
    observer; Planck's law and the observer from colour-science, sigma CODATA 2018. At
    rest, Y = K(T) L with K colour-science's luminous efficacy (CIE 15). The floor below
    stays lit: the lamp's sphere does not shadow its own light."""
    colour = _colour()
    import tomllib

    from relview.scene.model import Scene

    temperature, power, radius = 3000.0, 2000.0, 0.5
    data = tomllib.loads(SCENE + SPHERE_LAMP.format(temperature=temperature, beta=beta))
    data["render"]["resolution"] = [48, 27]
    data["camera"]["look_at"] = [0.0, 0.0, 1.2]
    scene = Scene.from_dict(data)
    assert [b.name for b in scene.bodies] == ["floor", "(lamp globe)"]
    frame = render(scene)
    glow = frame.layers["body"] == 1
    assert glow.sum() > 10
    radiance = power / (4.0 * math.pi**2 * radius**2)
    xyz = frame.layers["xyz"][glow]
    doppler = frame.layers["doppler"][glow]
    sigma = 5.670374419e-8  # W m^-2 K^-4 (CODATA 2018)
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    worst_xy = worst_y = 0.0
    for i in range(0, len(xyz), max(1, len(xyz) // 10)):
        sd = colour.sd_blackbody(temperature * doppler[i], cmfs.shape)  # W/(sr m2 nm)
        ref = (
            683.0
            * radiance
            * math.pi
            / (sigma * temperature**4)
            * colour.sd_to_XYZ(sd, cmfs, method="Integration", k=1.0)
        )
        worst_xy = max(worst_xy, np.max(np.abs(xyz[i, :2] / xyz[i].sum() - ref[:2] / ref.sum())))
        worst_y = max(worst_y, abs(xyz[i, 1] / ref[1] - 1.0))
    if beta == 0.0:
        assert np.allclose(doppler, 1.0, atol=1e-12)
        k = luminous_efficacy_colour_science(temperature)
        assert np.allclose(xyz[:, 1], k * radiance, rtol=3e-3)
    else:
        assert doppler.min() > 1.2  # coming towards the camera: blue-shifted and brighter
    # measured: xy 3.4e-6 and Y 1.4e-4 at rest, xy 1.0e-6 and Y 3.2e-5 at beta = -0.4
    # (the blackbody Doppler table's interpolation)
    print(f"beta {beta}: worst xy {worst_xy:.1e}, worst Y {worst_y:.1e}")
    assert worst_xy < 1e-3
    assert worst_y < 3e-3
    floor = frame.layers["body"] == 0
    assert np.nanmax(frame.layers["shadowed_fraction"][floor]) == 0.0


# ------------------------------------------------------------------------ glossy lobe


@pytest.mark.parametrize("exponent", [10.0, 100.0])
def test_glossy_lobe_conserves_energy(exponent):
    """The modified Phong lobe (n + 2)/(2 pi) cos^n alpha (Lafortune & Willems 1994,
    KU Leuven report CW 197): its directional albedo, integral f cos(theta_o) d omega over
    the outgoing hemisphere by scipy's dblquad, is 1 at normal incidence (their
    normalisation) and below 1 at oblique incidence (part of the lobe under the horizon)."""
    from scipy.integrate import dblquad

    from relview.light.lamps import glossy_lobe

    def albedo(theta_i):
        mirror = np.array([math.sin(theta_i), 0.0, math.cos(theta_i)])  # reflected direction

        def integrand(theta, phi):
            o = np.array(
                [math.sin(theta) * math.cos(phi), math.sin(theta) * math.sin(phi), math.cos(theta)]
            )
            f = glossy_lobe(np.array([o @ mirror]), exponent)[0]
            return f * math.cos(theta) * math.sin(theta)

        return dblquad(integrand, 0.0, 2 * math.pi, 0.0, math.pi / 2, epsabs=1e-10)[0]

    assert abs(albedo(0.0) - 1.0) < 1e-6
    assert 0.3 < albedo(math.radians(60.0)) < 1.0


def glossy(value: float, gloss: float, exponent: float) -> Reflective:
    s = grey(value)
    s.gloss, s.gloss_exponent = gloss, exponent
    return s


def test_glossy_plate_at_rest_matches_lambert_plus_the_lobe():
    """beta = 0: each pixel of a glossy grey plate under a point lamp records
    L_v = E_v [(1 - g) rho / pi + g (n + 2)/(2 pi) cos^n alpha], E_v = K P cos(theta) /
    (4 pi r^2) (inverse square and Lambert's cosine law; K from colour-science per CIE
    15), alpha between the direction to the camera and the mirror direction of the
    lamp's light (Lafortune & Willems 1994), all from the rendered hit positions."""
    rho, g, n, power, temp = 0.5, 0.4, 20.0, 3000.0, 3500.0
    lamp_at = np.array([-2.0, 0.0, 3.0])
    camera = np.array([3.0, 0.0, 3.0])
    scene = camera_scene(
        [plate(size=(6.0, 6.0), surface=glossy(rho, g, n))],
        position=tuple(camera),
        look_at=(0.5, 0.0, 0.0),
        resolution=(48, 27),
        fov=50.0,
    ).replace(lamps=[point_lamp(lamp_at, power, temp)])
    frame = render(scene)
    on = frame.layers["body"] == 0
    x = frame.layers["emit_position"][on]
    sep = lamp_at - x
    r = np.linalg.norm(sep, axis=1)
    cos_i = sep[:, 2] / r
    mirrored = -sep / r[:, None] * np.array([1.0, 1.0, -1.0])  # k reflected about z
    out = camera - x
    out /= np.linalg.norm(out, axis=1)[:, None]
    cos_a = np.maximum(np.sum(mirrored * out, axis=1), 0.0)
    e_v = luminous_efficacy_colour_science(temp) * power * cos_i / (4 * math.pi * r**2)
    expected = e_v * ((1 - g) * rho / math.pi + g * (n + 2) / (2 * math.pi) * cos_a**n)
    got = frame.layers["xyz"][on][:, 1]
    err = np.abs(got / expected - 1.0)
    print(f"worst {err.max():.1e}, highlight/diffuse {expected.max() / expected.min():.1f}")
    # measured: worst 1.1e-4 (the lamp colour table against colour-science's K)
    assert err.max() < 3e-3
    assert cos_a.max() > 0.999  # the highlight is in the picture


@pytest.mark.parametrize("beta, axis", [(0.6, (1.0, 0.0, 0.0)), (0.4, (0.0, 0.0, 1.0))])
def test_glossy_highlight_of_a_moving_plate_follows_the_rest_frame_reflection(beta, axis):
    """A white glossy plate moving at beta (along itself, or along its normal) under a
    lamp at rest, camera at rest: the Lambert part and the neutral lobe have the same
    spectrum and Doppler factors, so glossy / matte = (1 - g) + g (n + 2)/2 cos^n alpha',
    alpha' between the rest-frame direction towards the camera and the mirror direction
    of the incident light there, each from its S direction by Einstein's aberration
    (1905, section 7): k'_par = (k_par - beta)/(1 - beta k_par), k'_perp = k_perp /
    (gamma (1 - beta k_par)). Moving along its normal, the highlight leaves the place
    the law of reflection in S would give (Einstein 1905, section 8)."""
    g, n = 0.5, 30.0
    gamma = 1.0 / math.sqrt(1 - beta**2)
    e = np.array(axis)
    lamp_at = np.array([-2.0, 0.0, 3.0])
    camera = np.array([3.0, 0.0, 3.0])

    def frame(surface):
        scene = camera_scene(
            [plate(size=(200.0, 6.0), beta=tuple(beta * e), surface=surface)],
            position=tuple(camera),
            look_at=(0.0, 0.0, -1.0),
            resolution=(48, 27),
            fov=90.0,
        ).replace(lamps=[point_lamp(lamp_at, 3000.0, 4000.0)])
        return render(scene)

    shiny, matte = frame(glossy(1.0, g, n)), frame(grey(1.0))
    on = (matte.layers["body"] == 0) & (matte.layers["xyz"][..., 1] > 0)
    x = matte.layers["emit_position"][on]

    def rest(k):
        par = k @ e
        denom = 1.0 - beta * par
        perp = k - par[:, None] * e
        return ((par - beta) / denom)[:, None] * e + perp / (gamma * denom)[:, None]

    k_in = x - lamp_at  # from the lamp at rest: its position at any time
    k_in /= np.linalg.norm(k_in, axis=1)[:, None]
    k_out = camera - x
    k_out /= np.linalg.norm(k_out, axis=1)[:, None]
    flip = np.array([1.0, 1.0, -1.0])  # reflection about the plate's normal, z
    cos_a = np.maximum(np.sum(rest(k_in) * flip * rest(k_out), axis=1), 0.0)
    expected = (1 - g) + g * (n + 2) / 2 * cos_a**n
    got = shiny.layers["xyz"][on][:, 1] / matte.layers["xyz"][on][:, 1]
    err = np.abs(got / expected - 1.0)
    # the same lobe with the angles measured in S: what the check tells apart
    cos_s = np.maximum(np.sum(k_in * flip * k_out, axis=1), 0.0)
    s_frame = (1 - g) + g * (n + 2) / 2 * cos_s**n
    print(f"worst {err.max():.1e}; S-frame lobe off by {np.max(np.abs(s_frame / got - 1)):.2f}")
    # measured: worst 2.1e-15 and 1.8e-14 (rounding); the S-frame lobe off by 1.06 and 8.33
    assert err.max() < 1e-9
    assert np.max(np.abs(s_frame / got - 1)) > 0.1
    assert cos_a.max() > 0.99  # the rest-frame highlight is in the picture


def test_gloss_keys_are_read_and_checked(tmp_path):
    from relview.scene.model import load_scene

    path = tmp_path / "g.toml"
    path.write_text(SCENE + "gloss = 0.3\ngloss_exponent = 80.0\n")
    surface = load_scene(path).bodies[0].surface
    assert (surface.gloss, surface.gloss_exponent) == (0.3, 80.0)
    assert_scene_errors(
        path,
        SCENE,
        (
            ("gloss = 1.5\n", "gloss"),
            ("gloss = 0.3\ngloss_exponent = 0.5\n", "gloss_exponent"),
            ("gloss = 0.3\nlamp = 3000.0\n", "gloss"),
            ('gloss = "high"\n', "gloss"),
        ),
    )


def test_shadow_rays_find_the_nearest_hits_of_a_full_cast():
    """Tracer.first_hits (what shadow rays ask) finds the same nearest hit, length and
    body, as Tracer.cast for rays with their own start events, bodies at rest and moving
    (a consistency check of the two entry points; their physics is checked above)."""
    moving = plate(name="moving", size=(3.0, 3.0), beta=(0.6, 0.0, 0.0), position=(0, 0, 1))
    bodies = [plate(size=(10.0, 10.0)), moving]
    meshes = [_box_mesh(b) for b in bodies]
    tracer = Tracer(uniform_groups(bodies, meshes, Effects()))
    rng = np.random.default_rng(5)
    n = 2000
    starts = np.column_stack([rng.uniform(-2, 2, n), rng.uniform(-3, 3, (n, 2)), np.full(n, 3.0)])
    d = rng.normal(size=(n, 3))
    d[:, 2] = -np.abs(d[:, 2])
    d /= np.linalg.norm(d, axis=1)[:, None]
    hits = tracer.cast(starts, d, Effects())
    l, body = tracer.first_hits(starts, d, Effects())
    assert np.array_equal(body, hits.body) and np.array_equal(l, hits.l)
    assert (body == 1).sum() > 50 and (body == 0).sum() > 50
