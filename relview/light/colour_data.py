"""Colorimetric tables taken from colour-science, kept as one small cached file.

Importing colour-science costs about two seconds (it loads its plotting stack), which
would dominate the start-up of every command. The few tables relview needs are therefore
extracted once from colour-science into ``relview/data/colour_tables.npz``;
``tests/test_colour_data.py`` checks that the file still equals colour-science's own
tables, and ``python -m relview.light.colour_data`` rebuilds it.

Tables (all from colour-science, which carries the published values):

* ``cmf_nm``, ``cmf``: CIE 1931 2-degree standard observer, 360-830 nm at 1 nm (CIE 15);
* ``d65_nm``, ``d65``: CIE standard illuminant D65 relative spectral power;
* ``basis_nm``, ``basis``: Mallett & Yuksel (2019) sRGB reflectance basis spectra.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

CACHE_PATH = Path(__file__).parents[1] / "data" / "colour_tables.npz"
NAMES = ("cmf_nm", "cmf", "d65_nm", "d65", "basis_nm", "basis")


def from_colour_science() -> dict[str, np.ndarray]:
    """The tables, read from colour-science itself (slow import)."""
    import colour
    from colour.recovery import MSDS_BASIS_FUNCTIONS_sRGB_MALLETT2019 as basis

    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    d65 = colour.SDS_ILLUMINANTS["D65"]
    return {
        "cmf_nm": np.asarray(cmfs.wavelengths, float),
        "cmf": np.asarray(cmfs.values, float),
        "d65_nm": np.asarray(d65.wavelengths, float),
        "d65": np.asarray(d65.values, float),
        "basis_nm": np.asarray(basis.wavelengths, float),
        "basis": np.asarray(basis.values, float),
    }


def write_cache(path: Path = CACHE_PATH) -> Path:
    import colour

    data = from_colour_science()
    data["colour_science_version"] = np.array(colour.__version__)
    tmp = path.with_name(path.name + ".part")
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(tmp, "wb") as fh:
        np.savez_compressed(fh, **data)
    tmp.replace(path)
    return path


@functools.cache
def tables() -> dict[str, np.ndarray]:
    """The tables from the cache file, or from colour-science when the file is missing."""
    try:
        with np.load(CACHE_PATH) as f:
            return {name: f[name] for name in NAMES}
    except (OSError, KeyError, ValueError):
        return from_colour_science()


def sampled(name: str) -> tuple[np.ndarray, np.ndarray]:
    """One tabulated function as float arrays: (wavelengths nm (M,), values (M,) or (M, 3));
    ``name`` is "cmf", "d65" or "basis"."""
    t = tables()
    return np.asarray(t[f"{name}_nm"], dtype=float), np.asarray(t[name], dtype=float)


if __name__ == "__main__":
    print(f"wrote {write_cache()}")
