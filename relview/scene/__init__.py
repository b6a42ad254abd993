"""Scene reading: the plain-data parts of a scene, the validated TOML table, the scene
schema and the Scene itself.

Kept free of imports so that lower layers can import :mod:`relview.scene.parts` (plain
dataclasses) without loading the reader.
"""
