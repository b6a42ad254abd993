"""The Scene: camera, bodies, render settings, background and animation of one scene file.

:func:`load_scene` and :meth:`Scene.from_dict` validate their input through
:mod:`relview.scene.reader`, which returns the Scene's fields; the reader knows nothing of
this class, so the two modules import in one direction only.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path

from relview.scene.parts import Animation, Background, Body, Camera, Lamp, RenderSettings


@dataclass
class Scene:
    camera: Camera
    bodies: list[Body]
    render: RenderSettings = field(default_factory=RenderSettings)
    background: Background = field(default_factory=Background)
    animation: Animation | None = None
    title: str = ""
    format: int = 1
    source_path: Path | None = None  # the scene file, if loaded from one
    source_hash: str = ""  # sha256 of the scene file (and meshes), for provenance
    lamps: list[Lamp] = field(default_factory=list)  # [[lamp]]: light for reflective surfaces

    @classmethod
    def from_dict(cls, data: dict, base_dir: str | Path = ".", source: str = "<dict>") -> Scene:
        """Build and validate a Scene from the same structure a scene file holds.

        ``base_dir``: directory that relative file paths are resolved against;
        ``source``: the name used in error messages.
        """
        return scene_from_dict(data, base_dir=base_dir, source=source)

    def body_index(self, name: str) -> int:
        for i, b in enumerate(self.bodies):
            if b.name == name:
                return i
        raise KeyError(name)

    def replace(self, **changes) -> Scene:
        return dataclasses.replace(self, **changes)


def scene_from_dict(data, base_dir: str | Path = ".", source: str = "<dict>") -> Scene:
    """Validate the structure a scene file holds (nested dicts/lists) into a Scene."""
    # imported here: the reader loads the surface and mesh modules, which `import relview`
    # does not need (start-up stays under a second)
    from relview.scene import reader

    return Scene(**reader.fields_from_dict(data, base_dir=Path(base_dir), source=source))


def load_scene(path: str | Path) -> Scene:
    """Read, validate and return the scene in a TOML file."""
    from relview.scene import reader  # see scene_from_dict: keeps `import relview` light

    return Scene(**reader.read_scene_file(path))
