"""Shapes, intersection, the BVH and the scene-to-arrays compiler."""
