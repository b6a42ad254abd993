"""Scene-frame backgrounds: what a ray that meets no body sees.

Both skies are at rest in the scene frame S and infinitely far away, so a camera
moving through S sees them aberrated, Doppler-shifted and beamed like any body:

* ``graticule``: lines of constant latitude and longitude (scene z is the pole)
  drawn on the sky sphere, glowing as a blackbody; evaluated per pixel.
* ``cmb``: the cosmic microwave background, a blackbody at ``temperature`` (2.7255 K by
  default; Fixsen 2009, ApJ 707, 916) at rest in a frame F moving with ``frame_beta``
  in S (or fixed by the camera's velocity relative to F). Evaluated per pixel from the
  photon's frequency in F and in the camera frame (:func:`microwave_temperature`); the
  ``temperature`` layer holds the blackbody temperature the camera records. At 2.7 K
  it emits no visible light, so its image is black: the layer (and its false-colour
  map) is the picture.
* ``stars``: point-like blackbody stars of our own generation (seeded, uniform over
  the sphere, log-uniform temperatures, brightness spread over five astronomical
  magnitudes). Each star is a small disc of rest-frame solid angle STAR_SOLID_ANGLE
  (about a pixel of a 960-wide 60 deg view) radiating as a Planck blackbody times
  ``luminance`` (a scale factor) times 10^(-0.4 m); it is splatted into the pixel its
  aberrated direction falls in.
  Its radiance transforms with the surface rule (XYZ at D T) and its solid angle as
  1/D^2 (aberration; Rybicki & Lightman ch. 4), so its flux goes as D^2 in total
  power (D^4 radiance x D^-2 solid angle).

Blackbody colours use one Doppler table: a blackbody at T seen with factor D is a
blackbody at D T (physics.md), so XYZ_T(D) = XYZ_ref(D T / T_ref).
"""

from __future__ import annotations

import numpy as np

from relview.geometry import camera as cam_mod
from relview.kinematics.lorentz import aberrate_to_camera, compose_velocities, doppler_along
from relview.light import spectrum
from relview.light.surfaces import shifted_spectrum
from relview.scene.parts import Background, Camera, Effects

T_REF_K = 1000.0
#: Temperature of the cosmic microwave background today, K (Fixsen 2009, ApJ 707, 916).
CMB_TEMPERATURE_K = 2.7255
#: Rest-frame solid angle of each star's disc, steradians (about 1.1 mrad across).
STAR_SOLID_ANGLE = 1.0e-6
#: Brightness spread of the generated stars, in astronomical magnitudes (Pogson's ratio).
STAR_MAGNITUDE_RANGE = 5.0


def _reference_table() -> spectrum.DopplerTable:
    return spectrum.cached_table(
        ("sky-blackbody", T_REF_K), lambda w: spectrum.planck_spectral_radiance(w, T_REF_K)
    )


def blackbody_xyz(temperature_k: np.ndarray) -> np.ndarray:
    """(N,) temperatures -> (N, 3) absolute XYZ of a unit-emissivity blackbody."""
    t = np.asarray(temperature_k, float)
    return _reference_table().lookup(t / T_REF_K)


def _observed(temperature_k, scale, doppler, effects: Effects) -> np.ndarray:
    """XYZ of blackbodies (Planck radiance x ``scale``) seen with factor D."""
    t = np.asarray(temperature_k, float)
    scale = np.asarray(scale, float)
    dc, bright = spectrum.effect_factors(doppler, effects.doppler, effects.beaming)
    return blackbody_xyz(t * dc) * (scale * bright)[..., None]


def _camera_doppler(d_scene: np.ndarray, beta_cam: np.ndarray, effects: Effects) -> np.ndarray:
    """D of light from a source at rest in S, seen along d (towards the source)."""
    return doppler_along(np.zeros(3), d_scene, beta_cam, relativistic=effects.contraction)


def _line_temperature(bg: Background) -> float:
    t = np.atleast_1d(np.asarray(bg.temperature, float))
    return float(np.sqrt(t.min() * t.max()))


def per_pixel(bg: Background) -> bool:
    """Whether the sky is evaluated per pixel (graticule, cmb) rather than splatted (stars)
    or absent (black)."""
    return bg.kind in ("graticule", "cmb")


def microwave_frame_beta(bg: Background, beta_cam: np.ndarray) -> np.ndarray:
    """Velocity / c in S of the frame the microwave sky is at rest in, at an exposure where
    the camera moves with ``beta_cam``: ``frame_beta``, or, when the scene gives the
    camera's velocity u relative to that frame, the velocity of a frame moving at -u
    relative to the camera (relativistic composition; u taken along the camera frame's
    axes, which are the scene axes boosted)."""
    if bg.camera_velocity is None:
        return np.asarray(bg.frame_beta, float)
    return compose_velocities(np.asarray(beta_cam, float), -np.asarray(bg.camera_velocity, float))


def _received_doppler(
    d_scene: np.ndarray, beta_receiver: np.ndarray, relativistic: bool
) -> np.ndarray:
    """(N,) D of light from sources at rest in S arriving along S directions d (N,3)
    (towards the source) at receivers moving with beta (N,3) or (3,): gamma (1 + beta.d)
    (the Doppler factor of physics.md with n = -d; no gamma with ``relativistic`` off)."""
    beta = np.broadcast_to(np.asarray(beta_receiver, float), d_scene.shape)
    bd = np.sum(beta * d_scene, axis=1)
    if not relativistic:
        return 1.0 + bd
    return (1.0 + bd) / np.sqrt(1.0 - np.sum(beta * beta, axis=1))


def microwave_temperature(
    bg: Background,
    d_scene: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
    beta_receiver: np.ndarray | None = None,
    further: np.ndarray | None = None,
) -> np.ndarray:
    """(N,) blackbody temperature (K) the camera records along S directions d (towards the
    source) of a sky at rest in frame F.

    A photon arriving along d has, per unit frequency in S, the frequency
    gamma_c (1 + beta_c.d) in the camera frame and gamma_f (1 + beta_f.d) in F (the
    Doppler factor of physics.md, n = -d), so the camera sees the blackbody at
    T = T0 D_cam / D_F: for a camera at rest in S and F moving at -u,
    T = T0 / (gamma (1 - u.d)), the dipole T0 / (gamma (1 - beta cos theta)) (e.g. Peebles
    & Wilkinson 1968, Phys. Rev. 174, 2168). ``doppler`` off: T0 everywhere; ``contraction``
    off: the classical factors (no gammas), as for bodies.

    Seen in a mirror: ``beta_receiver`` (N,3) is the velocity of the mirror that receives
    the light along d (default: the camera), and ``further`` (N,) the Doppler factor of
    the remaining legs to the camera (the mirror's D_out): T = T0 D_receiver / D_F x
    further. F itself is fixed by the camera's velocity ``beta_cam`` at the exposure.
    """
    t0 = float(np.asarray(bg.temperature, float).max())
    n = len(d_scene)
    if not effects.doppler:
        return np.full(n, t0)
    rel = bool(effects.contraction)
    receiver = beta_cam if beta_receiver is None else beta_receiver
    d_rec = _received_doppler(d_scene, receiver, rel)
    d_frame = _received_doppler(d_scene, microwave_frame_beta(bg, beta_cam), rel)
    t = t0 * d_rec / d_frame
    return t if further is None else t * further


def sky_xyz(
    bg: Background, d_scene: np.ndarray, beta_cam: np.ndarray, effects: Effects
) -> np.ndarray:
    """(N, 3) observed XYZ of the per-pixel sky along S directions (towards the source)."""
    return seen_along(bg, d_scene, beta_cam, effects)


def seen_along(
    bg: Background,
    d_scene: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
    beta_receiver: np.ndarray | None = None,
    further: np.ndarray | None = None,
) -> np.ndarray:
    """(N, 3) observed XYZ of the per-pixel sky (graticule, microwave sky) along each ray's
    own S direction d (N,3) (towards the source): the per-ray entry point, for rays that
    leave a mirror as well as camera rays.

    The sky's light arrives along d at a receiver moving with ``beta_receiver`` (N,3)
    (default: the camera, ``beta_cam``) with D_rec = nu_receiver / nu_sky-frame, and is
    shifted again by ``further`` (N,) (default 1; a mirror's D_out towards the camera): a
    blackbody sky is seen as a blackbody at T D_rec further (I_nu / nu^3 invariant along
    each leg, Rybicki & Lightman eq. 4.97; in the mirror's rest frame reflection keeps the
    frequency), which for a mirror moving along its normal is Einstein's (1905, section 8)
    T nu_r / nu_i. The caller multiplies by the mirror's reflectance.
    """
    out = np.zeros((len(d_scene), 3))
    rows, temperature, scale, dop = _sources_along(
        bg, d_scene, beta_cam, effects, beta_receiver, further
    )
    if len(rows):
        out[rows] = _observed(temperature, scale, dop, effects)
    return out


def spectrum_along(
    bg: Background,
    wavelength_nm: np.ndarray,
    d_scene: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
    beta_receiver: np.ndarray | None = None,
    further: np.ndarray | None = None,
) -> np.ndarray:
    """(N, L) spectral radiance (W/(sr m^2 nm)) recorded at ``wavelength_nm`` (L,) of what
    :func:`seen_along` shows: Planck's law at T, times the sky's scale, seen with D
    (D^5 B(D lambda, T) = B(lambda, D T)), for tinted mirrors."""
    out = np.zeros((len(d_scene), len(wavelength_nm)))
    rows, temperature, scale, dop = _sources_along(
        bg, d_scene, beta_cam, effects, beta_receiver, further
    )
    if len(rows):
        out[rows] = scale[:, None] * shifted_spectrum(
            lambda w: spectrum.planck_spectral_radiance(w, temperature[:, None]),
            wavelength_nm,
            dop,
            effects,
        )
    return out


def _sources_along(bg, d_scene, beta_cam, effects, beta_receiver=None, further=None):
    """(rows (M,) that see the sky's light, their blackbody temperatures K (M,), radiance
    scales (M,), Doppler factors (M,) camera / sky frame) along the rays of
    :func:`seen_along`."""
    none = np.zeros(0, np.int64), np.zeros(0), np.zeros(0), np.zeros(0)
    if len(d_scene) == 0:
        return none
    receiver = beta_cam if beta_receiver is None else beta_receiver
    rel = bool(effects.contraction)
    if bg.kind == "cmb":
        # a blackbody at T0 seen at T is exactly a blackbody at T (I_nu / nu^3 invariant,
        # Rybicki & Lightman eq. 4.97); beaming off keeps the rest-frame brightness
        t = microwave_temperature(bg, d_scene, beta_cam, effects, receiver, further)
        t0 = float(np.asarray(bg.temperature, float).max())
        n = len(d_scene)
        return np.arange(n), np.full(n, t0), np.ones(n), t / t0
    if bg.kind == "stars":
        rows, star = stars_hit(bg, d_scene)
        rec = np.broadcast_to(np.asarray(receiver, float), d_scene.shape)[rows]
        dop = _received_doppler(d_scene[rows], rec, rel)
        if further is not None:
            dop = dop * np.asarray(further, float)[rows]
        _, temps, lum = _star_field(bg)
        return rows, temps[star], lum[star], dop
    if bg.kind != "graticule":
        return none
    lat = np.degrees(np.arcsin(np.clip(d_scene[:, 2], -1.0, 1.0)))
    lon = np.degrees(np.arctan2(d_scene[:, 1], d_scene[:, 0]))
    sp = float(bg.spacing)
    half = float(bg.width) / 2.0
    dlat = np.abs(lat - sp * np.round(lat / sp))
    # angular distance to the nearest meridian shrinks with cos(latitude)
    dlon = np.abs(lon - sp * np.round(lon / sp)) * np.cos(np.radians(lat))
    rows = np.nonzero((dlat <= half) | (dlon <= half))[0]
    rec = np.broadcast_to(np.asarray(receiver, float), d_scene.shape)[rows]
    dop = _received_doppler(d_scene[rows], rec, rel)
    if further is not None:
        dop = dop * np.asarray(further, float)[rows]
    t = _line_temperature(bg)
    scale = float(bg.luminance) / blackbody_xyz(np.array([t]))[0, 1]  # cd/m2 at rest
    return rows, np.full(len(rows), t), np.full(len(rows), scale), dop


def seen_in_mirrors(bg: Background) -> bool:
    """Whether rays leaving a mirror can see this sky (every kind but black)."""
    return bg.kind in ("graticule", "cmb", "stars")


#: the star fields generated so far: (seed, count, temperatures, luminance) ->
#: (a k-d tree of their directions, temperatures, radiance scales)
_STAR_FIELDS: dict = {}


def _star_field(bg: Background):
    key = (int(bg.seed), int(bg.count), tuple(np.atleast_1d(bg.temperature)), float(bg.luminance))
    field = _STAR_FIELDS.get(key)
    if field is None:
        from scipy.spatial import cKDTree  # scipy's spatial index: only for stars in mirrors

        dirs, temps, lum = generate_stars(bg)
        if len(_STAR_FIELDS) >= 8:
            _STAR_FIELDS.pop(next(iter(_STAR_FIELDS)))
        field = _STAR_FIELDS[key] = (cKDTree(dirs), temps, lum)
    return field


def stars_hit(bg: Background, d_scene: np.ndarray):
    """(rows (M,), star index (M,)): the rays whose S direction d (N,3) falls inside a
    star's disc, a cap of rest-frame solid angle STAR_SOLID_ANGLE = 2 pi (1 - cos r)
    around its direction (the stars' own definition above): point samples of the discs,
    for rays that leave mirrors (the camera's own view splats the stars instead)."""
    tree, _, _ = _star_field(bg)
    radius = np.arccos(1.0 - STAR_SOLID_ANGLE / (2.0 * np.pi))
    chord, idx = tree.query(d_scene, k=1, distance_upper_bound=2.0 * np.sin(radius / 2.0))
    rows = np.nonzero(np.isfinite(chord))[0]
    return rows, idx[rows]


def generate_stars(bg: Background):
    """(directions (N,3) unit in S, temperatures (N,) K, radiance scale (N,) of Planck's)."""
    rng = np.random.default_rng(int(bg.seed))
    n = int(bg.count)
    z = rng.uniform(-1.0, 1.0, n)
    phi = rng.uniform(0.0, 2.0 * np.pi, n)
    s = np.sqrt(1.0 - z * z)
    dirs = np.stack([s * np.cos(phi), s * np.sin(phi), z], axis=-1)
    t = np.atleast_1d(np.asarray(bg.temperature, float))
    temps = np.exp(rng.uniform(np.log(t.min()), np.log(t.max()), n))
    mags = rng.uniform(0.0, STAR_MAGNITUDE_RANGE, n)
    scale = float(bg.luminance) * 10.0 ** (-0.4 * mags)  # Pogson: 5 magnitudes = factor 100
    return dirs, temps, scale


def star_splat(
    bg: Background,
    camera: Camera,
    width: int,
    height: int,
    beta_cam: np.ndarray,
    effects: Effects,
    occluded: np.ndarray | None = None,
) -> np.ndarray | None:
    """(H, W, 3) XYZ image of the star field, or None for other backgrounds."""
    if bg.kind != "stars":
        return None
    dirs, temps, lum = generate_stars(bg)
    beta = np.asarray(beta_cam, float)
    ab = effects.aberration and np.any(beta)
    d_cam = aberrate_to_camera(dirs, beta) if ab else dirs
    px, valid = cam_mod.directions_to_pixels(camera, width, height, d_cam)
    ix = np.floor(px[:, 0]).astype(np.int64)
    iy = np.floor(px[:, 1]).astype(np.int64)
    valid &= (ix >= 0) & (ix < width) & (iy >= 0) & (iy < height)
    if occluded is not None:
        valid[valid] &= ~occluded[iy[valid], ix[valid]]
    img = np.zeros((height, width, 3))
    if not np.any(valid):
        return img
    dop = _camera_doppler(dirs[valid], beta, effects)
    radiance = _observed(temps[valid], lum[valid], dop, effects)
    solid = STAR_SOLID_ANGLE / (dop**2 if ab else 1.0)
    pix_omega = cam_mod.pixel_solid_angle(camera, width, height)[iy[valid], ix[valid]]
    np.add.at(img, (iy[valid], ix[valid]), radiance * (solid / pix_omega)[:, None])
    return img
