"""relview: ray-traced apparent images of relativistically moving bodies.

Public names (docs/scene-format.md): ``load_scene``, ``Scene``, ``render``, ``probe``.
``render`` and ``probe`` are the real functions of :mod:`relview.renderer` and
:mod:`relview.probes` (their signatures and docstrings show in ``help``), loaded on first
use so that ``import relview`` stays light (the compiled kernels load with them).
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

from relview.scene.model import Scene, load_scene  # noqa: E402

#: public name -> (module, attribute), imported on first access (PEP 562)
_LAZY = {
    "render": ("relview.renderer", "render"),
    "probe": ("relview.probes", "probe"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attribute = _LAZY[name]
        value = getattr(importlib.import_module(module), attribute)
        globals()[name] = value  # later lookups skip this function
        return value
    raise AttributeError(f"module 'relview' has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_LAZY))


__all__ = ["Scene", "load_scene", "render", "probe", "__version__"]
