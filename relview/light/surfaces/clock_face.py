"""Clock faces: a dial showing the body clock's reading carried by each point's light."""

from __future__ import annotations

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

#: lit segments of the seven-segment digits 0-9 (segments a-g: top, upper right, lower
#: right, bottom, lower left, upper left, middle; common practice for numeric displays)
_SEGMENTS = np.array(
    [
        [1, 1, 1, 1, 1, 1, 0],
        [0, 1, 1, 0, 0, 0, 0],
        [1, 1, 0, 1, 1, 0, 1],
        [1, 1, 1, 1, 0, 0, 1],
        [0, 1, 1, 0, 0, 1, 1],
        [1, 0, 1, 1, 0, 1, 1],
        [1, 0, 1, 1, 1, 1, 1],
        [1, 1, 1, 0, 0, 0, 0],
        [1, 1, 1, 1, 1, 1, 1],
        [1, 1, 1, 1, 0, 1, 1],
    ],
    bool,
)


def _segment_masks(x: np.ndarray, y: np.ndarray, stroke: float) -> np.ndarray:
    """(N, 7) which of the seven segments a point (x, y) of a digit cell [0,1] x [0,2]
    (y up) falls on, strokes ``stroke`` wide."""
    inside = (x >= 0) & (x <= 1) & (y >= 0) & (y <= 2)
    left, right = x <= stroke, x >= 1 - stroke
    upper, lower = y >= 1, y <= 1
    return np.stack(
        [
            inside & (y >= 2 - stroke),
            inside & right & upper,
            inside & right & lower,
            inside & (y <= stroke),
            inside & left & lower,
            inside & left & upper,
            inside & (np.abs(y - 1) <= stroke / 2),
        ],
        axis=1,
    )


class ClockFace(Surface):
    """A clock dial showing the body's clock reading carried by each point's light
    (relview.kinematics.clocks): drawn in the body's rest-frame coordinates, so it is
    aberrated, shifted and beamed like every surface, and each point shows the reading
    its own light left with.

    The dial lies in the plane of body axes ``axes`` = (i, j), centred at ``center`` (m,
    body axes; only components i and j count), of radius ``radius`` (m): a rim, twelve
    marks, and one hand that turns once per ``period`` s of the reading, clockwise from
    axis j towards axis i, pointing along j at reading ``phase`` s. Below the hub a
    seven-segment reading shows the whole number of ``unit`` s (the last ``digits``
    digits, a bar in front when negative) in a window the hand passes under. The dial's marks are drawn with ``ink``,
    everything else with ``face``.
    """

    uses_uv = False
    uses_position = True
    #: the renderer passes observed_xyz / lit_xyz the clock reading (s) of each hit
    uses_proper_time = True

    def __init__(
        self,
        period: float = 1e-8,
        phase: float = 0.0,
        center=(0.0, 0.0, 0.0),
        radius: float = 0.5,
        axes=(0, 2),
        unit: float = 1e-9,
        digits: int = 3,
        face: Surface | None = None,
        ink: Surface | None = None,
    ):
        self.period = _positive_number(period, "clock period (s)")
        self.phase = float(phase)
        self.center = np.asarray(center, float).reshape(3)
        self.radius = _positive_number(radius, "clock radius (m)")
        self.axes = tuple(int(a) for a in axes)
        if len(self.axes) != 2 or len(set(self.axes)) != 2 or not set(self.axes) <= {0, 1, 2}:
            raise ValueError(f"clock axes must be two distinct values from 0, 1, 2, got {axes!r}")
        self.unit = _positive_number(unit, "clock digit unit (s)")
        self.digits = int(digits)
        self.first = Reflective((0.85, 0.85, 0.8)) if face is None else face
        self.second = Reflective((0.03, 0.03, 0.03)) if ink is None else ink

    @classmethod
    def from_table(cls, table) -> ClockFace:
        """``clock_face = { period, phase, center, radius, axes, unit, digits, face, ink }``;
        ``face`` and ``ink`` are surface tables read through :data:`SURFACE_KINDS`."""
        t = table.table("clock_face")
        t.check_keys(
            ("period", "phase", "center", "radius", "axes", "unit", "digits", "face", "ink")
        )
        axes = (0, 2)
        if t.has("axes"):
            axes = t.int_vector("axes", 2, low=0)
            if max(axes) > 2 or axes[0] == axes[1]:
                raise t.error(
                    "axes",
                    f"axes = {t.show(t.data['axes'])} must be two distinct "
                    "values from 0, 1, 2 (0 = x, 1 = y, 2 = z)",
                    t.data["axes"],
                )
        face = read_nested(t.table("face")) if t.has("face") else None
        ink = read_nested(t.table("ink")) if t.has("ink") else None
        return cls(
            period=t.number("period", 1e-8, positive=True, unit="s"),
            phase=t.number("phase", 0.0, unit="s"),
            center=t.vector("center", 3, (0.0, 0.0, 0.0), unit="m"),
            radius=t.number("radius", 0.5, positive=True, unit="m"),
            axes=axes,
            unit=t.number("unit", 1e-9, positive=True, unit="s"),
            digits=t.integer("digits", 3, low=1, high=9),
            face=face,
            ink=ink,
        )

    def key(self):
        return (
            "clock_face",
            self.period,
            self.phase,
            tuple(self.center),
            self.radius,
            self.axes,
            self.unit,
            self.digits,
            self.first.key(),
            self.second.key(),
        )

    def ink_mask(self, rest_position, proper_time) -> np.ndarray:
        """(N,) True where the hit shows ink: rim, marks, hand, hub and digits."""
        p = np.asarray(rest_position, float).reshape(-1, 3)
        reading = np.asarray(proper_time, float).reshape(-1)
        i, j = self.axes
        a = (p[:, i] - self.center[i]) / self.radius  # dial coordinates: radius 1
        b = (p[:, j] - self.center[j]) / self.radius
        r = np.hypot(a, b)
        angle = np.arctan2(a, b)  # clockwise from axis j towards axis i
        rim = (r >= 0.93) & (r <= 1.0)
        nearest = np.round(angle / (np.pi / 6)) * (np.pi / 6)
        marks = (r >= 0.8) & (r < 0.93) & (np.abs(angle - nearest) * r <= 0.03)
        with np.errstate(invalid="ignore"):
            turn = 2.0 * np.pi * ((reading - self.phase) / self.period)
        along = a * np.sin(turn) + b * np.cos(turn)
        across = np.abs(a * np.cos(turn) - b * np.sin(turn))
        hand = (along >= -0.08) & (along <= 0.75) & (across <= 0.035)
        hub = r <= 0.07
        digits, window = self._digit_mask(a, b, reading)
        return rim | marks | (hand & ~window) | hub | digits

    def _digit_mask(self, a, b, reading) -> tuple[np.ndarray, np.ndarray]:
        """(ink, window): the seven-segment reading below the hub, cells 0.16 wide and
        0.32 high, 0.21 apart, centred on the dial's j axis between b = -0.62 and -0.30,
        and the window around them that the hand passes under."""
        n = self.digits + 1  # a sign cell, then the digits
        pitch, width = 0.21, 0.16
        left = -0.5 * (n * pitch - (pitch - width))
        cell = np.floor((a - left) / pitch)
        x = ((a - left) - cell * pitch) / width
        y = (b + 0.62) / 0.16
        with np.errstate(invalid="ignore"):
            count = np.floor(reading / self.unit)
        negative = count < 0
        shown = np.where(np.isfinite(count), np.abs(count), 0.0)
        place = (n - 1 - cell).clip(0, self.digits - 1)  # 0: the last digit
        digit = (np.floor(shown / 10.0**place) % 10).astype(np.int64).clip(0, 9)
        seg = _segment_masks(x, y, 0.18)
        ink = np.any(seg & _SEGMENTS[digit], axis=1) & (cell >= 1) & (cell < n)
        sign = (cell == 0) & negative & seg[:, 6]
        window = (np.abs(a) <= -left + 0.04) & (b >= -0.66) & (b <= -0.26)
        return (ink | sign) & np.isfinite(count), window

    def observed_xyz(
        self, doppler, rest_position, uv=None, effects=None, proper_time=None
    ) -> np.ndarray:
        return self.lit_xyz(doppler, rest_position, uv, effects, None, proper_time)

    def lit_xyz(
        self, doppler, rest_position, uv, effects, incident, proper_time=None
    ) -> np.ndarray:
        """Face and ink, lit by ``incident`` or, when it is None, by their own light."""
        d = _as_doppler(doppler)
        if proper_time is None:  # no clock data (e.g. a caller without clocks): a blank dial
            proper_time = np.full(d.size, np.nan)
        mask = self.ink_mask(rest_position, proper_time)
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        parts = ((self.first, ~mask), (self.second, mask))
        return _split_xyz(parts, d, pos, None, effects, incident)

    def spectrum_seen(
        self,
        wavelength_nm,
        doppler,
        rest_position,
        uv=None,
        effects=None,
        incident=None,
        proper_time=None,
    ) -> np.ndarray:
        d = _as_doppler(doppler)
        if proper_time is None:
            proper_time = np.full(d.size, np.nan)
        mask = self.ink_mask(rest_position, proper_time)
        pos = np.asarray(rest_position, dtype=float).reshape(-1, 3)
        parts = ((self.first, ~mask), (self.second, mask))
        return _split_spectra(parts, wavelength_nm, d, pos, None, effects, incident)
