"""Scene format: JSON Schema, loading and validation."""
from .model import *  # noqa: F401,F403
from .load import load_scene, scene_sha256  # noqa: F401
