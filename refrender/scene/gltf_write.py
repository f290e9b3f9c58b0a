"""A small glTF 2.0 writer (tests and tools/make_gltf_demo.py): accessors into one
buffer, written as a .gltf with a data: URI or an external .bin, or as a .glb.

The layout follows the glTF 2.0 specification (sections "Buffers and Buffer
Views", "Accessors", "GLB File Format Specification"; from memory).
"""
from __future__ import annotations

import base64
import json
import struct
from pathlib import Path

import numpy as np

COMPONENT = {np.dtype(np.int8): 5120, np.dtype(np.uint8): 5121, np.dtype(np.int16): 5122,
             np.dtype(np.uint16): 5123, np.dtype(np.uint32): 5125, np.dtype(np.float32): 5126}
TYPE = {1: "SCALAR", 2: "VEC2", 3: "VEC3", 4: "VEC4", 16: "MAT4"}


class Gltf:
    def __init__(self) -> None:
        self.doc = {"asset": {"version": "2.0"}, "scene": 0, "scenes": [{"nodes": []}], "nodes": [],
                    "meshes": [], "accessors": [], "bufferViews": [], "buffers": []}
        self.blob = bytearray()

    def _align(self) -> None:
        while len(self.blob) % 4:
            self.blob.append(0)

    def view(self, data: bytes, stride: int | None = None) -> int:
        self._align()
        bv = {"buffer": 0, "byteOffset": len(self.blob), "byteLength": len(data)}
        if stride:
            bv["byteStride"] = stride
        self.blob += data
        self.doc["bufferViews"].append(bv)
        return len(self.doc["bufferViews"]) - 1

    def accessor(self, values, dtype=np.float32, normalized: bool = False, **extra) -> int:
        a = np.ascontiguousarray(np.asarray(values).astype(dtype))
        a2 = a.reshape(len(a), -1)
        acc = {"bufferView": self.view(a2.tobytes()), "componentType": COMPONENT[a.dtype],
               "count": len(a2), "type": TYPE[a2.shape[1]]}
        if normalized:
            acc["normalized"] = True
        if a2.shape[1] == 3 and a.dtype == np.float32:
            acc["min"] = a2.min(axis=0).tolist()
            acc["max"] = a2.max(axis=0).tolist()
        acc.update(extra)
        self.doc["accessors"].append(acc)
        return len(self.doc["accessors"]) - 1

    def mesh(self, positions, indices=None, material=None, mode=None, **attributes) -> int:
        prim = {"attributes": {"POSITION": self.accessor(positions)}}
        for key, acc in attributes.items():
            prim["attributes"][key] = acc
        if indices is not None:
            prim["indices"] = self.accessor(np.asarray(indices).ravel(), np.uint32)
        if material is not None:
            prim["material"] = material
        if mode is not None:
            prim["mode"] = mode
        self.doc["meshes"].append({"primitives": [prim]})
        return len(self.doc["meshes"]) - 1

    def node(self, root: bool = True, **fields) -> int:
        self.doc["nodes"].append(fields)
        i = len(self.doc["nodes"]) - 1
        if root:
            self.doc["scenes"][0]["nodes"].append(i)
        return i

    def material(self, **fields) -> int:
        self.doc.setdefault("materials", []).append(fields)
        return len(self.doc["materials"]) - 1

    def light(self, **fields) -> int:
        ext = self.doc.setdefault("extensions", {}).setdefault("KHR_lights_punctual", {"lights": []})
        ext["lights"].append(fields)
        self.use("KHR_lights_punctual")
        return len(ext["lights"]) - 1

    def camera(self, **fields) -> int:
        self.doc.setdefault("cameras", []).append(fields)
        return len(self.doc["cameras"]) - 1

    def use(self, name: str) -> None:
        used = self.doc.setdefault("extensionsUsed", [])
        if name not in used:
            used.append(name)

    def _document(self, uri: str | None) -> dict:
        doc = json.loads(json.dumps(self.doc))
        self._align()
        doc["buffers"] = [{"byteLength": len(self.blob)}]
        if uri is not None:
            doc["buffers"][0]["uri"] = uri
        for key in ("meshes", "accessors", "bufferViews"):
            if not doc[key]:
                del doc[key]
        if not self.blob:
            del doc["buffers"]
        return doc

    def write_gltf(self, path: Path, external: bool = False) -> Path:
        path = Path(path)
        if external:
            bin_path = path.with_suffix(".bin")
            bin_path.write_bytes(bytes(self.blob))
            doc = self._document(bin_path.name)
        else:
            doc = self._document("data:application/octet-stream;base64,"
                                 + base64.b64encode(bytes(self.blob)).decode("ascii"))
        path.write_text(json.dumps(doc, indent=1))
        return path

    def write_glb(self, path: Path) -> Path:
        doc = self._document(None)
        text = json.dumps(doc).encode("utf-8")
        text += b" " * (-len(text) % 4)
        blob = bytes(self.blob)
        body = struct.pack("<II", len(text), 0x4E4F534A) + text
        if blob:
            body += struct.pack("<II", len(blob), 0x004E4942) + blob
        Path(path).write_bytes(struct.pack("<III", 0x46546C67, 2, 12 + len(body)) + body)
        return Path(path)


def box(lo, hi):
    """(8, 3) corners and (12, 3) triangles of an axis-aligned box, faces wound
    counter-clockwise seen from outside (normals (b - a) x (c - a) point out)."""
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1])
                        for z in (lo[2], hi[2])])
    quads = [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)]
    tris = []
    centre = corners.mean(axis=0)
    for a, b, c, d in quads:
        for t in ((a, b, c), (a, c, d)):
            p = corners[list(t)]
            n = np.cross(p[1] - p[0], p[2] - p[0])
            tris.append(t if n @ (p.mean(axis=0) - centre) > 0 else t[::-1])
    return corners, np.array(tris)
