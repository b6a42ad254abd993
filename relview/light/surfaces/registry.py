"""The scene file's surface kinds: which key builds which surface, and the reader."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple

from relview.errors import SceneError, UserError
from relview.light.surfaces import nesting
from relview.light.surfaces.base import Surface
from relview.light.surfaces.clock_face import ClockFace
from relview.light.surfaces.emitters import Blackbody, EmissionLines, TabulatedSpectrum
from relview.light.surfaces.mirror import Mirror
from relview.light.surfaces.pattern import Pattern
from relview.light.surfaces.reflective import Reflective

#: reader(table) -> surface; ``table`` is a relview.scene.table.Table (duck-typed)
SurfaceReader = Callable[[Any], Surface]


class SurfaceKind(NamedTuple):
    """How a scene file's surface table of one kind is read."""

    #: builds the surface from the table (reads the kind key and its extras)
    reader: SurfaceReader
    #: keys allowed beside the kind key (all other kinds' extras are refused by name)
    extras: tuple[str, ...] = ()


#: kind key of a ``[body.surface]`` table (exactly one is given) -> its reader and extras
SURFACE_KINDS: dict[str, SurfaceKind] = {
    "blackbody": SurfaceKind(Blackbody.from_table, ("scale",)),
    "line": SurfaceKind(EmissionLines.from_table),
    "lines": SurfaceKind(EmissionLines.from_table),
    "spectrum": SurfaceKind(TabulatedSpectrum.from_table),
    "color": SurfaceKind(
        Reflective.from_table, ("lamp", "luminance", "texture", "gloss", "gloss_exponent")
    ),
    "pattern": SurfaceKind(Pattern.from_table),
    "clock_face": SurfaceKind(ClockFace.from_table),
    "mirror": SurfaceKind(Mirror.from_table, ("bounces", "tint")),
}


def register_surface(kind: str, reader: SurfaceReader, extras: tuple[str, ...] = ()) -> None:
    """Make ``[body.surface] <kind> = ...`` build its surface with ``reader(table)``;
    ``extras``: the other keys that may accompany ``kind``."""
    SURFACE_KINDS[kind] = SurfaceKind(reader, tuple(extras))


def _kind_of(table) -> str:
    """The one kind key of a surface table, after checking its keys."""
    kinds_named = list(SURFACE_KINDS)
    extras: dict[str, str] = {}  # extra key -> the first kind that allows it
    for name, entry in SURFACE_KINDS.items():
        for key in entry.extras:
            extras.setdefault(key, name)
    table.check_keys(kinds_named + sorted(extras))
    kinds = [k for k in kinds_named if table.has(k)]
    if not kinds:
        raise table.error(
            None, f"no surface kind given; give exactly one of: {', '.join(kinds_named)}"
        )
    if len(kinds) > 1:
        raise table.error(
            kinds[1],
            f"gives {' and '.join(kinds)} "
            f"({', '.join(f'{k} = {table.show(table.data[k])}' for k in kinds)}); "
            f"a surface has exactly one kind: {', '.join(kinds_named)}",
            {k: table.data[k] for k in kinds},
        )
    kind = kinds[0]
    for key in table.given_keys():
        if key not in SURFACE_KINDS and key not in SURFACE_KINDS[kind].extras:
            raise table.error(
                key,
                f"{key} = {table.show(table.data[key])} applies only to {extras[key]} surfaces, "
                f"not {kind}",
                table.data[key],
            )
    return kind


def _read_kind(table) -> Surface:
    return SURFACE_KINDS[_kind_of(table)].reader(table)


nesting.set_reader(_read_kind)  # patterns and dials read their nested surfaces with it


def read_surface(table) -> Surface:
    """The surface a scene file's surface table describes.

    The table's own errors (SceneError) name the key they concern; a constructor's
    ValueError / OSError, or another UserError, from anywhere in the surface (a nested
    pattern's spectrum file too) is reported at this table's kind key.
    """
    kind = _kind_of(table)
    value = table.data[kind]
    try:
        return SURFACE_KINDS[kind].reader(table)
    except SceneError:
        raise
    except UserError as exc:  # keep its message (it names e.g. its own file and line)
        raise table.error(kind, f"{exc}", value, cls=type(exc)) from exc
    except (ValueError, OSError) as exc:
        raise table.error(kind, f"{kind} = {table.show(value)}: {exc}", value) from exc
