"""Geometry and tracing: rest-frame meshes, hierarchies, camera projections, the
retarded-time ray caster and light-cone snapshots of bodies in non-uniform motion."""
