"""Frame benchmark: relview on an ~80k-triangle mesh at 960x540, against Embree.

Run (not part of pytest):

    /tmp/venv/bin/python benchmarks/bench_frame.py            # measure, print, write results.md
    /tmp/venv/bin/python benchmarks/bench_frame.py --repeats 3 --no-write

Measures, in one run (see benchmarks/README.md for what each figure means):

1. relview full frame (renderer.render: rays, trace, Doppler, shading, layers, exposure)
   with the body at rest, the trace alone (Tracer.cast on the same rays, one call) and
   the time inside the numba kernel trace._cast during those casts (on 2 and 1 threads);
2. the same with the body moving at 0.9c across the view;
3. a bare first-hit cast of the rest-frame rays by Embree (embreex, the `bench` extra),
   single-threaded and split over as many threads as numba uses, plus its scene build,
   and the per-ray cost of both casters for rays that miss the mesh's box, enter it and
   miss, or hit;
4. rays per second, and the ratios against the targets, also from paired rounds (frame,
   Embree, moving frame timed back to back);
5. start-up of a second `relview render SCENE` (numba cache warm): the whole command at a
   small resolution, and an instrumented run at 960x540 that stamps the time of import,
   scene load, context build and the first batch of rays, and the cost of loading the
   cached compiled kernels;
6. peak resident memory of a process that renders one full frame (VmHWM; ru_maxrss);
7. a cProfile over several frames of each kind, split into trace kernel / trace glue /
   camera rays / Doppler / shading / exposure / the rest of render().

The machine is shared: every timing is repeated (after one warm-up) and reported as
median [min-max], with the load average (os.getloadavg) seen before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# --------------------------------------------------------------------------------------
# Benchmark set-up (fixed so that runs on different days compare)
# --------------------------------------------------------------------------------------

WIDTH, HEIGHT = 960, 540
FOV_DEG = 60.0  # horizontal
#: icosphere subdivision level: 20 * 4**6 = 81 920 triangles (trimesh.creation.icosphere)
SPHERE_DETAIL = 6
SPHERE_RADIUS_M = 1.0
#: camera distance from the sphere centre (m); the sphere's angular diameter,
#: 2 asin(1/3.5) = 33 deg, nearly fills the 36.4 deg vertical field at 16:9
CAMERA_DISTANCE_M = 3.5
MOVING_BETA = 0.9
BLACKBODY_K = 5800.0
#: resolution of the whole-command start-up runs (small: the figure is start-up, not render)
STARTUP_RESOLUTION = "96x54"
#: issue 12, "the whole frame near the cast": frame at rest <= 1.3x Embree's bare cast on
#: as many threads, frame at 0.9c <= 1.1x the frame at rest
TARGET_REST_VS_EMBREE = 1.3
TARGET_MOVING_VS_REST = 1.1
TARGET_STARTUP_S = 2.0

REPO = Path(__file__).resolve().parent.parent
RESULTS = REPO / "benchmarks" / "results.md"
#: results.md keeps everything below this line across runs (hand-written analysis)
ANALYSIS_MARK = "<!-- analysis: written by hand, kept by bench_frame.py across runs -->"


def scene_toml(beta: float) -> str:
    """A scene file: one 5800 K blackbody icosphere, camera on -y looking at the origin.

    Moving case: the body crosses the view along +x and its origin passes x = 0 at
    t = -CAMERA_DISTANCE/c, so the light it sent then reaches the camera at the
    exposure (t = 0): the body is in frame, near the image centre.
    """
    from relview.kinematics.lorentz import C

    t_pass = -CAMERA_DISTANCE_M / C if beta else 0.0
    return f"""\
[scene]
title = "Benchmark ball, beta = {beta}"
format = 1

[render]
resolution = [{WIDTH}, {HEIGHT}]
samples = 1
exposure = "auto"

[camera]
position = [0.0, {-CAMERA_DISTANCE_M!r}, 0.0]
look_at = [0.0, 0.0, 0.0]
up = [0.0, 0.0, 1.0]
fov = {FOV_DEG!r}
time = 0.0

[[body]]
name = "ball"
shape = "sphere"
radius = {SPHERE_RADIUS_M!r}
detail = {SPHERE_DETAIL}

[body.motion]
kind = "uniform"
beta = [{beta!r}, 0.0, 0.0]
position = [0.0, 0.0, 0.0]
time = {t_pass!r}

[body.surface]
blackbody = {BLACKBODY_K!r}

[background]
kind = "black"
"""


# --------------------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------------------


class Runs(list):
    """Wall-clock seconds of repeated runs, with the CPU seconds each used alongside."""

    def __init__(self, wall=(), cpu=None):
        super().__init__(wall)
        self.cpu = list(cpu) if cpu is not None else None


def _cpu_seconds() -> float:
    """CPU time of this process and its finished children (all threads), seconds."""
    me = resource.getrusage(resource.RUSAGE_SELF)
    ch = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + ch.ru_utime + ch.ru_stime


def timed_runs(fn, repeats: int, warmup: int = 1) -> Runs:
    """Wall-clock (and CPU) seconds of ``repeats`` calls of fn() after ``warmup`` untimed calls.

    CPU seconds (summed over threads) change less than wall time when other processes
    compete for the cores, so both are kept.
    """
    for _ in range(warmup):
        fn()
    wall, cpu = [], []
    for _ in range(repeats):
        c0 = _cpu_seconds()
        t0 = time.perf_counter()
        fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(_cpu_seconds() - c0)
    return Runs(wall, cpu)


class Stat:
    """Median and spread of repeated timings (s), and the median CPU seconds if known."""

    def __init__(self, runs):
        self.runs = list(runs)
        self.median = statistics.median(runs)
        self.min = min(runs)
        self.max = max(runs)
        cpu = getattr(runs, "cpu", None)
        self.cpu = statistics.median(cpu) if cpu else None

    def ms(self) -> str:
        return f"{self.median * 1e3:8.1f} [{self.min * 1e3:.1f}-{self.max * 1e3:.1f}]"

    def s(self) -> str:
        return f"{self.median:.2f} [{self.min:.2f}-{self.max:.2f}]"

    def cpu_ms(self) -> str:
        return "-" if self.cpu is None else f"{self.cpu * 1e3:.0f}"


def load_str() -> str:
    a, b, c = os.getloadavg()
    return f"{a:.2f} / {b:.2f} / {c:.2f}"


def cpu_model() -> str:
    """Model name, family/model numbers, vector extensions and cache from /proc/cpuinfo."""
    fields = {}
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if ":" not in line:
                if fields:
                    break  # first processor only
                continue
            key, value = (part.strip() for part in line.split(":", 1))
            fields.setdefault(key, value)
    except OSError:
        return platform.processor() or "unknown"
    wanted = ("sse4_2", "avx", "avx2", "fma", "avx512f")
    flags = [f for f in fields.get("flags", "").split() if f in wanted]
    return (
        f"{fields.get('model name', 'unknown')} (family {fields.get('cpu family', '?')}, "
        f"model {fields.get('model', '?')}, {fields.get('cpu MHz', '?')} MHz, cache "
        f"{fields.get('cache size', '?')}, {' '.join(flags)})"
    )


def versions() -> dict[str, str]:
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for name in ("relview", "numpy", "numba", "llvmlite", "trimesh", "embreex"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    src = relview_dir()
    out["relview imported from"] = str(src)
    try:
        commit = subprocess.run(
            ["git", "-C", str(src), "rev-parse", "--short", "HEAD"],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
        dirty = subprocess.run(
            ["git", "-C", str(src), "status", "--porcelain", "."],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
        out["relview commit"] = commit + (" + uncommitted changes in relview/" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        note = src.parent / "SNAPSHOT"
        if note.exists():
            out["relview commit"] = note.read_text().strip()
    return out


# --------------------------------------------------------------------------------------
# relview measurements
# --------------------------------------------------------------------------------------


def camera_rays(scene):
    """The renderer's own rays for the whole frame: ((N, 4) events, (N, 3) S directions, valid)."""
    import numpy as np

    from relview.geometry import camera as cam_mod
    from relview.renderer import camera_state

    event, beta_cam = camera_state(scene, scene.camera.time)
    px = cam_mod.pixel_grid(WIDTH, HEIGHT)
    if hasattr(cam_mod, "scene_directions"):  # fused directions + aberration
        d_s, valid = cam_mod.scene_directions(scene.camera, WIDTH, HEIGHT, px, beta_cam)
    else:
        from relview.kinematics.lorentz import aberrate_to_scene

        d_cam, valid = cam_mod.pixels_to_directions(scene.camera, WIDTH, HEIGHT, px)
        d_s = aberrate_to_scene(d_cam, beta_cam) if np.any(beta_cam) else d_cam
    origin = np.ascontiguousarray(np.broadcast_to(event, (len(d_s), 4)))
    return origin, np.ascontiguousarray(d_s), valid


class KernelTimer:
    """Times every call of the numba cast kernels (``relview.geometry.trace._cast`` for rays with
    their own start events, ``relview.geometry.trace._cast_packets`` for rays from one shared
    event, the camera's case) while installed.

    Tracer.cast looks the kernels up in its module at call time, so wrapping the module
    attributes times the kernels alone whatever their arguments are (the signatures
    change as they are tuned; this benchmark must not depend on them).
    """

    NAMES = ("_cast", "_cast_packets")

    def __init__(self):
        self.seconds = 0.0
        self.calls = 0

    def __enter__(self):
        from relview.geometry import trace

        self._orig = {name: getattr(trace, name) for name in self.NAMES if hasattr(trace, name)}

        def wrap(orig):
            def _cast_kernel(*a, **k):
                t0 = time.perf_counter()
                out = orig(*a, **k)
                self.seconds += time.perf_counter() - t0
                self.calls += 1
                return out

            return _cast_kernel

        for name, orig in self._orig.items():
            setattr(trace, name, wrap(orig))
        return self

    def __exit__(self, *exc):
        from relview.geometry import trace

        for name, orig in self._orig.items():
            setattr(trace, name, orig)


def numba_compiles() -> int:
    """Functions numba compiled (cache misses) so far in this process, over relview's modules."""
    from numba.core.registry import CPUDispatcher

    total = 0
    for name, mod in list(sys.modules.items()):
        if not name.startswith("relview") or mod is None:
            continue
        for obj in vars(mod).values():
            if isinstance(obj, CPUDispatcher):
                total += sum(obj.stats.cache_misses.values())
    return total


def relview_dir() -> Path:
    """The relview package this process imports (the working tree, or a snapshot on
    PYTHONPATH)."""
    import relview

    return Path(relview.__file__).resolve().parent


def relview_fingerprint() -> str:
    """Hash of relview/*.py, to notice code that changes while the benchmark runs."""
    import hashlib

    h = hashlib.sha256()
    for f in sorted(relview_dir().glob("*.py")):
        h.update(f.name.encode())
        h.update(f.read_bytes())
    return h.hexdigest()[:12]


def accepts_shared_event(tracer, event, d_s, effects) -> bool:
    """Whether Tracer.cast takes one (4,) start event for all rays (newer relview)."""
    try:
        return len(tracer.cast(event, d_s[:2], effects).body) == 2
    except Exception:  # older signature: (N, 4) events only
        return False


def bench_relview(scene, repeats: int) -> dict:
    from relview import renderer

    res = {}
    res["context"] = Stat(timed_runs(lambda: renderer.RenderContext(scene), repeats))
    ctx = renderer.RenderContext(scene)
    last = {}  # keep only the latest frame / hits, not one per run

    def frame_run():
        last["frame"] = renderer.render(scene, context=ctx)

    res["frame"] = Stat(timed_runs(frame_run, repeats))
    frame = last.pop("frame")
    event, _ = renderer.camera_state(scene, scene.camera.time)
    tracer = ctx.tracer(event)
    origin, d_s, valid = camera_rays(scene)
    effects = scene.render.effects
    # cast as the renderer does: one shared start event where Tracer.cast accepts it
    start = event if accepts_shared_event(tracer, event, d_s, effects) else origin

    def trace_run():
        last["hits"] = tracer.cast(start, d_s, effects)

    res["trace"] = Stat(timed_runs(trace_run, repeats))
    kernel = []

    def kernel_run():
        with KernelTimer() as kt:
            tracer.cast(start, d_s, effects)
        kernel.append(kt.seconds)

    timed_runs(kernel_run, repeats)
    res["kernel"] = Stat(kernel[1:])  # the first call was the warm-up
    # the same on one thread: per-core traversal speed, comparable with Embree on 1 thread
    import numba

    threads = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        kernel.clear()
        timed_runs(kernel_run, repeats)
        res["kernel_1thread"] = Stat(kernel[1:])
    finally:
        numba.set_num_threads(threads)
    body = frame.layers["body"]
    res["hit_fraction"] = float((body >= 0).mean())
    ys, xs = (body >= 0).nonzero()
    res["hit_centroid_px"] = (float(xs.mean()), float(ys.mean())) if len(xs) else None
    res["rays"] = len(d_s)
    res["context_obj"] = ctx
    res["hits"] = last["hits"]
    res["rays_arrays"] = (origin, d_s, valid)
    res["start"] = start
    res["scene"] = scene
    return res


# --------------------------------------------------------------------------------------
# Embree (embreex) measurements
# --------------------------------------------------------------------------------------


def bench_embree(vertices, faces, origin_xyz, d_s, repeats: int, threads: int) -> dict | None:
    """Embree first-hit cast of the same rays: build time, 1 thread, ``threads`` threads."""
    try:
        from embreex import rtcore_scene as rtcs
        from embreex.mesh_construction import TriangleMesh
    except ImportError:
        return None
    from concurrent.futures import ThreadPoolExecutor

    import numpy as np

    tris = np.ascontiguousarray(vertices[faces], dtype=np.float32)
    o32 = np.ascontiguousarray(origin_xyz, dtype=np.float32)
    d32 = np.ascontiguousarray(d_s, dtype=np.float32)
    one_o, one_d = o32[:1].copy(), d32[:1].copy()

    def build():
        sc = rtcs.EmbreeScene()
        TriangleMesh(sc, tris)
        sc.run(one_o, one_d)  # the scene is committed (its hierarchy built) on first use
        return sc

    res = {"build": Stat(timed_runs(build, repeats))}
    sc = build()

    def cast1():
        # output=1: distance, primitive id and barycentrics, like relview's first hit
        return sc.run(o32, d32, output=1)

    res["cast_1thread"] = Stat(timed_runs(cast1, repeats))
    n = len(d32)
    bounds = np.linspace(0, n, threads + 1).astype(int)
    chunks = [slice(bounds[i], bounds[i + 1]) for i in range(threads)]
    # embreex releases the GIL inside its ray loop, so Python threads run in parallel
    with ThreadPoolExecutor(threads) as pool:

        def cast_n():
            return list(pool.map(lambda s: sc.run(o32[s], d32[s], output=1), chunks))

        res["cast_nthreads"] = Stat(timed_runs(cast_n, repeats))
    res["result"] = cast1()
    res["threads"] = threads
    res["scene"] = (sc, None)

    def cast_n_fresh_pool():
        with ThreadPoolExecutor(threads) as pool:
            return list(pool.map(lambda s: sc.run(o32[s], d32[s], output=1), chunks))

    res["cast_n_fn"] = cast_n_fresh_pool
    return res


def bench_paired(rest: dict, moving: dict, emb: dict | None, repeats: int) -> dict:
    """Ratios from runs taken back to back, so each pair sees about the same load.

    Each round times: relview frame at rest, Embree cast (same thread count), relview frame
    moving. The median over rounds of each round's ratio is steadier on a shared machine
    than a ratio of medians taken minutes apart.
    """
    from relview import renderer

    def once(fn):
        t0 = time.perf_counter()
        fn()
        return time.perf_counter() - t0

    def frame(res):
        return lambda: renderer.render(res["scene"], context=res["context_obj"])

    rounds = []
    for _ in range(repeats):
        t_rest = once(frame(rest))
        t_emb = once(emb["cast_n_fn"]) if emb else None
        t_moving = once(frame(moving))
        rounds.append((t_rest, t_emb, t_moving))
    out = {"moving_vs_rest": Stat([m / r for r, _e, m in rounds]), "rounds": rounds}
    if emb:
        out["rest_vs_embree"] = Stat([r / e for r, e, _m in rounds])
    return out


def bench_ray_classes(rest: dict, emb_scene_rays, repeats: int) -> list[tuple]:
    """Per-ray cost on one thread, relview kernel vs Embree, for three classes of rest rays.

    Classes: rays that miss the mesh's bounding box (nearly free for any caster), rays
    that enter the box but miss the mesh, and rays that hit. Returns
    (class, rays, relview ns/ray, Embree ns/ray), best of ``repeats`` runs each.
    """
    import numba
    import numpy as np

    sc, _ = emb_scene_rays
    origin, d_s, _valid = rest["rays_arrays"]
    ctx = rest["context_obj"]
    scene = rest["scene"]
    event = origin[0]
    tracer = ctx.tracer(event)
    hit = rest["hits"].body >= 0
    v, _f = ctx.meshes[0]
    lo, hi = v.min(axis=0), v.max(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t0 = (lo - origin[:, 1:]) / d_s
        t1 = (hi - origin[:, 1:]) / d_s
    t_near = np.nanmax(np.minimum(t0, t1), axis=1)
    t_far = np.nanmin(np.maximum(t0, t1), axis=1)
    in_box = t_far >= np.maximum(t_near, 0.0)
    threads = numba.get_num_threads()
    numba.set_num_threads(1)
    rows = []
    try:
        for label, sel in (
            ("miss the bounding box", ~in_box),
            ("enter the box, miss", in_box & ~hit),
            ("hit", hit),
        ):
            n = int(sel.sum())
            if n == 0:
                continue
            o = rest["start"] if rest["start"].ndim == 1 else np.ascontiguousarray(origin[sel])
            d = np.ascontiguousarray(d_s[sel])
            o32 = np.ascontiguousarray(origin[sel][:, 1:], dtype=np.float32)
            d32 = np.ascontiguousarray(d, dtype=np.float32)
            kern = []

            def relview_run():
                with KernelTimer() as kt:
                    tracer.cast(o, d, scene.render.effects)
                kern.append(kt.seconds)

            timed_runs(relview_run, repeats)
            emb = timed_runs(lambda: sc.run(o32, d32, output=1), repeats)
            rows.append((label, n, min(kern[1:]) / n * 1e9, min(emb) / n * 1e9))
    finally:
        numba.set_num_threads(threads)
    return rows


# --------------------------------------------------------------------------------------
# Child processes: start-up stamps and peak memory
# --------------------------------------------------------------------------------------


def child_startup(scene_path: str, out_png: str) -> None:
    """Run `relview render` in-process with time stamps (time.time(), comparable across
    processes) at each stage; print them as one JSON line prefixed BENCH_STAMPS."""
    stamps = {"child_first_line": time.time()}
    import relview.cli.app as cli
    import relview.renderer as renderer  # noqa: F401  (imports trace -> numba, as render does)
    from relview.geometry import bvh, trace
    from relview.scene import reader as loader

    stamps["imported"] = time.time()
    orig_load, orig_ctx_init, orig_cast = (
        loader.read_scene_file,
        renderer.RenderContext.__init__,
        trace.Tracer.cast,
    )
    orig_build = bvh.build_bvh
    durations = {"bvh_build_calls": [], "cast_calls": []}  # seconds of each call
    build_args = []

    def build_bvh(*a, **k):
        build_args.append((a, k))
        t0 = time.perf_counter()
        out = orig_build(*a, **k)
        durations["bvh_build_calls"].append(time.perf_counter() - t0)
        return out

    def load_scene(path):
        stamps.setdefault("load_start", time.time())
        out = orig_load(path)
        stamps.setdefault("load_end", time.time())
        return out

    def ctx_init(self, *a, **k):
        stamps.setdefault("context_start", time.time())
        orig_ctx_init(self, *a, **k)
        stamps.setdefault("context_end", time.time())

    def cast(self, *a, **k):
        stamps.setdefault("first_batch_start", time.time())
        t0 = time.perf_counter()
        out = orig_cast(self, *a, **k)
        durations["cast_calls"].append(time.perf_counter() - t0)
        stamps.setdefault("first_batch_end", time.time())
        return out

    loader.read_scene_file = load_scene  # relview.scene.model.load_scene reads through it
    renderer.RenderContext.__init__ = ctx_init
    trace.Tracer.cast = cast
    bvh.build_bvh = build_bvh
    rc = cli.main(["render", scene_path, "-o", out_png, "--quiet", "--overwrite"])
    stamps["end"] = time.time()
    if build_args:
        # the same build again, warm: the difference from the first call is numba
        # loading the cached build kernel (the start-up cost of compiled code)
        a, k = build_args[0]
        t0 = time.perf_counter()
        orig_build(*a, **k)
        durations["bvh_build_again"] = time.perf_counter() - t0
    stamps["rc"] = rc
    stamps["compiles"] = numba_compiles()
    stamps["durations"] = durations
    print("BENCH_STAMPS " + json.dumps(stamps), flush=True)


def _status_kib(field: str) -> int:
    """A VmRSS / VmHWM figure (KiB) from /proc/self/status (Linux)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    return -1


def child_memory(scene_path: str) -> None:
    """Resident memory (KiB) at each stage up to and through one full frame.

    Peaks are read as VmHWM from /proc/self/status, the process's own high-water mark;
    ru_maxrss (getrusage) is reported too, but on Linux it also keeps the RSS of the
    process this one was forked from (the benchmark's parent, ~1 GB), so it only means
    the frame's peak when the command is started from a small shell. To see the frame's
    own peak the high-water mark is reset (writing 5 to /proc/self/clear_refs) after the
    scene and context are ready.
    """

    def maxrss():
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss

    out = {"start_rss": _status_kib("VmRSS")}
    from relview import renderer
    from relview.scene.model import load_scene

    out["imported_rss"] = _status_kib("VmRSS")
    scene = load_scene(scene_path)
    out["loaded_rss"] = _status_kib("VmRSS")
    ctx = renderer.RenderContext(scene)
    out["context_rss"] = _status_kib("VmRSS")
    out["peak_before_frame"] = _status_kib("VmHWM")
    try:
        Path("/proc/self/clear_refs").write_text("5")
        out["reset"] = _status_kib("VmHWM") <= _status_kib("VmRSS") + 1024
    except OSError:
        out["reset"] = False
    out["frame_start_rss"] = _status_kib("VmRSS")
    renderer.render(scene, context=ctx)
    out["peak_during_frame"] = _status_kib("VmHWM")
    out["process_peak"] = max(out["peak_during_frame"], out["peak_before_frame"])
    out["ru_maxrss"] = maxrss()
    out["compiles"] = numba_compiles()
    print("BENCH_MEMORY " + json.dumps(out), flush=True)


def _child_json(cmd: list[str], prefix: str) -> dict:
    out = subprocess.run(cmd, capture_output=True, text=True, cwd=REPO)
    for line in out.stdout.splitlines():
        if line.startswith(prefix):
            return json.loads(line[len(prefix) :])
    raise RuntimeError(f"{' '.join(cmd)} failed (exit {out.returncode}):\n{out.stderr[-2000:]}")


def bench_startup(scene_path: Path, workdir: Path, repeats: int) -> dict:
    relview_cmd = Path(sys.executable).with_name("relview")
    out_small = workdir / "startup_small.png"
    cmd = [
        str(relview_cmd),
        "render",
        str(scene_path),
        "--resolution",
        STARTUP_RESOLUTION,
        "-o",
        str(out_small),
        "--quiet",
        "--overwrite",
    ]

    def whole():
        subprocess.run(cmd, check=True, capture_output=True, cwd=workdir)

    res = {"whole_cmd": Stat(timed_runs(whole, repeats)), "cmd": cmd}
    # instrumented runs at the benchmark resolution
    stages = []
    durations = []
    child = [
        sys.executable,
        str(Path(__file__).resolve()),
        "--child",
        "startup",
        str(scene_path),
        str(workdir / "startup_full.png"),
    ]
    _child_json(child, "BENCH_STAMPS ")  # warm-up (fills the numba cache if it was stale)
    compiled = 0
    for _ in range(repeats + 3):
        t_spawn = time.time()
        s = _child_json(child, "BENCH_STAMPS ")
        if s.get("rc") != 0:
            raise RuntimeError(f"instrumented render exited {s.get('rc')}")
        if s.get("compiles"):
            # relview's source changed under us (numba cache stale): not a warm start
            compiled += 1
            continue
        durations.append(s.pop("durations", {}))
        stages.append({k: v - t_spawn for k, v in s.items() if k not in ("rc", "compiles")})
        if len(stages) == repeats:
            break
    if not stages:
        raise RuntimeError(
            "every instrumented start-up run compiled numba code: is relview "
            "being edited? rerun when it is quiet"
        )
    res["stages"] = {k: Stat([st[k] for st in stages]) for k in stages[0]}
    res["compiled_runs"] = compiled
    # numba cache loading: first call of a compiled stage minus the same work warm
    d = [x for x in durations if x.get("bvh_build_calls") and "bvh_build_again" in x]
    if d:
        res["bvh_first"] = Stat([x["bvh_build_calls"][0] for x in d])
        res["bvh_again"] = Stat([x["bvh_build_again"] for x in d])
    c = [x["cast_calls"] for x in durations if len(x.get("cast_calls", [])) >= 2]
    if c:
        res["cast_first"] = Stat([x[0] for x in c])
        res["cast_second"] = Stat([x[1] for x in c])
        res["batches"] = len(c[0])
    return res


def bench_memory(scene_path: Path) -> dict:
    """Memory stages of a child that renders one frame; a run that compiled is retried."""
    child = [sys.executable, str(Path(__file__).resolve()), "--child", "memory", str(scene_path)]
    for _ in range(3):
        out = _child_json(child, "BENCH_MEMORY ")
        if not out["compiles"]:
            break
    return out


# --------------------------------------------------------------------------------------
# Profile
# --------------------------------------------------------------------------------------


def profile_frame(scene, ctx, frames: int) -> dict:
    """cProfile ``frames`` frames; per-frame time of each part of render() (averaged)."""
    import cProfile
    import pstats

    from relview import renderer

    with KernelTimer():
        renderer.render(scene, context=ctx)  # warm (and the patched path)
        prof = cProfile.Profile()
        t0 = time.perf_counter()
        prof.enable()
        for _ in range(frames):
            renderer.render(scene, context=ctx)
        prof.disable()
        wall = (time.perf_counter() - t0) / frames
    st = pstats.Stats(prof)

    def cum(file_suffix, func):
        total = 0.0
        for (fname, _line, name), (_cc, _nc, _tt, ct, _callers) in st.stats.items():
            if name == func and fname.endswith(file_suffix):
                total += ct
        return total / frames

    render_total = cum("renderer.py", "render")
    kernel = cum("bench_frame.py", "_cast_kernel")
    # the outermost function of each stage (a fused stage replaces its parts)
    camera = cum("camera.py", "scene_directions") or (
        cum("camera.py", "pixels_to_directions") + cum("lorentz.py", "aberrate_to_scene")
    )
    parts = {
        "camera rays (pixel grid, directions, aberration)": cum("camera.py", "pixel_grid") + camera,
        "trace kernel (numba _cast)": kernel,
        # since the hit resolution computes D itself, the Doppler factor is part of the glue
        "trace glue + Doppler factor (Tracer.cast outside the kernel)": cum("trace.py", "cast")
        - kernel
        + cum("renderer.py", "doppler_of_hits"),
        "shading (renderer.shade -> observed_xyz)": cum("renderer.py", "shade"),
        "sky (sky_xyz, star_splat)": cum("sky.py", "sky_xyz") + cum("sky.py", "star_splat"),
        "exposure (exposure_white + expose)": cum("exposure.py", "exposure_white")
        + cum("exposure.py", "expose"),
        "metering masks and clipping report (lit and lamp pixels, clipped fractions)": cum(
            "renderer.py", "metering_masks"
        )
        + cum("renderer.py", "metering_report"),
        "proper-time layer (clocks.body_readings)": cum("clocks.py", "body_readings"),
        "per-exposure set-up (memory check, camera-inside-body check, tracer, provenance)": cum(
            "renderer.py", "check_memory"
        )
        + cum("renderer.py", "bodies_around_camera")
        + cum("renderer.py", "tracer")
        + cum("renderer.py", "provenance"),
    }
    parts["rest of render() (allocation, emission-time layer, masks)"] = render_total - sum(
        parts.values()
    )
    # heaviest functions by own time, for the report
    top = sorted(st.stats.items(), key=lambda kv: kv[1][2], reverse=True)[:12]
    top_rows = [
        (f"{Path(f).name}:{ln}({name})", tt / frames, ct / frames)
        for (f, ln, name), (_cc, _nc, tt, ct, _c) in top
    ]
    return {
        "wall": wall,
        "render_total": render_total,
        "parts": parts,
        "top": top_rows,
        "frames": frames,
    }


# --------------------------------------------------------------------------------------
# Report
# --------------------------------------------------------------------------------------


def build_report(info: dict) -> str:
    rest, moving, emb = info["rest"], info["moving"], info["embree"]
    n = rest["rays"]
    lines = []
    add = lines.append
    add("# relview frame benchmark: results")
    add("")
    add(
        f"Written by `benchmarks/bench_frame.py` on {info['date']} "
        f"({info['repeats']} timed runs after one warm-up per figure; median [min-max])."
    )
    add("")
    add("## Machine and load")
    add("")
    add(
        f"- CPU: {info['cpu']}, nproc = {info['nproc']}; numba threads = {info['numba_threads']} "
        f"(threading layer: {info['numba_layer']})"
    )
    add("- Versions: " + ", ".join(f"{k} {v}" for k, v in info["versions"].items()))
    add(
        f"- Load average (1/5/15 min) seen: start {info['load_start']}; "
        + "; ".join(f"{k} {v}" for k, v in info["loads"])
        + f"; end {info['load_end']}"
    )
    add(
        "- The machine is shared with other engineers: spreads wider than ~20 % mean another "
        "process competed for the 2 cores during that figure."
    )
    add(
        f"- relview/*.py fingerprint: {info['fingerprint_start']} at the start, "
        f"{info['fingerprint_end']} at the end"
        + (
            " (CHANGED during the run: the figures mix two versions of the code)"
            if info["fingerprint_start"] != info["fingerprint_end"]
            else " (unchanged)"
        )
        + f"; numba functions compiled in the main process (cache misses, warm-ups "
        f"included): {info['compiles_main']}."
    )
    add("")
    add("## Set-up")
    add("")
    add(
        f"- Mesh: icosphere, radius {SPHERE_RADIUS_M} m, detail {SPHERE_DETAIL} = "
        f'{info["triangles"]} triangles (relview\'s own `shape = "sphere"`, which is '
        "trimesh.creation.icosphere); 5800 K blackbody; black background."
    )
    add(
        f"- Camera: pinhole, {WIDTH}x{HEIGHT}, horizontal fov {FOV_DEG} deg, 1 ray per pixel, "
        f"{CAMERA_DISTANCE_M} m from the centre; rays = {n}."
    )
    add(
        f"- Rest: body at rest; {rest['hit_fraction'] * 100:.1f} % of the rays hit it "
        f"(centroid of the hits at pixel {fmt_px(rest['hit_centroid_px'])})."
    )
    add(
        f"- Moving: beta = {MOVING_BETA} along +x, origin at x = 0 at t = -d/c, so it is seen "
        f"near the centre at the exposure; {moving['hit_fraction'] * 100:.1f} % of rays hit "
        f"(centroid at pixel {fmt_px(moving['hit_centroid_px'])})."
    )
    add("")
    add("## Figures")
    add("")
    add("| figure | wall ms, median [min-max] | CPU ms (median, all threads) | Mrays/s |")
    add("|---|---|---|---|")

    def row(label, stat, rays=n):
        mr = f"{rays / stat.median / 1e6:.2f}" if rays else "-"
        add(f"| {label} | {stat.ms().strip()} | {stat.cpu_ms()} | {mr} |")

    row("relview full frame, rest (`render`)", rest["frame"])
    row("relview trace alone, rest (`Tracer.cast`, one call)", rest["trace"])
    row("relview kernel alone, rest (`trace._cast_packets`)", rest["kernel"])
    row("relview kernel alone, rest, 1 thread", rest["kernel_1thread"])
    row(f"relview full frame, {MOVING_BETA}c", moving["frame"])
    row(f"relview trace alone, {MOVING_BETA}c", moving["trace"])
    row(f"relview kernel alone, {MOVING_BETA}c", moving["kernel"])
    row(f"relview kernel alone, {MOVING_BETA}c, 1 thread", moving["kernel_1thread"])
    row("relview RenderContext build (mesh + BVH), rest", rest["context"], rays=0)
    if emb:
        row("Embree bare first-hit cast, 1 thread", emb["cast_1thread"])
        row(f"Embree bare first-hit cast, {emb['threads']} threads", emb["cast_nthreads"])
        row("Embree scene build (+ commit)", emb["build"], rays=0)
    add("")
    add("## Ratios against the targets")
    add("")
    add(
        "| ratio | of the medians | of the best runs | of the CPU times | target | "
        "met (median / best) |"
    )
    add("|---|---|---|---|---|---|")
    for label, value, best, cpu, target in info["ratios"]:
        cpu_s = "-" if cpu is None else f"{cpu:.2f}"
        add(
            f"| {label} | {value:.2f} | {best:.2f} | {cpu_s} | <= {target} | "
            f"{'yes' if value <= target else 'no'} / {'yes' if best <= target else 'no'} |"
        )
    add("")
    add(
        "On a loaded machine the best run is the one least disturbed by other processes, so "
        "the ratio of the best runs is the fairer reading of the code; the ratio of the "
        "medians is what a user on a busy machine sees. The CPU-time ratio compares CPU "
        "seconds summed over threads (CPU time also grows when another process shares the "
        "core)."
    )
    add("")
    pr = info["paired"]
    add(
        f"Paired rounds ({len(pr['rounds'])} rounds, each timing relview frame at rest, the "
        f"Embree cast and relview frame at {MOVING_BETA}c back to back; median [min-max] of "
        "the per-round ratios, the steadiest reading on a shared machine):"
    )
    add("")
    add("| ratio | paired median [min-max] | target | met |")
    add("|---|---|---|---|")
    if "rest_vs_embree" in pr:
        st = pr["rest_vs_embree"]
        add(
            f"| relview frame at rest / Embree cast ({info['embree']['threads']} threads) | "
            f"{st.median:.2f} [{st.min:.2f}-{st.max:.2f}] | <= {TARGET_REST_VS_EMBREE} | "
            f"{'yes' if st.median <= TARGET_REST_VS_EMBREE else 'no'} |"
        )
    st = pr["moving_vs_rest"]
    add(
        f"| relview frame at {MOVING_BETA}c / at rest | {st.median:.2f} [{st.min:.2f}-"
        f"{st.max:.2f}] | <= {TARGET_MOVING_VS_REST} | "
        f"{'yes' if st.median <= TARGET_MOVING_VS_REST else 'no'} |"
    )
    add("")
    if "kernel_vs_embree_1thread" in info:
        add(
            f"Per-core traversal (no target): relview kernel / Embree cast, both on 1 thread, "
            f"rest rays: {info['kernel_vs_embree_1thread'][0]:.2f} (medians), "
            f"{info['kernel_vs_embree_1thread'][1]:.2f} (best runs)."
        )
        add("")
    if info.get("agreement"):
        add(f"Cross-check (rest rays): {info['agreement']}")
        add("")
    if info.get("ray_classes"):
        add("Traversal cost per ray, one thread, best run (rest rays split by what they meet):")
        add("")
        add("| rays that | rays | relview kernel ns/ray | Embree ns/ray | relview / Embree |")
        add("|---|---|---|---|---|")
        for label, n_rays, rv, em in info["ray_classes"]:
            add(f"| {label} | {n_rays} | {rv:.0f} | {em:.0f} | {rv / em:.2f} |")
        add("")
        add("(Embree's figure includes embreex's per-ray Python-side loop, tens of ns.)")
        add("")
    su = info["startup"]
    add("## Start-up (second run, numba cache warm)")
    add("")
    add(
        f"- Whole command `relview render SCENE --resolution {STARTUP_RESOLUTION} -o FILE "
        f"--quiet --overwrite`: {su['whole_cmd'].s()} s wall, "
        f"{su['whole_cmd'].cpu:.2f} s CPU (median)."
    )
    add(
        f"- Instrumented `relview render` at {WIDTH}x{HEIGHT} (seconds from spawning the process; "
        f"{su['compiled_runs']} run(s) that had to compile numba code were left out):"
    )
    add("")
    add("| stage reached | s after spawn, median [min-max] |")
    add("|---|---|")
    labels = {
        "child_first_line": "interpreter up (first line of the script)",
        "imported": "relview.cli.app + relview.renderer imported (numpy, numba)",
        "load_start": "scene load starts",
        "load_end": "scene loaded",
        "context_start": "RenderContext build starts",
        "context_end": "RenderContext built (mesh + BVH)",
        "first_batch_start": "first batch of rays enters Tracer.cast",
        "first_batch_end": "first batch traced (incl. loading the cached kernel)",
        "end": "command done (PNG written)",
    }
    for k, lab in labels.items():
        if k in su["stages"]:
            add(f"| {lab} | {su['stages'][k].s()} |")
    add("")
    if "bvh_first" in su:
        add(
            f"Loading cached compiled code (numba cache warm, no compilation): the BVH build "
            f"takes {su['bvh_first'].s()} s on its first call in the command and "
            f"{su['bvh_again'].s()} s when repeated in the same process"
            + (
                f"; the first `Tracer.cast` batch {su['cast_first'].s()} s, the second "
                f"{su['cast_second'].s()} s (the batches hold about the same number of rays; "
                f"{su['batches']} batches)"
                if "cast_first" in su
                else ""
            )
            + ". The differences are numba loading cached kernels."
        )
        add("")
    fb = su["stages"]["first_batch_start"]
    add(
        f"Time from process start to the first batch of rays: median {fb.median:.2f} s, best "
        f"{fb.min:.2f} s (target <= {TARGET_STARTUP_S} s: median "
        f"{'met' if fb.median <= TARGET_STARTUP_S else 'not met'}, best "
        f"{'met' if fb.min <= TARGET_STARTUP_S else 'not met'})."
    )
    add("")
    add("## Peak memory of one full frame (in a process that only renders it)")
    add("")
    add(
        "| case | RSS after imports | after scene load | after context build | "
        "peak before the frame | RSS at frame start | peak during the frame | "
        "frame adds | process peak |"
    )
    add("|---|---|---|---|---|---|---|---|---|")
    for key, m in info["memory"].items():
        mib = {k: v / 1024 for k, v in m.items() if isinstance(v, int) and not isinstance(v, bool)}
        during = (
            f"{mib['peak_during_frame']:.0f}"
            if m["reset"]
            else "(high-water mark could not be reset)"
        )
        add(
            f"| {key} | {mib['imported_rss']:.0f} | {mib['loaded_rss']:.0f} | "
            f"{mib['context_rss']:.0f} | {mib['peak_before_frame']:.0f} | "
            f"{mib['frame_start_rss']:.0f} | {during} | "
            f"{mib['peak_during_frame'] - mib['frame_start_rss']:.0f} | "
            f"{mib['process_peak']:.0f} |"
        )
    add("")
    add(
        "All in MiB, from /proc/self/status (VmRSS; peaks are VmHWM, the high-water mark, "
        "reset before the frame). 'Frame adds' = peak during the frame - RSS at its start. "
        "ru_maxrss of the same child: "
        + ", ".join(f"{k} {m['ru_maxrss'] / 1024:.0f} MiB" for k, m in info["memory"].items())
        + " (Linux carries the forking parent's RSS into a child's ru_maxrss, so this is the "
        "benchmark parent's size when larger; started from a shell, ru_maxrss equals the "
        "process peak)."
    )
    add("")
    add("## Where one frame's time goes (cProfile; per-frame mean over the profiled frames)")
    add("")
    for key, p in info["profiles"].items():
        add(
            f"### {key}: render() {p['render_total'] * 1e3:.0f} ms per frame under the profiler "
            f"(mean of {p['frames']} frames after a warm-up; wall {p['wall'] * 1e3:.0f} ms)"
        )
        add("")
        add("| part | ms | share |")
        add("|---|---|---|")
        for lab, t in p["parts"].items():
            add(f"| {lab} | {t * 1e3:.1f} | {t / p['render_total'] * 100:.0f} % |")
        add("")
        add("Heaviest functions by own time:")
        add("")
        add("| function | own ms | cumulative ms |")
        add("|---|---|---|")
        for name, tt, ct in p["top"]:
            add(f"| `{name}` | {tt * 1e3:.1f} | {ct * 1e3:.1f} |")
        add("")
    return "\n".join(lines) + "\n"


def fmt_px(c) -> str:
    return "none" if c is None else f"({c[0]:.0f}, {c[1]:.0f})"


def write_results(text: str) -> None:
    kept = ""
    if RESULTS.exists():
        old = RESULTS.read_text()
        if ANALYSIS_MARK in old:
            kept = old[old.index(ANALYSIS_MARK) :]
    if not kept:
        kept = ANALYSIS_MARK + "\n\n## Analysis\n\n(none yet)\n"
    RESULTS.write_text(text + "\n" + kept)


def print_summary(info: dict) -> None:
    rest, moving, emb = info["rest"], info["moving"], info["embree"]
    n = rest["rays"]
    print(f"\nrelview frame benchmark  {info['date']}  {info['cpu']}  nproc={info['nproc']}")
    print(
        f"{info['triangles']} triangles, {WIDTH}x{HEIGHT}, {n} rays; median [min-max] of "
        f"{info['repeats']} runs; load {info['load_start']} -> {info['load_end']}\n"
    )
    print(f"{'figure':40s} {'wall ms':>28s} {'CPU ms':>7s} {'Mrays/s':>8s}")
    rows = [
        ("relview frame, rest", rest["frame"]),
        ("relview trace, rest", rest["trace"]),
        ("relview kernel, rest", rest["kernel"]),
        ("relview kernel, rest, 1 thread", rest["kernel_1thread"]),
        (f"relview frame, {MOVING_BETA}c", moving["frame"]),
        (f"relview trace, {MOVING_BETA}c", moving["trace"]),
        (f"relview kernel, {MOVING_BETA}c", moving["kernel"]),
        (f"relview kernel, {MOVING_BETA}c, 1 thread", moving["kernel_1thread"]),
    ]
    if emb:
        rows += [
            ("Embree cast, 1 thread", emb["cast_1thread"]),
            (f"Embree cast, {emb['threads']} threads", emb["cast_nthreads"]),
        ]
    for lab, st in rows:
        print(f"{lab:40s} {st.ms():>28s} {st.cpu_ms():>7s} {n / st.median / 1e6:8.2f}")
    print(
        f"{'relview RenderContext build (BVH)':40s} {rest['context'].ms():>28s} "
        f"{rest['context'].cpu_ms():>7s}"
    )
    if emb:
        print(f"{'Embree scene build':40s} {emb['build'].ms():>28s} {emb['build'].cpu_ms():>7s}")
    print()
    for label, value, best, cpu, target in info["ratios"]:
        cpu_s = "" if cpu is None else f", CPU {cpu:.2f}"
        print(f"{label:58s} median {value:6.2f}, best {best:6.2f}{cpu_s}  (target <= {target})")
    pr = info["paired"]
    if "rest_vs_embree" in pr:
        st = pr["rest_vs_embree"]
        print(
            f"{'paired rounds: frame at rest / Embree cast':58s} median {st.median:6.2f} "
            f"[{st.min:.2f}-{st.max:.2f}]  (target <= {TARGET_REST_VS_EMBREE})"
        )
    st = pr["moving_vs_rest"]
    print(
        f"{'paired rounds: frame at ' + str(MOVING_BETA) + 'c / frame at rest':58s} median "
        f"{st.median:6.2f} [{st.min:.2f}-{st.max:.2f}]  (target <= {TARGET_MOVING_VS_REST})"
    )
    if "kernel_vs_embree_1thread" in info:
        print(
            f"{'relview kernel / Embree cast, both 1 thread (per-core traversal)':60s} "
            f"median {info['kernel_vs_embree_1thread'][0]:.2f}, "
            f"best {info['kernel_vs_embree_1thread'][1]:.2f}"
        )
    if info.get("agreement"):
        print("cross-check:", info["agreement"])
    for label, n_rays, rv, em in info.get("ray_classes", []):
        print(
            f"  1 thread, rays that {label:24s} {n_rays:7d}: relview {rv:5.0f} ns/ray, "
            f"Embree {em:5.0f} ns/ray"
        )
    su = info["startup"]
    if info["fingerprint_start"] != info["fingerprint_end"]:
        print("WARNING: relview/*.py changed during the run; figures mix two code versions")
    print(
        f"numba compiles in this process: {info['compiles_main']}; start-up runs that "
        f"compiled (left out): {su['compiled_runs']}"
    )
    print(
        f"\nstart-up: whole command at {STARTUP_RESOLUTION}: {su['whole_cmd'].s()} s wall, "
        f"{su['whole_cmd'].cpu:.2f} s CPU"
    )
    for k, st in su["stages"].items():
        print(f"  {k:22s} {st.s()} s after spawn")
    if "bvh_first" in su:
        casts = (
            f"; cast first batch {su['cast_first'].s()} s, second {su['cast_second'].s()} s"
            if "cast_first" in su
            else ""
        )
        print(
            f"  BVH build first call {su['bvh_first'].s()} s, again {su['bvh_again'].s()} s" + casts
        )
    for key, m in info["memory"].items():
        print(
            f"memory {key}: process peak {m['process_peak'] / 1024:.0f} MiB; before the frame "
            f"{m['peak_before_frame'] / 1024:.0f} MiB; during the frame "
            f"{m['peak_during_frame'] / 1024:.0f} MiB (frame start RSS "
            f"{m['frame_start_rss'] / 1024:.0f} MiB)"
        )
    for key, p in info["profiles"].items():
        print(f"\nprofile {key}: render() {p['render_total'] * 1e3:.0f} ms under cProfile")
        for lab, t in p["parts"].items():
            print(f"  {lab:55s} {t * 1e3:8.1f} ms {t / p['render_total'] * 100:5.1f} %")


def agreement(rest: dict, emb: dict) -> str:
    """How often relview and Embree agree on hit/miss, and their distance difference."""
    import numpy as np

    hits = rest["hits"]
    r = emb["result"]
    e_hit = np.asarray(r["primID"]) >= 0
    r_hit = hits.body >= 0
    both = e_hit & r_hit
    dl = np.abs(np.asarray(r["tfar"], float)[both] - hits.l[both])
    return (
        f"hit/miss agree on {np.mean(e_hit == r_hit) * 100:.3f} % of rays "
        f"({int(np.sum(e_hit != r_hit))} differ, silhouette pixels); distance differs by "
        f"at most {dl.max():.2e} m (Embree float32, relview float64)"
    )


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=5, help="timed runs per figure (default 5)")
    ap.add_argument("--no-write", action="store_true", help="print only; leave results.md")
    ap.add_argument("--no-profile", action="store_true", help="skip the cProfile section")
    ap.add_argument("--child", choices=("startup", "memory"), help=argparse.SUPPRESS)
    ap.add_argument("child_args", nargs="*", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child == "startup":
        child_startup(*args.child_args)
        return 0
    if args.child == "memory":
        child_memory(*args.child_args)
        return 0

    import numba

    from relview.scene.model import load_scene

    info = {
        "date": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime()),
        "cpu": cpu_model(),
        "nproc": os.cpu_count(),
        "repeats": args.repeats,
        "versions": versions(),
        "numba_threads": numba.get_num_threads(),
        "load_start": load_str(),
        "loads": [],
        "fingerprint_start": relview_fingerprint(),
    }
    with tempfile.TemporaryDirectory(prefix="relview-bench-") as tmp:
        tmp = Path(tmp)
        paths = {}
        for key, beta in (("rest", 0.0), ("moving", MOVING_BETA)):
            paths[key] = tmp / f"bench_{key}.toml"
            paths[key].write_text(scene_toml(beta))
        scenes = {k: load_scene(p) for k, p in paths.items()}

        print("relview, body at rest ...", flush=True)
        info["rest"] = bench_relview(scenes["rest"], args.repeats)
        info["loads"].append(("after rest", load_str()))
        print(f"relview, body at {MOVING_BETA}c ...", flush=True)
        info["moving"] = bench_relview(scenes["moving"], args.repeats)
        info["loads"].append((f"after {MOVING_BETA}c", load_str()))
        info["numba_layer"] = numba.threading_layer()

        verts, faces = info["rest"]["context_obj"].meshes[0]
        info["triangles"] = len(faces)
        origin, d_s, _valid = info["rest"]["rays_arrays"]
        print("Embree ...", flush=True)
        emb = bench_embree(verts, faces, origin[:, 1:], d_s, args.repeats, numba.get_num_threads())
        info["embree"] = emb
        info["loads"].append(("after Embree", load_str()))

        ratios = []

        def ratio(label, a, b, target):
            cpu = a.cpu / b.cpu if a.cpu and b.cpu else None
            ratios.append((label, a.median / b.median, a.min / b.min, cpu, target))

        r, m = info["rest"], info["moving"]
        if emb:
            ratio(
                f"relview frame at rest / Embree cast ({emb['threads']} threads)",
                r["frame"],
                emb["cast_nthreads"],
                TARGET_REST_VS_EMBREE,
            )
            ratio(
                "relview frame at rest / Embree cast (1 thread)",
                r["frame"],
                emb["cast_1thread"],
                TARGET_REST_VS_EMBREE,
            )
            info["kernel_vs_embree_1thread"] = (
                r["kernel_1thread"].median / emb["cast_1thread"].median,
                r["kernel_1thread"].min / emb["cast_1thread"].min,
            )
            info["agreement"] = agreement(r, emb)
            info["ray_classes"] = bench_ray_classes(r, emb["scene"], args.repeats)
        else:
            print("embreex is not installed (pip install -e .[bench]): Embree figures skipped")
        print("paired rounds ...", flush=True)
        info["paired"] = bench_paired(r, m, emb, args.repeats)
        info["loads"].append(("after paired rounds", load_str()))
        ratio(
            f"relview frame at {MOVING_BETA}c / relview frame at rest",
            m["frame"],
            r["frame"],
            TARGET_MOVING_VS_REST,
        )
        ratio(
            f"relview trace at {MOVING_BETA}c / relview trace at rest",
            m["trace"],
            r["trace"],
            TARGET_MOVING_VS_REST,
        )
        info["ratios"] = ratios

        print("start-up (subprocesses) ...", flush=True)
        info["startup"] = bench_startup(paths["rest"], tmp, args.repeats)
        info["loads"].append(("after start-up", load_str()))
        print("peak memory (subprocesses) ...", flush=True)
        info["memory"] = {
            f"rest, {WIDTH}x{HEIGHT}": bench_memory(paths["rest"]),
            f"{MOVING_BETA}c, {WIDTH}x{HEIGHT}": bench_memory(paths["moving"]),
        }
        info["profiles"] = {}
        if not args.no_profile:
            print("profile ...", flush=True)
            info["profiles"]["rest"] = profile_frame(
                scenes["rest"], info["rest"]["context_obj"], args.repeats
            )
            info["profiles"][f"{MOVING_BETA}c"] = profile_frame(
                scenes["moving"], info["moving"]["context_obj"], args.repeats
            )
        info["load_end"] = load_str()
        info["compiles_main"] = numba_compiles()
        info["fingerprint_end"] = relview_fingerprint()

    print_summary(info)
    report = build_report(info)  # built even with --no-write, so a broken report shows
    if not args.no_write:
        write_results(report)
        print(f"\nwrote {RESULTS}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
