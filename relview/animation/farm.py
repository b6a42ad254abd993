"""Rendering animation frames on a Dask cluster (dask.distributed).

The client (``relview animate --cluster ...``) keeps every file operation: it
decides which frames are needed, writes the frames atomically and keeps the
manifest (relview.animation.batch, relview.animation.manifest). Workers only render
and return each frame as encoded PNG bytes, so they need no shared file system.

What is shipped to the workers, as bytes (once per worker, with
``Client.scatter(broadcast=True)``): the loaded and validated :class:`Scene`
(pickled; spectra and textures are already read into it) and the bytes of every
mesh file it names. A worker writes the mesh bytes into a private directory of its
own process (``tempfile.mkdtemp``: mode 0700, an unpredictable name, removed when the
process ends), under a name keyed by the bytes' SHA-256, and points the body at that
copy; a copy is used again only after its SHA-256 is checked, so a file planted or
changed there is never rendered in place of the user's mesh.

A frame lost with its worker or with the scheduler (KilledWorker, a cancelled future,
a closed connection) is sent again on a fresh connection (a new LocalCluster for
``local:N``), at most :data:`relview.animation.workers.MAX_RETRIES` times; then the run
stops with a :class:`relview.errors.WorkersLost` error. The client writes each frame as
it lands, so the finished ones are kept and a rerun renders only the rest. The worker renders with :class:`relview.animation.workers.FrameRenderer`,
the same code as a local render, and keeps one RenderContext per scene and settings,
so a worker builds the hierarchies once however many frames it renders.

Workers need relview installed at the same version as the client (checked when
connecting) and numba's cache directory writable.
"""

from __future__ import annotations

import atexit
import contextlib
import dataclasses
import hashlib
import logging
import os
import shutil
import tempfile
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from relview import __version__
from relview.animation.manifest import _file_sha256
from relview.animation.workers import MAX_RETRIES, FrameRenderer, lost_frames_error
from relview.errors import UserError

__all__ = [
    "LOCAL_PREFIX",
    "SCHEMES",
    "FarmSession",
    "SceneBundle",
    "bundle_scene",
    "connect",
    "parse_cluster",
    "render_frames",
    "render_on_worker",
]

#: ``--cluster local:N`` starts N worker processes on 127.0.0.1.
LOCAL_PREFIX = "local:"
#: Seconds to wait for a remote scheduler before giving up.
CONNECT_TIMEOUT_S = 20


#: Address schemes of a Dask scheduler this client can reach (distributed's tcp and
#: its TLS variant; ``inproc`` and ``ucx`` need an in-process or UCX set-up that a
#: command-line run does not have).
SCHEMES = ("tcp", "tls")


def parse_cluster(address: str) -> tuple[str, int | str]:
    """``"local:N"`` -> ("local", N); ``"tcp://host:port"`` (or tls://) -> ("address", it)."""
    text = str(address).strip()
    if text.startswith(LOCAL_PREFIX):
        count = text[len(LOCAL_PREFIX) :]
        try:
            n = int(count)
        except ValueError:
            n = 0
        if n < 1:
            raise UserError(
                f"--cluster {address!r}: local:N needs a number of worker processes N >= 1"
            )
        return "local", n
    if "://" in text and text.split("://", 1)[1]:
        scheme = text.split("://", 1)[0]
        if scheme.lower() not in SCHEMES:
            raise UserError(
                f"--cluster {address!r}: unknown address scheme {scheme + '://'!r}; a Dask "
                f"scheduler is reached with {' or '.join(s + '://' for s in SCHEMES)} "
                "(e.g. tcp://HOST:8786), or use local:N for N worker processes on this machine"
            )
        return "address", text
    raise UserError(
        f"--cluster {address!r}: expected a Dask scheduler address such as "
        "tcp://HOST:8786, or local:N for N worker processes on this machine"
    )


@contextlib.contextmanager
def connect(cluster) -> Iterator:
    """A ``distributed.Client`` for ``cluster`` (an address, ``local:N`` or a Client).

    ``local:N`` starts a LocalCluster of N worker processes with one thread each,
    listening on 127.0.0.1 only (the HTTP status server on a free local port), each with
    NUMBA_NUM_THREADS=1 (N processes share the cores); it is shut down on exit.
    A Client given by the caller is used as it is and left open.
    """
    from distributed import Client, LocalCluster  # dask is heavy: imported only to connect

    if isinstance(cluster, Client):
        yield cluster
        return
    kind, value = parse_cluster(cluster)
    if kind == "local":
        with (
            LocalCluster(
                n_workers=int(value),
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address="127.0.0.1:0",  # its HTTP server on a free local port
                silence_logs=logging.ERROR,
                env={"NUMBA_NUM_THREADS": "1"},
            ) as local,
            Client(local) as client,
        ):
            _check_workers(client, cluster)
            yield client
        return
    try:
        client = Client(value, timeout=f"{CONNECT_TIMEOUT_S}s")
    except (OSError, TimeoutError, ValueError) as exc:
        # ValueError: an address distributed cannot parse (a bad port, say)
        raise UserError(f"--cluster {value}: cannot reach the Dask scheduler ({exc})") from None
    with client:
        _check_workers(client, cluster)
        yield client


class FarmSession:
    """An open connection to ``cluster``, which can be opened afresh after a loss.

    :meth:`open` connects (and for ``local:N`` starts the workers) so that a cluster
    that cannot be reached fails before the caller writes anything;
    :meth:`reconnect` replaces a connection whose scheduler or workers were lost.
    """

    def __init__(self, cluster):
        self.cluster = cluster
        self.client = None
        self._stack: contextlib.ExitStack | None = None

    def open(self) -> FarmSession:
        stack = contextlib.ExitStack()
        try:
            self.client = stack.enter_context(connect(self.cluster))
        except BaseException:
            stack.close()
            raise
        self._stack = stack
        return self

    def reconnect(self) -> None:
        self.close()
        self.open()

    def close(self) -> None:
        stack, self._stack, self.client = self._stack, None, None
        if stack is not None:
            with contextlib.suppress(Exception):  # a connection already lost may not close cleanly
                stack.close()

    def __enter__(self) -> FarmSession:
        return self if self.client is not None else self.open()

    def __exit__(self, *exc) -> None:
        self.close()


def _worker_version() -> str:
    """Run on each worker by :func:`_check_workers`: the relview version installed there."""
    return __version__


def _check_workers(client, cluster) -> None:
    """Every worker must import relview at the client's version (frames must match)."""
    try:
        versions = client.run(_worker_version)
    except Exception as exc:  # noqa: BLE001 - whatever stops relview running there
        raise UserError(
            f"--cluster {cluster}: the Dask workers cannot run relview ({type(exc).__name__}: "
            f"{exc}); install relview {__version__} in the workers' environment"
        ) from None
    other = {w: v for w, v in versions.items() if v != __version__}
    if other:
        raise UserError(
            f"--cluster {cluster}: workers run other relview versions {sorted(set(other.values()))}"
            f" than this client ({__version__}); frames would not match"
        )


@dataclass
class SceneBundle:
    """A scene and the bytes of its mesh files: all a worker needs to render it."""

    scene: object
    mesh_files: dict[int, tuple[str, bytes]]  # body index -> (file name, bytes)
    digest: str  # scene hash plus mesh bytes: names the worker-side cache


def bundle_scene(scene) -> SceneBundle:
    """Pack ``scene`` for shipping: read every mesh file it names into memory."""
    meshes: dict[int, tuple[str, bytes]] = {}
    h = hashlib.sha256(scene.source_hash.encode())
    for i, body in enumerate(scene.bodies):
        if getattr(body, "shape", None) == "mesh" and getattr(body, "file", None) is not None:
            data = Path(body.file).read_bytes()
            meshes[i] = (Path(body.file).name, data)
            h.update(b"\0%d\0" % i + data)
    return SceneBundle(scene, meshes, h.hexdigest())


#: This worker process's private directory for mesh copies (made on first use).
_MESH_DIR: Path | None = None


def _private_mesh_dir() -> Path:
    """A directory only this user can enter, new for this process and removed at its end.

    ``mkdtemp`` makes it with mode 0700 under an unpredictable name, so no other user
    can plant or swap files in it (a fixed shared path such as <tmp>/relview-farm could
    be prepared by anyone on the machine).
    """
    global _MESH_DIR
    if _MESH_DIR is None or not _MESH_DIR.is_dir():
        _MESH_DIR = Path(tempfile.mkdtemp(prefix="relview-farm-"))
        atexit.register(shutil.rmtree, _MESH_DIR, True)
    return _MESH_DIR


def _unpack_on_worker(bundle: SceneBundle):
    """The scene with its mesh bodies pointing at local copies of the shipped bytes.

    A copy is reused only when its content has the shipped bytes' SHA-256 (checked on
    every use, not the size alone); otherwise it is written again, atomically.
    """
    if not bundle.mesh_files:
        return bundle.scene
    root = _private_mesh_dir()
    bodies = list(bundle.scene.bodies)
    for i, (name, data) in bundle.mesh_files.items():
        digest = hashlib.sha256(data).hexdigest()
        folder = root / digest
        path = folder / name
        if _file_sha256(path) != digest:
            folder.mkdir(mode=0o700, parents=True, exist_ok=True)
            tmp = folder / f".{name}.{uuid.uuid4().hex}.part"
            tmp.write_bytes(data)
            os.replace(tmp, path)
        bodies[i] = dataclasses.replace(bodies[i], file=path)
    return bundle.scene.replace(bodies=bodies)


#: Per worker process: FrameRenderer (with its RenderContext) per scene and settings.
_WORKER_RENDERERS: dict[tuple[str, str], FrameRenderer] = {}


def render_on_worker(bundle: SceneBundle, white, metadata: dict, index: int, time_s: float):
    """Dask task: render frame ``index`` at ``time_s`` (s) -> RenderedFrame (PNG bytes)."""
    key = (bundle.digest, metadata.get("animation_settings_sha256", "") + repr(white))
    renderer = _WORKER_RENDERERS.get(key)
    if renderer is None:
        _WORKER_RENDERERS.clear()  # one animation at a time per worker keeps memory bounded
        renderer = FrameRenderer(_unpack_on_worker(bundle), white, metadata)
        _WORKER_RENDERERS[key] = renderer
    return renderer.render(index, time_s)


def _lost_errors() -> tuple[type[BaseException], ...]:
    """What a lost worker or scheduler raises from a frame's future (not a render bug)."""
    from concurrent.futures import CancelledError  # FutureCancelledError derives from it

    from distributed import KilledWorker  # dask is heavy: imported only to farm out frames
    from distributed.comm.core import CommClosedError

    return (KilledWorker, CancelledError, CommClosedError, OSError, TimeoutError)


def _farm_pass(client, renderer, remaining: dict[int, float]) -> Iterator:
    """Submit the ``remaining`` frames once; yields each as it lands (and drops it)."""
    from distributed import as_completed  # dask is heavy: imported only to farm out frames

    [bundle] = client.scatter([bundle_scene(renderer.scene)], broadcast=True)
    run = uuid.uuid4().hex[:8]
    futures = [
        client.submit(
            render_on_worker,
            bundle,
            renderer.white,
            renderer.metadata,
            index,
            time_s,
            key=f"relview-frame-{index:05d}-{run}",
            pure=False,
        )
        for index, time_s in sorted(remaining.items())
    ]
    try:
        for fut in as_completed(futures):
            result = fut.result()
            remaining.pop(result.index, None)
            yield result
    finally:
        with contextlib.suppress(Exception):  # the connection may be gone already
            client.cancel(futures)


def render_frames(renderer, jobs, cluster, retries: int = MAX_RETRIES) -> Iterator:
    """Render ``jobs`` ((index, time_s) pairs) on ``cluster``; yields RenderedFrame as done.

    ``cluster``: an address, ``local:N``, a Client or an open :class:`FarmSession`.
    Frames lost with a worker or the scheduler are sent again on a fresh connection at
    most ``retries`` times, then :class:`relview.errors.WorkersLost` is raised.
    Closing the iterator (or an exception such as Ctrl-C in the caller) cancels the
    frames not yet finished; a ``local:N`` cluster is shut down.
    """
    lost = _lost_errors()
    remaining = {int(i): float(t) for i, t in jobs}
    own = not isinstance(cluster, FarmSession)
    session = FarmSession(cluster).open() if own else cluster
    try:
        for attempt in range(retries + 1):
            if attempt:
                try:
                    session.reconnect()
                except UserError as exc:  # the scheduler cannot be reached again
                    cause = exc
                    break
            try:
                yield from _farm_pass(session.client, renderer, remaining)
                return
            except lost as exc:
                cause = exc
        raise lost_frames_error(sorted(remaining), attempt + 1, "the Dask cluster", cause)
    finally:
        if own:
            session.close()
