"""Film: from absolute CIE XYZ images to pictures and files, safely.

Pipeline (docs: shared design contract, "Colour pipeline")::

    absolute CIE 1931 XYZ (Y in cd/m2)
      -- exposure: divide by the white luminance W (cd/m2)  -> relative XYZ, W -> Y = 1
      -- XYZ -> linear sRGB (IEC 61966-2-1 matrix, relview.light.spectrum)   = Frame.image
      -- display: gamut rule, optional tone curve, clip to [0, 1]
      -- sRGB encoding (IEC 61966-2-1 transfer function, relview.light.spectrum)
      -- 8 or 16 bit integers -> PNG

Exposure
    ``exposure_white`` gives the luminance W (cd/m2) that maps to white, either
    fixed (a number) or automatic: the 99th percentile of the luminance of the
    lit pixels, taken on a logarithmic scale (see :func:`auto_white`).
    ``ExposureLock`` holds one W across the frames of an animation.

Out-of-gamut colours (:func:`gamut_map`)
    Light from a Doppler-shifted spectrum can be more saturated than any sRGB
    colour, so the matrix gives negative channels. Rule: such a pixel is
    desaturated towards the grey of the same luminance, just far enough that its
    lowest channel becomes 0. The luminance Y (and the hue angle) are kept; a
    pixel whose luminance is not positive becomes black. (Common practice for
    gamut mapping by desaturation; the straight line towards the achromatic
    point is our own choice.)

Tone (:func:`apply_tone`)
    ``"none"`` (default, honest): clip each channel to [0, 1] after exposure.
    ``"reinhard"``: the extended global operator of Reinhard, Stark, Shirley &
    Ferwerda, "Photographic Tone Reproduction for Digital Images", SIGGRAPH
    2002, eq. 4, applied to luminance with the hue kept.

Files
    Every writer is atomic (temporary file in the target directory, fsync, then
    an atomic rename) and never destroys earlier output unless ``overwrite=True``:
    an existing file makes the writer choose ``name-1.ext``, ``name-2.ext``, ...
    (:func:`safe_output_path`). Failures (no permission, disk full, ...) raise
    :class:`relview.errors.OutputError` naming the path and the reason, and leave
    no partial file behind. Each writer returns the path it actually wrote.
"""

from __future__ import annotations

import errno
import itertools
import json
import math
import numbers
import os
import secrets
import struct
import zlib
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np

from relview.errors import OutputError

__all__ = [
    "AUTO_WHITE_PERCENTILE",
    "FALLBACK_WHITE_CD_M2",
    "LUMINANCE_WEIGHTS",
    "METADATA_ENTRY",
    "NAN_RGB",
    "REINHARD_L_WHITE",
    "TONE_CURVES",
    "ExposureLock",
    "OutputError",
    "apply_tone",
    "auto_white",
    "check_white",
    "encode_png",
    "expose",
    "exposure_white",
    "exr_available",
    "false_colour",
    "figure_metadata",
    "gamut_map",
    "safe_output_path",
    "save_layer_figure",
    "to_8bit",
    "to_16bit",
    "to_display",
    "write_exr",
    "write_json_sidecar",
    "write_layers_npz",
    "write_png",
]

# --------------------------------------------------------------------------- exposure

#: Percentile (of lit pixels' luminance, on a log scale) that automatic exposure maps
#: to white. 99 rather than the maximum so that a few strongly beamed pixels (brightness
#: goes as D^4) do not darken the whole frame; the top 1 % of lit pixels burn out.
#: Common practice in automatic exposure; the value 99 is our choice.
AUTO_WHITE_PERCENTILE = 99.0

#: White luminance (cd/m2) used by automatic exposure when no lit pixel has any light:
#: the frame is then black (or shows only unlit background light at this fixed scale).
FALLBACK_WHITE_CD_M2 = 1.0


def check_white(white: Any, what: str = "exposure white") -> float:
    """Validate a white luminance in cd/m2: a finite number > 0. Returns it as float."""
    if isinstance(white, bool) or not isinstance(white, numbers.Real):
        raise ValueError(f"{what} must be a luminance in cd/m2 (a number > 0), got {white!r}")
    value = float(white)
    if not math.isfinite(value) or value <= 0.0:
        raise ValueError(f"{what} must be a finite luminance in cd/m2 > 0, got {white!r}")
    return value


def _is_auto(setting: Any) -> bool:
    return isinstance(setting, str) and setting.strip().lower() == "auto"


def _check_setting(setting: Any) -> float | str:
    """``"auto"`` or a valid white luminance (cd/m2)."""
    if _is_auto(setting):
        return "auto"
    if isinstance(setting, str):
        raise ValueError(
            f'exposure must be "auto" or a luminance in cd/m2 that maps to white, got {setting!r}'
        )
    return check_white(setting, "exposure")


def _check_xyz(xyz_image: Any, name: str = "xyz image") -> np.ndarray:
    xyz = np.asarray(xyz_image)
    if xyz.ndim < 1 or xyz.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3) (X, Y, Z), got {xyz.shape}")
    if not np.issubdtype(xyz.dtype, np.number):
        raise ValueError(f"{name} must be numeric, got dtype {xyz.dtype}")
    return xyz


def _lit_luminance(xyz_image: Any, mask: Any) -> np.ndarray:
    """1-d float64 array of the luminance Y (cd/m2) of the masked pixels."""
    xyz = _check_xyz(xyz_image)
    y = xyz[..., 1]
    if mask is None:
        return np.asarray(y, dtype=np.float64).ravel()
    mask = np.asarray(mask)
    if mask.shape != y.shape:
        raise ValueError(f"mask shape {mask.shape} does not match the image {y.shape}")
    return np.asarray(y[mask.astype(bool)], dtype=np.float64)


def auto_white(luminance: Any) -> float:
    """Automatic white (cd/m2) from the luminances Y (cd/m2) of the lit pixels.

    Statistic: the :data:`AUTO_WHITE_PERCENTILE` (99th) percentile of log10(Y)
    over the pixels with 0 < Y < inf, returned as 10**percentile.

    * Pixels with Y = 0 saw a surface that sends no visible light; counting them
      would make the exposure depend on how much of the frame is black, so they
      are left out. NaN and infinite values are left out too.
    * The percentile is taken of log10(Y) because Y can span 20 orders of
      magnitude: interpolating between two neighbouring order statistics on a
      linear scale would be dominated by the larger one; on a log scale it stays
      between them geometrically.
    * With no positive luminance at all the result is :data:`FALLBACK_WHITE_CD_M2`.
    """
    y = np.asarray(luminance, dtype=np.float64).ravel()
    y = y[np.isfinite(y) & (y > 0.0)]
    if y.size == 0:
        return FALLBACK_WHITE_CD_M2
    return float(10.0 ** np.percentile(np.log10(y), AUTO_WHITE_PERCENTILE))


def exposure_white(xyz_image: Any, mask: Any = None, setting: float | str = "auto") -> float:
    """The luminance in cd/m2 that maps to white.

    Parameters
    ----------
    xyz_image:
        (H, W, 3) absolute CIE 1931 XYZ, Y in cd/m2.
    mask:
        (H, W) bool, True for pixels that saw something (a body; the caller
        decides whether background light counts). None: every pixel.
    setting:
        A number (cd/m2): returned as it is (validated). ``"auto"``: see
        :func:`auto_white`.
    """
    setting = _check_setting(setting)
    if setting != "auto":
        _check_xyz(xyz_image)
        return float(setting)
    return auto_white(_lit_luminance(xyz_image, mask))


def _colour_functions():
    """``(xyz_to_linear_srgb, encode_srgb)`` from relview.light.spectrum (imported lazily)."""
    from relview.light.spectrum import encode_srgb, xyz_to_linear_srgb

    return xyz_to_linear_srgb, encode_srgb


def expose(xyz_image: Any, white: float) -> np.ndarray:
    """(H, W, 3) absolute XYZ (cd/m2) -> (H, W, 3) float64 linear sRGB, not clipped.

    ``white`` (cd/m2) maps to Y = 1: a D65-white pixel of that luminance gives
    (1, 1, 1). Computed in float64 so that luminances 20 orders of magnitude
    apart neither overflow nor underflow.
    """
    white = check_white(white)
    xyz = _check_xyz(xyz_image).astype(np.float64, copy=False)
    xyz_to_linear_srgb, _ = _colour_functions()
    return np.asarray(xyz_to_linear_srgb(xyz / white), dtype=np.float64)


@dataclass
class ExposureLock:
    """One white level (cd/m2) held across the frames of an animation.

    ``setting`` is a number (fixed: locked at once) or ``"auto"``: the white is
    then computed by :meth:`lock_from` (pooled over a set of probe frames) or, if
    nothing locked it before, by the first call of :meth:`white_for` (from that
    first frame). :meth:`set` fixes it by hand. :meth:`to_dict` /
    :meth:`from_dict` store it as a small JSON-friendly dict, e.g. to resume an
    animation with the same exposure.
    """

    setting: float | str = "auto"
    white: float | None = None  # cd/m2, once locked
    source: str = ""  # how the white was found, for logs and metadata

    def __post_init__(self) -> None:
        self.setting = _check_setting(self.setting)
        if self.white is not None:
            self.white = check_white(self.white, "exposure lock white")
        elif self.setting != "auto":
            self.white = float(self.setting)
            self.source = self.source or "fixed"

    @property
    def locked(self) -> bool:
        return self.white is not None

    def set(self, white: float, source: str = "set") -> float:
        """Lock to a given white (cd/m2)."""
        self.white = check_white(white, "exposure lock white")
        self.source = source
        return self.white

    def lock_from(self, xyz_images: Iterable[Any], masks: Iterable[Any] | None = None) -> float:
        """Lock from probe frames: the automatic statistic over all their lit pixels pooled.

        For a fixed setting this keeps the fixed white. ``masks`` is one (H, W)
        bool mask per frame, or None for every pixel.
        """
        if self.setting != "auto":
            return self.set(float(self.setting), "fixed")
        images = list(xyz_images)
        if not images:
            raise ValueError("exposure lock: no probe frames given")
        mask_list = [None] * len(images) if masks is None else list(masks)
        if len(mask_list) != len(images):
            raise ValueError(
                f"exposure lock: {len(images)} probe frames but {len(mask_list)} masks"
            )
        pooled = np.concatenate([_lit_luminance(im, m) for im, m in zip(images, mask_list)])
        return self.set(auto_white(pooled), f"auto over {len(images)} probe frame(s)")

    def white_for(self, xyz_image: Any, mask: Any = None) -> float:
        """The locked white (cd/m2); locks it from this frame if nothing did before."""
        if self.white is None:
            return self.set(exposure_white(xyz_image, mask, "auto"), "auto from first frame")
        return self.white

    def to_dict(self) -> dict[str, Any]:
        return {"setting": self.setting, "white_cd_m2": self.white, "source": self.source}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ExposureLock:
        if not isinstance(data, Mapping):
            raise ValueError(f"exposure lock: expected a dict, got {type(data).__name__}")
        known = {"setting", "white_cd_m2", "source"}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ValueError(f"exposure lock: unknown key(s) {unknown}; expected {sorted(known)}")
        source = data.get("source", "")
        if not isinstance(source, str):
            raise ValueError(f"exposure lock: source must be text, got {source!r}")
        return cls(
            setting=data.get("setting", "auto"), white=data.get("white_cd_m2"), source=source
        )


# --------------------------------------------------------------------------- display

#: Luminance of linear sRGB: the Y row of the sRGB -> XYZ matrix, IEC 61966-2-1:1999
#: eq. (the weights sum to 1, so a grey (Y, Y, Y) has luminance Y).
LUMINANCE_WEIGHTS = np.array([0.2126, 0.7152, 0.0722])

#: Names accepted by :func:`apply_tone` / :func:`to_display`.
TONE_CURVES = ("none", "reinhard")

#: Relative luminance (1 = exposure white) that the "reinhard" curve maps to display
#: white (L_white of Reinhard et al. 2002, eq. 4). Our choice: up to 4x the exposure
#: white keeps some gradation before burning out.
REINHARD_L_WHITE = 4.0

# Linear values beyond this are all display white (or black) anyway; bounding them
# keeps products like L * L in the tone curve finite.
_DISPLAY_BOUND = 1e30


def gamut_map(linear: Any) -> np.ndarray:
    """Bring negative (out-of-gamut) linear sRGB channels to 0, keeping luminance.

    A pixel with a negative channel and luminance Y > 0 is mixed with the grey
    (Y, Y, Y): rgb' = Y + t (rgb - Y) with t = Y / (Y - min(rgb)), the largest t
    that makes every channel >= 0. Y is unchanged because the luminance weights
    sum to 1. Pixels with Y <= 0 become black. Other pixels are unchanged.
    Returns float64 (..., 3); values above 1 are left alone.
    """
    rgb = np.array(linear, dtype=np.float64)  # a copy
    if rgb.ndim < 1 or rgb.shape[-1] != 3:
        raise ValueError(f"linear sRGB must have shape (..., 3), got {rgb.shape}")
    lum = rgb @ LUMINANCE_WEIGHTS
    low = rgb.min(axis=-1)
    out_of_gamut = low < 0.0
    desaturate = out_of_gamut & (lum > 0.0)
    y = lum[desaturate][:, None]
    t = y / (y - low[desaturate][:, None])
    rgb[desaturate] = y + t * (rgb[desaturate] - y)
    rgb[out_of_gamut & ~(lum > 0.0)] = 0.0
    np.maximum(rgb, 0.0, out=rgb)  # rounding residue of order 1e-17
    return rgb


def apply_tone(linear: Any, tone: str = "none", l_white: float = REINHARD_L_WHITE) -> np.ndarray:
    """Apply a tone curve to non-negative linear sRGB (float64 (..., 3), not clipped).

    ``"none"``: unchanged. ``"reinhard"``: relative luminance L (= Y, 1 at the
    exposure white) becomes L_d = L (1 + L / l_white^2) / (1 + L) (Reinhard et al.
    2002, eq. 4) and each pixel's channels are scaled by L_d / L, keeping the hue.
    Channels can still exceed 1 for saturated bright colours; the caller clips.
    """
    if tone not in TONE_CURVES:
        raise ValueError(f"tone must be one of {TONE_CURVES}, got {tone!r}")
    rgb = np.asarray(linear, dtype=np.float64)
    if tone == "none":
        return rgb
    l_white = check_white(l_white, "reinhard l_white")
    lum = rgb @ LUMINANCE_WEIGHTS
    with np.errstate(divide="ignore", invalid="ignore"):
        mapped = lum * (1.0 + lum / (l_white * l_white)) / (1.0 + lum)
        scale = np.where(lum > 0.0, mapped / lum, 0.0)
    return rgb * scale[..., None]


def to_display(linear: Any, tone: str = "none") -> np.ndarray:
    """Linear sRGB (any range) -> display-referred linear sRGB in [0, 1], float64.

    Order: NaN -> 0 (black), +-inf bounded; :func:`gamut_map`; :func:`apply_tone`;
    clip each channel to [0, 1].
    """
    rgb = np.nan_to_num(
        np.asarray(linear, dtype=np.float64), nan=0.0, posinf=_DISPLAY_BOUND, neginf=-_DISPLAY_BOUND
    )
    np.clip(rgb, -_DISPLAY_BOUND, _DISPLAY_BOUND, out=rgb)
    rgb = apply_tone(gamut_map(rgb), tone)
    return np.clip(rgb, 0.0, 1.0)


def _quantise(linear: Any, tone: str, levels: int, dtype) -> np.ndarray:
    _, encode_srgb = _colour_functions()
    encoded = np.asarray(encode_srgb(to_display(linear, tone)), dtype=np.float64)
    return np.rint(np.clip(encoded, 0.0, 1.0) * levels).astype(dtype)


def to_8bit(linear: Any, tone: str = "none") -> np.ndarray:
    """Linear sRGB -> uint8 encoded sRGB (IEC 61966-2-1), via :func:`to_display`."""
    return _quantise(linear, tone, 255, np.uint8)


def to_16bit(linear: Any, tone: str = "none") -> np.ndarray:
    """Linear sRGB -> uint16 encoded sRGB (IEC 61966-2-1), via :func:`to_display`."""
    return _quantise(linear, tone, 65535, np.uint16)


# --------------------------------------------------------------------------- safe, atomic files

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


def _atomic_write(
    path: str | os.PathLike, write: Callable[[BinaryIO], None], overwrite: bool = False
) -> Path:
    """Write a file atomically with ``write(binary_file)``; return the path written.

    The data go to a hidden temporary file in the target directory (created with
    the usual permissions, subject to the umask), which is flushed, fsynced and
    then renamed into place. Any failure removes the temporary file; an OSError
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


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    raise TypeError(
        f"metadata value {value!r} of type {type(value).__name__} cannot be stored as JSON"
    )


def _metadata_json(metadata: Mapping[str, Any] | None, indent: int | None = None) -> str:
    metadata = {} if metadata is None else metadata
    if not isinstance(metadata, Mapping):
        raise ValueError(f"metadata must be a dict, got {type(metadata).__name__}")
    try:
        return json.dumps(
            dict(metadata),
            indent=indent,
            sort_keys=True,
            default=_json_default,
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
    text = _metadata_json(metadata, indent=2) + "\n"
    return _atomic_write(path, lambda fh: fh.write(text.encode("utf-8")), overwrite)


# --------------------------------------------------------------------------- PNG

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _png_chunk(kind: bytes, data: bytes) -> bytes:
    # Chunk layout and CRC-32 over type + data: PNG specification (W3C, ISO/IEC 15948), 5.3.
    return (
        struct.pack(">I", len(data))
        + kind
        + data
        + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)
    )


def _png_text_chunk(key: str, value: str) -> bytes:
    """tEXt for Latin-1 text, iTXt (UTF-8) otherwise (PNG specification 11.3.4)."""
    if not isinstance(key, str) or not 1 <= len(key) <= 79:
        raise ValueError(f"PNG metadata key must be text of 1 to 79 characters, got {key!r}")
    try:
        keyword = key.encode("latin-1")
    except UnicodeEncodeError:
        raise ValueError(f"PNG metadata key {key!r} must be Latin-1 text") from None
    if any(b < 32 or 126 < b < 161 for b in keyword) or key != key.strip() or "  " in key:
        raise ValueError(
            f"PNG metadata key {key!r}: printable characters only, "
            "no leading, trailing or double spaces"
        )
    try:
        data = value.encode("latin-1")
        if b"\x00" not in data:
            return _png_chunk(b"tEXt", keyword + b"\x00" + data)
    except UnicodeEncodeError:
        pass
    # keyword, null, compression flag 0, method 0, empty language tag, null,
    # empty translated keyword, null, UTF-8 text
    return _png_chunk(b"iTXt", keyword + b"\x00\x00\x00\x00\x00" + value.encode("utf-8"))


def _paeth_filtered(raw: np.ndarray, bytes_per_pixel: int) -> np.ndarray:
    """Rows of bytes -> PNG filter type 4 (Paeth) rows, each led by the filter byte.

    PNG specification 9.4: predictor from a = left, b = above, c = above-left
    (unfiltered bytes; 0 outside the image); ties prefer a, then b.
    """
    raw16 = raw.astype(np.int16)
    a = np.zeros_like(raw16)
    a[:, bytes_per_pixel:] = raw16[:, :-bytes_per_pixel]
    b = np.zeros_like(raw16)
    b[1:] = raw16[:-1]
    c = np.zeros_like(raw16)
    c[1:, bytes_per_pixel:] = raw16[:-1, :-bytes_per_pixel]
    p = a + b - c
    pa, pb, pc = np.abs(p - a), np.abs(p - b), np.abs(p - c)
    predictor = np.where((pa <= pb) & (pa <= pc), a, np.where(pb <= pc, b, c))
    filtered = ((raw16 - predictor) & 0xFF).astype(np.uint8)
    lead = np.full((raw.shape[0], 1), 4, dtype=np.uint8)
    return np.hstack([lead, filtered])


def encode_png(rgb: np.ndarray, metadata: Mapping[str, Any] | None = None) -> bytes:
    """(H, W, 3) uint8 or uint16 RGB -> PNG file bytes (colour type 2, 8 or 16 bit).

    Pillow cannot write 16-bit RGB, so the file is assembled here: IHDR, an sRGB
    chunk (the data are sRGB-encoded), text chunks, one zlib IDAT, IEND.
    """
    rgb = np.asarray(rgb)
    if rgb.ndim != 3 or rgb.shape[2] != 3 or rgb.shape[0] < 1 or rgb.shape[1] < 1:
        raise ValueError(f"PNG image must have shape (H, W, 3), got {rgb.shape}")
    if rgb.dtype == np.uint8:
        bit_depth, big_endian = 8, rgb
    elif rgb.dtype == np.uint16:
        bit_depth, big_endian = 16, rgb.astype(">u2")
    else:
        raise ValueError(f"PNG image must be uint8 or uint16, got {rgb.dtype}")
    height, width = rgb.shape[:2]
    raw = np.ascontiguousarray(big_endian).view(np.uint8).reshape(height, -1)
    scanlines = _paeth_filtered(raw, 3 * bit_depth // 8)
    parts = [
        _PNG_SIGNATURE,
        # width, height, bit depth, colour type 2 (RGB), deflate, adaptive filters, no interlace
        _png_chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, bit_depth, 2, 0, 0, 0)),
        _png_chunk(b"sRGB", b"\x01"),  # rendering intent: relative colorimetric
    ]
    for key, value in (metadata or {}).items():
        text = (
            value
            if isinstance(value, str)
            else json.dumps(value, default=_json_default, ensure_ascii=False)
        )
        parts.append(_png_text_chunk(key, text))
    parts.append(_png_chunk(b"IDAT", zlib.compress(scanlines.tobytes(), 6)))
    parts.append(_png_chunk(b"IEND", b""))
    return b"".join(parts)


def _as_png_integers(image: Any, bits: int, tone: str) -> np.ndarray:
    if bits not in (8, 16):
        raise ValueError(f"PNG bit depth must be 8 or 16, got {bits!r}")
    arr = np.asarray(image)
    if arr.dtype == np.uint8 or arr.dtype == np.uint16:
        if arr.dtype.itemsize * 8 != bits:
            raise ValueError(
                f"a {arr.dtype} image cannot be written as a {bits}-bit PNG "
                "without rescaling; pass linear floats or matching integers"
            )
        return arr
    if not np.issubdtype(arr.dtype, np.floating):
        raise ValueError(f"PNG image must be linear sRGB floats or uint8/uint16, got {arr.dtype}")
    return to_8bit(arr, tone) if bits == 8 else to_16bit(arr, tone)


def write_png(
    path: str | os.PathLike,
    image: Any,
    bits: int = 8,
    metadata: Mapping[str, Any] | None = None,
    *,
    tone: str = "none",
    overwrite: bool = False,
) -> Path:
    """Write an (H, W, 3) image as an 8- or 16-bit sRGB PNG (atomic); return the path written.

    ``image``: linear sRGB floats (encoded with :func:`to_8bit` / :func:`to_16bit`
    and ``tone``), or already encoded uint8 (bits=8) / uint16 (bits=16).
    ``metadata``: key -> text, stored as PNG text chunks (non-text values as JSON).
    """
    data = encode_png(_as_png_integers(image, bits, tone), metadata)
    return _atomic_write(path, lambda fh: fh.write(data), overwrite)


# --------------------------------------------------------------------------- layers, EXR

METADATA_ENTRY = "metadata"


def write_layers_npz(
    path: str | os.PathLike,
    layers: Mapping[str, Any],
    metadata: Mapping[str, Any] | None = None,
    *,
    overwrite: bool = False,
) -> Path:
    """Write named arrays to a compressed .npz (atomic); return the path written.

    ``metadata`` is stored as a JSON string in the entry ``"metadata"`` (a 0-d
    unicode array: ``json.loads(str(np.load(path)["metadata"]))``), so reading
    never needs pickle. Object arrays are refused for the same reason.
    """
    if not isinstance(layers, Mapping):
        raise ValueError(f"layers must be a dict of name -> array, got {type(layers).__name__}")
    arrays: dict[str, np.ndarray] = {}
    for name, value in layers.items():
        if not isinstance(name, str) or not name or name == METADATA_ENTRY or "/" in name:
            raise ValueError(
                f"layer name {name!r} is not allowed (non-empty text, "
                f"no '/', not {METADATA_ENTRY!r})"
            )
        arr = np.asarray(value)
        if arr.dtype.hasobject:
            raise ValueError(
                f"layer {name!r} has dtype object, which needs pickle; store numbers or text"
            )
        arrays[name] = arr
    arrays[METADATA_ENTRY] = np.array(_metadata_json(metadata))
    return _atomic_write(path, lambda fh: np.savez_compressed(fh, **arrays), overwrite)


def exr_available() -> bool:
    """True when the optional ``OpenEXR`` package can be imported."""
    try:
        import OpenEXR  # noqa: F401
    except ImportError:
        return False
    return True


def _exr_channels(linear: Any, layers: Mapping[str, Any] | None) -> dict[str, np.ndarray]:
    rgb = np.asarray(linear, dtype=np.float32)
    if rgb.ndim != 3 or rgb.shape[2] != 3:
        raise ValueError(f"EXR image must have shape (H, W, 3), got {rgb.shape}")
    channels = {name: np.ascontiguousarray(rgb[..., i]) for i, name in enumerate("RGB")}
    for name, value in (layers or {}).items():
        arr = np.asarray(value)
        if arr.shape[:2] != rgb.shape[:2] or arr.ndim not in (2, 3):
            raise ValueError(
                f"EXR layer {name!r} has shape {arr.shape}; "
                f"expected {rgb.shape[:2]} or {rgb.shape[:2] + (3,)}"
            )
        if arr.dtype.kind not in "biuf":
            raise ValueError(f"EXR layer {name!r} must be numeric, got {arr.dtype}")
        arr = arr.astype(np.float32)  # integer layers (body index) too: exact below 2**24
        if arr.ndim == 2:
            channels[str(name)] = np.ascontiguousarray(arr)
        else:
            for i in range(arr.shape[2]):
                channels[f"{name}.{'xyz'[i] if arr.shape[2] == 3 else i}"] = np.ascontiguousarray(
                    arr[..., i]
                )
    return channels


def write_exr(
    path: str | os.PathLike,
    linear: Any,
    layers: Mapping[str, Any] | None = None,
    metadata: Mapping[str, Any] | None = None,
    *,
    overwrite: bool = False,
) -> Path:
    """Write (H, W, 3) linear sRGB as a float32 OpenEXR file (atomic); return the path written.

    ``layers`` (optional): further (H, W) or (H, W, k) arrays stored as float32
    channels ``name`` or ``name.x``/``.y``/``.z`` (``name.0``... for k != 3).
    Metadata entries become string attributes of the header.
    Needs the optional ``OpenEXR`` package (3.x API); without it this raises
    :class:`OutputError` saying so (check :func:`exr_available` first).
    """
    try:
        import OpenEXR
    except ImportError:
        raise OutputError(
            "cannot write OpenEXR: the optional package 'OpenEXR' is not "
            "installed (pip install OpenEXR)",
            file=path,
        ) from None
    channels = _exr_channels(linear, layers)
    header: dict[str, Any] = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    for key, value in (metadata or {}).items():
        header[str(key)] = (
            value if isinstance(value, str) else json.dumps(value, default=_json_default)
        )

    def write(handle: BinaryIO) -> None:
        # OpenEXR writes by file name: write beside the temporary file, copy the bytes in.
        scratch = Path(handle.name + ".exr")
        try:
            with OpenEXR.File(header, channels) as exr_file:
                exr_file.write(str(scratch))
            handle.write(scratch.read_bytes())
        finally:
            scratch.unlink(missing_ok=True)

    return _atomic_write(path, write, overwrite)


# --------------------------------------------------------------------------- false colour

#: Colour of NaN (no data, e.g. background in the Doppler layer) in false-colour maps:
#: a neutral mid grey that no perceptually uniform matplotlib map contains.
NAN_RGB = (128, 128, 128)


def _colour_scale(values: np.ndarray, vmin: float | None, vmax: float | None, log: bool):
    """(valid mask, vmin, vmax) for a false-colour map; validates the range."""
    valid = np.isfinite(values)
    if log:
        valid &= values > 0.0
    if vmin is None or vmax is None:
        shown = values[valid]
        lo = float(shown.min()) if shown.size else (1.0 if log else 0.0)
        hi = float(shown.max()) if shown.size else (10.0 if log else 1.0)
        vmin = lo if vmin is None else vmin
        vmax = hi if vmax is None else vmax
    vmin, vmax = float(vmin), float(vmax)
    if not (math.isfinite(vmin) and math.isfinite(vmax)) or vmax < vmin:
        raise ValueError(f"colour range must be finite with vmin <= vmax, got [{vmin}, {vmax}]")
    if log and vmin <= 0.0:
        raise ValueError(f"a logarithmic colour scale needs vmin > 0, got {vmin}")
    return valid, vmin, vmax


def _colour_map(cmap: str):
    import matplotlib

    try:
        return matplotlib.colormaps[cmap]
    except KeyError:
        raise ValueError(
            f"unknown colour map {cmap!r}; e.g. 'viridis', 'magma', 'cividis', 'coolwarm'"
        ) from None


def false_colour(
    values: Any,
    vmin: float | None = None,
    vmax: float | None = None,
    cmap: str = "viridis",
    log: bool = False,
) -> np.ndarray:
    """(H, W) scalar layer -> (H, W, 3) uint8 RGB through a matplotlib colour map.

    Values are placed linearly (or by log10 when ``log``) between ``vmin`` and
    ``vmax`` (default: the finite data range) and clipped to the ends. NaN and
    infinite values, and on a log scale values <= 0 (which have no place on the
    axis), are shown in :data:`NAN_RGB`. The output is display-referred RGB.
    """
    v = np.asarray(values, dtype=np.float64)
    if v.ndim != 2:
        raise ValueError(f"false colour needs an (H, W) layer, got shape {v.shape}")
    valid, vmin, vmax = _colour_scale(v, vmin, vmax, log)
    colour_map = _colour_map(cmap)
    with np.errstate(divide="ignore", invalid="ignore"):
        if log:
            pos, lo, hi = np.log10(np.where(valid, v, 1.0)), math.log10(vmin), math.log10(vmax)
        else:
            pos, lo, hi = np.where(valid, v, 0.0), vmin, vmax
    fraction = np.full(v.shape, 0.5) if hi == lo else np.clip((pos - lo) / (hi - lo), 0.0, 1.0)
    rgb = colour_map(fraction, bytes=True)[..., :3].copy()
    rgb[~valid] = NAN_RGB
    return rgb


def figure_metadata(fmt: str, metadata: Mapping[str, Any] | None) -> dict[str, str] | None:
    """Provenance for matplotlib's ``savefig(metadata=...)`` in the keys each format allows.

    PNG: every entry as its own text chunk. PDF (document information dictionary) and
    SVG (Dublin Core): only fixed keys exist, so the whole record goes as JSON into
    ``Subject`` (PDF) or ``Description`` (SVG), with ``Title`` and ``Creator`` set.
    Other formats: None (matplotlib has no metadata for them).
    """
    if not metadata:
        return None
    fmt = fmt.lower()
    if fmt == "png":
        return {str(k): v if isinstance(v, str) else json.dumps(v, default=_json_default)
                for k, v in metadata.items()}
    record = _metadata_json(metadata)
    title = str(metadata.get("title") or metadata.get("scene") or "relview figure")
    creator = f"relview {metadata.get('relview_version', '')}".strip()
    if fmt == "pdf":
        return {"Title": title, "Subject": record, "Creator": creator}
    if fmt == "svg":
        return {"Title": title, "Description": record, "Creator": creator}
    return None


def save_layer_figure(
    path: str | os.PathLike,
    values: Any,
    label: str,
    unit: str,
    log: bool = False,
    *,
    vmin: float | None = None,
    vmax: float | None = None,
    cmap: str = "viridis",
    title: str | None = None,
    dpi: int = 100,
    overwrite: bool = False,
    metadata: Mapping[str, Any] | None = None,
) -> Path:
    """A figure of an (H, W) layer in false colour with a labelled colour bar (atomic).

    The colour bar reads ``label (unit)``; NaN pixels are shown in :data:`NAN_RGB`
    and noted under the bar. The format follows the file extension (png, pdf,
    svg, ...). ``metadata`` (provenance) is stored as :func:`figure_metadata`
    describes. Returns the path written.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import LogNorm, Normalize
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, NullFormatter

    v = np.asarray(values, dtype=np.float64)
    rgb = false_colour(v, vmin, vmax, cmap, log)
    valid, vmin, vmax = _colour_scale(v, vmin, vmax, log)
    if vmin == vmax:  # a flat layer still gets a readable bar
        vmin, vmax = (vmin / 2, vmin * 2) if log else (vmin - 0.5, vmax + 0.5)
    fmt = Path(path).suffix.lstrip(".").lower() or "png"
    height, width = v.shape
    fig = Figure(figsize=(6.4, max(2.0, 6.4 * height / width * 0.85)), dpi=dpi)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.imshow(rgb, interpolation="nearest")
    ax.set_axis_off()
    if title:
        ax.set_title(title)
    norm = LogNorm(vmin, vmax) if log else Normalize(vmin, vmax)
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=_colour_map(cmap)), ax=ax)
    bar.set_label(f"{label} ({unit})" if unit else label)
    if log:  # plain numbers (1.25, 3, 100) rather than 1.25 x 10^0
        plain = FuncFormatter(lambda v, _pos: f"{v:g}")
        bar.ax.yaxis.set_major_formatter(plain)
        # label the 2..9 ticks too when the range spans less than two decades
        bar.ax.yaxis.set_minor_formatter(plain if vmax / vmin < 100.0 else NullFormatter())
    if not valid.all():
        bar.ax.set_xlabel("grey: no data", fontsize="small")
    meta = figure_metadata(fmt, metadata)
    return _atomic_write(path, lambda fh: fig.savefig(fh, format=fmt, metadata=meta), overwrite)
