"""The surfaces' former single module, kept so that its public names stay importable:
the surface kinds now live in relview.light.surfaces, one module per kind
(DEVELOPERS.md, "Layout")."""

from __future__ import annotations

from relview.light.surfaces import *  # noqa: F403 - the package's public names
from relview.light.surfaces import __all__  # noqa: F401
