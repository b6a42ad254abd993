"""Rendering animation frames on a Dask cluster (dask.distributed).

The client (``relview animate --cluster ...``) keeps every file operation: it
decides which frames are needed, writes the frames atomically and keeps the
manifest (relview.animation.batch, relview.animation.manifest). Workers only render
and return each frame as encoded PNG bytes, so they need no shared file system.

What is shipped to the workers, as bytes (once per worker, with
``Client.scatter(broadcast=True)``): the loaded and validated :class:`Scene`
(pickled; spectra and textures are already read into it) and the bytes of every
mesh file it names. A worker writes the mesh bytes to its own temporary
directory (``<tmp>/relview-farm/<sha256>/<file name>``) and points the body at
that copy. The worker renders with :class:`relview.animation.workers.FrameRenderer`,
the same code as a local render, and keeps one RenderContext per scene and settings,
so a worker builds the hierarchies once however many frames it renders.

Workers need relview installed at the same version as the client (checked when
connecting) and numba's cache directory writable.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import logging
import os
import tempfile
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from relview import __version__
from relview.animation.workers import FrameRenderer
from relview.errors import UserError

__all__ = [
    "LOCAL_PREFIX",
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
    except (OSError, TimeoutError) as exc:
        raise UserError(f"--cluster {value}: cannot reach the Dask scheduler ({exc})") from None
    with client:
        _check_workers(client, cluster)
        yield client


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


def _unpack_on_worker(bundle: SceneBundle):
    """The scene with its mesh bodies pointing at local copies of the shipped bytes."""
    if not bundle.mesh_files:
        return bundle.scene
    root = Path(tempfile.gettempdir()) / "relview-farm"
    bodies = list(bundle.scene.bodies)
    for i, (name, data) in bundle.mesh_files.items():
        folder = root / hashlib.sha256(data).hexdigest()
        path = folder / name
        if not path.is_file() or path.stat().st_size != len(data):
            folder.mkdir(parents=True, exist_ok=True)
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


def render_frames(renderer, jobs, cluster) -> Iterator:
    """Render ``jobs`` ((index, time_s) pairs) on ``cluster``; yields RenderedFrame as done.

    Closing the iterator (or an exception such as Ctrl-C in the caller) cancels the
    frames not yet finished; a ``local:N`` cluster is shut down.
    """
    from distributed import as_completed  # dask is heavy: imported only to farm out frames

    with connect(cluster) as client:
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
            for index, time_s in jobs
        ]
        try:
            for fut in as_completed(futures):
                yield fut.result()
        finally:
            client.cancel(futures)
