"""Output files that never destroy earlier output: safe names, atomic writes, JSON.

Every writer in relview goes through :func:`atomic_write` (temporary file in the
target directory, fsync, then an atomic rename) and never destroys earlier output
unless ``overwrite=True``: an existing file makes the writer choose ``name-1.ext``,
``name-2.ext``, ... (:func:`safe_output_path`). Failures (no permission, disk full,
...) raise :class:`relview.errors.OutputError` naming the path and the reason, and
leave no partial file behind. Each writer returns the path it actually wrote.

Metadata (provenance) is stored as JSON: :func:`metadata_json` for the text,
:func:`write_json_sidecar` for a file of its own.
"""

from __future__ import annotations

import errno
import glob
import itertools
import json
import os
import secrets
import time
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np

from relview.errors import OutputError

__all__ = [
    "atomic_write",
    "json_default",
    "metadata_json",
    "safe_output_path",
    "write_json_sidecar",
]

_REASONS = {
    errno.ENOSPC: "no space left on device (disk full)",
    errno.EDQUOT: "disk quota exceeded",
    errno.EACCES: "permission denied",
    errno.EPERM: "operation not permitted",
    errno.EROFS: "read-only file system",
    errno.ENOENT: "no such file or directory",
    errno.ENOTDIR: "a part of the path is not a directory",
    errno.EISDIR: "is a directory",
    errno.ENAMETOOLONG: "file name too long",
}


def _output_error(path: Path, exc: OSError) -> OutputError:
    reason = _REASONS.get(exc.errno) or exc.strerror or str(exc) or type(exc).__name__
    code = errno.errorcode.get(exc.errno) if exc.errno else None
    if code:
        reason = f"{reason} [{code}]"
    where = exc.filename
    if (
        where is not None
        and str(where) != str(path)
        and not str(where).startswith(str(path.parent / ("." + path.name)))
    ):
        reason = f"{reason} (at {where})"
    return OutputError(f"cannot write the output file: {reason}", file=path)


def safe_output_path(path: str | os.PathLike, overwrite: bool = False) -> Path:
    """The path to write to without destroying earlier output.

    If ``path`` does not exist, or ``overwrite`` is True, it is returned as it is.
    Otherwise the first free name of ``stem-1.ext``, ``stem-2.ext``, ... beside it
    is returned and the existing file is left alone. A path that names an existing
    directory raises :class:`OutputError`.
    """
    path = Path(path)
    if path.is_dir():
        raise OutputError("cannot write the output file: is a directory", file=path)
    if overwrite or not os.path.lexists(path):
        return path
    for number in itertools.count(1):
        candidate = path.with_name(f"{path.stem}-{number}{path.suffix}")
        if not os.path.lexists(candidate):
            return candidate
    raise AssertionError("unreachable")  # pragma: no cover


# Errors of os.link that mean "this file system has no hard links", not a real failure.
_NO_HARD_LINKS = {
    errno.EPERM,
    errno.EXDEV,
    errno.ENOSYS,
    errno.EMLINK,
    getattr(errno, "ENOTSUP", -1),
    getattr(errno, "EOPNOTSUPP", -1),
}


def _commit(tmp: Path, final: Path, overwrite: bool) -> Path:
    """Move the finished temporary file to its final name; returns that name.

    With ``overwrite`` this is os.replace (atomic). Without, a hard link is made
    first, which fails rather than replace a file that someone created since the
    name was chosen; the next free name is taken then. On a file system without
    hard links it falls back to os.replace onto a name checked to be free.
    """
    if overwrite:
        os.replace(tmp, final)
        return final
    while True:
        try:
            os.link(tmp, final)
        except FileExistsError:
            final = safe_output_path(final, overwrite=False)
            continue
        except OSError as exc:
            if exc.errno not in _NO_HARD_LINKS:
                raise
            final = safe_output_path(final, overwrite=False)
            os.replace(tmp, final)
            return final
        os.unlink(tmp)
        return final


def _fsync_directory(directory: Path) -> None:
    """Make the rename durable (POSIX); ignored where directories cannot be opened."""
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


#: A hidden temporary (``.NAME.XXXXXXXX.part``) older than this is left over from a write
#: that was killed (SIGKILL, power loss) and is removed by the next write of the same file;
#: a younger one may belong to a write still running in another process (common practice:
#: temporary-file cleaners work by age).
STALE_PART_AGE_S = 3600.0


def _remove_stale_parts(directory: Path, name: str) -> None:
    """Delete this target's temporaries left behind by killed writes (older than
    :data:`STALE_PART_AGE_S`); errors are ignored (another process may clean up too)."""
    now = time.time()
    for old in directory.glob(f".{glob.escape(name)}.*.part"):
        rest = old.name[len(name) + 2 : -len(".part")]
        if len(rest) != 8 or any(c not in "0123456789abcdef" for c in rest):
            continue  # not one of ours
        try:
            if now - old.stat().st_mtime > STALE_PART_AGE_S:
                old.unlink()
        except OSError:
            pass


def atomic_write(
    path: str | os.PathLike, write: Callable[[BinaryIO], None], overwrite: bool = False
) -> Path:
    """Write a file atomically with ``write(binary_file)``; return the path written.

    The data go to a hidden temporary file in the target directory (created with
    the usual permissions, subject to the umask), which is flushed, fsynced and
    then renamed into place; temporaries of the same file left by killed writes are
    removed first (:data:`STALE_PART_AGE_S`). Any failure removes the temporary file; an OSError
    becomes :class:`OutputError` naming the path and the reason. A missing target
    directory is created.
    """
    final = safe_output_path(path, overwrite)
    directory = final.parent
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except FileExistsError as exc:  # a part of the directory path is a file
        raise OutputError(
            f"cannot create the directory: {exc.filename} is a file, not a directory", file=final
        ) from exc
    except OSError as exc:
        raise _output_error(final, exc) from exc
    _remove_stale_parts(directory, final.name)
    tmp: Path | None = None
    try:
        while True:
            candidate = directory / f".{final.name}.{secrets.token_hex(4)}.part"
            try:
                handle = open(candidate, "xb")  # exclusive create, mode 0o666 & ~umask
            except FileExistsError:
                continue
            tmp = candidate
            break
        with handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        final = _commit(tmp, final, overwrite)
        tmp = None
        _fsync_directory(directory)
        return final
    except OSError as exc:
        raise _output_error(final, exc) from exc
    finally:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass


def json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    raise TypeError(
        f"metadata value {value!r} of type {type(value).__name__} cannot be stored as JSON"
    )


def metadata_json(metadata: Mapping[str, Any] | None, indent: int | None = None) -> str:
    metadata = {} if metadata is None else metadata
    if not isinstance(metadata, Mapping):
        raise ValueError(f"metadata must be a dict, got {type(metadata).__name__}")
    try:
        return json.dumps(
            dict(metadata),
            indent=indent,
            sort_keys=True,
            default=json_default,
            allow_nan=False,
            ensure_ascii=False,
        )
    except ValueError as exc:
        raise ValueError(
            f"metadata cannot be stored as JSON: {exc} (NaN and infinity are not allowed)"
        ) from exc


def write_json_sidecar(
    path: str | os.PathLike, metadata: Mapping[str, Any], *, overwrite: bool = False
) -> Path:
    """Write ``metadata`` as an indented UTF-8 JSON file (atomic); return the path written."""
    text = metadata_json(metadata, indent=2) + "\n"
    return atomic_write(path, lambda fh: fh.write(text.encode("utf-8")), overwrite)
