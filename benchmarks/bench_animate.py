"""Frames per minute of `relview animate`: one process, two processes, two Dask workers.

Usage (from the repository root):

    python benchmarks/bench_animate.py [--resolution 320x180] [--frames 32] [--repeat 3]

Scene: scenes/sphere-flyby.toml (a gridded ball at 0.95c passing 3 m from the camera,
graticule sky) with an animation from -6 ns to 16 ns attached in code (the ball is in
view throughout). Every configuration renders the same frames into a fresh temporary
directory. Two rates are printed:

* "batch": frames / time from starting the workers to the last frame written (worker
  start-up included), AnimationSummary.frames_per_minute;
* "steady": (frames - 1) / time between the first and the last frame file's
  modification time, i.e. without start-up: what a long batch approaches.

First, the seconds per frame of a render alone in this process with 1 and with 2 numba
threads (interleaved). `relview animate` sets OMP_WAIT_POLICY=PASSIVE unless the user
set it (numba's OpenMP layer otherwise spins while waiting, which costs much on a
shared machine); this script does the same unless given --omp-active.

Numba's cache is warmed first. The machine may be shared: the configurations are run
in turn, ``--repeat`` times, and the median is reported.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import statistics
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def thread_comparison(scene, rounds: int = 2) -> None:
    """Seconds per frame in this process with 1 and with 2 numba threads, interleaved.

    Fixed white, no files: the render alone. Run once as it is and once with
    --omp-active to see what OpenMP's spinning wait costs on a shared machine.
    """
    import numba

    from relview.animation.timing import frame_times
    from relview.animation.workers import FrameRenderer

    renderer = FrameRenderer(scene, 1.0e6)
    times = frame_times(scene.animation)[:: max(1, scene.animation.frames // 12)]
    spent: dict[int, list[float]] = {1: [], 2: []}
    default = numba.get_num_threads()
    for r in range(rounds):
        for k, t in enumerate(times):
            for n in (1, 2) if (r + k) % 2 else (2, 1):
                numba.set_num_threads(min(n, numba.config.NUMBA_NUM_THREADS))
                t0 = time.perf_counter()
                renderer.render(k, t)
                spent[n].append(time.perf_counter() - t0)
    numba.set_num_threads(default)
    print(
        f"one process, render only, median s/frame: 1 numba thread "
        f"{statistics.median(spent[1]):.4f}, 2 threads {statistics.median(spent[2]):.4f} "
        f"(threading layer {numba.threading_layer()}, "
        f"OMP_WAIT_POLICY={os.environ.get('OMP_WAIT_POLICY', '(default)')})",
        flush=True,
    )


def main() -> None:
    ap0 = argparse.ArgumentParser(add_help=False)
    ap0.add_argument("--omp-active", action="store_true")
    if not ap0.parse_known_args()[0].omp_active:
        # as `import relview` does (relview/__init__.py), before numba loads
        os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")
    from relview.animation.batch import animate
    from relview.animation.workers import FrameRenderer
    from relview.scene.model import load_scene
    from relview.scene.parts import Animation

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--resolution", default="320x180")
    ap.add_argument("--frames", type=int, default=32)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--configs", default="1,2,local:2")
    ap.add_argument(
        "--omp-active", action="store_true", help="leave OpenMP's default (spinning) wait policy"
    )
    args = ap.parse_args()
    w, h = (int(v) for v in args.resolution.split("x"))
    scene = load_scene(ROOT / "scenes" / "sphere-flyby.toml")
    scene = scene.replace(
        render=dataclasses.replace(scene.render, resolution=(w, h)),
        animation=Animation(start=-6.0e-9, end=1.6e-8, frames=args.frames, fps=24.0),
    )
    FrameRenderer(scene, None).render(0, 0.0)  # compile / load numba's cache
    thread_comparison(scene)
    print(
        f"scene {scene.source_path.name}, {w}x{h}, {args.frames} frames, "
        f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f}"
    )
    results: dict[str, list[tuple[float, float]]] = {}
    configs = args.configs.split(",")
    for rep in range(args.repeat):
        for config in configs[rep % len(configs) :] + configs[: rep % len(configs)]:
            with tempfile.TemporaryDirectory() as tmp:
                kw = (
                    {"cluster": config} if config.startswith("local:") else {"workers": int(config)}
                )
                s = animate(scene, Path(tmp) / "out", progress=False, **kw)
                done = sorted(p.stat().st_mtime_ns for p in (Path(tmp) / "out").glob("frame-*"))
            steady = 60.0 * (len(done) - 1) / ((done[-1] - done[0]) * 1e-9)
            results.setdefault(s.backend, []).append((s.frames_per_minute, steady))
            print(
                f"run {rep + 1}: {s.backend:<34} batch {s.frames_per_minute:6.1f}  steady "
                f"{steady:6.1f} frames/min  (render {s.render_seconds:.1f} s, "
                f"load {os.getloadavg()[0]:.1f})",
                flush=True,
            )
    print(f"median of {args.repeat} runs (frames/min):")
    for backend, rates in results.items():
        batch = statistics.median(r[0] for r in rates)
        steady = statistics.median(r[1] for r in rates)
        print(f"  {backend:<34} batch {batch:6.1f}  steady {steady:6.1f}")


if __name__ == "__main__":
    main()
