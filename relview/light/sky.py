"""Scene-frame backgrounds: what a ray that meets no body sees.

Both skies are at rest in the scene frame S and infinitely far away, so a camera
moving through S sees them aberrated, Doppler-shifted and beamed like any body:

* ``graticule``: lines of constant latitude and longitude (scene z is the pole)
  drawn on the sky sphere, glowing as a blackbody; evaluated per pixel.
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

from relview.kinematics.lorentz import aberrate_to_camera, doppler_along
from relview.light import spectrum
from relview.scene.parts import Background, Camera, Effects

T_REF_K = 1000.0
#: Rest-frame solid angle of each star's disc, steradians (about 1.1 mrad across).
STAR_SOLID_ANGLE = 1.0e-6
#: Brightness spread of the generated stars, in astronomical magnitudes (Pogson's ratio).
STAR_MAGNITUDE_RANGE = 5.0


def _reference_table() -> spectrum.DopplerTable:
    return spectrum.cached_table(("sky-blackbody", T_REF_K),
                                 lambda w: spectrum.planck_spectral_radiance(w, T_REF_K))


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
    """Whether the sky is evaluated per pixel (graticule) rather than splatted (stars) or
    absent (black)."""
    return bg.kind == "graticule"


def sky_xyz(bg: Background, d_scene: np.ndarray, beta_cam: np.ndarray,
            effects: Effects) -> np.ndarray:
    """(N, 3) observed XYZ of the per-pixel sky along S directions (towards the source)."""
    out = np.zeros((len(d_scene), 3))
    if bg.kind != "graticule" or len(d_scene) == 0:
        return out
    lat = np.degrees(np.arcsin(np.clip(d_scene[:, 2], -1.0, 1.0)))
    lon = np.degrees(np.arctan2(d_scene[:, 1], d_scene[:, 0]))
    sp = float(bg.spacing)
    half = float(bg.width) / 2.0
    dlat = np.abs(lat - sp * np.round(lat / sp))
    # angular distance to the nearest meridian shrinks with cos(latitude)
    dlon = np.abs(lon - sp * np.round(lon / sp)) * np.cos(np.radians(lat))
    on = (dlat <= half) | (dlon <= half)
    if np.any(on):
        dop = _camera_doppler(d_scene[on], beta_cam, effects)
        t = _line_temperature(bg)
        scale = float(bg.luminance) / blackbody_xyz(np.array([t]))[0, 1]  # cd/m2 at rest
        out[on] = _observed(np.full(on.sum(), t), np.full(on.sum(), scale), dop, effects)
    return out


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


def star_splat(bg: Background, camera: Camera, width: int, height: int, beta_cam: np.ndarray,
               effects: Effects, occluded: np.ndarray | None = None) -> np.ndarray | None:
    """(H, W, 3) XYZ image of the star field, or None for other backgrounds."""
    from relview.geometry import camera as cam_mod

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
