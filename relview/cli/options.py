"""Options and helpers shared by the commands (render, probe, animate, compare).

Argument types for argparse, the frame options every rendering command takes, the scene
loaded with those overrides, and the check on output paths made before any work
(relview.imaging.formats).
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import os
import re
from collections.abc import Iterable
from pathlib import Path

from relview.errors import OutputError, UserError
from relview.frame_memory import check_memory
from relview.imaging import formats
from relview.scene.model import load_scene
from relview.scene.reader import MAX_SAMPLES

EFFECTS = ("delay", "contraction", "aberration", "doppler", "beaming")


def resolution_text(text: str) -> tuple[int, int]:
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected WIDTHxHEIGHT such as 960x540, got {text!r}"
        ) from None
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
            f"expected 'auto' or a luminance in cd/m2, got {text!r}"
        ) from None
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
    p.add_argument(
        "--resolution",
        type=resolution_text,
        metavar="WxH",
        help="override render.resolution, e.g. 480x270",
    )
    p.add_argument("--samples", type=int, metavar="N", help="override render.samples")
    p.add_argument(
        "--exposure", type=exposure_text, metavar="auto|CD_M2", help="override render.exposure"
    )
    for name in EFFECTS:
        p.add_argument(
            f"--no-{name}",
            action="store_true",
            help=f"switch the {name} effect off (docs/scene-format.md)",
        )
    p.add_argument(
        "--tone",
        choices=("none", "reinhard"),
        help="display curve for PNGs: none (clip, default) or reinhard (Reinhard et al. "
        "2002, on luminance)",
    )
    p.add_argument(
        "--overwrite",
        action="store_true",
        help="replace existing output files (default: an existing file named with "
        "-o, --csv or --plot is an error; default names get a numbered new name)",
    )
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
    source = (
        "--resolution" if getattr(args, "resolution", None) else f"{args.scene}: render.resolution"
    )
    check_memory(*settings.resolution, source=source)
    off = {n: False for n in EFFECTS if getattr(args, f"no_{n}", False)}
    if off:
        settings = dataclasses.replace(
            settings, effects=dataclasses.replace(settings.effects, **off)
        )
    return dataclasses.replace(scene, render=settings)


def default_output(scene_path: str, suffix: str) -> Path:
    return Path("outputs") / (Path(scene_path).stem + suffix)


#: The check every command makes on its output path before any work. The output types
#: and the check live with the writers (relview.imaging.formats: FRAME_FORMATS, the
#: default, and FIGURE_FORMATS); the commands take it from here with their other helpers.
check_output_path = formats.check_output_path


# --------------------------------------------------------------------------- negative values

#: A value that starts with '-' and a digit (or '-.' and a digit): a negative number, a
#: point such as -5,0,0, a time range such as -1:1:5. argparse takes only plain negative
#: numbers like -5 or -0.5 as values; anything else that starts with '-' it reads as an
#: option ("expected one argument").
_NEGATIVE_VALUE = re.compile(r"^-\.?\d")

#: The options whose values may be negative: rest-frame points, scene times and time
#: ranges. Others (--resolution -5x5, --samples -1) keep argparse's own message.
SIGNED_OPTIONS = frozenset({"--point", "--time", "--times"})


def _signed_options(parser: argparse.ArgumentParser) -> set[str]:
    """The :data:`SIGNED_OPTIONS` that ``parser`` has, taking exactly one value each."""
    return {
        s
        for a in parser._actions
        if a.option_strings and a.nargs is None
        for s in a.option_strings
        if s in SIGNED_OPTIONS
    }


def attach_negative_values(parser: argparse.ArgumentParser, argv: Iterable[str]) -> list[str]:
    """argv with each negative value joined to its option: ``--point -5,0,0`` ->
    ``--point=-5,0,0`` (also ``--time -1e-8``, ``--times -1:1:5``; :data:`SIGNED_OPTIONS`),
    so argparse reads it as the option's value. Options are looked up in the command's
    own parser (the first word that is a command); nothing after ``--`` is touched."""
    argv = list(argv)
    commands: dict[str, argparse.ArgumentParser] = {}
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            commands.update(action.choices)
    takes_value = _signed_options(parser)
    out: list[str] = []
    i = 0
    while i < len(argv):
        word = argv[i]
        if word == "--":
            out.extend(argv[i:])
            break
        if word in commands and not any(w in commands for w in out):
            takes_value = takes_value | _signed_options(commands[word])
        if word in takes_value and i + 1 < len(argv) and _NEGATIVE_VALUE.match(argv[i + 1]):
            out.append(f"{word}={argv[i + 1]}")
            i += 2
            continue
        out.append(word)
        i += 1
    return out


# --------------------------------------------------------------------------- explicit outputs


def refuse_existing(outputs: Iterable[tuple[str, Path]], overwrite: bool) -> None:
    """The rule for output paths the user names (``-o``, ``--csv``, ``--plot``): an
    existing file is refused (exit 2) unless ``--overwrite``, checked before any work.
    ``outputs``: (how the path was given, path) pairs, companions included (the .npz
    of --layers, a figure's .json sidecar). Default names are not checked here: they
    get a numbered new name instead (relview.imaging.files.safe_output_path)."""
    if overwrite:
        return
    for flag, path in outputs:
        if os.path.lexists(path) and not Path(path).is_dir():
            raise OutputError(
                f"{flag}: the file exists; pass --overwrite to replace it, or name another "
                "file (relview never replaces a file you named unless asked)",
                file=path,
            )
