"""``relview compare``: comparison sheets and false-colour layer maps (relview.figures)."""

from __future__ import annotations

import math
from pathlib import Path

from relview.cli.options import (
    add_frame_options,
    check_output_path,
    default_output,
    finite_time,
    scene_with_overrides,
)
from relview.errors import UserError
from relview.figures.layer_maps import LAYERS, layer_map
from relview.figures.sheets import DEFAULT_PANELS, FRAMINGS, PANELS, compare_sheet
from relview.imaging.formats import FIGURE_FORMATS, figure_type_hint


def cmd_compare(args) -> int:
    scene = scene_with_overrides(args)
    if args.layer:
        out = Path(args.output) if args.output else default_output(args.scene, f"-{args.layer}.png")
        check_output_path(out, FIGURE_FORMATS)
        written, side, _ = layer_map(
            scene,
            args.layer,
            out,
            args.time,
            panel=args.panel,
            overwrite=args.overwrite,
            progress=not args.quiet,
        )
        print(f"wrote {written}\nwrote {side}")
        return 0
    if args.panel:
        raise UserError("--panel goes with --layer; for a sheet use --panels LIST")
    off = [
        f"--no-{n}"
        for n in ("delay", "contraction", "aberration", "doppler", "beaming")
        if getattr(args, f"no_{n.replace('-', '_')}", False)
    ]
    if off:
        raise UserError(
            f"{' '.join(off)}: a comparison sheet sets every panel's effects itself "
            "(docs/figures.md); choose panels with --panels, e.g. --panels measured,delay-only"
        )
    out = Path(args.output) if args.output else default_output(args.scene, "-compare.png")
    check_output_path(out, FIGURE_FORMATS)
    sheet = compare_sheet(
        scene,
        args.time,
        args.panels,
        out,
        exposure=args.exposure_mode,
        body=args.body,
        overwrite=args.overwrite,
        progress=not args.quiet,
        framing=args.framing,
        overlay=args.overlay,
    )
    print(f"  framing: {sheet.framing}")
    for p in sheet.panels:
        scale = (
            f"{p.metres_per_pixel:.4g} m/px at {p.scale_distance_m:.4g} m"
            if math.isfinite(p.metres_per_pixel)
            else "no scale"
        )
        print(
            f"  {p.kind.name:<16} white {p.frame.white:.4g} cd/m2  {scale}"
            + (f"  ({p.out_of_view})" if p.out_of_view else "")
        )
    print(f"wrote {sheet.path}\nwrote {sheet.sidecar}")
    return 0


def register(subparsers) -> None:
    """Add the ``compare`` command."""
    p = subparsers.add_parser(
        "compare",
        help="side-by-side panels of one exposure (rest / measured / photograph), "
        "or a false-colour map of one data layer",
    )
    p.add_argument("scene", metavar="SCENE")
    p.add_argument(
        "-o",
        "--output",
        metavar="FILE",
        help=f"figure: {figure_type_hint()}; a FILE.json sidecar is written beside it",
    )
    p.add_argument("--time", type=finite_time, metavar="S", help="exposure time (s), scene frame")
    p.add_argument(
        "--panels",
        default=",".join(DEFAULT_PANELS),
        metavar="LIST",
        help=f"comma-separated panels from: {', '.join(PANELS)} "
        f"(default {','.join(DEFAULT_PANELS)})",
    )
    p.add_argument(
        "--body",
        metavar="NAME",
        help="the main body for speed and scale bar (default: the fastest)",
    )
    p.add_argument(
        "--exposure-mode",
        choices=("held", "each"),
        default="held",
        help="held: one white level for all panels (default); each: per panel",
    )
    p.add_argument(
        "--framing",
        choices=FRAMINGS,
        default="auto",
        help="scene: the scene's camera; common: one view holding the main body in every "
        "panel; each: every panel aims at and fits it; auto (default): scene when it shows "
        "the main body whole in every panel, else common",
    )
    p.add_argument(
        "--overlay",
        action="store_true",
        help="add a panel with the main body's measured and photographed outlines "
        "(solid and dashed) and a scale bar",
    )
    p.add_argument(
        "--layer",
        choices=tuple(LAYERS),
        metavar="NAME",
        help=f"instead of a sheet, a false-colour map of one layer: {', '.join(LAYERS)}",
    )
    p.add_argument(
        "--panel",
        metavar="NAME",
        help="with --layer: render with this panel's effects (default: the scene's)",
    )
    add_frame_options(p)
    p.set_defaults(func=cmd_compare)
