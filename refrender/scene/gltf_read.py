"""Reading glTF 2.0 files: the JSON (through pygltflib), buffers, accessors, images.

Nothing here knows about refrender's scene model; :mod:`refrender.scene.gltf`
translates what this module reads.  Every problem is a
:class:`refrender.errors.SceneError` whose one line names the file and the
JSON path inside it, e.g. ``model.glb: accessors[3]: ...``.

Facts of the glTF 2.0 specification used here (Khronos, "glTF 2.0
Specification", sections 3.6 "Buffers and Buffer Views", 3.6.2 "Accessors",
3.6.2.4 "Sparse Accessors", 4.4 "GLB File Format Specification"; from
memory, checked against the two sample files of the tests):

- GLB: a 12-byte header (magic ``glTF``, version 2, total length) and chunks
  of (length, type, data); the first chunk is JSON, an optional second one
  ``BIN\\0`` is buffer 0 when that buffer has no ``uri``.
- Component types 5120 int8, 5121 uint8, 5122 int16, 5123 uint16,
  5125 uint32, 5126 float32; element types SCALAR, VEC2, VEC3, VEC4, MAT2,
  MAT3, MAT4.  Without ``byteStride`` elements are tightly packed.
- ``normalized`` integers map to [0, 1] (unsigned, c / (2^b - 1)) or
  [-1, 1] (signed, max(c / (2^(b-1) - 1), -1)).
- An accessor without ``bufferView`` is zeros; ``sparse`` replaces the
  elements listed by its ``indices`` with its ``values``.
"""
from __future__ import annotations

import base64
import hashlib
import json
import struct
import urllib.parse
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import SceneError
from ._util import format_path, one_line

COMPONENTS = {5120: np.int8, 5121: np.uint8, 5122: np.int16, 5123: np.uint16,
              5125: np.uint32, 5126: np.float32}
WIDTH = {"SCALAR": 1, "VEC2": 2, "VEC3": 3, "VEC4": 4, "MAT2": 4, "MAT3": 9, "MAT4": 16}
GLB_MAGIC = 0x46546C67      # "glTF" little-endian
CHUNK_JSON = 0x4E4F534A     # "JSON"
CHUNK_BIN = 0x004E4942      # "BIN\0"


class GltfFile:
    """One glTF file: its pygltflib document, buffers and the files read (hashed)."""

    def __init__(self, path: str | Path, label: str | None = None) -> None:
        self.path = Path(path)
        self.label = label if label is not None else str(path)
        self.digests: list[tuple[Path, bytes]] = []
        data = self._read_file(self.path, ())
        if data[:4] == b"glTF":
            text, self._glb_bin = self._split_glb(data)
        else:
            text, self._glb_bin = data, None
        self.doc = self._parse(text)
        self._buffers: dict[int, bytes] = {}

    # ------------------------------------------------------------------ errors, files
    def error(self, path: tuple, message: str) -> SceneError:
        where = f"{self.label}: {format_path(path)}" if path else self.label
        return SceneError(one_line(f"{where}: {message}"))

    def _read_file(self, resolved: Path, path: tuple) -> bytes:
        if not resolved.exists():
            raise self.error(path, f"file not found: {resolved}")
        if not resolved.is_file():
            raise self.error(path, f"not a file: {resolved}")
        try:
            data = resolved.read_bytes()
        except OSError as exc:
            raise self.error(path, f"cannot read {resolved}: {exc.strerror or exc}") from None
        self.digests.append((resolved.resolve(), hashlib.sha256(data).digest()))
        return data

    def _split_glb(self, data: bytes) -> tuple[bytes, bytes | None]:
        if len(data) < 20:
            raise self.error((), f"truncated GLB: {len(data)} bytes, a header needs 20")
        magic, version, length = struct.unpack_from("<III", data, 0)
        if version != 2:
            raise self.error((), f"GLB version {version}, only glTF 2.0 is supported")
        if length != len(data):
            raise self.error((), f"truncated GLB: header says {length} bytes, file has {len(data)}")
        chunks = []
        pos = 12
        while pos < length:
            if pos + 8 > length:
                raise self.error((), f"truncated GLB: chunk header at byte {pos} is cut off")
            size, kind = struct.unpack_from("<II", data, pos)
            if pos + 8 + size > length:
                raise self.error((), f"truncated GLB: chunk at byte {pos} needs {size} bytes, "
                                 f"{length - pos - 8} remain")
            chunks.append((kind, data[pos + 8:pos + 8 + size]))
            pos += 8 + size
        if not chunks or chunks[0][0] != CHUNK_JSON:
            raise self.error((), "GLB: the first chunk must be JSON")
        binary = chunks[1][1] if len(chunks) > 1 and chunks[1][0] == CHUNK_BIN else None
        return chunks[0][1], binary

    def _parse(self, text: bytes):
        import pygltflib
        try:
            raw = json.loads(text.decode("utf-8-sig"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise self.error((), f"not glTF JSON: {exc}") from None
        if not isinstance(raw, dict):
            raise self.error((), "not glTF JSON: the top level must be an object")
        version = str((raw.get("asset") or {}).get("version", ""))
        if not version.startswith("2."):
            raise self.error(("asset", "version"), f"glTF {version or '(missing)'}: only 2.x is supported")
        self.raw = raw
        try:
            return pygltflib.GLTF2.from_json(json.dumps(raw))
        except Exception as exc:  # noqa: BLE001 - a malformed document is a bad file
            raise self.error((), f"malformed glTF: {type(exc).__name__}: {exc}") from None

    # ------------------------------------------------------------------ buffers
    def uri_bytes(self, uri: str, path: tuple) -> bytes:
        """Bytes of a ``data:`` URI or of a file relative to the glTF file."""
        if uri.startswith("data:"):
            head, _, payload = uri.partition(",")
            try:
                if head.endswith(";base64"):
                    return base64.b64decode(payload, validate=True)
                return urllib.parse.unquote_to_bytes(payload)
            except ValueError as exc:
                raise self.error(path, f"bad data URI: {exc}") from None
        resolved = (self.path.parent / urllib.parse.unquote(uri)).resolve()
        return self._read_file(resolved, path)

    def buffer(self, index: int, path: tuple) -> bytes:
        if not 0 <= index < len(self.doc.buffers):
            raise self.error(path, f"buffer {index} does not exist ({len(self.doc.buffers)} buffers)")
        if index not in self._buffers:
            buf = self.doc.buffers[index]
            where = ("buffers", index)
            if buf.uri is None:
                if index != 0 or self._glb_bin is None:
                    raise self.error(where, "has no uri and there is no GLB binary chunk")
                data = self._glb_bin
            else:
                data = self.uri_bytes(buf.uri, where + ("uri",))
            if len(data) < buf.byteLength:
                raise self.error(where, f"byteLength {buf.byteLength} but the data has {len(data)} bytes")
            self._buffers[index] = data
        return self._buffers[index]

    def view(self, index: int, path: tuple) -> tuple[bytes, int, int, int | None]:
        """(buffer bytes, byte offset, byte length, byte stride or None) of a bufferView."""
        if not 0 <= index < len(self.doc.bufferViews):
            raise self.error(path, f"bufferView {index} does not exist "
                             f"({len(self.doc.bufferViews)} buffer views)")
        bv = self.doc.bufferViews[index]
        where = ("bufferViews", index)
        data = self.buffer(bv.buffer, where + ("buffer",))
        offset = bv.byteOffset or 0
        if offset < 0 or bv.byteLength < 0 or offset + bv.byteLength > len(data):
            raise self.error(where, f"bytes {offset}..{offset + bv.byteLength} lie outside "
                             f"buffer {bv.buffer} ({len(data)} bytes)")
        return data, offset, bv.byteLength, bv.byteStride

    # ------------------------------------------------------------------ accessors
    def _strided(self, view: int, offset: int, count: int, dtype, width: int, path: tuple,
                 where: tuple) -> np.ndarray:
        data, base, length, stride = self.view(view, path)
        item = np.dtype(dtype).itemsize
        elem = item * width
        stride = stride or elem
        if stride < elem:
            raise self.error(where, f"byteStride {stride} is smaller than one element ({elem} bytes)")
        if offset < 0 or (count > 0 and offset + (count - 1) * stride + elem > length):
            raise self.error(where, f"{count} elements from byte {offset} (stride {stride}) run past "
                             f"the end of bufferView {view} ({length} bytes)")
        if count == 0:
            return np.zeros((0, width), dtype)
        if (base + offset) % item:
            raw = np.frombuffer(data, np.uint8, count=length - offset, offset=base + offset).copy()
            data, base, offset = raw.tobytes(), 0, 0
        flat = np.frombuffer(data, dtype=np.uint8)
        rows = np.lib.stride_tricks.as_strided(flat[base + offset:], shape=(count, elem),
                                               strides=(stride, 1), writeable=False)
        return np.ascontiguousarray(rows).view(dtype).reshape(count, width)

    def accessor(self, index: int, path: tuple) -> np.ndarray:
        """Accessor *index* as an array (count, width): float64 when float or normalized,
        else int64.  *path* names the field that refers to it (for errors)."""
        if not isinstance(index, int) or not 0 <= index < len(self.doc.accessors):
            raise self.error(path, f"accessor {index} does not exist ({len(self.doc.accessors)} accessors)")
        acc = self.doc.accessors[index]
        where = ("accessors", index)
        if acc.componentType not in COMPONENTS:
            raise self.error(where + ("componentType",), f"unknown component type {acc.componentType}")
        if acc.type not in WIDTH:
            raise self.error(where + ("type",), f"unknown element type {acc.type!r}")
        dtype, width, count = COMPONENTS[acc.componentType], WIDTH[acc.type], acc.count
        if acc.bufferView is None:
            values = np.zeros((count, width), dtype)
        else:
            values = self._strided(acc.bufferView, acc.byteOffset or 0, count, dtype, width,
                                   where + ("bufferView",), where)
        if acc.sparse is not None:
            values = self._sparse(acc.sparse, values, dtype, width, where + ("sparse",))
        return self._convert(values, dtype, bool(acc.normalized))

    def _sparse(self, sparse, values, dtype, width, where) -> np.ndarray:
        values = values.copy()
        n = sparse.count
        idx = sparse.indices
        if idx.componentType not in (5121, 5123, 5125):
            raise self.error(where + ("indices", "componentType"), f"must be an unsigned type, "
                             f"got {idx.componentType}")
        ids = self._strided(idx.bufferView, idx.byteOffset or 0, n, COMPONENTS[idx.componentType], 1,
                            where + ("indices", "bufferView"), where + ("indices",))[:, 0]
        if n and int(ids.max()) >= len(values):
            raise self.error(where + ("indices",), f"index {int(ids.max())} out of range "
                             f"({len(values)} elements)")
        new = self._strided(sparse.values.bufferView, sparse.values.byteOffset or 0, n, dtype, width,
                            where + ("values", "bufferView"), where + ("values",))
        values[ids.astype(np.int64)] = new
        return values

    @staticmethod
    def _convert(values: np.ndarray, dtype, normalized: bool) -> np.ndarray:
        if dtype is np.float32:
            return values.astype(np.float64)
        if not normalized:
            return values.astype(np.int64)
        info = np.iinfo(dtype)
        x = values.astype(np.float64) / float(info.max)
        return np.maximum(x, -1.0) if info.min < 0 else x

    # ------------------------------------------------------------------ images
    def image_bytes(self, index: int, path: tuple) -> bytes:
        if not 0 <= index < len(self.doc.images):
            raise self.error(path, f"image {index} does not exist ({len(self.doc.images)} images)")
        img = self.doc.images[index]
        where = ("images", index)
        if img.uri is not None:
            return self.uri_bytes(img.uri, where + ("uri",))
        if img.bufferView is None:
            raise self.error(where, "has neither uri nor bufferView")
        data, base, length, _ = self.view(img.bufferView, where + ("bufferView",))
        return data[base:base + length]


@dataclass
class Ignored:
    """Features of a file that the import could not honour, each named once."""
    notes: dict[str, str] = field(default_factory=dict)

    def add(self, feature: str, why: str) -> None:
        self.notes.setdefault(feature, why)
