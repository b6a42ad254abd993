"""Rendering frames: one frame to PNG bytes, and the local ways of rendering many.

:class:`FrameRenderer` renders the frames of one scene with one RenderContext (the
hierarchies are built once) and returns each as a :class:`RenderedFrame`: encoded PNG
bytes with provenance text chunks, the frame's mean relative luminance and its white.
The same class renders in the calling process (:func:`render_serial`), in local worker
processes (:func:`render_in_processes`: spawned, one numba thread each) and on Dask
workers (relview.animation.farm), so all three produce the same bytes.

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
from relview.imaging.display import to_8bit
from relview.imaging.png import encode_png

__all__ = ["FrameRenderer", "RenderedFrame", "render_in_processes", "render_serial"]


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


def _init_worker_process(scene, white, metadata) -> None:
    """Initialiser of a local worker process: one numba thread, one RenderContext."""
    global _PROCESS_RENDERER
    # Ctrl-C goes to the whole process group: let the parent alone decide what stops.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ["NUMBA_NUM_THREADS"] = "1"
    import numba  # only now, after the thread count is set

    numba.set_num_threads(1)  # in case numba was imported before the variable was set
    _PROCESS_RENDERER = FrameRenderer(scene, white, metadata)


def _render_in_worker_process(index: int, time_s: float) -> RenderedFrame:
    assert _PROCESS_RENDERER is not None, "worker process not initialised"
    return _PROCESS_RENDERER.render(index, time_s)


def render_serial(renderer: FrameRenderer, jobs) -> Iterator[RenderedFrame]:
    """Render ``jobs`` ((index, time_s) pairs) one after another in this process."""
    for index, time_s in jobs:
        yield renderer.render(index, time_s)


def render_in_processes(renderer: FrameRenderer, jobs, workers: int) -> Iterator[RenderedFrame]:
    """Render ``jobs`` in ``workers`` spawned local processes; yields frames as they finish.

    Closing the iterator (or an exception in the caller) cancels the frames not started.
    """
    # Imported when a pool is started: a serial run (the default) does not need them.
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    jobs = list(jobs)
    pool = ProcessPoolExecutor(
        max_workers=min(workers, len(jobs)),
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_init_worker_process,
        initargs=(renderer.scene, renderer.white, renderer.metadata),
    )
    try:
        pending = {pool.submit(_render_in_worker_process, i, t) for i, t in jobs}
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                yield fut.result()
    finally:
        pool.shutdown(wait=False, cancel_futures=True)
