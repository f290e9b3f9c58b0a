"""Building shapes from validated ``objects[i]`` entries: transforms and mesh files.

All lengths are in scene units; every returned shape is in world space.
"""
from __future__ import annotations

import contextlib
import hashlib
import io
import logging
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

from ..errors import SceneError
from ._util import format_path, path_problem, scene_error, show, unit, vec3
from ..limits import AREA_MIN, SCENE_NUMBER_MAX
from .model import Disk, Rectangle, Shape, Sphere, TriangleMesh

#: |e1 . e2| may be at most this fraction of |e1| |e2| for a rectangle.
PERPENDICULAR_TOLERANCE = 1e-6
#: A triangle whose |(b-a) x (c-a)| is at most this fraction of |b-a| |c-a|
#: (the sine of its angle at a) has zero area.
ZERO_AREA_TOLERANCE = 1e-12
#: A 3x3 matrix whose |det| is at most this fraction of the product of its
#: column lengths (Hadamard's bound) is singular.
SINGULAR_TOLERANCE = 1e-12


def _short(path) -> str:
    """A path for an error message: at most 200 characters, control characters escaped."""
    text = repr(str(path))[1:-1]
    return text if len(text) <= 200 else text[:97] + "..." + text[-100:]


@dataclass
class FileLog:
    """Files read while loading a scene, in document order, with their hashes."""

    base_dir: Path
    digests: list[tuple[Path, bytes]] = field(default_factory=list)

    def read(self, relative: str, path: tuple) -> tuple[Path, bytes]:
        """Read a referenced file; errors name the field *path*."""
        try:
            resolved = (self.base_dir / relative).resolve()
            if not resolved.exists():
                raise scene_error(path, f"file not found: {_short(resolved)}")
            if not resolved.is_file():
                raise scene_error(path, f"not a file: {_short(resolved)}")
            data = resolved.read_bytes()
        except SceneError:
            raise
        except (OSError, ValueError, RuntimeError) as exc:  # long name, NUL byte, symlink loop, I/O
            raise scene_error(path, f"cannot read {_short(relative)}: {path_problem(exc)}") from None
        self.digests.append((resolved, hashlib.sha256(data).digest()))
        return resolved, data


# ----------------------------------------------------------------------------- transforms

def is_singular(a: np.ndarray) -> bool:
    """Whether the 3x3 matrix *a* is singular (relative to its column lengths)."""
    bound = float(np.prod(np.linalg.norm(a, axis=0)))
    return bound == 0.0 or abs(float(np.linalg.det(a))) <= SINGULAR_TOLERANCE * bound


def affine_matrix(rows: list, path: tuple) -> np.ndarray:
    """A (4, 4) float64 affine matrix from a row-major 4x4 list.

    The bottom row must be [0, 0, 0, 1] (to 1e-12) and the 3x3 part non-singular.
    """
    m = np.array(rows, dtype=np.float64)
    if not np.allclose(m[3], [0.0, 0.0, 0.0, 1.0], rtol=0.0, atol=1e-12):
        raise scene_error(path + (3,), f"bottom row must be [0, 0, 0, 1] (affine), got {show(rows[3])}")
    m[3] = [0.0, 0.0, 0.0, 1.0]
    if is_singular(m[:3, :3]):
        raise scene_error(path, "singular matrix (its 3x3 part has no inverse)")
    return m


def _cos_sin_degrees(degrees: float) -> tuple[float, float]:
    """cos and sin of an angle in degrees, exact at multiples of 90 degrees."""
    quarter, rest = divmod(degrees, 90.0)
    if rest == 0.0:
        return [(1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0)][int(quarter) % 4]
    rad = np.deg2rad(degrees)
    return float(np.cos(rad)), float(np.sin(rad))


def rotation_matrix(axis: np.ndarray, degrees: float) -> np.ndarray:
    """(3, 3) rotation by *degrees* about the unit *axis*, right-hand rule (Rodrigues)."""
    c, s = _cos_sin_degrees(degrees)
    x, y, z = axis
    cross = np.array([[0.0, -z, y], [z, 0.0, -x], [-y, x, 0.0]])
    return c * np.eye(3) + s * cross + (1.0 - c) * np.outer(axis, axis)


def _srt_matrix(spec: dict, path: tuple) -> np.ndarray:
    """(4, 4) matrix T R S of a ``{scale, rotate, translate}`` transform."""
    scale = spec.get("scale", 1.0)
    s = vec3(scale) if isinstance(scale, list) else np.full(3, float(scale))
    if np.any(s == 0.0):
        raise scene_error(path + ("scale",), f"must be non-zero in every component, got {show(scale)}")
    r = np.eye(3)
    if "rotate" in spec:
        rot = spec["rotate"]
        r = rotation_matrix(unit(rot["axis"], path + ("rotate", "axis")), float(rot["degrees"]))
    m = np.eye(4)
    m[:3, :3] = r @ np.diag(s)
    m[:3, 3] = vec3(spec.get("translate", [0.0, 0.0, 0.0]))
    return m


def transform_matrix(spec: Any, path: tuple) -> np.ndarray:
    """(4, 4) object-to-world matrix of a ``transform`` value (None = identity)."""
    if spec is None:
        return np.eye(4)
    if isinstance(spec, list):
        return affine_matrix(spec, path)
    return _srt_matrix(spec, path)


def apply_transform(matrix: np.ndarray, positions: np.ndarray) -> np.ndarray:
    """Transform (n, 3) points by a (4, 4) affine matrix."""
    return positions @ matrix[:3, :3].T + matrix[:3, 3]


# ----------------------------------------------------------------------------- shapes

def _scaled(v: np.ndarray) -> np.ndarray:
    """Rows of *v* divided by their largest |component| (zero rows stay zero).

    Scaling first keeps products of huge lengths from overflowing in the
    relative tests below.
    """
    peak = np.max(np.abs(v), axis=-1, keepdims=True)
    return np.divide(v, peak, out=np.zeros_like(v), where=peak > 0)


def _sphere(spec: dict, path: tuple, files: FileLog) -> Sphere:
    return Sphere(center=vec3(spec["center"]), radius=float(spec["radius"]))


def _disk(spec: dict, path: tuple, files: FileLog) -> Disk:
    normal = unit(spec["normal"], path + ("normal",))
    return Disk(center=vec3(spec["center"]), normal=normal, radius=float(spec["radius"]))


def _rectangle(spec: dict, path: tuple, files: FileLog) -> Rectangle:
    edges = []
    for key in ("edge1", "edge2"):
        edge = vec3(spec[key])
        if not np.any(edge):
            raise scene_error(path + (key,), "must be non-zero (a zero-area rectangle)")
        edges.append(edge)
    e1, e2 = edges
    u1, u2 = _scaled(e1), _scaled(e2)
    if abs(float(u1 @ u2)) > PERPENDICULAR_TOLERANCE * np.linalg.norm(u1) * np.linalg.norm(u2):
        cosine = float(u1 @ u2) / (np.linalg.norm(u1) * np.linalg.norm(u2))
        raise scene_error(path + ("edge2",), f"edges must be perpendicular (cosine of their angle {cosine:.3g})")
    with np.errstate(under="ignore"):
        area = float(np.linalg.norm(np.cross(e1, e2)))
    if not area >= AREA_MIN:
        raise scene_error(path, f"area {area:.3g} is below {AREA_MIN:g} (refrender's smallest primitive area)")
    return Rectangle(origin=vec3(spec["origin"]), edge1=e1, edge2=e2)


def zero_area(positions: np.ndarray, indices: np.ndarray) -> np.ndarray:
    """(m,) bool mask of the triangles with zero area: relative to their edges (see
    ZERO_AREA_TOLERANCE), or absolutely below AREA_MIN (refrender/limits.py)."""
    a, b, c = (positions[indices[:, k]] for k in range(3))
    d1, d2 = b - a, c - a
    e1, e2 = _scaled(d1), _scaled(d2)
    area2 = np.linalg.norm(np.cross(e1, e2), axis=1)
    relative = area2 <= ZERO_AREA_TOLERANCE * np.linalg.norm(e1, axis=1) * np.linalg.norm(e2, axis=1)
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        absolute = ~(0.5 * np.linalg.norm(np.cross(d1, d2), axis=1) >= AREA_MIN)
    return relative | absolute


def _transformed(spec: dict, path: tuple, positions: np.ndarray, where: tuple) -> np.ndarray:
    """Apply the object's transform; non-finite results are an error at *where*."""
    matrix = transform_matrix(spec.get("transform"), path + ("transform",))
    with np.errstate(over="ignore", invalid="ignore"):
        world = apply_transform(matrix, positions)
    if not np.all(np.abs(world) <= SCENE_NUMBER_MAX):
        raise scene_error(where, f"transformed positions exceed {SCENE_NUMBER_MAX:g} in magnitude "
                          "(refrender's limit for coordinates)")
    return world


def _triangles(spec: dict, path: tuple, files: FileLog) -> TriangleMesh:
    positions = np.array(spec["positions"], dtype=np.float64).reshape(-1, 3)
    indices = np.array(spec["indices"], dtype=np.int64).reshape(-1, 3)
    bad = np.argwhere(indices >= len(positions))
    if len(bad):
        tri, corner = (int(v) for v in bad[0])
        raise scene_error(path + ("indices", tri, corner),
                          f"index {indices[tri, corner]} out of range ({len(positions)} positions)")
    world = _transformed(spec, path, positions, path + ("positions",))
    degenerate = np.flatnonzero(zero_area(world, indices))
    if len(degenerate):
        tri = int(degenerate[0])
        raise scene_error(path + ("indices", tri), f"triangle {tri} has zero area")
    uvs = None
    if "uvs" in spec:
        uvs = np.array(spec["uvs"], dtype=np.float64).reshape(-1, 2)
        if len(uvs) != len(positions):
            raise scene_error(path + ("uvs",), f"needs one [u, v] per position: {len(uvs)} for "
                              f"{len(positions)} positions")
    return TriangleMesh(positions=world, indices=indices, source="triangles", uvs=uvs)


def _mesh_uvs(mesh, count: int) -> np.ndarray | None:
    """Per-vertex texture coordinates (count, 2) of a trimesh mesh, or None."""
    uv = getattr(getattr(mesh, "visual", None), "uv", None)
    if uv is None:
        return None
    uv = np.asarray(uv, dtype=np.float64)
    if uv.shape != (count, 2) or not np.all(np.isfinite(uv)):
        return None
    return uv


@contextlib.contextmanager
def _quiet_trimesh():
    """trimesh logs warnings (to stderr through logging's last-resort handler) and
    its compiled helpers may print: both are held back while a mesh is read; a
    failure becomes our one-line SceneError."""
    from ..io.quiet import foreign_stderr
    logger = logging.getLogger("trimesh")
    level = logger.level
    logger.setLevel(logging.CRITICAL + 1)
    try:
        with foreign_stderr(), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            yield
    finally:
        logger.setLevel(level)


def _read_mesh(resolved: Path, data: bytes, path: tuple):
    """Vertex positions (n, 3) float64, faces (m, 3) int64 and texture coordinates
    ((n, 2) float64 or None) of a mesh file's bytes."""
    import trimesh  # imported lazily: only scenes with mesh files need it

    file_type = resolved.suffix.lstrip(".").lower()
    try:
        with _quiet_trimesh():
            mesh = trimesh.load(io.BytesIO(data), file_type=file_type, force="mesh", process=False)
        vertices = np.asarray(mesh.vertices, dtype=np.float64).reshape(-1, 3)
        faces = np.asarray(mesh.faces, dtype=np.int64).reshape(-1, 3)
        uvs = _mesh_uvs(mesh, len(vertices))
    except Exception as exc:  # noqa: BLE001 - any loader failure is a bad file for the user
        raise scene_error(path, f"cannot read mesh file {resolved}: {type(exc).__name__}: {exc}") from None
    if len(faces) == 0:
        raise scene_error(path, f"mesh file has no triangles: {resolved}")
    if not np.all(np.isfinite(vertices)):
        raise scene_error(path, f"mesh file has non-finite vertex positions: {resolved}")
    if faces.min() < 0 or faces.max() >= len(vertices):
        raise scene_error(path, f"mesh file has a face index out of range: {resolved}")
    return vertices, faces, uvs


def _mesh(spec: dict, path: tuple, files: FileLog) -> TriangleMesh:
    where = path + ("path",)
    resolved, data = files.read(spec["path"], where)
    vertices, faces, uvs = _read_mesh(resolved, data, where)
    world = _transformed(spec, path, vertices, where)
    degenerate = zero_area(world, faces)
    if np.all(degenerate):
        raise scene_error(where, f"every triangle of the mesh has zero area: {resolved}")
    if np.any(degenerate):
        warnings.warn(f"{format_path(where)}: dropped {int(degenerate.sum())} zero-area "
                      f"triangles of {len(faces)} in {resolved}", stacklevel=2)
        faces = faces[~degenerate]
    return TriangleMesh(positions=world, indices=faces, source=str(resolved), uvs=uvs)


_BUILDERS: dict[str, Callable[[dict, tuple, FileLog], Shape]] = {
    "sphere": _sphere,
    "rectangle": _rectangle,
    "disk": _disk,
    "triangles": _triangles,
    "mesh": _mesh,
}


def build_shape(spec: dict, path: tuple, files: FileLog) -> Shape:
    """The world-space shape of one schema-valid ``objects[i]`` entry."""
    return _BUILDERS[spec["shape"]](spec, path, files)
