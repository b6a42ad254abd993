"""Read and validate scene files (TOML) into :class:`relview.scene.model.Scene`.

Every key is described in docs/scene-format.md. The policy, in short:

* Nothing in a scene file is evaluated as code: it is parsed with the standard
  library's ``tomllib`` and every value is checked against the key's type and range.
* Any mistake raises :class:`relview.errors.SceneError` (or ``MeshError`` for mesh
  files) naming the file, the line when it can be found, the key as the user wrote
  it, and the offending value. Unknown keys are errors, with the nearest valid key
  suggested.
* Paths (mesh, spectrum, texture files) are relative to the scene file.

Motion kinds are a registry, :data:`MOTION_KINDS`, so other modules can add kinds
without editing this one::

    from relview.scene.reader import register_motion

    def parse_spin(table):            # table: a relview.scene.reader.Table
        table.check_keys({"kind", "axis", "rate", ...})
        return SpinMotion(axis=table.vector("axis", 3), ...)

    register_motion("spin", parse_spin)

``relview.kinematics.motion`` is imported (if it exists) before the first motion is parsed,
so registrations made at its import time are always seen.
"""

from __future__ import annotations

import difflib
import hashlib
import importlib
import importlib.util
import json
import math
import numbers
import os
import re
import tomllib
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from relview.errors import MeshError, SceneError, UserError
from relview.scene.parts import (
    Animation,
    Background,
    Body,
    Camera,
    Effects,
    RenderSettings,
    UniformMotion,
)

#: newest scene-file ``format`` this version reads
SUPPORTED_FORMAT = 1

SHAPES = ("box", "sphere", "cylinder", "plane", "mesh")
PROJECTIONS = ("pinhole", "panorama", "fisheye")
BACKGROUND_KINDS = ("black", "stars", "graticule")
SURFACE_KINDS = ("blackbody", "line", "lines", "spectrum", "color", "pattern")
PATTERN_KINDS = ("checks", "grid")
LAMPS = ("D65",)  # named lamps besides a blackbody temperature in K

#: tessellation levels accepted for ``body.detail`` (see relview.geometry.shapes)
DETAIL_RANGE = (0, 7)

# Upper limits of counts that size arrays or loops, so an extra digit is an error
# message instead of running out of memory (all stars are held at once, about 200
# bytes each; every sample and frame is a list entry before any work).
#: most rays per pixel, ``render.samples``
MAX_SAMPLES = 65536
#: most stars in ``background.count`` (about 200 MB of star arrays)
MAX_STARS = 1_000_000
#: most frames in ``animation.frames`` (11.6 hours at 24 frames/s)
MAX_FRAMES = 1_000_000
# Temperatures whose Planck spectrum is representable in float64 over the visible
# band: Planck's law overflows there above ~1e280 K, and a lamp below ~30 K has no
# visible light at all (its white normalisation divides by zero). The limits are kept
# well inside those measured edges.
#: hottest blackbody, star or line temperature, K
MAX_TEMPERATURE = 1e12
#: coolest lamp lighting a reflective surface, K
MIN_LAMP_TEMPERATURE = 100.0

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
_STRING_RE = re.compile(r'"(?:\\.|[^"\\])*"|\'[^\']*\'')


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
            raise self.error(
                key, f"{what} not found: {key} = {show(value)} (looked for {path})", value
            )
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


# ============================================================================ motion registry

MotionParser = Callable[[Table], Any]


def parse_uniform_motion(table: Table) -> UniformMotion:
    """``kind = "uniform"``: beta (velocity / c), position (m) at time (s)."""
    table.check_keys(("kind", "beta", "position", "time"))
    return UniformMotion(
        beta=table.beta("beta"),
        position=table.vector("position", 3, (0.0, 0.0, 0.0), unit="m"),
        time=table.number("time", 0.0, unit="s"),
    )


#: motion kind -> parser(Table) -> motion object. Add kinds with register_motion.
MOTION_KINDS: dict[str, MotionParser] = {"uniform": parse_uniform_motion}

_motion_plugins_loaded = False


def register_motion(kind: str, parser: MotionParser) -> None:
    """Make ``[body.motion] kind = <kind>`` build its motion with ``parser(table)``."""
    MOTION_KINDS[kind] = parser


def _load_motion_plugins() -> None:
    global _motion_plugins_loaded
    if not _motion_plugins_loaded:
        if importlib.util.find_spec("relview.kinematics.motion") is not None:
            importlib.import_module("relview.kinematics.motion")
        _motion_plugins_loaded = True


def _parse_motion(body: Table) -> Any:
    given = body.data.get("motion")
    if given is not None and not isinstance(given, Mapping) and hasattr(given, "kind"):
        return given  # a ready-made motion object (Scene.from_dict in scripts)
    table = body.table("motion", None, section="body.motion")
    if table is None:
        return UniformMotion()  # at rest at the scene origin
    _load_motion_plugins()
    kind = table.string("kind", "uniform", choices=sorted(MOTION_KINDS))
    return MOTION_KINDS[kind](table)


# ============================================================================ surfaces

# surface kind -> the keys that may accompany it
_SURFACE_EXTRAS = {
    "blackbody": ("scale",),
    "line": (),
    "lines": (),
    "spectrum": (),
    "color": ("lamp", "luminance", "texture"),
    "pattern": (),
}
_MAX_PATTERN_DEPTH = 4


def _parse_line(table: Table) -> tuple[float, float, float]:
    table.check_keys(("nm", "width_nm", "radiance"))
    return (
        table.number("nm", positive=True, unit="nm"),
        table.number("width_nm", positive=True, unit="nm"),
        table.number("radiance", nonnegative=True, unit="W/(sr m2)"),
    )


def surface_spec(table: Table, depth: int = 0) -> tuple[str, dict]:
    """Validate a surface table into (material class name, keyword arguments).

    Pattern arguments ``first`` and ``second`` are themselves specs.
    """
    allowed = list(SURFACE_KINDS) + sorted({k for v in _SURFACE_EXTRAS.values() for k in v})
    table.check_keys(allowed)
    kinds = [k for k in SURFACE_KINDS if table.has(k)]
    if not kinds:
        raise table.error(
            None, f"no surface kind given; give exactly one of: {', '.join(SURFACE_KINDS)}"
        )
    if len(kinds) > 1:
        raise table.error(
            kinds[1],
            f"gives {' and '.join(kinds)} ({', '.join(f'{k} = {show(table.data[k])}' for k in kinds)}); "
            f"a surface has exactly one kind: {', '.join(SURFACE_KINDS)}",
            {k: table.data[k] for k in kinds},
        )
    kind = kinds[0]
    for key in table.given_keys():
        if key not in SURFACE_KINDS and key not in _SURFACE_EXTRAS[kind]:
            owner = next(k for k, v in _SURFACE_EXTRAS.items() if key in v)
            raise table.error(
                key,
                f"{key} = {show(table.data[key])} applies only to {owner} surfaces, not {kind}",
                table.data[key],
            )

    if kind == "blackbody":
        return "Blackbody", {
            "temperature_k": table.number("blackbody", positive=True, high=MAX_TEMPERATURE,
                                          unit="K"),
            "scale": table.number("scale", 1.0, positive=True),
        }
    if kind == "line":
        return "EmissionLines", {"lines": [_parse_line(table.table("line"))]}
    if kind == "lines":
        value = table.data["lines"]
        if not isinstance(value, (list, tuple)) or not value:
            raise table.error(
                "lines",
                f"expected a non-empty list of tables {{ nm, width_nm, radiance }}, got {show(value)}",
                value,
            )
        lines = []
        for i, item in enumerate(value):
            if not isinstance(item, Mapping):
                raise table.error(
                    "lines",
                    f"entry {i + 1} is {_type_name(item)}, not a table: {show(item)}",
                    value,
                )
            sub = Table(
                item,
                table.doc,
                table.path + ("lines", i),
                table.section,
                f"{table.prefix}lines[{i + 1}].",
                table.context,
            )
            lines.append(_parse_line(sub))
        return "EmissionLines", {"lines": lines}
    if kind == "spectrum":
        return "TabulatedSpectrum.from_csv", {
            "path": table.path_value("spectrum", what="spectrum file")
        }
    if kind == "color":
        rgb = table.vector("color", 3)
        if np.any(rgb < 0) or np.any(rgb > 1):
            raise table.error(
                "color",
                f"reflectances must lie in 0..1, got color = {show(table.data['color'])}",
                table.data["color"],
            )
        lamp: float | str = 5800.0
        if table.has("lamp"):
            raw = table.data["lamp"]
            if isinstance(raw, str):
                lamp = table.string("lamp", choices=LAMPS)
            else:
                lamp = table.number("lamp", low=MIN_LAMP_TEMPERATURE, high=MAX_TEMPERATURE,
                                    unit="K")
        texture = None
        if table.has("texture"):
            texture = table.path_value("texture", what="texture image")
            _check_image(table, texture)
        return "Reflective", {
            "rgb": tuple(float(c) for c in rgb),
            "lamp": lamp,
            "luminance": table.number("luminance", 100.0, positive=True, unit="cd/m2"),
            "texture": texture,
        }
    # pattern
    pat = table.table("pattern")
    pat.check_keys(("kind", "period", "line_width", "axes", "first", "second"))
    if depth >= _MAX_PATTERN_DEPTH:
        raise pat.error(None, f"patterns nest at most {_MAX_PATTERN_DEPTH} deep")
    pkind = pat.string("kind", choices=PATTERN_KINDS)
    period = pat.number("period", 0.1, positive=True, unit="m")
    line_width = pat.number("line_width", period / 10.0, positive=True, unit="m")
    if line_width >= period:
        raise pat.error(
            "line_width",
            f"line_width = {show(line_width)} must be smaller than period = {show(period)}",
            line_width,
        )
    axes = (0, 1, 2)
    if pat.has("axes"):
        raw = pat.data["axes"]
        if not isinstance(raw, (list, tuple)) or not 1 <= len(raw) <= 3:
            raise pat.error(
                "axes",
                f"expected a list of 1 to 3 axis numbers (0 = x, 1 = y, 2 = z), got axes = "
                f"{show(raw)}",
                raw,
            )
        axes = pat.int_vector("axes", len(raw), low=0)
        if max(axes) > 2 or len(set(axes)) != len(axes):
            raise pat.error("axes", f"axes = {show(raw)} must be distinct values from 0, 1, 2", raw)
    return "Pattern", {
        "kind": pkind,
        "period": period,
        "line_width": line_width,
        "axes": axes,
        "first": surface_spec(pat.table("first"), depth + 1),
        "second": surface_spec(pat.table("second"), depth + 1),
    }


def _check_image(table: Table, path: Path) -> None:
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(path) as im:
            im.verify()
    except (UnidentifiedImageError, OSError, SyntaxError, ValueError) as exc:
        raise table.error(
            "texture",
            f"texture = {show(table.data['texture'])} is not a readable image ({exc})",
            table.data["texture"],
        ) from exc


def build_surface(spec: tuple[str, dict]) -> Any:
    """Construct the relview.light.materials object a surface spec describes."""
    from relview.light import materials  # imported here: materials imports colour tables at load

    name, kwargs = spec
    if name == "TabulatedSpectrum.from_csv":
        return materials.TabulatedSpectrum.from_csv(kwargs["path"])
    if name == "Pattern":
        kwargs = dict(
            kwargs, first=build_surface(kwargs["first"]), second=build_surface(kwargs["second"])
        )
    return getattr(materials, name)(**kwargs)


def _is_surface_object(value: Any) -> bool:
    """A ready-made relview.light.materials surface (Scene.from_dict in scripts)."""
    return hasattr(value, "observed_xyz") and hasattr(value, "key")


def _parse_surface(body: Table) -> Any:
    if _is_surface_object(body.data.get("surface")):
        return body.data["surface"]
    table = body.table("surface", section="body.surface")
    spec = surface_spec(table)
    kind = next(k for k in SURFACE_KINDS if table.has(k))
    try:
        return build_surface(spec)
    except UserError as exc:  # keep the materials' message (it names e.g. the CSV file and line)
        raise table.error(kind, f"{exc}", table.data[kind], cls=type(exc)) from exc
    except (ValueError, OSError) as exc:
        raise table.error(
            kind, f"{kind} = {show(table.data[kind])}: {exc}", table.data[kind]
        ) from exc


# ============================================================================ sections


def _parse_meta(root: Table) -> tuple[str, int]:
    meta = root.table("scene", None, section="scene")
    if meta is None:
        return "", SUPPORTED_FORMAT
    # Read the format first: a newer file may use keys this version does not know.
    fmt = meta.integer("format", SUPPORTED_FORMAT, low=1)
    if fmt > SUPPORTED_FORMAT:
        raise meta.error(
            "format",
            f"format = {fmt} is newer than this version of relview supports "
            f"(up to {SUPPORTED_FORMAT}); upgrade relview to read this file",
            fmt,
        )
    meta.check_keys(("title", "format"))
    return meta.string("title", ""), fmt


def _parse_render(root: Table) -> RenderSettings:
    t = root.table("render", None, section="render")
    if t is None:
        return RenderSettings()
    t.check_keys(("resolution", "samples", "exposure", "seed", "effects", "shutter",
                  "shutter_samples", "tone"))
    defaults = RenderSettings()
    exposure: float | str = "auto"
    if t.has("exposure"):
        if isinstance(t.data["exposure"], str):
            exposure = t.string("exposure", choices=("auto",))
        else:
            exposure = t.number("exposure", positive=True, unit="cd/m2")
    effects = Effects()
    e = t.table("effects", None, section="render.effects")
    if e is not None:
        names = ("delay", "contraction", "aberration", "doppler", "beaming")
        e.check_keys(names)
        effects = Effects(**{n: e.boolean(n, True) for n in names})
    return RenderSettings(
        resolution=t.int_vector("resolution", 2, defaults.resolution, low=1),
        samples=t.integer("samples", defaults.samples, low=1, high=MAX_SAMPLES),
        exposure=exposure,
        effects=effects,
        seed=t.integer("seed", defaults.seed, low=0, high=2**63 - 1),
        shutter=t.number("shutter", 0.0, nonnegative=True, unit="s"),
        shutter_samples=t.integer("shutter_samples", defaults.shutter_samples, low=1,
                                  high=4096),
        tone=t.string("tone", "none", choices=("none", "reinhard")),
    )


def _unit(v: np.ndarray) -> np.ndarray:
    """v / |v| for a nonzero finite vector, without overflow for huge entries."""
    v = v / np.abs(v).max()
    return v / np.linalg.norm(v)


def _parse_camera(root: Table) -> Camera:
    t = root.table("camera", section="camera")
    t.check_keys(("position", "look_at", "direction", "up", "fov", "time", "beta", "projection",
                  "motion"))
    time = t.number("time", 0.0, unit="s")
    motion = None
    if t.has("motion"):
        # The camera rides any motion kind; its place and velocity follow the worldline.
        for clash in ("position", "beta"):
            if t.has(clash):
                raise t.error(clash, f"{clash} = {show(t.data[clash])} cannot be given with "
                              "[camera.motion], which sets the camera's worldline; remove it",
                              t.data[clash])
        m = t.table("motion", None, section="camera.motion")
        _load_motion_plugins()
        kind = m.string("kind", "uniform", choices=sorted(MOTION_KINDS))
        motion = MOTION_KINDS[kind](m)
        from relview.kinematics.lorentz import C as _C
        from relview.kinematics.motion import camera_state

        position, _beta = camera_state(motion, _C * time)
        position = np.asarray(position, float)
    else:
        position = t.vector("position", 3, unit="m")
    if t.has("look_at") == t.has("direction"):
        both = t.has("look_at")
        raise t.error(
            "direction" if both else None,
            "give exactly one of look_at and direction"
            + (
                f", not both (look_at = {show(t.data['look_at'])}, direction = {show(t.data['direction'])})"
                if both
                else " (neither is given)"
            ),
        )
    look_at = direction = None
    if t.has("look_at"):
        look_at = t.vector("look_at", 3, unit="m")
        # Compare in units of the larger coordinate, so huge values cannot overflow.
        size = max(1.0, float(np.abs(position).max()), float(np.abs(look_at).max()))
        forward = look_at / size - position / size
        if np.linalg.norm(forward) <= 1e-12:
            raise t.error(
                "look_at",
                f"look_at = {show(t.data['look_at'])} equals the camera position; the view direction is undefined",
                t.data["look_at"],
            )
    else:
        direction = t.vector("direction", 3, nonzero=True)
        forward = direction
        direction = _unit(direction)
    up = t.vector("up", 3, (0.0, 0.0, 1.0), nonzero=True)
    sine = np.linalg.norm(np.cross(_unit(forward), _unit(up)))
    if sine < 1e-6:
        raise t.error(
            "up",
            f"up = {show(t.data.get('up', [0.0, 0.0, 1.0]))} is parallel to the view direction "
            f"{show(np.round(_unit(forward), 6))}; the image's vertical is "
            "undefined: give an up vector across the view",
            t.data.get("up"),
        )
    projection = t.string("projection", "pinhole", choices=PROJECTIONS)
    if projection == "panorama":
        if t.has("fov"):
            raise t.error(
                "fov",
                f"fov = {show(t.data['fov'])} does not apply to the panorama projection "
                "(it always shows the full sphere); remove it",
                t.data["fov"],
            )
        fov = 360.0
    elif projection == "fisheye":
        fov = t.number("fov", 180.0, low=0.0, high=360.0, low_open=True, unit="degrees")
    else:
        fov = t.number(
            "fov", 60.0, low=0.0, high=180.0, low_open=True, high_open=True, unit="degrees"
        )
    return Camera(
        position=position,
        look_at=look_at,
        direction=direction,
        up=up,
        fov=fov,
        time=time,
        beta=np.zeros(3) if motion is not None else t.beta("beta"),
        projection=projection,
        motion=motion,
    )


_SHAPE_KEYS = {
    "box": ("size",),
    "sphere": ("radius", "detail"),
    "cylinder": ("radius", "height", "detail"),
    "plane": ("size",),
    "mesh": ("file", "scale", "center"),
}
_BODY_COMMON = ("name", "shape", "rotation", "motion", "surface")


def _parse_body(t: Table, index: int, seen: dict[str, int]) -> Body:
    name = t.string("name", f"body{index + 1}")
    if not name.strip():
        raise t.error("name", f"body name must not be empty: name = {show(name)}", name)
    t.context = f'body "{name}"' if "name" in t.data else f"body #{index + 1}"
    if name in seen:
        raise t.error(
            "name", f'duplicate body name "{name}" (already used by body #{seen[name] + 1})', name
        )
    seen[name] = index

    all_shape_keys = sorted({k for v in _SHAPE_KEYS.values() for k in v})
    t.check_keys(_BODY_COMMON + tuple(all_shape_keys))
    shape = t.string("shape", choices=SHAPES)
    own = _SHAPE_KEYS[shape]
    t.check_keys(
        _BODY_COMMON + own,
        not_here={
            k: f'does not apply to shape "{shape}" (keys for {shape}: {", ".join(own)})'
            for k in all_shape_keys
            if k not in own
        },
    )

    body = Body(name=name, shape=shape, motion=None, surface=None, source_key=t.key_label())
    body.rotation = t.vector("rotation", 3, (0.0, 0.0, 0.0), unit="degrees")
    if shape == "box":
        body.size = t.vector("size", 3, positive=True, unit="m")
    elif shape == "plane":
        body.size = t.vector("size", 2, positive=True, unit="m")
    elif shape in ("sphere", "cylinder"):
        body.radius = t.number("radius", positive=True, unit="m")
        if shape == "cylinder":
            body.height = t.number("height", positive=True, unit="m")
        body.detail = t.integer("detail", None, low=DETAIL_RANGE[0], high=DETAIL_RANGE[1])
    else:
        body.scale = t.number("scale", 1.0, positive=True)
        body.center = t.boolean("center", True)
        body.file = t.path_value("file", what="mesh file")
        _check_mesh(t, body)
    from relview.geometry.shapes import MAX_COORDINATE

    for key in ("size", "radius", "height"):
        value = getattr(body, key, None)
        if value is not None and np.max(value) > MAX_COORDINATE:
            raise t.error(
                key,
                f"{key} = {show(t.data[key])} m is too large to compute with; the largest "
                f"usable size is {MAX_COORDINATE:.0e} m",
                t.data[key],
            )

    body.motion = _parse_motion(t)
    body.surface = _parse_surface(t)
    return body


def _check_mesh(t: Table, body: Body) -> None:
    """Read the mesh now, so a bad file is reported by `relview check` too."""
    from relview.geometry.shapes import load_mesh_file

    try:
        load_mesh_file(body.file, scale=body.scale, center=body.center)
    except MeshError as exc:
        raise t.error(
            "file",
            f"{exc.message}: file = {show(t.data['file'])} ({body.file})",
            t.data["file"],
            cls=MeshError,
        ) from exc


def _parse_bodies(root: Table) -> list[Body]:
    value = root.data.get("body")
    if value is None:
        return []
    if isinstance(value, Mapping):
        raise root.error(
            "body", "bodies are an array of tables: write [[body]] (double brackets) for each body"
        )
    if not isinstance(value, (list, tuple)):
        raise root.error(
            "body",
            f"expected [[body]] tables, got {_type_name(value)}: body = {show(value)}",
            value,
        )
    bodies: list[Body] = []
    seen: dict[str, int] = {}
    for i, item in enumerate(value):
        if not isinstance(item, Mapping):
            raise root.error(
                "body", f"body entry {i + 1} is {_type_name(item)}, not a table: {show(item)}", item
            )
        t = Table(item, root.doc, ("body", i), "body", "", f"body #{i + 1}")
        bodies.append(_parse_body(t, i, seen))
    return bodies


def _parse_background(root: Table) -> Background:
    t = root.table("background", None, section="background")
    if t is None:
        return Background()
    defaults = Background()
    keys_for = {
        "black": ("kind",),
        "stars": ("kind", "count", "seed", "temperature", "luminance"),
        "graticule": ("kind", "spacing", "width", "temperature", "luminance"),
    }
    all_keys = sorted({k for v in keys_for.values() for k in v})
    t.check_keys(all_keys)
    kind = t.string("kind", "black", choices=BACKGROUND_KINDS)
    t.check_keys(
        keys_for[kind],
        not_here={
            k: f'does not apply to background kind "{kind}"'
            for k in all_keys
            if k not in keys_for[kind]
        },
    )
    if kind == "black":
        return Background(kind="black")
    if kind == "stars":
        temperature = t.vector("temperature", 2, defaults.temperature, positive=True, unit="K")
        if temperature[1] > MAX_TEMPERATURE:
            raise t.error(
                "temperature",
                f"temperature = {show(t.data['temperature'])}: out of range; must be "
                f"<= {MAX_TEMPERATURE:.0e} K",
                t.data["temperature"],
            )
        if temperature[0] > temperature[1]:
            raise t.error(
                "temperature",
                f"temperature = {show(t.data['temperature'])} must be [min, max] with min <= max",
                t.data["temperature"],
            )
        return Background(
            kind="stars",
            count=t.integer("count", defaults.count, low=0, high=MAX_STARS),
            seed=t.integer("seed", defaults.seed, low=0, high=2**63 - 1),
            temperature=(float(temperature[0]), float(temperature[1])),
            luminance=t.number("luminance", defaults.luminance, positive=True),
        )
    spacing = t.number(
        "spacing", defaults.spacing, low=0.0, high=90.0, low_open=True, unit="degrees"
    )
    width = t.number("width", defaults.width, positive=True, unit="degrees")
    if width >= spacing:
        raise t.error(
            "width", f"width = {show(width)} must be smaller than spacing = {show(spacing)}", width
        )
    line_t = t.number("temperature", 6500.0, positive=True, high=MAX_TEMPERATURE, unit="K")
    return Background(
        kind="graticule",
        spacing=spacing,
        width=width,
        temperature=(line_t, line_t),  # one colour: min = max
        luminance=t.number("luminance", defaults.luminance, positive=True, unit="cd/m2"),
    )


def _parse_animation(root: Table) -> Animation | None:
    t = root.table("animation", None, section="animation")
    if t is None:
        return None
    t.check_keys(("start", "end", "frames", "fps"))
    start = t.number("start", 0.0, unit="s")
    end = t.number("end", start, unit="s")
    if end < start:
        raise t.error(
            "end", f"end = {show(t.data['end'])} s is before start = {show(start)} s", t.data["end"]
        )
    return Animation(
        start=start,
        end=end,
        frames=t.integer("frames", 1, low=1, high=MAX_FRAMES),
        fps=t.number("fps", 24.0, positive=True, unit="frames/s"),
    )


# ============================================================================ entry points


def _hash(raw: bytes, referenced: list[Path]) -> str:
    h = hashlib.sha256(raw)
    for path in referenced:
        h.update(b"\0" + str(path.name).encode() + b"\0")
        h.update(path.read_bytes())
    return h.hexdigest()


def _build(data: Any, doc: _Document, raw: bytes | None, source_path: Path | None) -> dict:
    """The validated fields of a :class:`relview.scene.model.Scene`."""
    if not isinstance(data, Mapping):
        raise SceneError(f"a scene is a table of sections, got {_type_name(data)}", file=doc.source)
    root = Table(data, doc, (), "")
    title, fmt = _parse_meta(root)
    root.check_keys(("scene", "render", "camera", "body", "background", "animation"))
    render = _parse_render(root)
    camera = _parse_camera(root)
    bodies = _parse_bodies(root)
    background = _parse_background(root)
    animation = _parse_animation(root)
    if raw is None:
        raw = json.dumps(data, sort_keys=True, default=show).encode()
    return dict(
        camera=camera,
        bodies=bodies,
        render=render,
        background=background,
        animation=animation,
        title=title,
        format=fmt,
        source_path=source_path,
        source_hash=_hash(raw, doc.referenced),
    )


def fields_from_dict(data: Mapping, base_dir: str | Path = ".", source: str = "<dict>") -> dict:
    """Validate the structure a scene file holds (nested dicts/lists) into Scene fields.

    ``base_dir``: directory that relative file paths are resolved against.
    ``source``: the name used in error messages.
    """
    return _build(data, _Document(source, Path(base_dir), None), None, None)


_TOML_POS_RE = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")


def read_scene_file(path: str | Path) -> dict:
    """Read and validate the scene in a TOML file -> the fields of its Scene."""
    path = Path(path)
    source = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise SceneError("scene file does not exist", file=source, value=source) from None
    except IsADirectoryError:
        raise SceneError("is a directory, not a scene file", file=source, value=source) from None
    except OSError as exc:
        raise SceneError(
            f"cannot read scene file: {exc.strerror}", file=source, value=source
        ) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise SceneError(
            f"not UTF-8 text (byte 0x{raw[exc.start]:02x}); scene files are TOML, which is UTF-8",
            file=source,
            line=line,
        ) from None
    text = text.removeprefix("\ufeff")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = _TOML_POS_RE.search(msg)
        line = column = None
        if m:
            line, column = int(m.group(1)), int(m.group(2))
            msg = msg[: m.start()]
        elif msg.endswith("(at end of document)"):
            line = max(1, len(text.splitlines()))
            msg = msg[: -len("(at end of document)")].rstrip() + " at the end of the file"
        snippet = ""
        if line is not None and 1 <= line <= len(text.splitlines()):
            snippet = f": {text.splitlines()[line - 1].strip()!r}"
        raise SceneError(
            f"TOML syntax error: {msg}{snippet}", file=source, line=line, column=column
        ) from None
    if not data:
        what = "is empty" if not text.strip() else "holds only comments"
        raise SceneError(
            f"the scene file {what}; a scene needs at least a [camera] table", file=source
        )
    doc = _Document(source, path.parent, text)
    return _build(data, doc, raw, path)
