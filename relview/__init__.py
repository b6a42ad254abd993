"""relview: ray-traced apparent images of relativistically moving bodies.

Public names (docs/scene-format.md): ``load_scene``, ``Scene``, ``render``, ``probe``.
"""

import os
from importlib.metadata import PackageNotFoundError, version

# numba's OpenMP threads spin while they wait; on a machine whose cores are shared (load
# above the core count) two spinning threads made a frame about 3x slower than one, and
# the passive policy removed that loss (benchmarks/bench_animate.py). It must be set
# before the first parallel kernel loads the OpenMP runtime; a user's own setting wins.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

try:
    __version__ = version("relview")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+source"

from relview.scene.model import Scene  # noqa: E402


def load_scene(path):
    """Read and validate a TOML scene file -> Scene (relview.scene.reader.load_scene)."""
    from relview.scene.model import load_scene as _load

    return _load(path)


def render(scene, *args, **kwargs):
    """Render one exposure -> Frame with .image, .layers, .save() (relview.renderer.render)."""
    from relview.renderer import render as _render

    return _render(scene, *args, **kwargs)


def probe(scene, body, point, *args, **kwargs):
    """Apparent time, place, direction, pixel, visibility and D of one body point."""
    from relview.probes import probe as _probe

    return _probe(scene, body, point, *args, **kwargs)


__all__ = ["Scene", "load_scene", "render", "probe", "__version__"]
