"""Lamp and mirror benchmark: the cost of one point lamp with shadows, and of one mirror
bounce, on the frame benchmark.

Run (not part of pytest; the machine is shared, so run it when it is quiet):

    python benchmarks/bench_lamps.py                # 960x540, 81 920-triangle sphere
    python benchmarks/bench_lamps.py --repeats 5 --resolution 480x270

Set-up: benchmarks/bench_frame.py's frame (an icosphere of detail 6 at 3.5 m, camera at
rest, 60 degree field) with its surface made a grey ``color``, a floor plate under it and
a backdrop plate behind it,
rendered (a) with co-moving lamps only (no [[lamp]]: the frame without lamps), (b) lit
by one point lamp at rest with shadows (the sphere shadows the floor), and (c) as (a)
with the backdrop a mirror (``mirror = 0.9``: every backdrop pixel casts one reflected
ray, which meets the sphere's far side, the floor or a wall behind the camera). Targets:
(b) / (a) <= 2 and (c) / (a) <= 2.5. Prints median [min-max] seconds of each after one
warm-up render, the ratios and the load average.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import tomllib
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_frame  # noqa: E402  (the frame benchmark's fixed set-up)

TARGET_RATIO = 2.0
#: one mirror bounce against the frame without (issue 10)
TARGET_MIRROR_RATIO = 2.5

LAMP = """
[[lamp]]
name = "bench"
blackbody = 3000.0
power = 2000.0
[lamp.motion]
position = [1.5, -2.0, 3.0]
"""


def scene_text(width: int, height: int, lit: bool, mirror: bool = False) -> str:
    """bench_frame's scene at rest, grey, on a floor; lit by LAMP or by co-moving lamps;
    ``mirror``: the floor a mirror (co-moving lamps)."""
    own_lamp = "" if lit else "\nlamp = 3000.0"
    text = bench_frame.scene_toml(0.0)
    text = text.replace(
        f"resolution = [{bench_frame.WIDTH}, {bench_frame.HEIGHT}]",
        f"resolution = [{width}, {height}]",
    )
    text = text.replace(
        f"blackbody = {bench_frame.BLACKBODY_K!r}", "color = [0.6, 0.6, 0.6]" + own_lamp
    )
    floor = (
        '\n[[body]]\nname = "floor"\nshape = "plane"\nsize = [20.0, 20.0]\n'
        "[body.motion]\nposition = [0.0, 0.0, -1.2]\n"
        f"[body.surface]\ncolor = [0.5, 0.5, 0.5]{own_lamp}\n"
    )
    # a backdrop filling the frame behind the sphere: as a mirror it sends its rays
    # back towards the camera, past or onto the sphere and the floor
    backdrop = (
        '\n[[body]]\nname = "backdrop"\nshape = "plane"\nsize = [20.0, 20.0]\n'
        "rotation = [90.0, 0.0, 0.0]\n[body.motion]\nposition = [0.0, 2.5, 0.0]\n"
        "[body.surface]\n"
        + ("mirror = 0.9\n" if mirror else f"color = [0.4, 0.4, 0.4]{own_lamp}\n")
    )
    # and a wall behind the camera (out of its view), so reflected rays that pass the
    # sphere meet a surface too: every bounce is a full cast and a shaded hit
    behind = (
        '\n[[body]]\nname = "behind"\nshape = "plane"\nsize = [20.0, 20.0]\n'
        "rotation = [90.0, 0.0, 0.0]\n[body.motion]\nposition = [0.0, -4.0, 0.0]\n"
        f"[body.surface]\ncolor = [0.3, 0.5, 0.7]{own_lamp}\n"
    )
    return text + floor + backdrop + behind + (LAMP if lit else "")


def timed(scene, repeats: int) -> list[float]:
    import relview

    relview.render(scene)  # warm-up: compiled kernels, colour tables
    out = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        relview.render(scene)
        out.append(time.perf_counter() - t0)
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--resolution", default=f"{bench_frame.WIDTH}x{bench_frame.HEIGHT}")
    args = parser.parse_args(argv)
    width, height = (int(v) for v in args.resolution.split("x"))
    import relview

    medians = {}
    cases = (
        ("bare", False, False, "without lamps"),
        ("lamp", True, False, "one point lamp, shadows"),
        ("mirror", False, True, "mirror backdrop, one bounce"),
    )
    for key, lit, mirror, label in cases:
        scene = relview.Scene.from_dict(tomllib.loads(scene_text(width, height, lit, mirror)))
        runs = timed(scene, args.repeats)
        medians[key] = statistics.median(runs)
        print(f"{label:26s} {medians[key]:.3f} s [{min(runs):.3f}-{max(runs):.3f}]")
    # the mirror figure means something only if its reflected rays do the work of a frame:
    # the sky is black here, so a reflected ray that meets no body shows exactly zero
    scene = relview.Scene.from_dict(tomllib.loads(scene_text(width, height, False, True)))
    frame = relview.render(scene)
    on_mirror = frame.layers["body"] == [b.name for b in scene.bodies].index("backdrop")
    met = frame.layers["xyz"][on_mirror][:, 1] > 0
    print(
        f"mirror: {on_mirror.mean():.0%} of the pixels; "
        f"{met.mean():.1%} of their reflected rays meet a body"
    )
    print(f"lamp ratio {medians['lamp'] / medians['bare']:.2f} (target <= {TARGET_RATIO})")
    print(
        f"mirror ratio {medians['mirror'] / medians['bare']:.2f} (target <= {TARGET_MIRROR_RATIO})"
    )
    print("load average (1, 5, 15 min): " + " ".join(f"{v:.2f}" for v in os.getloadavg()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
