"""A validated view of one TOML table: typed getters whose every error names the file,
the line, the key as the user writes it, and the offending value.

Generic: the scene schema (relview.scene.reader) and each kind's own schema (motion
kinds in relview.kinematics, surface kinds in relview.light.materials) read their keys
through it, so every message has the same shape. The line index is a light scan of the
TOML text used only to point messages at a line; the values always come from tomllib.
"""

from __future__ import annotations

import contextlib
import difflib
import errno
import json
import math
import numbers
import os
import re
from collections.abc import Iterable, Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from relview.errors import SceneError, UserError
from relview.kinematics.kinds import MOTION_KINDS

_REQUIRED: Any = object()
_UNSET: Any = object()


# ============================================================================ line index


def _split_dotted(key: str) -> list[str]:
    """Split a TOML dotted key ``a."b.c".d`` into its parts."""
    parts, buf, quote = [], "", None
    for ch in key:
        if quote:
            if ch == quote:
                quote = None
            else:
                buf += ch
        elif ch in "\"'":
            quote = ch
        elif ch == ".":
            parts.append(buf.strip())
            buf = ""
        else:
            buf += ch
    parts.append(buf.strip())
    return parts


_KEY_PART = r"""(?:[A-Za-z0-9_-]+|"[^"\n]*"|'[^'\n]*')"""
_KEY_RE = re.compile(rf"^\s*({_KEY_PART}(?:\s*\.\s*{_KEY_PART})*)\s*=(.*)$")
_ARRAY_HEADER_RE = re.compile(rf"^\s*\[\[\s*({_KEY_PART}(?:\s*\.\s*{_KEY_PART})*)\s*\]\]")
_TABLE_HEADER_RE = re.compile(rf"^\s*\[\s*({_KEY_PART}(?:\s*\.\s*{_KEY_PART})*)\s*\]")
# Possessive quantifiers (*+, ++): the plain form "(?:\\.|[^"\\])*" kept a backtracking
# entry per character, about 120 bytes each (2.4 GB for a 20 MB string); these keep none.
_STRING_RE = re.compile(r'"(?:[^"\\]++|\\.)*+"|\'[^\']*+\'')


def index_lines(text: str) -> dict[tuple, int]:
    """Map key paths (``("body", 0, "motion", "beta")``) to 1-based line numbers.

    A light scan of the TOML text, only used to point error messages at a line;
    the values themselves always come from tomllib.
    """
    lines: dict[tuple, int] = {}
    arrays: dict[tuple, int] = {}  # array-of-tables path -> number of entries so far
    current: tuple = ()
    depth = 0  # open brackets/braces of a multi-line value
    in_string: str | None = None  # delimiter of an open multi-line string

    def resolve(names: list[str]) -> tuple:
        path: tuple = ()
        for name in names:
            path = path + (name,)
            if path in arrays:
                path = path + (arrays[path] - 1,)
        return path

    for lineno, raw in enumerate(text.splitlines(), 1):
        line = raw
        if in_string:
            if in_string in line:
                line = line.split(in_string, 1)[1]
                in_string = None
            else:
                continue
        if depth > 0:
            body = _STRING_RE.sub('""', line).split("#", 1)[0]
            depth += body.count("[") + body.count("{") - body.count("]") - body.count("}")
            continue
        m = _ARRAY_HEADER_RE.match(line)
        if m:
            names = _split_dotted(m.group(1))
            key = resolve(names[:-1]) + (names[-1],)
            arrays[key] = arrays.get(key, 0) + 1
            current = key + (arrays[key] - 1,)
            lines.setdefault(key, lineno)
            lines[current] = lineno
            continue
        m = _TABLE_HEADER_RE.match(line)
        if m:
            current = resolve(_split_dotted(m.group(1)))
            lines.setdefault(current, lineno)
            continue
        m = _KEY_RE.match(line)
        if not m:
            continue
        names = _split_dotted(m.group(1))
        for i in range(1, len(names) + 1):
            lines.setdefault(current + tuple(names[:i]), lineno)
        rest = m.group(2)
        for delim in ('"""', "'''"):
            if rest.count(delim) % 2 == 1:
                in_string = delim
                break
        if in_string:
            continue
        body = _STRING_RE.sub('""', rest).split("#", 1)[0]
        depth = max(0, body.count("[") + body.count("{") - body.count("]") - body.count("}"))
    return lines


def _why_missing(path: Path) -> tuple[str, str]:
    """Why ``path`` names no file, and the detail: absent, a symbolic link to nothing, or
    a loop of links (Path.exists() is False for all three)."""
    try:
        os.stat(path)
    except ValueError as exc:  # e.g. a NUL character: no file system takes that name
        return "is not a usable path", str(exc)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            return "path is a loop of symbolic links", str(path)
        if os.path.islink(path):
            return "is a symbolic link to a missing file", f"{path} -> {os.readlink(path)}"
    return "not found", f"looked for {path}"


# ============================================================================ documents


class _Document:
    """The scene being read: its name for messages, line index, base directory."""

    def __init__(self, source: str, base_dir: Path, text: str | None):
        self.source = source
        self.base_dir = Path(base_dir).absolute()  # later chdir must not break paths
        self.lines = index_lines(text) if text is not None else {}
        self.referenced: list[Path] = []  # mesh/spectrum/texture files, for source_hash

    def line_of(self, path: tuple) -> int | None:
        for n in range(len(path), 0, -1):
            line = self.lines.get(path[:n])
            if line is not None:
                return line
        return None


def show(value: Any) -> str:
    """A value as the user would write it in TOML (for messages)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, (numbers.Real, np.floating, np.integer)):
        v = float(value) if isinstance(value, (float, np.floating)) else int(value)
        if isinstance(v, float) and math.isnan(v):
            return "nan"
        if isinstance(v, float) and math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(show(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{k} = {show(v)}" for k, v in value.items()) + " }"
    return repr(value)


def _type_name(value: Any) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, numbers.Integral):
        return "an integer"
    if isinstance(value, numbers.Real):
        return "a number"
    if isinstance(value, Mapping):
        return "a table"
    if isinstance(value, (list, tuple, np.ndarray)):
        return "a list"
    return type(value).__name__


def _is_number(value: Any) -> bool:
    return isinstance(value, (numbers.Real, np.floating, np.integer)) and not isinstance(
        value, (bool, np.bool_)
    )


def suggest(word: str, choices: Iterable[str]) -> str:
    """' Did you mean "x"?' for the nearest choice (difflib), or ''."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f'; did you mean "{close[0]}"?' if close else ""


# ============================================================================ tables


class Table:
    """One table of the scene file, with typed, validated getters.

    Public so that motion parsers registered from other modules validate their keys
    the same way (see :func:`register_motion`). Every getter raises SceneError
    naming file, line, key and value.

    section: the table as the user writes its header, e.g. ``body.motion``.
    prefix:  dotted keys above this table inside an inline table, e.g. ``pattern.first.``.
    context: which body, e.g. ``body "rod"``.
    """

    def __init__(
        self,
        data: Mapping,
        doc: _Document,
        path: tuple,
        section: str,
        prefix: str = "",
        context: str = "",
    ):
        self.data = data
        self.doc = doc
        self.path = path
        self.section = section
        self.prefix = prefix
        self.context = context

    # ---------------------------------------------------------------- messages

    # for kind readers in lower layers, which cannot import this module
    show, type_name = staticmethod(show), staticmethod(_type_name)

    def key_label(self, key: str | None = None) -> str:
        name = self.prefix + (key or "")
        name = name.rstrip(".")
        label = f"[{self.section}] {name}" if self.section else name
        label = label.strip()
        if self.context:
            label += f" ({self.context})"
        return label

    def error(
        self, key: str | None, message: str, value: Any = _UNSET, cls=SceneError
    ) -> UserError:
        """A SceneError at ``key`` of this table (the caller raises it)."""
        path = self.path + ((key,) if key else ())
        return cls(
            message,
            file=self.doc.source,
            key=self.key_label(key),
            value=value,
            line=self.doc.line_of(path),
        )

    # ---------------------------------------------------------------- structure

    def has(self, key: str) -> bool:
        return self.data.get(key) is not None

    def given_keys(self) -> list[str]:
        return [k for k, v in self.data.items() if v is not None]

    def check_keys(self, allowed: Iterable[str], not_here: Mapping[str, str] | None = None) -> None:
        """Reject keys outside ``allowed``.

        ``not_here`` maps keys that exist elsewhere (e.g. for another shape) to the
        reason they do not apply here.
        """
        allowed = list(allowed)
        for key in self.given_keys():
            if key in allowed:
                continue
            value = self.data[key]
            if not_here and key in not_here:
                raise self.error(key, f"{key} = {show(value)}: {not_here[key]}", value)
            raise self.error(
                key,
                f'unknown key "{key}" (= {show(value)}){suggest(key, allowed)}'
                f" Valid keys here: {', '.join(allowed)}",
                value,
            )

    def _get(self, key: str, default: Any) -> Any:
        value = self.data.get(key)
        if value is None:
            if default is _REQUIRED:
                raise self.error(key, f'missing required key "{key}"')
            return _UNSET
        return value

    # ---------------------------------------------------------------- scalars

    def _check_number(self, key: str, value: Any, what: str = "a number") -> float:
        if not _is_number(value):
            raise self.error(
                key, f"expected {what}, got {_type_name(value)}: {key} = {show(value)}", value
            )
        v = float(value)
        if not math.isfinite(v):
            raise self.error(key, f"must be a finite number, got {key} = {show(value)}", value)
        return v

    def number(
        self,
        key: str,
        default: Any = _REQUIRED,
        *,
        positive: bool = False,
        nonnegative: bool = False,
        low: float | None = None,
        high: float | None = None,
        low_open: bool = False,
        high_open: bool = False,
        unit: str = "",
    ) -> float:
        """A finite real number; ``positive``: > 0; [low, high] with optional open ends."""
        value = self._get(key, default)
        if value is _UNSET:
            return default
        v = self._check_number(key, value)
        unit_s = f" {unit}" if unit else ""
        if positive and not v > 0:
            raise self.error(key, f"must be > 0{unit_s}, got {key} = {show(value)}", value)
        if nonnegative and not v >= 0:
            raise self.error(key, f"must be >= 0{unit_s}, got {key} = {show(value)}", value)
        below = low is not None and (v <= low if low_open else v < low)
        above = high is not None and (v >= high if high_open else v > high)
        if below or above:
            lo = "" if low is None else f"{'>' if low_open else '>='} {show(low)}"
            hi = "" if high is None else f"{'<' if high_open else '<='} {show(high)}"
            rng = " and ".join(p for p in (lo, hi) if p)
            raise self.error(
                key, f"out of range: {key} = {show(value)}; must be {rng}{unit_s}", value
            )
        return v

    def integer(
        self, key: str, default: Any = _REQUIRED, *, low: int | None = None, high: int | None = None
    ) -> int:
        """An integer (a float with an integral value is accepted), in [low, high]."""
        value = self._get(key, default)
        if value is _UNSET:
            return default
        return self._check_integer(key, value, value, low, high)

    def _check_integer(self, key, item, whole, low, high) -> int:
        if not _is_number(item) or not float(item).is_integer():
            raise self.error(
                key, f"expected an integer, got {_type_name(item)}: {key} = {show(whole)}", whole
            )
        v = int(item)
        if (low is not None and v < low) or (high is not None and v > high):
            rng = " and ".join(
                p
                for p in (
                    f">= {low}" if low is not None else "",
                    f"<= {high}" if high is not None else "",
                )
                if p
            )
            raise self.error(key, f"out of range: {key} = {show(whole)}; must be {rng}", whole)
        return v

    def string(
        self, key: str, default: Any = _REQUIRED, *, choices: Iterable[str] | None = None
    ) -> str:
        value = self._get(key, default)
        if value is _UNSET:
            return default
        if not isinstance(value, str):
            raise self.error(
                key, f"expected a string, got {_type_name(value)}: {key} = {show(value)}", value
            )
        if choices is not None:
            choices = list(choices)
            if value not in choices:
                raise self.error(
                    key,
                    f"unknown value {key} = {show(value)}{suggest(value, choices)}"
                    f" Choose one of: {', '.join(choices)}",
                    value,
                )
        return value

    def boolean(self, key: str, default: Any = _REQUIRED) -> bool:
        value = self._get(key, default)
        if value is _UNSET:
            return default
        if not isinstance(value, (bool, np.bool_)):
            raise self.error(
                key,
                f"expected true or false, got {_type_name(value)}: {key} = {show(value)}",
                value,
            )
        return bool(value)

    # ---------------------------------------------------------------- vectors

    def _list(self, key: str, value: Any, n: int, what: str) -> list:
        if not isinstance(value, (list, tuple, np.ndarray)) or isinstance(value, str):
            raise self.error(
                key,
                f"expected a list of {n} {what}, got {_type_name(value)}: {key} = {show(value)}",
                value,
            )
        items = list(np.asarray(value).tolist()) if isinstance(value, np.ndarray) else list(value)
        if len(items) != n:
            raise self.error(
                key,
                f"expected a list of {n} {what}, got {len(items)}: {key} = {show(value)}",
                value,
            )
        return items

    def vector(
        self,
        key: str,
        n: int = 3,
        default: Any = _REQUIRED,
        *,
        nonzero: bool = False,
        positive: bool = False,
        unit: str = "",
    ) -> np.ndarray:
        """A list of ``n`` finite numbers as a float array."""
        value = self._get(key, default)
        if value is _UNSET:
            return None if default is None else np.array(default, float)
        items = self._list(key, value, n, "numbers")
        out = []
        for item in items:
            if not _is_number(item):
                raise self.error(
                    key,
                    f"expected a list of {n} numbers, found {_type_name(item)} in {key} = {show(value)}",
                    value,
                )
            if not math.isfinite(float(item)):
                raise self.error(key, f"must hold finite numbers, got {key} = {show(value)}", value)
            out.append(float(item))
        arr = np.array(out)
        unit_s = f" {unit}" if unit else ""
        if positive and not np.all(arr > 0):
            raise self.error(
                key, f"every entry must be > 0{unit_s}, got {key} = {show(value)}", value
            )
        if nonzero and not np.any(arr != 0):
            raise self.error(key, f"must not be the zero vector, got {key} = {show(value)}", value)
        return arr

    def int_vector(
        self, key: str, n: int, default: Any = _REQUIRED, *, low: int | None = None
    ) -> tuple:
        value = self._get(key, default)
        if value is _UNSET:
            return default
        items = self._list(key, value, n, "integers")
        return tuple(self._check_integer(key, item, value, low, None) for item in items)

    def beta(self, key: str = "beta", default: Any = (0.0, 0.0, 0.0)) -> np.ndarray:
        """A velocity / c: three numbers with |beta| < 1."""
        b = self.vector(key, 3, default)
        speed = float(np.linalg.norm(b))
        if speed >= 1.0:
            raise self.error(
                key,
                f"speed |beta| = {speed:.6g} is at or above c; must be < 1 ({key} = {show(self.data.get(key))})",
                self.data.get(key),
            )
        return b

    # ---------------------------------------------------------------- nesting, files

    def table(
        self, key: str, default: Any = _REQUIRED, *, section: str | None = None
    ) -> Table | None:
        """The sub-table ``key``; ``section`` names it in messages (default: this.section.key)."""
        value = self._get(key, default)
        if value is _UNSET:
            return default
        if not isinstance(value, Mapping):
            raise self.error(
                key, f"expected a table, got {_type_name(value)}: {key} = {show(value)}", value
            )
        if section is not None:
            return Table(value, self.doc, self.path + (key,), section, "", self.context)
        return Table(
            value, self.doc, self.path + (key,), self.section, f"{self.prefix}{key}.", self.context
        )

    def array_of_tables(self, key: str, plural: str) -> list[Table]:
        """The ``[[key]]`` entries, each a Table in section ``key`` named ``key #n`` in
        messages; [] when absent. ``plural`` names them in the messages ("bodies")."""
        value = self.data.get(key)
        if value is None:
            return []
        if not isinstance(value, (list, tuple)):
            raise self.error(
                key,
                f"{plural} are an array of tables: write [[{key}]] (double brackets) for each "
                f"{key}, got {_type_name(value)}: {key} = {show(value)}",
                value,
            )
        entries = []
        for i, item in enumerate(value):
            if not isinstance(item, Mapping):
                raise self.error(
                    key,
                    f"{key} entry {i + 1} is {_type_name(item)}, not a table: {show(item)}",
                    item,
                )
            entries.append(Table(item, self.doc, (key, i), key, "", f"{key} #{i + 1}"))
        return entries

    def path_value(self, key: str, default: Any = _REQUIRED, *, what: str = "file") -> Path:
        """A file path, relative to the scene file, that must name an existing file."""
        if isinstance(self.data.get(key), os.PathLike):  # Scene.from_dict with Path objects
            self.data = dict(self.data, **{key: os.fspath(self.data[key])})
        value = self.string(key, default)
        if value is default and default is not _REQUIRED:
            return default
        if not value.strip():
            raise self.error(key, f"empty path: {key} = {show(value)}", value)
        try:
            path = Path(value).expanduser()
        except RuntimeError:  # "~name/..." for a user that does not exist
            raise self.error(
                key, f"{what} not found: {key} = {show(value)} (no such user's home)", value
            ) from None
        if not path.is_absolute():
            path = self.doc.base_dir / path
        try:
            exists, is_file = path.exists(), path.is_file()
        except (OSError, ValueError) as exc:  # e.g. a name too long for the file system
            reason = getattr(exc, "strerror", None) or str(exc)
            raise self.error(key, f"unusable path {key} = {show(value)}: {reason}", value) from None
        if not exists:
            reason, detail = _why_missing(path)
            raise self.error(key, f"{what} {reason}: {key} = {show(value)} ({detail})", value)
        if not is_file:
            raise self.error(key, f"{what} is not a file: {key} = {show(value)} ({path})", value)
        try:
            with open(path, "rb") as fh:
                fh.read(1)
        except OSError as exc:
            raise self.error(
                key, f"cannot read {what}: {key} = {show(value)}: {exc.strerror}", value
            ) from exc
        self.doc.referenced.append(path)
        return path

    # ---------------------------------------------------------------- lists

    def number_list(self, key: str, default: Any = _REQUIRED, *, unit: str = "") -> np.ndarray:
        """A non-empty list of finite numbers, as a float array."""
        value = self._get(key, default)
        if value is _UNSET:
            return default
        if not isinstance(value, (list, tuple)) or not value:
            raise self.error(
                key,
                f"expected a non-empty list of numbers{' (' + unit + ')' if unit else ''}, "
                f"got {_type_name(value)}: {key} = {show(value)}",
                value,
            )
        for item in value:
            if not _is_number(item) or not math.isfinite(float(item)):
                raise self.error(
                    key,
                    f"expected a list of finite numbers, found {show(item)} in "
                    f"{key} = {show(value)}",
                    value,
                )
        return np.array([float(v) for v in value])

    def vector_list(
        self, key: str, n: int = 3, default: Any = _REQUIRED, *, unit: str = ""
    ) -> np.ndarray:
        """A non-empty list of ``n``-number lists, as a (K, n) float array."""
        value = self._get(key, default)
        if value is _UNSET:
            return default
        what = f"a non-empty list of [{', '.join('xyzw'[:n])}]{' (' + unit + ')' if unit else ''}"
        if not isinstance(value, (list, tuple)) or not value:
            raise self.error(
                key, f"expected {what}, got {_type_name(value)}: {key} = {show(value)}", value
            )
        rows = []
        for item in value:
            ok = (
                isinstance(item, (list, tuple))
                and len(item) == n
                and all(_is_number(v) and math.isfinite(float(v)) for v in item)
            )
            if not ok:
                raise self.error(
                    key, f"expected {what}, found {show(item)} in {key} = {show(value)}", value
                )
            rows.append([float(v) for v in item])
        return np.array(rows)

    # ---------------------------------------------------------------- kinds, checks

    def motion(
        self,
        key: str,
        default: Any = _REQUIRED,
        *,
        section: str | None = None,
        exclude: Mapping[str, str] | None = None,
    ) -> Any:
        """The motion described by sub-table ``key``: its ``kind`` (default "uniform")
        chooses the reader in relview.kinematics.kinds.MOTION_KINDS. ``exclude`` maps
        kinds not allowed here to the reason."""
        sub = self.table(key, default, section=section or f"{self.section}.{key}".strip("."))
        if sub is None or sub is default:
            return default
        kind = sub.string("kind", "uniform", choices=sorted(MOTION_KINDS))
        if exclude and kind in exclude:
            raise sub.error(
                "kind", f"kind = {show(kind)} is not allowed here: {exclude[kind]}", kind
            )
        return MOTION_KINDS[kind](sub)

    @contextlib.contextmanager
    def errors_at(self, key: str) -> Iterator[None]:
        """Report a ValueError raised inside (a constructor's own check) as an error at
        ``key``, with its value: for checks that involve several keys at once."""
        try:
            yield
        except ValueError as exc:
            value = self.data.get(key)
            raise self.error(key, f"{key} = {show(value)}: {exc}", value) from None
