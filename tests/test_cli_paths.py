"""The command line's output-path rule and negative option values.

Rule (README, docs/errors.md): a file the user names with -o, --csv or --plot that
already exists is refused with exit 2 before any work, and the message points to
--overwrite; default names still get a numbered new name; nothing is replaced unless
--overwrite is given. These are the project's own documented behaviours, checked
against the file system (no outside reference applies).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from relview.cli.app import build_parser, main
from relview.cli.options import attach_negative_values

SCENE = Path(__file__).resolve().parents[1] / "scenes" / "sphere-flyby.toml"
SMALL = ("--resolution", "32x18", "--quiet")


def run(capsys, *argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


# ------------------------------------------------------------------ negative values


def test_probe_point_with_negative_x_after_a_space(capsys):
    code, out, err = run(capsys, "probe", SCENE, "--body", "ball", "--point", "-1,0,0", "--json")
    assert code == 0, err
    assert json.loads(out)["point"] == [-1.0, 0.0, 0.0]
    # the same as the '=' spelling
    code2, out2, _ = run(capsys, "probe", SCENE, "--body", "ball", "--point=-1,0,0", "--json")
    assert code2 == 0 and json.loads(out2) == json.loads(out)


def test_negative_time_and_time_range_after_a_space(capsys):
    code, out, err = run(
        capsys,
        "probe",
        SCENE,
        "--body",
        "ball",
        "--point",
        "-1,0,0",
        "--point",
        "1,-0.5,0",
        "--time",
        "-1e-9",
        "--json",
    )
    assert code == 0, err
    records = json.loads(out)
    assert [r["point"] for r in records] == [[-1.0, 0.0, 0.0], [1.0, -0.5, 0.0]]
    code, out, err = run(
        capsys,
        "probe",
        SCENE,
        "--body",
        "ball",
        "--point",
        "1,0,0",
        "--times",
        "-2e-8:2e-8:3",
        "--json",
    )
    assert code == 0, err


def test_attach_negative_values_leaves_other_words_alone():
    parser = build_parser()
    argv = ["probe", "s.toml", "--body", "-b", "--point", "-5,0,0", "--json", "--", "--time", "-1"]
    # --body -b is not a number: left for argparse to report; after '--' nothing changes
    assert attach_negative_values(parser, argv) == [
        "probe",
        "s.toml",
        "--body",
        "-b",
        "--point=-5,0,0",
        "--json",
        "--",
        "--time",
        "-1",
    ]
    # a flag without a value (--json) does not swallow a following word
    assert attach_negative_values(parser, ["probe", "--json", "-5"]) == ["probe", "--json", "-5"]


def test_a_missing_point_value_still_says_so(capsys):
    code, _, err = run(capsys, "probe", SCENE, "--body", "ball", "--point", "--json")
    assert code == 2 and "--point" in err and "expected one argument" in err


# ------------------------------------------------------------------ explicit output paths


def test_render_refuses_an_existing_named_file(tmp_path, capsys):
    target = tmp_path / "fig.png"
    target.write_bytes(b"earlier figure")
    code, out, err = run(capsys, "render", SCENE, "-o", target, *SMALL)
    assert code == 2
    assert "fig.png" in err and "--overwrite" in err and "Traceback" not in err
    assert target.read_bytes() == b"earlier figure"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fig.png"]  # no fig-1.png either
    # with --overwrite it is replaced, in place
    code, out, err = run(capsys, "render", SCENE, "-o", target, "--overwrite", *SMALL)
    assert code == 0, err
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fig.png"]


def test_render_layers_companion_is_checked_too(tmp_path, capsys):
    (tmp_path / "fig.npz").write_bytes(b"earlier layers")
    code, _, err = run(capsys, "render", SCENE, "-o", tmp_path / "fig.png", "--layers", *SMALL)
    assert code == 2 and "fig.npz" in err and "--layers" in err
    assert not (tmp_path / "fig.png").exists()


def test_default_names_still_get_a_numbered_name(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    first = tmp_path / "outputs" / "sphere-flyby.png"
    first.parent.mkdir()
    first.write_bytes(b"earlier")
    code, out, err = run(capsys, "render", SCENE, *SMALL)
    assert code == 0, err
    assert "sphere-flyby-1.png" in out and first.read_bytes() == b"earlier"


def test_compare_refuses_an_existing_sidecar(tmp_path, capsys):
    (tmp_path / "sheet.png.json").write_text("{}")
    code, _, err = run(capsys, "compare", SCENE, "-o", tmp_path / "sheet.png", *SMALL)
    assert code == 2 and "sheet.png.json" in err and "--overwrite" in err
    assert not (tmp_path / "sheet.png").exists()


@pytest.mark.parametrize("flag, name", [("--csv", "table.csv"), ("--plot", "table.png")])
def test_probe_refuses_existing_table_files(tmp_path, capsys, flag, name):
    target = tmp_path / name
    target.write_text("earlier")
    code, _, err = run(
        capsys,
        "probe",
        SCENE,
        "--body",
        "ball",
        "--point",
        "1,0,0",
        "--times",
        "-1e-8:1e-8:3",
        flag,
        target,
        "--quiet",
    )
    assert code == 2 and name in err and flag in err and "--overwrite" in err
    assert target.read_text() == "earlier"
