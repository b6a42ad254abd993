"""Render every demo scene in scenes/ into docs/img/gallery/ for the README.

    python scripts/make_gallery.py [--width 960]

Each demo is rendered at its own resolution scaled to ``--width`` pixels wide (aspect
kept) with its own samples; a scene with the microwave sky (its image is black by
physics) gets its temperature layer map instead. The scenes in LABELLED get each body's
name written under where that body is seen (from the body layer). Existing gallery files
are replaced.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import relview
from relview.figures.layer_maps import layer_map
from relview.scene.model import load_scene

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "docs" / "img" / "gallery"
#: demos whose bodies are panels to tell apart: the gallery names each one in the picture
LABELLED = {"spectral-panels"}


def label_bodies(path: Path, scene, frame) -> None:
    """Write each body's name, centred under where the body is seen, into the PNG."""
    import numpy as np
    from PIL import Image, ImageDraw, ImageFont  # imported here: only labelled scenes

    image = Image.open(path)
    info = dict(image.info)
    draw = ImageDraw.Draw(image)
    font = ImageFont.load_default(size=max(10, image.width // 60))
    bodies = frame.layers["body"]
    for i, body in enumerate(scene.bodies):
        rows, cols = np.nonzero(bodies == i)
        if rows.size:
            draw.text(
                (float(cols.mean()), float(rows.max()) + 4),
                body.name,
                fill="white",
                font=font,
                anchor="mt",
            )
    from PIL.PngImagePlugin import PngInfo

    meta = PngInfo()
    for key, value in info.items():
        if isinstance(value, str):
            meta.add_text(key, value)
    image.save(path, pnginfo=meta)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--width", type=int, default=960, help="gallery image width (px)")
    parser.add_argument(
        "names", nargs="*", help="scene names (file stems) to render; default: every scene"
    )
    args = parser.parse_args()
    OUT.mkdir(parents=True, exist_ok=True)
    for path in sorted((ROOT / "scenes").glob("*.toml")):
        if args.names and path.stem not in args.names:
            continue
        scene = load_scene(path)
        w, h = scene.render.resolution
        size = (args.width, max(1, round(args.width * h / w)))
        target = OUT / f"{path.stem}.png"
        if scene.background.kind == "cmb":
            written, _, _ = layer_map(scene, "temperature", target, resolution=size, overwrite=True)
        else:
            frame = relview.render(scene, resolution=size)
            written = frame.save(target, overwrite=True)
            if path.stem in LABELLED:
                label_bodies(written, scene, frame)
        print(f"wrote {written}")


if __name__ == "__main__":
    main()
