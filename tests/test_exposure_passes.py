"""The compiled exposure passes give exactly the numbers of the numpy formulations they
replace (the formulations are the reference here; their physics is checked in
tests/test_film.py and tests/test_metering.py)."""

from __future__ import annotations

import numpy as np

from relview.imaging import exposure
from relview.imaging.exposure_passes import (
    any_channel_above,
    clipped_counts,
    expose_rows,
    metered_values,
)
from relview.light.spectrum import xyz_to_linear_srgb


def _image(seed=2, shape=(37, 53)):
    rng = np.random.default_rng(seed)
    xyz = rng.lognormal(2.0, 2.0, shape + (3,)) * rng.choice([0.0, 1.0, -1.0], shape + (3,))
    xyz[0, 0] = np.nan
    xyz[1, 1, 2] = np.inf
    return xyz


def test_any_channel_above_is_numpy_any():
    xyz = _image()
    for level in (0.0, 1.0 + 1e-9, 50.0):
        assert np.array_equal(any_channel_above(xyz, level), np.any(xyz > level, axis=-1))


def test_metered_values_are_the_gathered_pixels_in_order():
    xyz = _image()
    mask = np.any(xyz > 0, axis=-1) & (np.arange(xyz.shape[1]) % 3 != 0)
    y, peak = metered_values(xyz, mask)
    sel = xyz[mask]
    assert np.array_equal(y, sel[:, 1], equal_nan=True)
    want = xyz_to_linear_srgb(sel).max(axis=-1, initial=-np.inf)
    assert np.array_equal(peak, want, equal_nan=True)
    assert metered_values(xyz, np.zeros(mask.shape, bool))[0].shape == (0,)


def test_expose_and_clipped_fraction_match_numpy():
    xyz = np.abs(_image(seed=4))
    white = 37.5
    image = exposure.expose(xyz, white)
    assert np.array_equal(image, xyz_to_linear_srgb(xyz / white), equal_nan=True)
    assert np.array_equal(expose_rows(xyz, white), image, equal_nan=True)
    over = np.any(image > 1.0 + exposure.CLIP_TOLERANCE, axis=-1)
    mask = np.any(image > 0, axis=-1) & (np.arange(image.shape[0])[:, None] % 2 == 0)
    assert exposure.clipped_fraction(image, mask) == float(over[mask].mean())
    assert exposure.clipped_fraction(image) == float(over.mean())
    assert exposure.clipped_fraction(image, np.zeros(mask.shape, bool)) == 0.0
    assert clipped_counts(image, mask, 1.0 + exposure.CLIP_TOLERANCE) == (
        int(mask.sum()),
        int(over[mask].sum()),
    )
