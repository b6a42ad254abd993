"""Rendering frames: one frame to PNG bytes, and the local ways of rendering many.

:class:`FrameRenderer` renders the frames of one scene with one RenderContext (the
hierarchies are built once) and returns each as a :class:`RenderedFrame`: encoded PNG
bytes with provenance text chunks, the frame's mean relative luminance and its white.
The same class renders in the calling process (:func:`render_serial`), in local worker
processes (:func:`render_in_processes`: spawned, one numba thread each) and on Dask
workers (relview.animation.farm), so all three produce the same bytes.

A worker process that dies (killed, out of memory) breaks its pool; the frames it and
its siblings had not returned are rendered again in a fresh pool, at most
:data:`MAX_RETRIES` times, and then the run stops with :class:`WorkersLost`. How many
local workers a machine can take is :func:`check_worker_count` (cores and memory).

This module must not load numba when it is imported: a spawned worker process
imports it to find its initialiser, and that initialiser sets NUMBA_NUM_THREADS=1
before the renderer (and with it numba) is first loaded.
"""

from __future__ import annotations

import hashlib
import os
import signal
from collections.abc import Iterator
from dataclasses import dataclass

from relview.animation.flashes import mean_relative_luminance
from relview.errors import UserError, WorkersLost
from relview.imaging.display import to_8bit
from relview.imaging.png import encode_png

__all__ = [
    "MAX_RETRIES",
    "WORKER_BASE_BYTES",
    "FrameRenderer",
    "RenderedFrame",
    "check_worker_count",
    "lost_frames_error",
    "render_in_processes",
    "render_serial",
]

#: How many times the frames of a lost worker (or a lost Dask scheduler) are sent again
#: before the run stops. One loss is an accident (a killed process, a restarted node);
#: a frame that kills its worker three times in a row will not render on a fourth.
MAX_RETRIES = 2

#: Memory of one worker process before its frame buffers and meshes: the peak RSS of a
#: spawned worker that imported relview and numba (one thread) and rendered a 160x90
#: box, measured at 184 MiB on this project's machine (Linux, Python 3.11), rounded up.
WORKER_BASE_BYTES = 200 * 2**20


@dataclass
class RenderedFrame:
    """One finished frame as encoded PNG bytes (what a worker sends back)."""

    index: int
    time_s: float
    png: bytes
    mean_luminance: float  # mean relative luminance of the encoded frame, 0..1
    white: float  # cd/m2 mapped to white in this frame

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.png).hexdigest()


class FrameRenderer:
    """Renders frames of one scene with one RenderContext (hierarchies built once).

    ``white``: the locked white (cd/m2), or None for per-frame automatic exposure.
    ``metadata``: extra PNG text chunks for every frame (settings digest, ...).
    Used in the calling process, in local worker processes and on Dask workers, so
    all three produce the same bytes.
    """

    def __init__(self, scene, white: float | None, metadata: dict[str, str] | None = None):
        self.scene = scene
        self.white = white
        self.metadata = dict(metadata or {})
        self._context = None

    def __getstate__(self) -> dict:
        # Sent to worker processes without the RenderContext: each builds its own.
        return dict(self.__dict__, _context=None)

    @property
    def context(self):
        if self._context is None:
            # Imported on first use: the renderer loads numba (see the module docstring).
            from relview.renderer import RenderContext

            self._context = RenderContext(self.scene)
        return self._context

    def render(self, index: int, time_s: float) -> RenderedFrame:
        from relview.renderer import render  # loads numba: see the module docstring

        exposure = self.white if self.white is not None else self.scene.render.exposure
        frame = render(self.scene, time=float(time_s), exposure=exposure, context=self.context)
        rgb8 = to_8bit(frame.image, getattr(self.scene.render, "tone", "none"))
        meta = dict(frame.metadata)
        meta.update(self.metadata)
        meta["frame_index"] = str(int(index))
        meta["frame_time_s"] = repr(float(time_s))
        png = encode_png(rgb8, meta)
        return RenderedFrame(
            int(index), float(time_s), png, mean_relative_luminance(rgb8), float(frame.white)
        )


# --- local worker processes (spawned; one numba thread each) -----------------------------

#: The renderer of this worker process (set by its initialiser).
_PROCESS_RENDERER: FrameRenderer | None = None


def _init_worker_process(renderer: FrameRenderer) -> None:
    """Initialiser of a local worker process: one numba thread, one RenderContext."""
    global _PROCESS_RENDERER
    # Ctrl-C goes to the whole process group: let the parent alone decide what stops.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ["NUMBA_NUM_THREADS"] = "1"
    import numba  # only now, after the thread count is set

    numba.set_num_threads(1)  # in case numba was imported before the variable was set
    _PROCESS_RENDERER = renderer


def _render_in_worker_process(index: int, time_s: float) -> RenderedFrame:
    assert _PROCESS_RENDERER is not None, "worker process not initialised"
    return _PROCESS_RENDERER.render(index, time_s)


def render_serial(renderer: FrameRenderer, jobs) -> Iterator[RenderedFrame]:
    """Render ``jobs`` ((index, time_s) pairs) one after another in this process."""
    for index, time_s in jobs:
        yield renderer.render(index, time_s)


def lost_frames_error(missing: list[int], attempts: int, where: str, cause) -> WorkersLost:
    """The error that stops a run whose workers kept dying; says the finished frames stay."""
    reason = f"{type(cause).__name__}: {cause}" if str(cause) else type(cause).__name__
    shown = ", ".join(str(k) for k in missing[:10]) + (", ..." if len(missing) > 10 else "")
    return WorkersLost(
        f"{len(missing)} frame(s) (frames {shown}) could not be rendered: workers of "
        f"{where} were lost {attempts} time(s) ({reason}); the finished frames are kept, "
        "and running the same command again renders only the missing ones",
        frames=missing,
    )


def usable_cores() -> int:
    """The cores this process may run on (its CPU affinity where the OS has one)."""
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def available_memory() -> int | None:
    """Bytes of memory free now, or None where the OS does not say."""
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_AVPHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return None


def check_worker_count(n: int, per_worker_bytes: int, option: str) -> None:
    """Refuse more local worker processes than cores, or than 80 % of free memory holds.

    Each worker renders with one numba thread, so workers beyond the cores only take
    turns on them while each still holds its own memory (``per_worker_bytes``: the
    process, its frame buffers and meshes).
    """
    cores = usable_cores()
    if n > cores:
        raise UserError(
            f"{option}: {n} worker processes but this machine has {cores} core(s); each worker "
            f"renders on one core, so use at most {cores}"
        )
    free = available_memory()
    if free is not None and n * per_worker_bytes > 0.8 * free:
        fit = max(1, int(0.8 * free // per_worker_bytes))
        raise UserError(
            f"{option}: {n} worker processes need about {n * per_worker_bytes / 2**30:.1f} GiB "
            f"({per_worker_bytes / 2**20:.0f} MiB each) but only {free / 2**30:.1f} GiB is "
            f"free; use at most {fit}"
        )


def _pool_pass(renderer: FrameRenderer, remaining: dict[int, float], workers: int):
    """One pool over the ``remaining`` frames; yields each as it lands (and drops it).

    Raises BrokenProcessPool after yielding the frames that finished, when a worker died.
    """
    # Imported when a pool is started: a serial run (the default) does not need them.
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    pool = ProcessPoolExecutor(
        max_workers=min(workers, len(remaining)),
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_init_worker_process,
        initargs=(renderer,),
    )
    try:
        pending = {
            pool.submit(_render_in_worker_process, i, t) for i, t in sorted(remaining.items())
        }
        broken = None
        while pending and broken is None:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                if isinstance(fut.exception(), BrokenProcessPool):
                    broken = fut.exception()
                    continue
                result = fut.result()
                remaining.pop(result.index, None)
                yield result
        if broken is not None:
            raise broken
    finally:
        pool.shutdown(wait=False, cancel_futures=True)


def render_in_processes(
    renderer: FrameRenderer, jobs, workers: int, retries: int = MAX_RETRIES
) -> Iterator[RenderedFrame]:
    """Render ``jobs`` in ``workers`` spawned local processes; yields frames as they finish.

    When a worker process dies, the frames not yet returned are rendered in a fresh
    pool of one process, at most ``retries`` times; then :class:`WorkersLost` is raised. Closing the
    iterator (or an exception in the caller) cancels the frames not started.
    """
    from concurrent.futures.process import BrokenProcessPool  # see _pool_pass

    remaining = {int(i): float(t) for i, t in jobs}
    for attempt in range(retries + 1):
        # A dead worker takes the frames of its siblings with it (the whole pool breaks),
        # so retries render one frame at a time: a frame that kills its worker cannot
        # take the others down again, and a pool that ran out of memory gets more of it.
        try:
            yield from _pool_pass(renderer, remaining, workers if attempt == 0 else 1)
            return
        except BrokenProcessPool as exc:
            cause = exc
    raise lost_frames_error(sorted(remaining), retries + 1, "the local process pool", cause)
