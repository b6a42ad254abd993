"""Patterns: two surfaces alternating on a body in a rest-frame lattice."""

from __future__ import annotations

import contextvars

import numpy as np

from relview.light.surfaces.base import (
    Surface,
    _as_doppler,
    _positive_number,
    _split_spectra,
    _split_xyz,
)
from relview.light.surfaces.nesting import read_nested
from relview.light.surfaces.reflective import Reflective

#: deepest nesting of ``pattern`` surfaces in a scene file
MAX_PATTERN_DEPTH = 4

#: patterns enclosing the surface table being read (a context variable, so the limit
#: holds whichever reader nests: readers keep the one-argument signature)
_PATTERN_DEPTH: contextvars.ContextVar[int] = contextvars.ContextVar("pattern_depth", default=0)


class Pattern(Surface):
    """Two surfaces laid out by a rest-frame lattice of cubic cells of size ``period`` (m).

    The lattice: cell n along axis i covers (n - 1/2) period <= p_i < (n + 1/2) period, so
    the body origin sits at a cell centre (and faces of boxes whose half-size is a multiple
    of ``period`` lie at cell centres rather than on boundaries). Only the coordinates
    listed in ``axes`` (0 = x, 1 = y, 2 = z of the body's rest frame) take part.

    * ``kind = "checks"``: a 3-D checkerboard; the cell with even sum of indices shows
      ``first``, odd shows ``second``.
    * ``kind = "grid"``: lines of width ``line_width`` (m) centred on the cell boundaries,
      in ``second``, on a ``first`` background.

    Defaults: ``first`` a light grey and ``second`` a dark grey Reflective under D65.
    """

    KINDS = ("checks", "grid")

    def __init__(
        self,
        kind: str = "checks",
        period: float = 0.1,
        line_width: float = 0.01,
        first: Surface | None = None,
        second: Surface | None = None,
        axes=(0, 1, 2),
    ):
        if kind not in self.KINDS:
            raise ValueError(f"pattern kind must be one of {', '.join(self.KINDS)}, got {kind!r}")
        self.kind = kind
        self.period = _positive_number(period, "pattern period (m)")
        self.line_width = _positive_number(line_width, "pattern line width (m)")
        if kind == "grid" and self.line_width >= self.period:
            raise ValueError(
                f"pattern line width ({self.line_width} m) must be smaller than the period "
                f"({self.period} m)"
            )
        self.first = Reflective((0.8, 0.8, 0.8)) if first is None else first
        self.second = Reflective((0.05, 0.05, 0.05)) if second is None else second
        self.uses_uv = bool(
            getattr(self.first, "uses_uv", True) or getattr(self.second, "uses_uv", True)
        )
        for name, s in (("first", self.first), ("second", self.second)):
            if not hasattr(s, "observed_xyz") or not hasattr(s, "key"):
                raise ValueError(f"pattern {name} must be a surface, got {s!r}")
        try:
            axes_t = tuple(int(a) for a in axes)
        except (TypeError, ValueError):
            raise ValueError(f"pattern axes must be a list of 0, 1, 2, got {axes!r}") from None
        if not axes_t or any(a not in (0, 1, 2) for a in axes_t) or len(set(axes_t)) != len(axes_t):
            raise ValueError(f"pattern axes must be distinct values from 0, 1, 2, got {axes!r}")
        self.axes = axes_t

    @classmethod
    def from_table(cls, table) -> Pattern:
        """``pattern = { kind, period, line_width, axes, first, second }``; ``first`` and
        ``second`` are surface tables read through :data:`SURFACE_KINDS`, patterns
        included, nested at most :data:`MAX_PATTERN_DEPTH` deep."""
        pat = table.table("pattern")
        pat.check_keys(("kind", "period", "line_width", "axes", "first", "second"))
        depth = _PATTERN_DEPTH.get()
        if depth >= MAX_PATTERN_DEPTH:
            raise pat.error(None, f"patterns nest at most {MAX_PATTERN_DEPTH} deep")
        kind = pat.string("kind", choices=cls.KINDS)
        period = pat.number("period", 0.1, positive=True, unit="m")
        line_width = pat.number("line_width", period / 10.0, positive=True, unit="m")
        if line_width >= period:
            raise pat.error(
                "line_width",
                f"line_width = {pat.show(line_width)} must be smaller than period = {pat.show(period)}",
                line_width,
            )
        axes = (0, 1, 2)
        if pat.has("axes"):
            raw = pat.data["axes"]
            if not isinstance(raw, (list, tuple)) or not 1 <= len(raw) <= 3:
                raise pat.error(
                    "axes",
                    f"expected a list of 1 to 3 axis numbers (0 = x, 1 = y, 2 = z), got axes = "
                    f"{pat.show(raw)}",
                    raw,
                )
            axes = pat.int_vector("axes", len(raw), low=0)
            if max(axes) > 2 or len(set(axes)) != len(axes):
                raise pat.error(
                    "axes", f"axes = {pat.show(raw)} must be distinct values from 0, 1, 2", raw
                )
        token = _PATTERN_DEPTH.set(depth + 1)
        try:
            first = read_nested(pat.table("first"))
            second = read_nested(pat.table("second"))
        finally:
            _PATTERN_DEPTH.reset(token)
        return cls(
            kind=kind, period=period, line_width=line_width, first=first, second=second, axes=axes
        )

    def key(self):
        return (
            "pattern",
            self.kind,
            self.period,
            self.line_width,
            self.first.key(),
            self.second.key(),
            self.axes,
        )

    def second_mask(self, rest_position) -> np.ndarray:
        """(N,) True where the hit shows ``second``."""
        p = np.asarray(rest_position, dtype=float).reshape(-1, 3)[:, list(self.axes)]
        scaled = p / self.period
        if self.kind == "checks":
            cells = np.floor(scaled + 0.5).astype(np.int64)
            return (cells.sum(axis=1) % 2) == 1
        # grid: distance (in periods) to the nearest boundary at half-integers
        frac = scaled + 0.5 - np.floor(scaled + 0.5)  # in [0, 1): 0 on a boundary
        dist = np.minimum(frac, 1.0 - frac) * self.period
        return np.any(dist < 0.5 * self.line_width, axis=1)

    def observed_xyz(self, doppler, rest_position, uv=None, effects=None) -> np.ndarray:
        return self.lit_xyz(doppler, rest_position, uv, effects, None)

    def lit_xyz(self, doppler, rest_position, uv, effects, incident) -> np.ndarray:
        """Each cell's surface, lit by ``incident`` (relview.light.lamps.Incident) or,
        when it is None, by its own light only."""
        d = _as_doppler(doppler)
        mask = self.second_mask(rest_position)
        if mask.shape[0] != d.size:
            raise ValueError(f"pattern: {d.size} Doppler factors but {mask.shape[0]} positions")
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        uv_arr = None if uv is None else np.asarray(uv, dtype=float).reshape(-1, 2)
        parts = ((self.first, ~mask), (self.second, mask))
        return _split_xyz(parts, d, pos, uv_arr, effects, incident)

    def spectrum_seen(
        self, wavelength_nm, doppler, rest_position, uv=None, effects=None, incident=None
    ) -> np.ndarray:
        d = _as_doppler(doppler)
        mask = self.second_mask(rest_position)
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        uv_arr = None if uv is None else np.asarray(uv, dtype=float).reshape(-1, 2)
        parts = ((self.first, ~mask), (self.second, mask))
        return _split_spectra(parts, wavelength_nm, d, pos, uv_arr, effects, incident)

    def __repr__(self):
        return (
            f"Pattern(kind={self.kind!r}, period={self.period!r}, line_width={self.line_width!r}, "
            f"first={self.first!r}, second={self.second!r}, axes={self.axes!r})"
        )
