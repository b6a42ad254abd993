"""The ``relview`` command line: a thin layer over the Python API.

Exit codes: 0 success, 2 a user error (message, no traceback), 1 an internal error
(traceback, with a request to report it), 130 interrupted.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import traceback
import warnings
from pathlib import Path

from relview.errors import UserError

EFFECTS = ("delay", "contraction", "aberration", "doppler", "beaming")


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so every user error takes one path."""

    def error(self, message):
        raise UserError(f"{self.prog}: {message} (see '{self.prog} --help')")


def _resolution(text: str) -> tuple[int, int]:
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected WIDTHxHEIGHT such as 960x540, got {text!r}") from None
    if w < 1 or h < 1:
        raise argparse.ArgumentTypeError(f"resolution must be positive, got {text!r}")
    return w, h


def _exposure(text: str):
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


def _point(text: str):
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
    p.add_argument("--resolution", type=_resolution, metavar="WxH",
                   help="override render.resolution, e.g. 480x270")
    p.add_argument("--samples", type=int, metavar="N", help="override render.samples")
    p.add_argument("--exposure", type=_exposure, metavar="auto|CD_M2",
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
    import dataclasses

    from relview.scene.model import load_scene

    scene = load_scene(args.scene)
    settings = scene.render
    if getattr(args, "resolution", None):
        settings = dataclasses.replace(settings, resolution=args.resolution)
    if getattr(args, "samples", None) is not None:
        from relview.scene.reader import MAX_SAMPLES

        if not 1 <= args.samples <= MAX_SAMPLES:
            raise UserError(f"--samples must be >= 1 and <= {MAX_SAMPLES}, got {args.samples}")
        settings = dataclasses.replace(settings, samples=args.samples)
    if getattr(args, "exposure", None) is not None:
        settings = dataclasses.replace(settings, exposure=args.exposure)
    if getattr(args, "tone", None):
        settings = dataclasses.replace(settings, tone=args.tone)
    from relview.renderer import check_memory

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


IMAGE_TYPES = (".png", ".npz", ".exr")
FIGURE_TYPES = (".png", ".pdf", ".svg")


def check_output_path(path: Path, types=IMAGE_TYPES) -> None:
    """Refuse, before any rendering, an output path that could never be written.

    The same reasons the writers in film.py give, found early so no work is lost.
    """
    from relview.imaging import film
    from relview.errors import OutputError

    ext = path.suffix.lower()
    if ext not in types:
        raise OutputError(f"unknown file type {ext!r}; use {', '.join(types)}", file=path)
    if ext == ".exr" and not film.exr_available():
        raise OutputError("cannot write .exr: no OpenEXR writer is installed; use .png or "
                          ".npz", file=path)
    film.safe_output_path(path)  # raises when the path is a directory
    for parent in path.absolute().parents:
        if parent.exists():
            if not parent.is_dir():
                raise OutputError(f"cannot create the directory: {parent} is a file, not a "
                                  "directory", file=path)
            break


def cmd_render(args) -> int:
    from relview.renderer import render

    scene = scene_with_overrides(args)
    out = Path(args.output) if args.output else default_output(args.scene, ".png")
    check_output_path(out)
    frame = render(scene, time=args.time, progress=not args.quiet)
    written = frame.save(out, overwrite=args.overwrite, bits=args.bits)
    print(f"wrote {written}  (white = {frame.white:.4g} cd/m2)")
    if args.layers:
        lay = frame.save(written.with_suffix(".npz"), overwrite=args.overwrite)
        print(f"wrote {lay}")
    return 0


def cmd_probe(args) -> int:
    from relview.probes import probe

    scene = scene_with_overrides(args)
    try:
        scene.body_index(args.body)
    except KeyError:
        import difflib

        names = [b.name for b in scene.bodies]
        near = difflib.get_close_matches(args.body, names, n=1)
        hint = f"; did you mean {near[0]!r}?" if near else f"; bodies: {', '.join(names)}"
        raise UserError(f"{args.scene}: --body {args.body!r}: no such body{hint}") from None
    if args.times is not None or args.csv or args.plot:
        return _probe_over_time(scene, args)
    if args.json and len(args.point) > 1:  # one JSON document: a list, one record per point
        records = [probe(scene, args.body, q, time=args.time).to_dict() for q in args.point]
        print(json.dumps(records, indent=2))
        return 0
    for i, point in enumerate(args.point):
        r = probe(scene, args.body, point, time=args.time)
        if args.json:
            print(json.dumps(r.to_dict(), indent=2))
            continue
        rows = [
            ("body", r.body),
            ("point (rest frame)", "(%.6g, %.6g, %.6g) m" % r.point),
            ("emission time", f"{r.emit_time:.9g} s"),
            ("emission position", "(%.6g, %.6g, %.6g) m" % r.emit_position),
            ("light delay", f"{r.light_delay:.6g} s"),
            ("direction (camera)", "(%.6f, %.6f, %.6f)" % r.direction),
            ("pixel", "(%.2f, %.2f)%s" % (*r.pixel, "" if r.in_view else "  (outside the view)")),
            ("visible", "yes" if r.visible else "no (hidden)"),
            ("Doppler factor D", f"{r.doppler:.6g}"),
            ("beta at emission", "(%.6g, %.6g, %.6g)" % r.beta_emit),
        ]
        width = max(len(k) for k, _ in rows)
        if i:
            print()
        for k, v in rows:
            print(f"{k:<{width}}  {v}")
    return 0


def _probe_over_time(scene, args) -> int:
    """relview probe --times / --csv / --plot: a probe table (relview.figures.timeline)."""
    import numpy as np

    from relview.figures import timeline

    if args.times is not None and args.time is not None:
        raise UserError("give either --time S (one exposure) or --times A:B:N, not both")
    if args.times is not None:
        times = timeline.parse_times(args.times)
    else:
        times = np.array([scene.camera.time if args.time is None else args.time])
    table = timeline.probe_table(scene, args.body, args.point, times,
                                 progress=not args.quiet)
    if args.csv:
        for path in timeline.write_csv(table, args.csv, overwrite=args.overwrite):
            print(f"wrote {path}", file=sys.stderr)
    if args.plot:
        for path in timeline.write_plot(table, args.plot, overwrite=args.overwrite):
            print(f"wrote {path}", file=sys.stderr)
    if args.json:
        print(json.dumps(timeline.table_json(table), indent=2, allow_nan=False))
    elif not (args.csv or args.plot):
        print(timeline.format_rows(table))
    return 0


def cmd_check(args) -> int:
    from relview.scene.model import load_scene

    scene = load_scene(args.scene)
    w, h = scene.render.resolution
    from relview.renderer import check_memory, estimate_bytes

    check_memory(w, h, source=f"{args.scene}: render.resolution")
    from relview.geometry import lightcone
    from relview.geometry import shapes
    from relview.scene.parts import UniformMotion

    for i, body in enumerate(scene.bodies):
        # every point of a body on a non-uniform worldline must stay below c
        if not isinstance(body.motion, UniformMotion):
            lightcone.check_body_speed(scene, i, shapes.mesh_data(body).vertices)
    print(f"{args.scene}: ok  ({len(scene.bodies)} bodies, {w}x{h}, "
          f"about {estimate_bytes(w, h) / 2**20:.0f} MiB per frame)")
    return 0


def build_parser() -> argparse.ArgumentParser:
    from relview import __version__

    parser = _Parser(prog="relview", description="Apparent images of relativistically "
                     "moving bodies: light delay, aberration, Doppler shift and beaming.")
    parser.add_argument("--version", action="version", version=f"relview {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("render", help="render one exposure to PNG (and float layers)")
    p.add_argument("scene", metavar="SCENE")
    p.add_argument("-o", "--output", metavar="FILE",
                   help="output image (.png, .npz or .exr); default outputs/SCENE.png")
    p.add_argument("--time", type=finite_time, metavar="S", help="exposure time (s), scene frame")
    p.add_argument("--layers", action="store_true", help="also write the float layers as .npz")
    p.add_argument("--bits", type=int, choices=(8, 16), default=8, help="PNG bit depth")
    add_frame_options(p)
    p.set_defaults(func=cmd_render)

    p = sub.add_parser("probe", help="where, when and how body points are seen, at one "
                       "time or over a time range")
    p.add_argument("scene", metavar="SCENE")
    p.add_argument("--body", required=True, metavar="NAME")
    p.add_argument("--point", required=True, type=_point, action="append", metavar="X,Y,Z",
                   help="point in the body's rest frame, metres (repeat for more points; "
                   "two points add the photographed length between them; write --point=-1,0,0 when X is negative)")
    p.add_argument("--time", type=finite_time, metavar="S", help="exposure time (s), scene frame")
    p.add_argument("--times", metavar="A:B:N",
                   help="N exposure times from A to B seconds: a probe table over time")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.add_argument("--csv", metavar="FILE",
                   help="write the probe table as CSV (commented provenance header)")
    p.add_argument("--plot", metavar="FILE",
                   help="plot the probe table against time (.png, .pdf or .svg)")
    add_frame_options(p)
    p.set_defaults(func=cmd_probe)

    p = sub.add_parser("check", help="validate a scene file (exit 0, or a clear error)")
    p.add_argument("scene", metavar="SCENE")
    p.set_defaults(func=cmd_check)

    for register in _extra_commands():
        register(sub)
    return parser


def _extra_commands():
    """Commands that live in their own modules (animation, comparison sheets)."""
    regs = []
    for mod in ("relview.animation.batch", "relview.figures.sheets"):
        try:
            m = __import__(mod, fromlist=["register_cli"])
        except ImportError:
            continue
        if hasattr(m, "register_cli"):
            regs.append(m.register_cli)
    return regs


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """User warnings (mesh repairs, camera inside a body) as one plain line."""
    if issubclass(category, UserWarning):
        print(f"relview: warning: {message}", file=sys.stderr)
    else:
        _default_show_warning(message, category, filename, lineno, file, line)


_default_show_warning = warnings.showwarning


def compile_notice() -> str | None:
    """A notice when the compiled ray-casting kernels are not cached yet (first run after
    an install or an upgrade), so a silent 20-40 s compile does not look like a hang."""
    import os

    cache = Path(__file__).resolve().parent / "__pycache__"
    if os.environ.get("NUMBA_CACHE_DIR") or (cache.is_dir() and not os.access(cache, os.W_OK)):
        return None  # numba caches elsewhere; nothing reliable to look at
    if cache.is_dir() and any(cache.glob("trace._cast-*.nbi")):
        return None
    return ("relview: first run on this installation: compiling the ray-casting kernels "
            "(once, about 20-40 s; later runs start in about a second)")


def main(argv=None) -> int:
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _show_warning
            args = build_parser().parse_args(argv)
            # a person at a terminal is told why the first run waits; logs and pipes,
            # whose stderr carries only errors and warnings, are not
            if args.command in ("render", "probe", "animate", "compare") and sys.stderr.isatty():
                notice = compile_notice()
                if notice:
                    print(notice, file=sys.stderr)
            return int(args.func(args) or 0)
    except UserError as e:
        print(f"relview: error: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("relview: interrupted; finished files are kept", file=sys.stderr)
        return 130
    except SystemExit as e:  # --help / --version
        return int(e.code or 0) if isinstance(e.code, int) else 0
    except Exception:
        traceback.print_exc()
        print("relview: internal error (a bug in relview, not in your input); please report "
              "it with the traceback above and the scene file", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
