"""Write the meshes of the lantern-orchard demos (scenes/orchard-*.toml) into scenes/meshes/.

    python scripts/make_orchard_meshes.py

Two rows of posts 12 m apart along the x axis, one post every 10 m from x = -60 m to
x = 200 m, each 3 m tall with a lantern globe (radius 0.35 m) on top. The posts and
the globes are separate files, so a scene can give them different surfaces (the posts
reflect lamp light, the globes glow). Existing files are replaced.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent.parent / "scenes" / "meshes"
ROW_Y_M = (-6.0, 6.0)
POST_X_M = np.arange(-60.0, 200.1, 10.0)
POST_SIZE_M = (0.25, 0.25, 3.0)
GLOBE_RADIUS_M = 0.35


def main() -> None:
    import trimesh  # imported here: only this script needs it at run time

    posts, globes = [], []
    for y in ROW_Y_M:
        for x in POST_X_M:
            post = trimesh.creation.box(extents=POST_SIZE_M)
            post.apply_translation((x, y, POST_SIZE_M[2] / 2))
            posts.append(post)
            globe = trimesh.creation.icosphere(subdivisions=1, radius=GLOBE_RADIUS_M)
            globe.apply_translation((x, y, POST_SIZE_M[2] + GLOBE_RADIUS_M))
            globes.append(globe)
    for name, parts in (("orchard-posts.obj", posts), ("orchard-globes.obj", globes)):
        mesh = trimesh.util.concatenate(parts)
        path = OUT / name
        path.write_text(trimesh.exchange.obj.export_obj(mesh, include_normals=False))
        print(f"wrote {path} ({len(mesh.faces)} triangles)")


if __name__ == "__main__":
    main()
