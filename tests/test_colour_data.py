"""The cached colorimetric tables must equal colour-science's (the published CIE 15 values)."""

import numpy as np

from relview.light import colour_data


def test_cache_equals_colour_science_tables():
    # colour-science (general-purpose reference library) carries the CIE 1931 2-degree
    # observer and illuminant D65 from CIE 15, and the Mallett & Yuksel 2019 basis.
    cached = colour_data.tables()
    reference = colour_data.from_colour_science()
    for name in colour_data.NAMES:
        assert np.array_equal(cached[name], reference[name]), name


def test_cmf_spot_values():
    # CIE 1931 ybar peaks at 1.0 at 555 nm (CIE 15 table, from memory) and the table runs
    # 360-830 nm in 1 nm steps.
    t = colour_data.tables()
    i = int(np.argmax(t["cmf"][:, 1]))
    assert t["cmf_nm"][i] == 555.0 and t["cmf"][i, 1] == 1.0
    assert t["cmf_nm"][0] == 360.0 and t["cmf_nm"][-1] == 830.0
