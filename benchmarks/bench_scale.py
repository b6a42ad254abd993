"""Speed at scale: non-uniform motion, many velocities, and a second render of one scene.

Run (not part of pytest; the machine is shared, so run it when it is quiet):

    python benchmarks/bench_scale.py                 # 480x270, 5 repeats
    python benchmarks/bench_scale.py --repeats 3 --counts 1,10,100,1000

All figures come from one run, so their ratios compare like with like. Every case is one
frame at 480x270, one ray per pixel, camera at rest 3.5 m from the origin (60 degree
field), bodies are blackbody icospheres:

* ``uniform``: one sphere of radius 1 m, detail 6 (81 920 triangles), beta = 0.9 along
  +x, seen near the centre; rendered with an explicit, reused ``RenderContext``;
* ``second render``: the same scene through ``relview.render(scene)`` again (no context
  passed: whatever the renderer keeps between calls is used);
* ``hyperbolic``: the same sphere on a hyperbolic worldline (c^2/a = 10 m) that moves at
  0.9c as the light seen left it, context reused;
* ``new time each frame``: the uniform and the hyperbolic scene exposed at successive
  times FRAME_STEP_S apart (as an animation's frames), so nothing of an earlier
  exposure can be reused unchanged;
* ``N bodies``: N spheres of radius 0.05 m, detail 3 (1 280 triangles), on a grid across
  the view, each with its own velocity (|beta| from 0.1 to 0.8, directions spread),
  context reused; N = 1, 10, 100, 1 000. The seen area grows with N (0.1 % of the
  pixels for one body, two thirds for 1 000), so a second series keeps it about fixed:
  radius 0.05 m x sqrt(1000 / N) (one sphere of 1.6 m, ..., 1 000 of 0.05 m).

Each line prints the share of pixels that see a body. Times are median [min-max] seconds over ``--repeats`` frames after one warm-up frame.
Peak memory: the resident-memory high-water mark (VmHWM, reset through
/proc/self/clear_refs, Linux) over the case's warm-up and timed frames, and the RSS
before the case. The load average is printed before and after every case.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_frame  # noqa: E402  (the frame benchmark's fixed set-up)

WIDTH, HEIGHT = 480, 270
#: hyperbolic case: c^2 / a (m); the speed seen is BETA
HYPERBOLIC_LENGTH_M = 10.0
BETA = 0.9
TARGET_HYPERBOLIC = 3.0
#: the "new time each frame" cases: successive exposures this far apart (s), as the
#: frames of an animation (the 0.9c body moves 5.4 cm between them)
FRAME_STEP_S = 2e-10
TARGET_MANY = 4.0
TARGET_SECOND = 1.2


def frame_scene() -> str:
    """bench_frame's scene (the 81 920-triangle ball at 0.9c, seen near the centre) at
    WIDTH x HEIGHT."""
    return bench_frame.scene_toml(BETA).replace(
        f"resolution = [{bench_frame.WIDTH}, {bench_frame.HEIGHT}]",
        f"resolution = [{WIDTH}, {HEIGHT}]",
    )


def without_bodies() -> str:
    """frame_scene's camera, render settings and background, no bodies."""
    text = frame_scene()
    return text[: text.index("[[body]]")] + text[text.index("[background]") :]


def with_motion(text: str, motion: str) -> str:
    """``text`` with its (one) body's motion table replaced by ``motion``."""
    head, rest = text.split("[body.motion]\n", 1)
    return head + "[body.motion]\n" + motion + "\n" + rest[rest.index("[body.surface]") :]


def scene_hyperbolic(c):
    """The ball at rest at time t0 and x0, accelerating along +x with c^2/a = L: it is at
    x = 0 moving at BETA when the light that reaches the camera at t = 0 leaves it."""
    length = HYPERBOLIC_LENGTH_M
    d = length * BETA / np.sqrt(1 - BETA**2)  # c (t - t0) where beta(t) = BETA
    x0 = -float(np.sqrt(length**2 + d**2) - length)
    t0 = float(-bench_frame.CAMERA_DISTANCE_M / c - d / c)
    return with_motion(
        frame_scene(),
        f'kind = "hyperbolic"\nacceleration = [{c * c / length!r}, 0.0, 0.0]\n'
        f"position = [{x0!r}, 0.0, 0.0]\ntime = {t0!r}",
    )


def scene_many(c, n: int, radius: float = 0.05):
    """n spheres (``radius``, detail 3) on a grid across the view, each with its own
    velocity, each at its grid point when the light seen at t = 0 leaves it."""
    rng = np.random.default_rng(n)
    side = int(np.ceil(np.sqrt(n)))
    distance = bench_frame.CAMERA_DISTANCE_M
    bodies = []
    for k in range(n):
        i, j = divmod(k, side)
        x = (j + 0.5) / side * 3.6 - 1.8
        z = (i + 0.5) / side * 2.0 - 1.0
        direction = rng.normal(size=3)
        beta = (0.1 + 0.7 * k / max(1, n - 1)) * direction / np.linalg.norm(direction)
        seen = -float(np.sqrt(x * x + distance**2 + z * z)) / c
        bodies.append(
            f'[[body]]\nname = "b{k}"\nshape = "sphere"\nradius = {radius!r}\ndetail = 3\n'
            f'[body.motion]\nkind = "uniform"\nbeta = [{", ".join(repr(float(v)) for v in beta)}]'
            f"\nposition = [{x!r}, 0.0, {z!r}]\ntime = {seen!r}\n"
            f"[body.surface]\nblackbody = {bench_frame.BLACKBODY_K!r}\n"
        )
    return without_bodies() + "\n" + "\n".join(bodies)


def rss_mib(field: str) -> float:
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(field + ":"):
                return int(line.split()[1]) / 1024
    return float("nan")


def reset_peak() -> None:
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
    except OSError:
        pass


def load() -> str:
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


def run_case(name, fn, repeats, rows):
    before = load()
    rss0 = rss_mib("VmRSS")
    reset_peak()
    frame = fn()  # warm-up
    seen = float((frame.layers["body"] >= 0).mean())
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    peak = rss_mib("VmHWM")
    rows[name] = times
    print(
        f"{name:<44} {statistics.median(times):8.4f} s [{min(times):.4f}-{max(times):.4f}]"
        f"  hits {100 * seen:5.1f} %  RSS before {rss0:5.0f} MiB, peak {peak:5.0f} MiB"
        f"  load {before} -> {load()}",
        flush=True,
    )


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--counts", default="1,10,100,1000")
    parser.add_argument(
        "--skip", default="", help="comma list of cases to skip: uniform,second,hyperbolic,many"
    )
    args = parser.parse_args(argv)
    skip = set(filter(None, args.skip.split(",")))

    import tempfile

    import relview
    from relview.kinematics.lorentz import C
    from relview.renderer import RenderContext, render
    from relview.scene.model import load_scene

    print(
        f"relview from {os.path.dirname(relview.__file__)}; {WIDTH}x{HEIGHT}, "
        f"{args.repeats} repeats; load at start {load()}"
    )
    rows: dict[str, list[float]] = {}
    with tempfile.TemporaryDirectory() as tmp:

        def scene_of(key, text):
            path = os.path.join(tmp, f"{key}.toml")
            with open(path, "w") as f:
                f.write(text)
            return load_scene(path)

        def with_context(scene):
            context = RenderContext(scene)
            return lambda: render(scene, context=context)

        def new_time_each_frame(scene):
            # an animation: every call exposes at the next time (nothing of an earlier
            # exposure can be reused as it is), FRAME_STEP_S apart
            context = RenderContext(scene)
            count = iter(range(1 << 30))
            start = scene.camera.time
            return lambda: render(scene, time=start + FRAME_STEP_S * next(count), context=context)

        if "uniform" not in skip or "second" not in skip:
            uniform = scene_of("uniform", frame_scene())
            run_case("uniform 0.9c, context reused", with_context(uniform), args.repeats, rows)
            run_case(
                "uniform 0.9c, new time each frame",
                new_time_each_frame(uniform),
                args.repeats,
                rows,
            )
            run_case(
                "uniform 0.9c, render(scene) again",
                lambda: relview.render(uniform),
                args.repeats,
                rows,
            )
        if "hyperbolic" not in skip:
            hyper = scene_of("hyperbolic", scene_hyperbolic(C))
            run_case("hyperbolic 0.9c, context reused", with_context(hyper), args.repeats, rows)
            run_case(
                "hyperbolic 0.9c, new time each frame",
                new_time_each_frame(hyper),
                args.repeats,
                rows,
            )
        counts = [int(x) for x in args.counts.split(",") if x] if "many" not in skip else []
        for n in counts:
            many = scene_of(f"many{n}", scene_many(C, n))
            run_case(
                f"{n} bodies x 1280 tri, own velocities", with_context(many), args.repeats, rows
            )
        for n in counts:  # the same seen area whatever n: radius ~ 1 / sqrt(n)
            many = scene_of(f"area{n}", scene_many(C, n, 0.05 * float(np.sqrt(max(counts) / n))))
            run_case(f"{n} bodies, same seen area", with_context(many), args.repeats, rows)

    med = {k: statistics.median(v) for k, v in rows.items()}
    best = {k: min(v) for k, v in rows.items()}
    print("\nratios (of the medians; of the best runs) and targets:")

    def ratio(label, num, den, target):
        if num in med and den in med:
            print(
                f"  {label:<52} {med[num] / med[den]:7.2f}; {best[num] / best[den]:7.2f}"
                f"   target <= {target}"
            )

    ratio(
        "hyperbolic / uniform (context reused)",
        "hyperbolic 0.9c, context reused",
        "uniform 0.9c, context reused",
        TARGET_HYPERBOLIC,
    )
    ratio(
        "hyperbolic / uniform (new time each frame)",
        "hyperbolic 0.9c, new time each frame",
        "uniform 0.9c, new time each frame",
        TARGET_HYPERBOLIC,
    )
    ratio(
        "render(scene) again / with explicit context",
        "uniform 0.9c, render(scene) again",
        "uniform 0.9c, context reused",
        TARGET_SECOND,
    )
    for n in counts:
        ratio(
            f"{n} bodies / 1 body (same body size)",
            f"{n} bodies x 1280 tri, own velocities",
            f"{counts[0]} bodies x 1280 tri, own velocities",
            TARGET_MANY,
        )
    for n in counts:
        ratio(
            f"{n} bodies / 1 body (same seen area)",
            f"{n} bodies, same seen area",
            f"{counts[0]} bodies, same seen area",
            TARGET_MANY,
        )
    print(f"load at end {load()}")


if __name__ == "__main__":
    main()
