"""Tests for relview.imaging: exposure, display encoding, PNG and layer files, safe atomic
writing, false colour.

Outside references used here: IEC 61966-2-1:1999 (sRGB transfer function and
matrix), the PNG specification read back by independent decoders (pillow and
the ffmpeg binary shipped with imageio-ffmpeg), colour-science's sRGB colour
space, matplotlib's colour maps, Reinhard et al. 2002 (tone curve).
"""

from __future__ import annotations

import errno
import json
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from relview.errors import OutputError, UserError
from relview.imaging import display, exposure, false_colour, files, layer_files, png

# ----------------------------------------------------------------------------- references


def iec_61966_2_1_encode(linear: float) -> float:
    """sRGB encoding written out from IEC 61966-2-1:1999, section 5.2 (independent of
    relview.light.spectrum): V = 12.92 L for L <= 0.0031308, else 1.055 L^(1/2.4) - 0.055."""
    if linear <= 0.0031308:
        return 12.92 * linear
    return 1.055 * linear ** (1.0 / 2.4) - 0.055


# IEC 61966-2-1:1999: luminance of linear sRGB (Y row of the RGB -> XYZ matrix).
IEC_Y_WEIGHTS = (0.2126, 0.7152, 0.0722)

# D65 white point chromaticity x = 0.3127, y = 0.3290 (IEC 61966-2-1 / CIE 15), as XYZ
# with Y = 1: X = x / y, Z = (1 - x - y) / y.
D65_XYZ = np.array([0.3127 / 0.3290, 1.0, (1.0 - 0.3127 - 0.3290) / 0.3290])


def no_temporaries(directory: Path) -> bool:
    return not [p for p in directory.iterdir() if p.name.endswith(".part")]


# ----------------------------------------------------------------------------- sRGB encoding

GREYS = [0.0, 1e-4, 0.001, 0.0031308, 0.0031309, 0.01, 0.05, 0.18, 0.5, 0.9, 1.0]


def test_16bit_encoding_matches_iec_61966_2_1():
    # Source: IEC 61966-2-1:1999 5.2, via the formula written out above.
    # A grey linear value passes gamut mapping unchanged, so each channel is V(L).
    linear = np.array(GREYS)[None, :, None].repeat(3, axis=2)
    got = display.to_16bit(linear)
    want = [round(65535 * iec_61966_2_1_encode(v)) for v in GREYS]
    assert got.dtype == np.uint16
    assert got[0, :, 0].tolist() == want
    assert (got[..., 0] == got[..., 1]).all() and (got[..., 1] == got[..., 2]).all()


def test_8bit_encoding_known_values():
    # IEC 61966-2-1:1999 5.2: the two segments meet at L = 0.0031308, V = 0.04045
    # (12.92 * 0.0031308 = 0.040450); 18 % grey encodes to V = 0.4614, i.e. 118 of 255
    # (from memory; recomputed here from the formula).
    assert iec_61966_2_1_encode(0.0031308) == pytest.approx(0.04045, abs=1e-5)
    assert 1.055 * 0.0031308 ** (1 / 2.4) - 0.055 == pytest.approx(0.04045, abs=1e-5)
    assert iec_61966_2_1_encode(0.18) == pytest.approx(0.4614, abs=1e-4)
    grey = np.array([[[0.0] * 3, [0.18] * 3, [0.5] * 3, [1.0] * 3, [7.0] * 3]])
    got = display.to_8bit(grey)[0, :, 0].tolist()
    assert got == [0, 118, round(255 * iec_61966_2_1_encode(0.5)), 255, 255]


def test_spectrum_encode_srgb_agrees_with_iec_formula():
    # The encoder relview.imaging.display imports from relview.light.spectrum, against IEC
    # 61966-2-1 5.2.
    from relview.light.spectrum import encode_srgb

    samples = np.concatenate([np.linspace(0, 0.01, 101), np.linspace(0.01, 1, 200)])
    want = np.array([iec_61966_2_1_encode(v) for v in samples])
    assert np.allclose(encode_srgb(samples), want, rtol=0, atol=1e-12)


def test_nan_and_negative_display_as_black_and_values_clip():
    # Common practice: NaN (no data) shows black; above-white clips per channel.
    img = np.array([[[np.nan, np.nan, np.nan], [-1.0, -1.0, -1.0], [2.0, 0.5, 0.0]]])
    got = display.to_8bit(img)
    assert got[0, 0].tolist() == [0, 0, 0]
    assert got[0, 1].tolist() == [0, 0, 0]
    assert got[0, 2].tolist() == [255, round(255 * iec_61966_2_1_encode(0.5)), 0]


# ----------------------------------------------------------------------------- exposure


def test_fixed_white_maps_d65_to_one():
    # IEC 61966-2-1: the D65 white of luminance W, exposed with white W, is (1, 1, 1).
    for white in (1e-12, 250.0, 3e9):
        xyz = np.broadcast_to(D65_XYZ * white, (2, 3, 3))
        assert exposure.exposure_white(xyz, None, white) == white
        assert np.allclose(exposure.expose(xyz, white), 1.0, rtol=0, atol=1e-9)


def test_expose_matches_colour_science_matrix():
    # Reference: colour-science's sRGB colour space (IEC 61966-2-1 matrix, 4 decimals).
    colour = pytest.importorskip("colour")
    rng = np.random.default_rng(1)
    xyz = rng.uniform(0, 1, (4, 5, 3)) * 1e15  # absolute, cd/m2
    white = 2e15
    want = (xyz / white) @ np.asarray(colour.RGB_COLOURSPACES["sRGB"].matrix_XYZ_to_RGB).T
    assert np.allclose(exposure.expose(xyz, white), want, rtol=0, atol=2e-4)


def test_expose_spans_twenty_orders_of_magnitude():
    xyz = np.stack([D65_XYZ * 1e-18, D65_XYZ * 1e2, D65_XYZ * 1e22])[None]
    lin = exposure.expose(xyz.astype(np.float32), 1e2)
    assert np.isfinite(lin).all()
    assert np.allclose(lin[0, :, 1], [1e-20, 1.0, 1e20], rtol=1e-6)
    assert display.to_8bit(lin)[0].tolist() == [[0, 0, 0], [255] * 3, [255] * 3]


def test_auto_white_ignores_few_beamed_pixels_zeros_and_unlit():
    # Constructed case: 1000 lit pixels with light, 5 of them (0.5 %) beamed to 1e20 cd/m2,
    # 995 at 100 cd/m2; 500 lit pixels with Y = 0; unlit pixels at 1e25 cd/m2.
    # Metering (Reinhard et al. 2002, eqs. 1-2, key 0.18): the log-average of the 1000
    # positive values is 100 * (1e18)**(5/1000) = 10**2.09 cd/m2, so W = 10**2.09 / 0.18.
    # The highlight guard (the 99th-percentile order statistic, sorted position
    # ceil(0.99 * 999) = 990, among the 995) is 100, below that.
    y = np.concatenate([np.full(995, 100.0), np.full(5, 1e20), np.zeros(500), np.full(100, 1e25)])
    mask = np.concatenate([np.ones(1500, bool), np.zeros(100, bool)])
    perm = np.random.default_rng(2).permutation(y.size)
    xyz = (D65_XYZ[None, :] * y[perm, None]).reshape(40, 40, 3)
    white = exposure.exposure_white(xyz, mask[perm].reshape(40, 40), "auto")
    assert white == pytest.approx(10**2.09 / 0.18, rel=1e-9)
    # The maximum would have been 1e20: check that the statistic is not the maximum.
    assert white < 1e-10 * y[mask].max()


def test_auto_white_guard_is_an_order_statistic():
    # 991 pixels at 1 cd/m2, 9 at 1e20. The guard takes the order statistic at sorted
    # position ceil(0.99 * 999) = 990 (numpy's "higher" method): 1 cd/m2, so the 9
    # pixels (0.9 %) clip; the key gives 10**(9 * 20 / 1000) / 0.18 = 10**0.18 / 0.18.
    y = np.concatenate([np.ones(991), np.full(9, 1e20)])
    assert exposure.auto_white(y) == pytest.approx(10**0.18 / 0.18, rel=1e-9)
    # 11 at 1e20 (1.1 %): the guard moves up to 1e20, so none of them clips.
    y = np.concatenate([np.ones(989), np.full(11, 1e20)])
    assert exposure.auto_white(y) == pytest.approx(1e20, rel=1e-12)


def test_auto_white_is_scale_invariant_over_twenty_decades():
    # Property of the log-average and of a percentile: scaling all luminances by k
    # scales the white by k.
    rng = np.random.default_rng(3)
    y = 10.0 ** rng.uniform(-10, 10, 5000)
    base = exposure.auto_white(y)
    for k in (1e-20, 1e15):
        assert exposure.auto_white(y * k) == pytest.approx(base * k, rel=1e-9)
    # ... and with this wide spread the guard decides: at most 1 % of the pixels above W.
    assert np.mean(y > base) <= 0.01


def test_auto_white_fallbacks():
    zeros = np.zeros((4, 4, 3))
    assert (
        exposure.exposure_white(zeros, np.ones((4, 4), bool), "auto")
        == exposure.FALLBACK_WHITE_CD_M2
    )
    bright = np.full((4, 4, 3), 5.0)
    assert (
        exposure.exposure_white(bright, np.zeros((4, 4), bool), "auto")
        == exposure.FALLBACK_WHITE_CD_M2
    )
    # uniform Y = 5: the log-average 5 sits at the key 0.18 (Reinhard et al. 2002)
    assert exposure.exposure_white(bright, None, "AUTO") == pytest.approx(5.0 / 0.18)


@pytest.mark.parametrize("bad", [0, -1.0, float("nan"), float("inf"), "bright", True, None])
def test_bad_exposure_setting_is_named(bad):
    with pytest.raises(ValueError, match="exposure"):
        exposure.exposure_white(np.ones((2, 2, 3)), None, bad)


def test_exposure_lock_round_trip_and_hold():
    frame1 = np.broadcast_to(D65_XYZ * 40.0, (3, 3, 3))
    frame2 = frame1 * 1000.0
    lock = exposure.ExposureLock("auto")
    assert not lock.locked
    # a uniform D65 grey of 40 cd/m2 is metered to the key 0.18 (Reinhard et al. 2002)
    assert lock.white_for(frame1) == pytest.approx(40.0 / 0.18)
    assert lock.white_for(frame2) == pytest.approx(40.0 / 0.18)  # held, not re-computed
    data = json.loads(json.dumps(lock.to_dict()))
    again = exposure.ExposureLock.from_dict(data)
    assert again == lock and again.white_for(frame2) == pytest.approx(40.0 / 0.18)

    pooled = exposure.ExposureLock().lock_from([frame1, frame2])
    # pooled over both frames: all 9 + 9 pixels, half at 40, half at 40000 cd/m2
    assert 40.0 < pooled <= 40000.0 * (1 + 1e-12)
    fixed = exposure.ExposureLock(12.5)
    assert fixed.locked and fixed.white_for(frame2) == 12.5
    assert exposure.ExposureLock.from_dict(fixed.to_dict()) == fixed
    with pytest.raises(ValueError, match="white_cd"):
        exposure.ExposureLock.from_dict({"white": 3.0})
    with pytest.raises(ValueError, match="exposure lock white"):
        exposure.ExposureLock.from_dict({"white_cd_m2": -3.0})


# ----------------------------------------------------------------------------- gamut, tone


def test_gamut_map_keeps_luminance_and_hue_line():
    rgb = np.array([[1.2, -0.3, 0.1], [0.2, 0.5, -0.05], [0.3, 0.2, 0.1], [-0.5, -0.1, 0.2]])
    out = display.gamut_map(rgb)
    y_in = rgb @ IEC_Y_WEIGHTS
    y_out = out @ IEC_Y_WEIGHTS
    assert (out >= 0).all()
    # Out-of-gamut pixels with Y > 0: luminance kept, lowest channel exactly at 0, and the
    # new colour on the straight line from grey (Y, Y, Y) to the original colour.
    for i in (0, 1):
        assert y_out[i] == pytest.approx(y_in[i], rel=1e-12)
        assert out[i].min() == pytest.approx(0.0, abs=1e-15)
        assert np.cross(out[i] - y_in[i], rgb[i] - y_in[i]) == pytest.approx(0, abs=1e-12)
    assert out[2].tolist() == rgb[2].tolist()  # in gamut: unchanged
    assert y_in[3] < 0 and out[3].tolist() == [0.0, 0.0, 0.0]


def test_reinhard_tone_curve():
    # Reinhard, Stark, Shirley & Ferwerda 2002, eq. 4: L_d = L (1 + L/Lw^2) / (1 + L);
    # L = Lw maps to 1, L = 1 with Lw = 4 to 1 * (1 + 1/16) / 2 = 0.53125.
    lw = display.REINHARD_L_WHITE
    grey = np.array([[1.0] * 3, [lw] * 3, [0.0] * 3])
    out = display.apply_tone(grey, "reinhard")
    assert out[:, 0] == pytest.approx([(1 + 1 / lw**2) / 2, 1.0, 0.0])
    colour = np.array([0.9, 0.3, 0.05]) * 3
    mapped = display.apply_tone(colour, "reinhard")
    assert mapped / mapped[0] == pytest.approx(colour / colour[0])  # hue (ratios) kept
    assert (display.apply_tone(colour, "none") == colour).all()
    with pytest.raises(ValueError, match="tone"):
        display.apply_tone(colour, "filmic")


# ----------------------------------------------------------------------------- PNG

METADATA = {"scene": "tram past the mast", "beta": "0.8", "note": "β = 0.8, D = 3 (γ = 5/3)"}


def test_png_8bit_round_trip_with_text_chunks(tmp_path):
    rng = np.random.default_rng(4)
    linear = rng.uniform(-0.1, 1.3, (5, 7, 3))
    path = png.write_png(tmp_path / "still.png", linear, 8, METADATA)
    # Independent decoder: pillow (also checks every chunk CRC in verify()).
    with Image.open(path) as im:
        im.verify()
    with Image.open(path) as im:
        assert im.mode == "RGB" and im.size == (7, 5)
        assert (np.asarray(im) == display.to_8bit(linear)).all()
        assert {k: im.text[k] for k in METADATA} == METADATA
    # A second reader: imageio.
    import imageio.v3 as iio

    assert (iio.imread(path) == display.to_8bit(linear)).all()
    assert no_temporaries(tmp_path)


def _ffmpeg_rgb48(path: Path, width: int, height: int) -> np.ndarray:
    """Decode a PNG with the ffmpeg binary of imageio-ffmpeg (an independent PNG decoder)."""
    exe = pytest.importorskip("imageio_ffmpeg").get_ffmpeg_exe()
    raw = subprocess.run(
        [exe, "-v", "error", "-i", str(path), "-f", "rawvideo", "-pix_fmt", "rgb48le", "-"],
        check=True,
        capture_output=True,
        timeout=60,
    ).stdout
    return np.frombuffer(raw, dtype="<u2").reshape(height, width, 3)


def test_png_16bit_round_trip_with_text_chunks(tmp_path):
    rng = np.random.default_rng(5)
    data = rng.integers(0, 65536, (6, 9, 3), dtype=np.uint16)  # random: every Paeth branch
    data[0, 0] = [0, 65535, 256]
    path = png.write_png(tmp_path / "deep.png", data, bits=16, metadata=METADATA)
    assert (_ffmpeg_rgb48(path, 9, 6) == data).all()
    with Image.open(path) as im:  # pillow reads the header and text of 16-bit RGB
        im.verify()
    with Image.open(path) as im:
        assert im.size == (9, 6)
        assert {k: im.text[k] for k in METADATA} == METADATA
    # Floats are encoded with to_16bit.
    linear = rng.uniform(0, 1, (3, 4, 3))
    path2 = png.write_png(tmp_path / "deep.png", linear, bits=16)
    assert path2.name == "deep-1.png"
    assert (_ffmpeg_rgb48(path2, 4, 3) == display.to_16bit(linear)).all()


def test_png_rejects_mismatched_integers_and_bad_keys(tmp_path):
    with pytest.raises(ValueError, match="uint8"):
        png.write_png(tmp_path / "a.png", np.zeros((2, 2, 3), np.uint8), bits=16)
    with pytest.raises(ValueError, match="key"):
        png.write_png(tmp_path / "a.png", np.zeros((2, 2, 3)), metadata={"": "x"})
    assert list(tmp_path.iterdir()) == []


# ----------------------------------------------------------------------------- other writers


def test_layers_npz_and_json_sidecar_round_trip(tmp_path):
    layers = {
        "xyz": np.arange(24.0).reshape(2, 4, 3),
        "body": np.array([[0, -1, 1, 0]] * 2),
        "doppler": np.array([[np.nan, 3.0, 1 / 3, 1.0]] * 2),
    }
    meta = {"white_cd_m2": np.float64(42.0), "frame": 7, "title": "Zug über die Brücke"}
    path = layer_files.write_layers_npz(tmp_path / "layers.npz", layers, meta)
    with np.load(path, allow_pickle=False) as npz:
        for name, arr in layers.items():
            assert np.array_equal(npz[name], arr, equal_nan=True)
        assert json.loads(str(npz["metadata"])) == {
            "white_cd_m2": 42.0,
            "frame": 7,
            "title": "Zug über die Brücke",
        }
    side = files.write_json_sidecar(tmp_path / "layers.json", meta)
    assert json.loads(side.read_text("utf-8"))["white_cd_m2"] == 42.0
    with pytest.raises(ValueError, match="NaN"):
        files.write_json_sidecar(tmp_path / "bad.json", {"x": float("nan")})
    with pytest.raises(ValueError, match="metadata"):
        layer_files.write_layers_npz(tmp_path / "x.npz", {"metadata": np.zeros(2)})
    assert no_temporaries(tmp_path)


def test_write_exr_when_available(tmp_path):
    if not layer_files.exr_available():
        with pytest.raises(OutputError, match="OpenEXR"):
            layer_files.write_exr(tmp_path / "a.exr", np.zeros((2, 2, 3)))
        assert list(tmp_path.iterdir()) == []
        pytest.skip("optional OpenEXR package not installed")
    import OpenEXR

    linear = np.random.default_rng(6).uniform(0, 1e20, (3, 5, 3)).astype(np.float32)
    path = layer_files.write_exr(
        tmp_path / "a.exr", linear, {"doppler": np.full((3, 5), 3.0)}, {"scene": "tram"}
    )
    with OpenEXR.File(str(path)) as f:
        # The reader (OpenEXR's own, the reference) groups the R, G, B channels again.
        assert {c.name for c in f.header()["channels"]} >= {"R", "G", "B", "doppler"}
        ch = f.channels()
        assert np.array_equal(ch["RGB"].pixels, linear)
        assert np.all(ch["doppler"].pixels == 3.0)
        assert f.header()["scene"] == "tram"


# ----------------------------------------------------------------------------- safety


def test_safe_output_path_numbering(tmp_path):
    target = tmp_path / "frame.png"
    assert files.safe_output_path(target) == target
    target.write_bytes(b"old")
    assert files.safe_output_path(target) == tmp_path / "frame-1.png"
    (tmp_path / "frame-1.png").write_bytes(b"older")
    assert files.safe_output_path(target) == tmp_path / "frame-2.png"
    assert files.safe_output_path(target, overwrite=True) == target
    with pytest.raises(OutputError, match="directory"):
        files.safe_output_path(tmp_path, overwrite=True)
    # Writers follow it: the earlier file stays.
    written = files.write_json_sidecar(target, {"a": 1})
    assert written == tmp_path / "frame-2.png" and target.read_bytes() == b"old"
    assert files.write_json_sidecar(target, {"a": 2}, overwrite=True) == target
    assert json.loads(target.read_text()) == {"a": 2}


def test_missing_directory_is_created(tmp_path):
    path = png.write_png(tmp_path / "a" / "b" / "c.png", np.zeros((1, 1, 3)))
    assert path.exists()
    # A parent that is a file cannot become a directory: a clear error, nothing written.
    (tmp_path / "plain").write_text("not a directory")
    with pytest.raises(OutputError, match="plain is a file, not a directory") as info:
        png.write_png(tmp_path / "plain" / "c.png", np.zeros((1, 1, 3)))
    assert info.value.file == str(tmp_path / "plain" / "c.png")
    assert (tmp_path / "plain").read_text() == "not a directory"


def test_failure_mid_write_leaves_old_file_and_no_partial(tmp_path, monkeypatch):
    target = tmp_path / "still.png"
    target.write_bytes(b"earlier output")

    def disk_full(fd):  # the data were written, the flush to disk fails
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(files.os, "fsync", disk_full)
    for overwrite in (True, False):
        with pytest.raises(OutputError) as info:
            png.write_png(target, np.ones((4, 4, 3)), overwrite=overwrite)
        err = info.value
        assert isinstance(err, UserError)
        assert "no space left on device" in str(err)
        assert err.file is not None and err.file in str(err)
        assert Path(err.file).name == ("still.png" if overwrite else "still-1.png")
    assert target.read_bytes() == b"earlier output"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["still.png"]


def test_non_os_failure_in_writer_removes_temporary(tmp_path, monkeypatch):
    target = tmp_path / "layers.npz"
    target.write_bytes(b"earlier")

    def half_then_crash(fh, **arrays):
        fh.write(b"PK\x03\x04 partial")
        raise RuntimeError("simulated crash mid-write")

    monkeypatch.setattr(layer_files.np, "savez_compressed", half_then_crash)
    with pytest.raises(RuntimeError, match="simulated"):
        layer_files.write_layers_npz(target, {"a": np.zeros(3)}, overwrite=True)
    assert target.read_bytes() == b"earlier"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["layers.npz"]


@pytest.mark.parametrize(
    "code, words",
    [
        (errno.EACCES, "permission denied"),
        (errno.ENOSPC, "no space left on device"),
        (errno.EROFS, "read-only file system"),
    ],
)
def test_rename_failure_becomes_output_error(tmp_path, monkeypatch, code, words):
    # Root ignores directory permissions, so the failure is injected at the rename.
    target = tmp_path / "out.png"
    target.write_bytes(b"keep me")

    def refuse(src, dst):
        raise OSError(code, os.strerror(code), str(dst))

    monkeypatch.setattr(files.os, "replace", refuse)
    with pytest.raises(OutputError, match=words) as info:
        png.write_png(target, np.zeros((2, 2, 3)), overwrite=True)
    assert info.value.file == str(target) and str(target) in str(info.value)
    assert target.read_bytes() == b"keep me"
    assert no_temporaries(tmp_path)


def test_link_failure_without_overwrite_becomes_output_error(tmp_path, monkeypatch):
    def refuse(src, dst):
        raise PermissionError(errno.EACCES, "Permission denied", str(dst))

    monkeypatch.setattr(files.os, "link", refuse)
    with pytest.raises(OutputError, match="permission denied"):
        png.write_png(tmp_path / "new.png", np.zeros((2, 2, 3)))
    assert list(tmp_path.iterdir()) == []


def test_file_appearing_during_write_is_not_replaced(tmp_path, monkeypatch):
    # Another process creates the chosen name between the choice and the rename.
    target = tmp_path / "frame.png"
    real_link = os.link

    def intruder_then_link(src, dst):
        if Path(dst) == target and not target.exists():
            target.write_bytes(b"someone else's")
        return real_link(src, dst)

    monkeypatch.setattr(files.os, "link", intruder_then_link)
    written = png.write_png(target, np.zeros((2, 2, 3)))
    assert written == tmp_path / "frame-1.png"
    assert target.read_bytes() == b"someone else's"
    with Image.open(written) as im:
        assert im.size == (2, 2)


def test_no_hard_links_falls_back_to_checked_replace(tmp_path, monkeypatch):
    def unsupported(src, dst):
        raise OSError(errno.EPERM, "Operation not permitted")

    monkeypatch.setattr(files.os, "link", unsupported)
    (tmp_path / "a.json").write_text("old")
    assert files.write_json_sidecar(tmp_path / "a.json", {"x": 1}).name == "a-1.json"
    assert (tmp_path / "a.json").read_text() == "old"


@pytest.mark.skipif(
    os.name != "posix" or os.geteuid() == 0, reason="root ignores directory permissions"
)
def test_read_only_directory(tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        with pytest.raises(OutputError, match="permission denied"):
            png.write_png(locked / "x.png", np.zeros((2, 2, 3)))
    finally:
        locked.chmod(0o755)


# ----------------------------------------------------------------------------- false colour


def test_false_colour_ends_nan_and_log():
    import matplotlib

    viridis = matplotlib.colormaps["viridis"]  # reference: matplotlib's own table
    ends = [tuple(viridis(x, bytes=True)[:3]) for x in (0.0, 0.5, 1.0)]
    values = np.array([[0.0, 5.0, 10.0, np.nan, -3.0, 99.0]])
    rgb = false_colour.false_colour(values, 0.0, 10.0)
    assert rgb.dtype == np.uint8 and rgb.shape == (1, 6, 3)
    assert [tuple(c) for c in rgb[0, :3]] == ends
    assert tuple(rgb[0, 3]) == false_colour.NAN_RGB
    assert tuple(rgb[0, 4]) == ends[0] and tuple(rgb[0, 5]) == ends[2]  # clipped
    logged = false_colour.false_colour(np.array([[1 / 3, 1.0, 3.0, 0.0]]), 1 / 3, 3.0, log=True)
    assert [tuple(c) for c in logged[0, :3]] == ends  # D = 1 is the middle on log10
    assert tuple(logged[0, 3]) == false_colour.NAN_RGB
    with pytest.raises(ValueError, match="vmin > 0"):
        false_colour.false_colour(values, 0.0, 10.0, log=True)
    with pytest.raises(ValueError, match="colour map"):
        false_colour.false_colour(values, cmap="no-such-map")


def test_save_layer_figure(tmp_path):
    doppler = np.full((12, 16), np.nan)
    doppler[3:9, 4:12] = np.geomspace(1 / 3, 3, 8)[None, :]
    path = false_colour.save_layer_figure(
        tmp_path / "doppler.png", doppler, "Doppler factor D", "", log=True
    )
    with Image.open(path) as im:
        assert im.format == "PNG" and im.size[0] > 100
    again = false_colour.save_layer_figure(tmp_path / "doppler.png", doppler, "D", "")
    assert again.name == "doppler-1.png"
    assert no_temporaries(tmp_path)
