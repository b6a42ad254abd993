"""``relview animate``: resumable frame batches, video, worker pools and Dask (relview.animation)."""

from __future__ import annotations

from pathlib import Path

from relview.animation.batch import DEFAULT_WORKERS, animate
from relview.animation.timing import parse_frame_range
from relview.cli.options import add_frame_options, scene_with_overrides
from relview.errors import UserError


def register(subparsers) -> None:
    """Add ``relview animate``."""
    p = subparsers.add_parser(
        "animate",
        help="render the frames of the scene's [animation] (resumable; local or Dask)",
        description="Render frames 'frame-00000.png', ... of the scene's [animation] into a "
        "directory with a manifest.json; a rerun finishes what is missing or stale.",
    )
    p.add_argument("scene", metavar="SCENE")
    p.add_argument(
        "-o", "--output", metavar="DIR", help="output directory (default outputs/SCENE-STEM/)"
    )
    p.add_argument(
        "--frames",
        metavar="A:B",
        help="render only frames A <= k < B (also A: and :B), e.g. for a job array",
    )
    p.add_argument(
        "--video", metavar="FILE", help="also assemble an .mp4 or .gif once every frame is finished"
    )
    p.add_argument(
        "--cluster",
        metavar="ADDRESS",
        help="render on Dask: tcp://HOST:8786 (a running scheduler) or local:N",
    )
    p.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help=f"local worker processes, one numba thread each when more than 1 "
        f"(default {DEFAULT_WORKERS}: this process)",
    )
    p.add_argument(
        "--unlock-exposure",
        action="store_true",
        help="automatic exposure of each frame on its own (default: one white "
        "locked over the animation)",
    )
    add_frame_options(p)
    p.set_defaults(func=cmd_animate)


def cmd_animate(args) -> int:
    scene = scene_with_overrides(args)
    if scene.animation is None:
        raise UserError(
            "has no [animation] section; add one with start, end (s), frames and fps "
            "(docs/scene-format.md)",
            file=args.scene,
        )
    frames = parse_frame_range(args.frames, scene.animation.frames) if args.frames else None
    out = Path(args.output) if args.output else Path("outputs") / Path(args.scene).stem
    # A FlashWarning is printed as "relview: warning: ..." by relview.cli.app.
    summary = animate(
        scene,
        out,
        frames=frames,
        video=args.video,
        cluster=args.cluster,
        overwrite=args.overwrite,
        progress=not args.quiet,
        workers=args.workers,
        unlock_exposure=args.unlock_exposure,
    )
    exp = summary.exposure
    white = exp.get("white_cd_m2")
    how = {"fixed": "fixed", "locked": "locked", "per-frame": "per frame"}.get(exp.get("mode"))
    white_text = f"white {white:.4g} cd/m2 ({how})" if white else "automatic exposure per frame"
    rate = (
        f", {summary.frames_per_minute:.1f} frames/min on {summary.backend}"
        if summary.rendered
        else ""
    )
    print(
        f"{summary.out_dir}: rendered {len(summary.rendered)}, already done "
        f"{len(summary.skipped) + len(summary.adopted)} of {len(summary.frames_requested)} "
        f"frame(s); {white_text}{rate}"
    )
    if summary.video is not None:
        print(f"wrote {summary.video}")
    elif summary.video_note:
        print(summary.video_note)
    return 0
