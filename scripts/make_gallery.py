"""Render every demo scene in scenes/ into docs/img/gallery/ for the README.

    python scripts/make_gallery.py [--width 640]

Each demo is rendered at its own resolution scaled to ``--width`` pixels wide (aspect
kept) with its own samples; a scene with the microwave sky (its image is black by
physics) gets its temperature layer map instead. Existing gallery files are replaced.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import relview
from relview.figures.layer_maps import layer_map
from relview.scene.model import load_scene

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "docs" / "img" / "gallery"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--width", type=int, default=640, help="gallery image width (px)")
    args = parser.parse_args()
    OUT.mkdir(parents=True, exist_ok=True)
    for path in sorted((ROOT / "scenes").glob("*.toml")):
        scene = load_scene(path)
        w, h = scene.render.resolution
        size = (args.width, max(1, round(args.width * h / w)))
        target = OUT / f"{path.stem}.png"
        if scene.background.kind == "cmb":
            written, _, _ = layer_map(scene, "temperature", target, resolution=size,
                                      overwrite=True)
        else:
            written = relview.render(scene, resolution=size).save(target, overwrite=True)
        print(f"wrote {written}")


if __name__ == "__main__":
    main()
