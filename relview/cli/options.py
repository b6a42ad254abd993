"""Options and helpers shared by the commands (render, probe, animate, compare).

Argument types for argparse, the frame options every rendering command takes, the scene
loaded with those overrides, and the check on output paths made before any work
(relview.imaging.formats).
"""

from __future__ import annotations

import argparse
import dataclasses
import math
from pathlib import Path

from relview.errors import UserError
from relview.imaging import formats
from relview.renderer import check_memory
from relview.scene.model import load_scene
from relview.scene.reader import MAX_SAMPLES

EFFECTS = ("delay", "contraction", "aberration", "doppler", "beaming")


def resolution_text(text: str) -> tuple[int, int]:
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected WIDTHxHEIGHT such as 960x540, got {text!r}") from None
    if w < 1 or h < 1:
        raise argparse.ArgumentTypeError(f"resolution must be positive, got {text!r}")
    return w, h


def exposure_text(text: str):
    if text == "auto":
        return "auto"
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected 'auto' or a luminance in cd/m2, got {text!r}") from None
    if not v > 0 or v == float("inf"):
        raise argparse.ArgumentTypeError(f"exposure luminance must be > 0 and finite, got {text!r}")
    return v


def point_text(text: str):
    try:
        p = [float(v) for v in text.split(",")]
    except ValueError:
        p = []
    if len(p) != 3:
        raise argparse.ArgumentTypeError(f"expected X,Y,Z in metres such as 0.5,0,0, got {text!r}")
    if not all(math.isfinite(v) for v in p):
        raise argparse.ArgumentTypeError(f"X,Y,Z must be finite numbers, got {text!r}")
    return p


def finite_time(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        v = math.nan
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"expected a finite time in seconds, got {text!r}")
    return v


def add_frame_options(p: argparse.ArgumentParser) -> None:
    """Options shared by every command that renders (render, animate, compare)."""
    p.add_argument("--resolution", type=resolution_text, metavar="WxH",
                   help="override render.resolution, e.g. 480x270")
    p.add_argument("--samples", type=int, metavar="N", help="override render.samples")
    p.add_argument("--exposure", type=exposure_text, metavar="auto|CD_M2",
                   help="override render.exposure")
    for name in EFFECTS:
        p.add_argument(f"--no-{name}", action="store_true",
                       help=f"switch the {name} effect off (docs/scene-format.md)")
    p.add_argument("--tone", choices=("none", "reinhard"),
                   help="display curve for PNGs: none (clip, default) or reinhard (Reinhard et al. "
                   "2002, on luminance)")
    p.add_argument("--overwrite", action="store_true",
                   help="replace existing output files (default: write a numbered new name)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def scene_with_overrides(args):
    """Load SCENE and apply the frame options."""
    scene = load_scene(args.scene)
    settings = scene.render
    if getattr(args, "resolution", None):
        settings = dataclasses.replace(settings, resolution=args.resolution)
    if getattr(args, "samples", None) is not None:
        if not 1 <= args.samples <= MAX_SAMPLES:
            raise UserError(f"--samples must be >= 1 and <= {MAX_SAMPLES}, got {args.samples}")
        settings = dataclasses.replace(settings, samples=args.samples)
    if getattr(args, "exposure", None) is not None:
        settings = dataclasses.replace(settings, exposure=args.exposure)
    if getattr(args, "tone", None):
        settings = dataclasses.replace(settings, tone=args.tone)
    # Refuse a frame that cannot fit before any work, naming where the size came from.
    source = ("--resolution" if getattr(args, "resolution", None)
              else f"{args.scene}: render.resolution")
    check_memory(*settings.resolution, source=source)
    off = {n: False for n in EFFECTS if getattr(args, f"no_{n}", False)}
    if off:
        settings = dataclasses.replace(settings,
                                       effects=dataclasses.replace(settings.effects, **off))
    return dataclasses.replace(scene, render=settings)


def default_output(scene_path: str, suffix: str) -> Path:
    return Path("outputs") / (Path(scene_path).stem + suffix)


#: The check every command makes on its output path before any work. The output types
#: and the check live with the writers (relview.imaging.formats: FRAME_FORMATS, the
#: default, and FIGURE_FORMATS); the commands take it from here with their other helpers.
check_output_path = formats.check_output_path
