"""The ``relview`` command line: a thin layer over the Python API.

Exit codes: 0 success, 2 a user error (message, no traceback), 1 an internal error
(traceback, with a request to report it), 130 interrupted.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import sys
import traceback
import warnings
from pathlib import Path

from relview import __version__
from relview.cli import animate_command, compare_command
from relview.cli.options import (
    add_frame_options,
    attach_negative_values,
    check_output_path,
    default_output,
    finite_time,
    point_text,
    refuse_existing,
    scene_with_overrides,
)
from relview.errors import SceneWarning, UserError
from relview.figures import timeline
from relview.figures.timeline import length_csv_path
from relview.frame_memory import check_memory, estimate_bytes
from relview.geometry import shapes
from relview.imaging.figure_files import sidecar_path
from relview.scene.model import load_scene


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so every user error takes one path."""

    def error(self, message):
        raise UserError(f"{self.prog}: {message} (see '{self.prog} --help')")


def cmd_render(args) -> int:
    # imported here: it loads the numba kernels, which command start-up does not need
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
    # imported here: it loads the numba kernels, which command start-up does not need
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
            ("clock reading seen", f"{r.proper_time:.9g} s"),
            ("tick rate seen", f"{r.tick_rate:.6g} s per camera s"),
            ("clock, computed", f"{r.computed_proper_time:.9g} s (at the exposure's scene time)"),
            ("camera clock", f"{r.camera_proper_time:.9g} s"),
        ]
        for lamp in r.lamps:  # the light of each lamp at the emission event
            event = (
                "distant (plane wave)"
                if lamp.event_time != lamp.event_time
                else "t = %.9g s at (%.6g, %.6g, %.6g) m" % (lamp.event_time, *lamp.event_position)
            )
            rows += [
                (f"lamp {lamp.lamp}: event", event),
                (f"lamp {lamp.lamp}: incident (rest)", "(%.6f, %.6f, %.6f)" % lamp.direction_rest),
                (f"lamp {lamp.lamp}: D_in", f"{lamp.doppler_in:.6g}"),
                (
                    f"lamp {lamp.lamp}: lit",
                    (
                        "yes"
                        if lamp.lit_fraction == 1.0
                        else f"{lamp.lit_fraction:.3g} of it"
                        if lamp.lit
                        else "no (shadowed)"
                    ),
                ),
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

    if args.times is not None and args.time is not None:
        raise UserError("give either --time S (one exposure) or --times A:B:N, not both")
    if args.times is not None:
        times = timeline.parse_times(args.times)
    else:
        times = np.array([scene.camera.time if args.time is None else args.time])
    table = timeline.probe_table(scene, args.body, args.point, times, progress=not args.quiet)
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


def named_outputs(args) -> list[tuple[str, Path]]:
    """The output files the user named on the command line, with the companions each
    one brings (for :func:`relview.cli.options.refuse_existing`)."""
    named: list[tuple[str, Path]] = []
    output = getattr(args, "output", None)
    if output and args.command == "render":
        named.append(("-o", Path(output)))
        if args.layers:
            named.append(("-o (its --layers file)", Path(output).with_suffix(".npz")))
    elif output and args.command == "compare":
        named += [("-o", Path(output)), ("-o (its sidecar)", sidecar_path(Path(output)))]
    elif args.command == "probe":
        if args.csv:
            named.append(("--csv", Path(args.csv)))
            if len(args.point) == 2:
                named.append(("--csv (its length table)", length_csv_path(args.csv)))
        if args.plot:
            named += [
                ("--plot", Path(args.plot)),
                ("--plot (its sidecar)", sidecar_path(Path(args.plot))),
            ]
    return named


def cmd_check(args) -> int:
    # imported here: it loads the numba kernels, which command start-up does not need
    from relview.geometry import lightcone

    scene = load_scene(args.scene)
    w, h = scene.render.resolution
    check_memory(w, h, source=f"{args.scene}: render.resolution")
    for i, body in enumerate(scene.bodies):
        # every point of a body on a non-uniform worldline must stay below c
        if not body.motion.is_inertial:
            lightcone.check_body_speed(scene, i, shapes.mesh_data(body).vertices)
    print(
        f"{args.scene}: ok  ({len(scene.bodies)} bodies, {w}x{h}, "
        f"about {estimate_bytes(w, h) / 2**20:.0f} MiB per frame)"
    )
    _report_sightings(args.scene, scene)
    return 0


def _report_sightings(source, scene) -> None:
    """Where each body is seen at the exposure (one render at the scene's resolution),
    with a warning for each body outside the frame, hidden or only a few pixels big."""
    # imported here: they load the numba kernels, which command start-up does not need
    from relview import framing
    from relview.renderer import camera_state, render

    if not scene.bodies:
        return
    try:
        frame = render(scene, samples=1)
        event, beta_cam = camera_state(scene, frame.time)
        found = framing.sightings(scene, event, beta_cam, scene.render.effects, frame=frame)
    except UserError as exc:  # e.g. a scene too far out to trace: the file itself is valid
        print(f"  where the bodies are seen: not computed ({exc})")
        return
    print(f"  seen at t = {frame.time:.6g} s:")
    for sighting in found:
        print(f"    {sighting.describe()}")
    for message in framing.sighting_warnings(found):
        warnings.warn(f"{source}: {message}", SceneWarning, stacklevel=2)


def build_parser() -> argparse.ArgumentParser:

    parser = _Parser(
        prog="relview",
        description="Apparent images of relativistically "
        "moving bodies: light delay, aberration, Doppler shift and beaming.",
    )
    parser.add_argument("--version", action="version", version=f"relview {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("render", help="render one exposure to PNG (and float layers)")
    p.add_argument("scene", metavar="SCENE")
    p.add_argument(
        "-o",
        "--output",
        metavar="FILE",
        help="output image (.png, .npz or .exr); default outputs/SCENE.png",
    )
    p.add_argument("--time", type=finite_time, metavar="S", help="exposure time (s), scene frame")
    p.add_argument("--layers", action="store_true", help="also write the float layers as .npz")
    p.add_argument("--bits", type=int, choices=(8, 16), default=8, help="PNG bit depth")
    add_frame_options(p)
    p.set_defaults(func=cmd_render)

    p = sub.add_parser(
        "probe", help="where, when and how body points are seen, at one time or over a time range"
    )
    p.add_argument("scene", metavar="SCENE")
    p.add_argument("--body", required=True, metavar="NAME")
    p.add_argument(
        "--point",
        required=True,
        type=point_text,
        action="append",
        metavar="X,Y,Z",
        help="point in the body's rest frame, metres (repeat for more points; "
        "two points add the photographed length between them; negative "
        "coordinates as in --point -5,0,0)",
    )
    p.add_argument("--time", type=finite_time, metavar="S", help="exposure time (s), scene frame")
    p.add_argument(
        "--times",
        metavar="A:B:N",
        help="N exposure times from A to B seconds: a probe table over time",
    )
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.add_argument(
        "--csv", metavar="FILE", help="write the probe table as CSV (commented provenance header)"
    )
    p.add_argument(
        "--plot", metavar="FILE", help="plot the probe table against time (.png, .pdf or .svg)"
    )
    add_frame_options(p)
    p.set_defaults(func=cmd_probe)

    p = sub.add_parser("check", help="validate a scene file (exit 0, or a clear error)")
    p.add_argument("scene", metavar="SCENE")
    p.set_defaults(func=cmd_check)

    animate_command.register(sub)
    compare_command.register(sub)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """User warnings (mesh repairs, camera inside a body) as one plain line."""
    if issubclass(category, UserWarning):
        print(f"relview: warning: {message}", file=sys.stderr)
    else:
        _default_show_warning(message, category, filename, lineno, file, line)


_default_show_warning = warnings.showwarning


def kernel_cache_dir() -> Path:
    """Where numba caches the ray-casting kernels: beside relview/geometry/trace.py (found
    without importing it, which would load numba)."""
    origin = importlib.util.find_spec("relview.geometry.trace").origin
    return Path(origin).resolve().parent / "__pycache__"


def compile_notice() -> str | None:
    """A notice when the compiled ray-casting kernels are not cached yet (first run after
    an install or an upgrade), so a silent 20-40 s compile does not look like a hang."""
    import os

    cache = kernel_cache_dir()
    if os.environ.get("NUMBA_CACHE_DIR") or (cache.is_dir() and not os.access(cache, os.W_OK)):
        return None  # numba caches elsewhere; nothing reliable to look at
    if cache.is_dir() and any(cache.glob("trace._cast-*.nbi")):
        return None
    return (
        "relview: first run on this installation: compiling the ray-casting kernels "
        "(once, about 20-40 s; later runs start in about a second)"
    )


def main(argv=None) -> int:
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _show_warning
            parser = build_parser()
            args = parser.parse_args(
                attach_negative_values(parser, sys.argv[1:] if argv is None else argv)
            )
            refuse_existing(named_outputs(args), getattr(args, "overwrite", False))
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
        print(
            "relview: internal error (a bug in relview, not in your input); please report "
            "it with the traceback above and the scene file",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":
    sys.exit(main())
