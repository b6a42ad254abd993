"""How every cost grows: frame time, context build, first frame and peak memory against
triangles, pixels and bodies.

Run (not part of pytest; the machine is shared, so run it when it is quiet):

    python benchmarks/bench_growth.py                 # full sweep, 5 frames per point
    python benchmarks/bench_growth.py --quick         # smaller sweep (about a minute)
    python benchmarks/bench_growth.py --repeats 3 --no-write

Three sweeps, each point a scene of bench_frame / bench_scale (imported, not copied):

* ``triangles``: bench_scale's 1 m sphere at 480x270, icosphere detail 3..6
  (1 280 .. 81 920 triangles), in uniform motion at 0.9c and on the hyperbolic worldline
  (0.9c as seen);
* ``pixels``: the same 81 920-triangle sphere at 240x135 .. 1920x1080 (written into
  the scene file, so the snapshot tolerance follows the pixel), uniform and hyperbolic;
* ``bodies``: bench_scale's N = 1, 10, 100, 1 000 spheres of 1 280 triangles, each with
  its own uniform velocity, at 480x270: same body size (radius 0.05 m, the seen area grows
  with N) and same seen area (radius 0.05 m x sqrt(1000 / N)).

For each point: the scene-file load (once), then ``--builds`` cold starts (every mesh
and hierarchy the process keeps dropped first, see ``forget_built``): the
``RenderContext`` build (meshes, inertial frame groups and their hierarchies), then the
first frame (for non-inertial bodies also the light-cone snapshot's topology and first
hierarchy build); then one warm-up frame and ``--repeats`` timed frames
with the context reused (median [min-max]). Peak memory, in a fresh child process per
point (memory freed by earlier points stays in a process's heap, so in one process the
later points would read the earlier ones' peaks): the child loads the compiled kernels
on small scenes, drops what they built, resets the resident-memory high-water mark
(VmHWM, through /proc/self/clear_refs, Linux; bench_scale's helpers), then loads the
scene, builds the context and renders three frames; reported: the child's peak and the
peak above its RSS before the scene was loaded (what the point itself needs; the rest is
interpreter, numpy, numba and compiled kernels).

Growth exponents per series: the slope k of log(cost) against log(size) (cost ~ size^k),
between the end points and by least squares over all points.

The tables are printed; unless ``--no-write``, they are also written as Markdown to a new
file (``--out``, default a time-stamped file in the temporary directory).
"""

from __future__ import annotations

import argparse
import gc
import os
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_frame  # noqa: E402  (the frame benchmark's fixed scene)
import bench_scale  # noqa: E402  (hyperbolic and many-body scenes, memory helpers)

FULL = {
    "details": [3, 4, 5, 6],
    "resolutions": [(240, 135), (480, 270), (960, 540), (1920, 1080)],
    "counts": [1, 10, 100, 1000],
}
QUICK = {
    "details": [3, 4, 5],
    "resolutions": [(240, 135), (480, 270), (960, 540)],
    "counts": [1, 10, 100],
}
#: the triangles and bodies sweeps' resolution (bench_scale's)
BASE_RESOLUTION = (bench_scale.WIDTH, bench_scale.HEIGHT)


def with_detail(text: str, detail: int) -> str:
    """A bench_scale sphere scene with the icosphere subdivision level ``detail``."""
    old = f"detail = {bench_frame.SPHERE_DETAIL}"
    assert text.count(old) == 1, "the sphere scene changed shape"
    return text.replace(old, f"detail = {detail}")


def with_resolution(text: str, width: int, height: int) -> str:
    """A bench_scale scene rendered at width x height. Written into the scene file, not
    passed as render(resolution=...): the light-cone snapshot's tolerance is a fraction
    of the scene file's pixel (lightcone.pixel_tolerance), as a command-line render at
    that resolution has it."""
    old = f"resolution = [{bench_scale.WIDTH}, {bench_scale.HEIGHT}]"
    assert text.count(old) == 1, "the scene changed shape"
    return text.replace(old, f"resolution = [{width}, {height}]")


def triangles(detail: int) -> int:
    return 20 * 4**detail


class Point:
    """One measured point of a series: its size and every cost."""

    def __init__(self, size, label):
        self.size = size
        self.label = label
        self.load_s = float("nan")
        self.build: list[float] = []
        self.first: list[float] = []
        self.frames: list[float] = []
        self.hits = float("nan")
        self.rss0 = float("nan")  # child's RSS before the scene (MiB)
        self.peak = float("nan")  # child's peak (MiB)
        self.load_avg = ""


def forget_built() -> None:
    """A cold start: drop every mesh and hierarchy the process keeps (the renderer's
    geometry cache, the primitive-mesh cache; the light-cone topology and snapshot
    hierarchy go with their faces arrays), then collect."""
    from relview.geometry import shapes
    from relview.renderer import clear_geometry_cache

    clear_geometry_cache()
    shapes.clear_cache()
    gc.collect()


def measure(scene_path, resolution, builds, repeats, label, size, memory_of) -> Point:
    from relview.renderer import RenderContext, render
    from relview.scene.model import load_scene

    point = Point(size, label)
    before = bench_scale.load()
    forget_built()
    t0 = time.perf_counter()
    scene = load_scene(scene_path)
    point.load_s = time.perf_counter() - t0
    gc.collect()
    for _ in range(builds):
        forget_built()
        t0 = time.perf_counter()
        context = RenderContext(scene)
        t1 = time.perf_counter()
        render(scene, resolution=resolution, context=context)
        t2 = time.perf_counter()
        point.build.append(t1 - t0)
        point.first.append(t2 - t1)
        del context
    context = RenderContext(scene)
    frame = render(scene, resolution=resolution, context=context)  # warm-up
    point.hits = float((frame.layers["body"] >= 0).mean())
    del frame
    for _ in range(repeats):
        t0 = time.perf_counter()
        render(scene, resolution=resolution, context=context)
        point.frames.append(time.perf_counter() - t0)
    if memory_of is not None:
        point.rss0, point.peak = memory_of(scene_path, resolution)
    point.load_avg = f"{before} -> {bench_scale.load()}"
    del context, scene
    forget_built()
    print(
        f"  {label:<34} frame {fmt(point.frames)}  build {fmt(point.build)}"
        f"  first {fmt(point.first)}  load {point.load_s:.3f}  hits {100 * point.hits:5.1f} %"
        f"  peak {point.peak:5.0f} MiB (+{point.peak - point.rss0:.0f})  load {point.load_avg}",
        flush=True,
    )
    return point


def fmt(values) -> str:
    if not values:
        return "-"
    m = statistics.median(values)
    return f"{m:.4f} [{min(values):.4f}-{max(values):.4f}]"


def exponents(sizes, costs) -> tuple[float, float]:
    """(end points, least squares) slope of log cost against log size."""
    x = np.log(np.asarray(sizes, float))
    y = np.log(np.asarray(costs, float))
    if len(x) < 2 or not np.all(np.isfinite(y)):
        return float("nan"), float("nan")
    ends = (y[-1] - y[0]) / (x[-1] - x[0])
    fit = float(np.polyfit(x, y, 1)[0])
    return float(ends), fit


#: the costs whose growth is fitted: column name -> value of a point
COSTS = {
    "frame": lambda p: statistics.median(p.frames),
    "build": lambda p: statistics.median(p.build),
    "first frame": lambda p: statistics.median(p.first),
    "peak above RSS before": lambda p: p.peak - p.rss0,
}


def series_table(name, size_name, points) -> list[str]:
    lines = [
        f"### {name}",
        "",
        f"| {size_name} | frame s, median [min-max] | context build s | first frame s "
        "| scene load s | hits | peak MiB (+ above RSS before the scene) |",
        "|---|---|---|---|---|---|---|",
    ]
    for p in points:
        lines.append(
            f"| {p.label} | {fmt(p.frames)} | {fmt(p.build)} | {fmt(p.first)} "
            f"| {p.load_s:.3f} | {100 * p.hits:.1f} % | {p.peak:.0f} (+{p.peak - p.rss0:.0f}) |"
        )
    lines.append("")
    return lines


def exponent_table(series) -> list[str]:
    lines = [
        "### Growth exponents k (cost ~ size^k): end points; least squares",
        "",
        "| series | size | " + " | ".join(COSTS) + " |",
        "|---|---|" + "---|" * len(COSTS),
    ]
    for name, size_name, points in series:
        sizes = [p.size for p in points]
        cells = []
        for cost in COSTS.values():
            ends, fit = exponents(sizes, [cost(p) for p in points])
            cells.append(f"{ends:.2f}; {fit:.2f}")
        span = f"{size_name} {sizes[0]:,}..{sizes[-1]:,}".replace(",", " ")
        lines.append(f"| {name} | {span} | " + " | ".join(cells) + " |")
    lines.append("")
    return lines


def child_memory(scene_path: str, width: int, height: int, warm_paths: list[str]) -> None:
    """In a fresh process: kernels loaded, then the point's peak (prints two numbers)."""
    from relview.renderer import RenderContext, render
    from relview.scene.model import load_scene

    warm_up(warm_paths, quiet=True)
    rss0 = bench_scale.rss_mib("VmRSS")
    bench_scale.reset_peak()
    scene = load_scene(scene_path)
    context = RenderContext(scene)
    for _ in range(3):
        render(scene, resolution=(width, height), context=context)
    print(f"{rss0} {bench_scale.rss_mib('VmHWM')}")


def warm_up(paths, quiet=False) -> None:
    """Load numba's compiled kernels (compile them in a fresh snapshot) for every kind of
    scene, at a small resolution, outside every timing."""
    from relview.renderer import RenderContext, render
    from relview.scene.model import load_scene

    t0 = time.perf_counter()
    for path in paths:
        scene = load_scene(path)
        render(scene, resolution=(96, 54), context=RenderContext(scene))
    forget_built()
    if not quiet:
        print(f"warm-up (kernels loaded or compiled): {time.perf_counter() - t0:.1f} s", flush=True)


def snapshot_name() -> str:
    import relview

    stamp = Path(relview.__file__).resolve().parent.parent / "SNAPSHOT"
    return stamp.read_text().strip() if stamp.exists() else "(working tree, no SNAPSHOT file)"


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--repeats", type=int, default=5, help="timed frames per point")
    parser.add_argument("--builds", type=int, default=3, help="cold starts per point")
    parser.add_argument("--quick", action="store_true", help="smaller sweep")
    parser.add_argument(
        "--skip", default="", help="comma list of sweeps to skip: triangles,pixels,bodies"
    )
    parser.add_argument("--no-write", action="store_true", help="print only")
    parser.add_argument(
        "--no-memory", action="store_true", help="skip the peak-memory child processes"
    )
    parser.add_argument("--child-memory", nargs="+", help=argparse.SUPPRESS)
    parser.add_argument("--out", default=None, help="Markdown file for the tables (new)")
    args = parser.parse_args(argv)
    if args.child_memory:
        path, width, height, *warm = args.child_memory
        child_memory(path, int(width), int(height), warm)
        return
    sweep = QUICK if args.quick else FULL
    skip = set(filter(None, args.skip.split(",")))

    import relview
    from relview.kinematics.lorentz import C

    started = datetime.now(UTC)
    header = (
        f"relview from {os.path.dirname(relview.__file__)}; snapshot {snapshot_name()}; "
        f"{os.cpu_count()} cores; {args.repeats} frames, {args.builds} cold starts per point; "
        f"start {started:%Y-%m-%d %H:%M:%S} UTC, load {bench_scale.load()}"
    )
    print(header, flush=True)
    series = []
    with tempfile.TemporaryDirectory() as tmp:

        def scene_file(key, text):
            path = os.path.join(tmp, f"{key}.toml")
            with open(path, "w") as f:
                f.write(text)
            return path

        uniform_text = bench_scale.frame_scene()
        hyper_text = bench_scale.scene_hyperbolic(C)
        warm_paths = [
            scene_file("warm-uniform", with_detail(uniform_text, 2)),
            scene_file("warm-hyper", with_detail(hyper_text, 2)),
            scene_file("warm-many", bench_scale.scene_many(C, 3)),
        ]
        warm_up(warm_paths)

        def memory_of(path, resolution):
            # same interpreter and environment (PYTHONPATH: the same snapshot)
            out = subprocess.run(
                [sys.executable, __file__, "--child-memory", path, *map(str, resolution)]
                + warm_paths,
                check=True,
                capture_output=True,
                text=True,
            ).stdout.split()
            return float(out[-2]), float(out[-1])

        memory = None if args.no_memory else memory_of
        kinds = [("uniform 0.9c", uniform_text), ("hyperbolic 0.9c", hyper_text)]
        if "triangles" not in skip:
            for kind, text in kinds:
                print(f"triangles, {kind}, {BASE_RESOLUTION[0]}x{BASE_RESOLUTION[1]}:")
                points = [
                    measure(
                        scene_file(f"{kind[:4]}-d{d}", with_detail(text, d)),
                        BASE_RESOLUTION,
                        args.builds,
                        args.repeats,
                        f"{triangles(d):,} tri".replace(",", " "),
                        triangles(d),
                        memory,
                    )
                    for d in sweep["details"]
                ]
                series.append((f"triangles, {kind}", "triangles", points))
        if "pixels" not in skip:
            for kind, text in kinds:
                print(f"pixels, {kind}, {triangles(bench_frame.SPHERE_DETAIL)} triangles:")
                points = [
                    measure(
                        scene_file(f"{kind[:4]}-{w}x{h}", with_resolution(text, w, h)),
                        (w, h),
                        args.builds,
                        args.repeats,
                        f"{w}x{h}",
                        w * h,
                        memory,
                    )
                    for w, h in sweep["resolutions"]
                ]
                series.append((f"pixels, {kind}", "pixels", points))
        if "bodies" not in skip:
            counts = sweep["counts"]
            for key, name, radius in (
                ("size", "same body size", lambda n: 0.05),
                ("area", "same seen area", lambda n: 0.05 * float(np.sqrt(max(counts) / n))),
            ):
                print(f"bodies, {name}, own velocities, 1 280 triangles each:")
                points = [
                    measure(
                        scene_file(f"many-{key}-{n}", bench_scale.scene_many(C, n, radius(n))),
                        BASE_RESOLUTION,
                        args.builds,
                        args.repeats,
                        f"{n} (r {radius(n):.3g} m)",
                        n,
                        memory,
                    )
                    for n in counts
                ]
                series.append((f"bodies, {name}", "bodies", points))

    ended = datetime.now(UTC)
    lines = [
        f"{header}; end {ended:%H:%M:%S} UTC, load {bench_scale.load()} "
        f"({(ended - started).total_seconds():.0f} s)",
        "",
    ]
    for name, size_name, points in series:
        lines += series_table(name, size_name, points)
    if series:
        lines += exponent_table(series)
    text = "\n".join(lines)
    print("\n" + text)
    if not args.no_write:
        out = Path(
            args.out
            or os.path.join(tempfile.gettempdir(), f"relview-growth-{started:%Y%m%dT%H%M%S}.md")
        )
        if out.exists():
            sys.exit(f"bench_growth: {out} exists; not replaced (pass another --out)")
        out.write_text(text + "\n")
        print(f"tables written to {out}")


if __name__ == "__main__":
    main()
