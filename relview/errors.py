"""Errors caused by the user's input (scene files, meshes, output paths).

A :class:`UserError` is a mistake the user can fix: the command line prints its
message and exits with status 2, without a traceback. Anything else that escapes
is an internal error (exit status 1).

The message names where the problem is and what was found, for example::

    scene.toml:14: [body.motion] beta (body "rod"): speed |beta| = 1.2 is at or above c; must be < 1

The parts are also kept as attributes (``file``, ``line``, ``column``, ``key``,
``value``) so that callers and tests can inspect them.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

_UNSET: Any = object()


class UserError(Exception):
    """A mistake in the user's input.

    Parameters
    ----------
    message:
        What is wrong and what would be accepted, in plain words.
    file:
        The file the mistake is in (scene file, mesh file, output path).
    key:
        Where in the file, as the user writes it, e.g. ``[body.motion] beta (body "rod")``.
    value:
        The offending value, if there is one (kept for programs; the message already
        quotes it).
    line, column:
        1-based position in the file, when known.
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | Path | None = None,
        key: str | None = None,
        value: Any = _UNSET,
        line: int | None = None,
        column: int | None = None,
    ) -> None:
        self.message = message
        self.file = str(file) if file is not None else None
        self.key = key
        self.value = None if value is _UNSET else value
        self.has_value = value is not _UNSET
        self.line = line
        self.column = column
        super().__init__(self.format())

    def location(self) -> str:
        """``file:line:column`` as far as it is known ('' if nothing is)."""
        parts = [self.file] if self.file else []
        if self.line is not None:
            parts.append(str(self.line))
            if self.column is not None:
                parts.append(str(self.column))
        return ":".join(parts)

    def format(self) -> str:
        head = [p for p in (self.location(), self.key) if p]
        return ": ".join(head + [self.message])

    def __str__(self) -> str:  # keep str() in step with attribute edits
        return self.format()


class SceneError(UserError):
    """A scene file (or the dict given to Scene.from_dict) is malformed or invalid."""


class MeshError(UserError):
    """A mesh file is missing, unreadable, empty or corrupt."""


class OutputError(UserError):
    """An output path cannot be written (missing directory, no permission, would overwrite)."""


class WorkersLost(UserError):
    """Worker processes (or a Dask scheduler) were lost more often than a run retries.

    The frames that finished are kept; ``frames`` lists those still missing, which a
    rerun of the same command renders.
    """

    def __init__(self, message: str, *, frames: list[int] | None = None, **where) -> None:
        self.frames = list(frames or [])
        super().__init__(message, **where)


class MeshWarning(UserWarning):
    """A mesh file was accepted with a repair or a caveat (degenerate triangles, open edges)."""


class SceneWarning(UserWarning):
    """A scene is valid but will not look as intended (e.g. the camera is inside a body)."""
