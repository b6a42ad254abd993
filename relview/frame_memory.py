"""What one frame needs in memory, and refusing work that cannot fit, before any work.

Kept apart from relview.renderer (which loads the numba kernels) so that the command line
checks a resolution from the options without loading them.
"""

from __future__ import annotations

from relview.errors import UserError
from relview.geometry.shapes import free_memory, mesh_bytes

#: Rays traced per batch (a 960x540 frame is one batch); bounds the working memory of one
#: batch to about 150 MB.
RAYS_PER_BATCH = 1 << 19
#: Bytes per pixel held for the float layers and accumulators of one frame.
BYTES_PER_PIXEL = 8 * (3 + 3 + 1 + 1 + 3 + 3 + 1 + 3)


def estimate_bytes(width: int, height: int, faces: int = 0) -> int:
    """Working memory of one frame: layers plus one ray batch, plus ``faces`` mesh
    triangles at relview.geometry.shapes.BYTES_PER_FACE each (measured)."""
    return width * height * BYTES_PER_PIXEL + RAYS_PER_BATCH * 400 + mesh_bytes(faces)


def check_memory(
    width: int, height: int, source: str = "render.resolution", faces: int = 0
) -> None:
    """Refuse before any work when a frame (and ``faces`` mesh triangles) would not fit in
    this machine's memory."""
    need = estimate_bytes(width, height, faces)
    avail = free_memory()
    if avail is None:
        return
    if need > 0.8 * avail:
        meshes = f" with {faces:,} mesh triangles" if faces else ""
        raise UserError(
            f"{source} = [{width}, {height}]: a frame{meshes} needs about "
            f"{need / 2**30:.1f} GiB but only {avail / 2**30:.1f} GiB is free; "
            "lower the resolution" + (" or simplify the meshes" if faces else "")
        )
