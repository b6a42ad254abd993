"""Probe tables over time against closed-form retarded-time solutions and plain geometry."""

import json
import math

import numpy as np
import pytest
from PIL import Image

from relview.cli import app as cli
from relview.errors import UserError
from relview.figures import timeline
from relview.kinematics.lorentz import C
from relview.scene.model import Scene

ROD = 2.0  # m, rest length


def rod_scene(
    beta=(0.6, 0.0, 0.0),
    camera=(0.0, -3.0, 0.0),
    look_at=(0.0, 0.0, 0.0),
    fov=90.0,
    position=(0.0, 0.0, 0.0),
):
    return Scene.from_dict(
        {
            "render": {"resolution": [64, 36]},
            "camera": {"position": list(camera), "look_at": list(look_at), "fov": fov},
            "body": [
                {
                    "name": "rod",
                    "shape": "box",
                    "size": [ROD, 0.05, 0.05],
                    "motion": {"beta": list(beta), "position": list(position)},
                    "surface": {"color": [0.5, 0.5, 0.5]},
                }
            ],
        }
    )


ENDS = [[-ROD / 2, 0.0, 0.0], [ROD / 2, 0.0, 0.0]]


def retarded_emission(y, beta, x_cam):
    """Independent closed form for straight uniform motion (Mueller & Boblest 2014, Eur. J.
    Phys. 35 065025): with Y the point's position at the camera time and w = x_cam - Y,
    the emission happened tau = c (t_c - t_e) earlier where
    (1 - b^2) tau^2 - 2 (beta.w) tau - w.w = 0; the non-negative root, via numpy.roots."""
    beta = np.asarray(beta, float)
    w = np.asarray(x_cam, float) - np.asarray(y, float)
    roots = np.roots([1.0 - beta @ beta, -2.0 * (beta @ w), -(w @ w)])
    tau = max(r.real for r in roots if abs(r.imag) < 1e-12)
    return np.asarray(y, float) - beta * tau, tau


def test_photographed_rod_length_near_the_camera():
    beta = np.array([0.6, 0.0, 0.0])
    gamma = 1.25  # 1 / sqrt(1 - 0.36), exact
    cam = np.array([0.0, -3.0, 0.0])
    times = np.linspace(-3e-8, 3e-8, 5)
    table = timeline.probe_table(rod_scene(), "rod", ENDS, times)
    for row, t in zip(table.length, times):
        # each end at the camera time: contracted offset along beta, plus beta c t
        ends_now = [np.array(e) / np.array([gamma, 1, 1]) + beta * C * t for e in ENDS]
        emitted = [retarded_emission(y, beta, cam)[0] for y in ends_now]
        expected = np.linalg.norm(emitted[1] - emitted[0])
        assert row["photographed_length_m"] == pytest.approx(expected, rel=1e-9)
        assert row["rest_length_m"] == pytest.approx(ROD)
        # Lorentz-FitzGerald: the length at one instant of the scene frame is L0 / gamma
        assert row["contracted_length_m"] == pytest.approx(ROD / gamma, rel=1e-12)
    lengths = table.length_column("photographed_length_m")
    # near the camera the photograph is longer than L0 while approaching and shorter than
    # L0 / gamma while receding (physics.md: it can be longer or shorter than L0)
    assert lengths[0] > ROD and lengths[-1] < ROD / gamma


def test_head_on_rod_is_stretched_by_the_doppler_factor():
    # Camera on the line of motion, ahead: the photographed length is
    # L0 sqrt((1 + b) / (1 - b)) (physics.md; exact for a collinear camera) = 2 L0 at b = 0.6.
    scene = rod_scene(camera=(50.0, 0.0, 0.0), look_at=(0.0, 0.0, 0.0), fov=30.0)
    table = timeline.probe_table(scene, "rod", ENDS, [0.0, 1e-8])
    assert table.length_column("photographed_length_m") == pytest.approx(
        ROD * math.sqrt(1.6 / 0.4), rel=1e-12
    )
    # and the approaching rod's Doppler factor is the same sqrt((1+b)/(1-b)) = 2
    assert table.column("doppler") == pytest.approx(2.0, rel=1e-12)


def test_columns_units_and_angles():
    # a body at rest: a point at (3, 10, 4) m from a camera at the origin looking along +y
    scene = rod_scene(
        beta=(0.0, 0.0, 0.0),
        camera=(0.0, 0.0, 0.0),
        look_at=(0.0, 1.0, 0.0),
        position=(3.0, 10.0, 4.0),
    )
    table = timeline.probe_table(scene, "rod", [[0.0, 0.0, 0.0]], [0.0, 1e-9])
    assert list(table.rows[0]) == list(timeline.COLUMNS)
    for name, (unit, _) in timeline.COLUMNS.items():  # unit suffix in every column name
        suffix = {"s": "_s", "m": "_m", "deg": "_deg"}.get(unit)
        if suffix:
            assert name.endswith(suffix)
    r = table.rows[1]
    dist = math.sqrt(9 + 100 + 16)
    # light delay = distance / c, c = 299 792 458 m/s exactly (SI definition)
    assert r["light_delay_s"] == pytest.approx(dist / 299_792_458.0, rel=1e-12)
    assert r["emit_time_s"] == pytest.approx(1e-9 - dist / 299_792_458.0, rel=1e-12)
    # azimuth right of the view axis and elevation above the horizontal plane: spherical
    # angles of (right, up, forward) = (3, 4, 10)
    assert r["azimuth_deg"] == pytest.approx(math.degrees(math.atan2(3.0, 10.0)), abs=1e-9)
    assert r["elevation_deg"] == pytest.approx(math.degrees(math.asin(4.0 / dist)), abs=1e-9)
    assert r["doppler"] == pytest.approx(1.0)
    assert r["visible"] is False  # the centre is inside the box: its surface hides it
    assert table.length is None


def test_csv_and_json_round_trip(tmp_path):
    scene = rod_scene()
    table = timeline.probe_table(scene, "rod", ENDS, np.linspace(0, 2e-8, 3))
    paths = timeline.write_csv(table, tmp_path / "t.csv")
    assert [p.name for p in paths] == ["t.csv", "t.length.csv"]
    text = paths[0].read_text()
    assert text.startswith("# relview probe table")
    assert f"# scene_sha256: {scene.source_hash}" in text
    rows, meta = timeline.read_csv(paths[0])
    assert rows == table.rows  # floats written with repr: exact round trip
    assert meta["scene_sha256"] == scene.source_hash
    assert meta["effects"]["delay"] is True
    length_rows, _ = timeline.read_csv(paths[1])
    assert length_rows == table.length
    j = timeline.write_json(table, tmp_path / "t.json")
    back = timeline.read_json(j)
    assert back.rows == table.rows and back.length == table.length
    assert back.metadata == json.loads(json.dumps(table.metadata))
    # never replace earlier output unless asked
    assert timeline.write_csv(table, tmp_path / "t.csv")[0].name == "t-1.csv"


def test_plot_files(tmp_path):
    scene = rod_scene()
    table = timeline.probe_table(scene, "rod", ENDS, np.linspace(-1e-8, 1e-8, 4))
    png, side = timeline.write_plot(table, tmp_path / "p.png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    assert Image.open(png).text["scene_sha256"] == scene.source_hash
    assert json.loads(side.read_text())["body"] == "rod"
    svg, _ = timeline.write_plot(table, tmp_path / "p.svg")
    assert "<svg" in svg.read_text()
    pdf, _ = timeline.write_plot(table, tmp_path / "p.pdf")
    assert pdf.read_bytes()[:5] == b"%PDF-"  # PDF header (ISO 32000-1, 7.5.2)


def test_parse_times():
    assert timeline.parse_times("0:1e-8:3") == pytest.approx([0.0, 5e-9, 1e-8])
    assert timeline.parse_times("2e-9:2e-9:1") == pytest.approx([2e-9])
    for bad in ("0:1", "a:b:3", "0:1:0", "1:0:3", "0:1:1", "0:inf:3"):
        with pytest.raises(UserError, match="--times"):
            timeline.parse_times(bad)


def test_probe_command(tmp_path, capsys):
    path = tmp_path / "rod.toml"
    path.write_text("""
[render]
resolution = [64, 36]
[camera]
position = [0.0, -3.0, 0.0]
look_at = [0.0, 0.0, 0.0]
fov = 90
[[body]]
name = "rod"
shape = "box"
size = [2.0, 0.05, 0.05]
[body.motion]
beta = [0.6, 0.0, 0.0]
[body.surface]
color = [0.5, 0.5, 0.5]
""")
    # single time, one point: the table as before
    assert cli.main(["probe", str(path), "--body", "rod", "--point", "1,0,0"]) == 0
    out = capsys.readouterr().out
    assert "Doppler factor D" in out and "emission time" in out
    args = [
        "probe",
        str(path),
        "--body",
        "rod",
        "--point=-1,0,0",
        "--point",
        "1,0,0",
        "--times",
        "0:2e-8:3",
        "--quiet",
    ]
    assert cli.main(args + ["--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    # single time, two points, JSON: one document, a list of two records
    assert cli.main(args[:7] + ["--json"]) == 0
    records = json.loads(capsys.readouterr().out)
    assert [r["point"] for r in records] == [[-1.0, 0.0, 0.0], [1.0, 0.0, 0.0]]
    assert len(doc["rows"]) == 6 and len(doc["length"]) == 3
    csv_path, plot_path = tmp_path / "r.csv", tmp_path / "r.png"
    assert cli.main(args + ["--csv", str(csv_path), "--plot", str(plot_path)]) == 0
    assert csv_path.exists() and plot_path.exists() and (tmp_path / "r.length.csv").exists()
    assert cli.main(args + ["--time", "0"]) == 2
    assert "not both" in capsys.readouterr().err
