"""refrender: ground-truth Monte Carlo path tracing with per-pixel error bars."""
__version__ = "0.1.0"

from . import _jit  # noqa: F401  (sets the kernel cache location first)
from .errors import ImageError, RefrenderError, RenderError, SceneError
from .render import render
from .result import Result, merge

__all__ = ["load_scene", "prepare", "render", "merge", "read_image", "trace", "Result", "SceneError",
           "RefrenderError", "RenderError", "ImageError", "__version__"]


def load_scene(source, **kwargs):
    """Load and validate a scene from a JSON file path or a dict (see scene.load)."""
    from .scene.load import load_scene as _load
    return _load(source, **kwargs)


def read_image(path):
    """Read EXR, PFM, Radiance HDR, PNG/JPEG (sRGB-decoded) or NPY as float (H, W, C)."""
    from .io.images import read_image as _read
    return _read(path)


def trace(scene, origins, directions, *, arrays=None, kernel="auto"):
    """Closest hits of a batch of rays; see refrender.query.trace."""
    from .query import trace as _trace
    return _trace(scene, origins, directions, arrays=arrays, kernel=kernel)


def prepare(scene):
    """The compiled scene (BVH, arrays, lights), built once per Scene object and
    reused by trace, render and the farm; see refrender.prepared."""
    from .prepared import prepare as _prepare
    return _prepare(scene)
