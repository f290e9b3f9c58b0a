"""``refrender info FILE``: metadata and a noise summary of an EXR or state file."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..errors import ImageError


def add_parser(sub) -> None:
    p = sub.add_parser("info", help="show the metadata and noise of a rendered EXR or state file, "
                       "or what a glTF file or USD stage imports as")
    p.add_argument("file", help="an EXR written by refrender, its .state file, a .gltf/.glb file or "
                   "a USD stage")
    p.add_argument("--json", action="store_true", help="print machine-readable JSON")
    p.add_argument("--gltf-scene", type=int, metavar="INDEX", help="glTF files: the scene to read")
    p.add_argument("--camera", metavar="PRIM_PATH", help="USD stages: the camera to describe")
    from .render import add_gltf_light_options
    add_gltf_light_options(p)
    p.set_defaults(run=run)


def _noise(mean, var) -> dict:
    from ..result import noise_summary
    return noise_summary(mean, var)


def describe(path: Path) -> dict:
    """Metadata and a noise summary recomputed from the pixels."""
    if path.suffix.lower() == ".state":
        from ..result import Result
        res = Result.from_state(path)
        info = res.metadata()
        info["noise"] = _noise(res.mean, res.variance)
        info["file"] = str(path)
        return info
    from ..io import read_exr
    img = read_exr(path)
    info = dict(img.metadata)
    info["file"] = str(path)
    info["channels"] = sorted(img.channels)
    from ..color import space_of
    info["chromaticities"] = (space_of(img.chromaticities) or list(img.chromaticities)
                              if img.chromaticities is not None else None)
    info["size"] = [int(img.shape[1]), int(img.shape[0])]
    if "variance" in img.layers():
        info["noise"] = _noise(img.rgb().astype(np.float64), img.layer("variance").astype(np.float64))
    else:
        info["noise"] = None
    return info


def layer_listing(channels) -> str:
    """``beauty R,G,B (+variance); direct R,G,B (+variance); depth Z`` from channel names."""
    order = {c: i for i, c in enumerate("RGBAXYZ")}
    groups: dict = {}
    for ch in channels:
        layer, _, name = ch.rpartition(".")
        groups.setdefault(layer or "beauty", []).append(name)
    out = []
    for layer in sorted(groups, key=lambda k: (k != "beauty", k)):
        if layer.endswith(".variance") or layer == "variance":
            continue
        names = sorted(groups[layer], key=lambda c: (order.get(c, 99), c))
        var = "variance" if layer == "beauty" else f"{layer}.variance"
        out.append(f"{layer} {','.join(names)}" + (" (+variance)" if var in groups else ""))
    return "; ".join(out)


def _value(v) -> str:
    """A value as JSON (null, true, lists), floats rounded to 6 significant digits."""
    def rounded(x):
        if isinstance(x, float):
            return float(f"{x:.6g}")
        if isinstance(x, (list, tuple)):
            return [rounded(y) for y in x]
        if isinstance(x, dict):
            return {k: rounded(y) for k, y in x.items()}
        return x
    if isinstance(v, str):
        return v
    return json.dumps(rounded(v), ensure_ascii=False)


#: width of the key column
W = 23


def _flat(prefix, d, out):
    for key in sorted(d):
        v = d[key]
        if isinstance(v, dict):
            _flat(f"{prefix}{key}.", v, out)
        else:
            out.append((prefix + key, v))


def _gltf_info(args) -> int:
    """What the import of a glTF file makes of it (meshes ... ignored features)."""
    from ..scene.gltf import import_gltf
    report = import_gltf(args.file, light_units=args.light_units,
                         light_range=args.light_range, gltf_scene=args.gltf_scene).report()
    if args.json:
        print(json.dumps(report, indent=2, sort_keys=True))
        return 0
    ignored = report.pop("ignored")
    for key in ("meshes", "primitives", "instances", "triangles", "materials", "lights"):
        print(f"{key:>{W}}: {report[key]}")
    print(f"{'cameras':>{W}}: {len(report['cameras'])}"
          + (f" ({', '.join(report['cameras'])})" if report["cameras"] else ""))
    if not ignored:
        print(f"{'ignored':>{W}}: nothing")
    for feature, why in sorted(ignored.items()):
        print(f"{'ignored':>{W}}: {feature}: {why}")
    return 0


def _usd_info(args) -> int:
    """What the translation of a USD stage imports, approximates and ignores."""
    from ..scene.usd import translate_stage
    report = translate_stage(args.file, camera=args.camera).report()
    if args.json:
        print(json.dumps(report, indent=2, sort_keys=True))
        return 0
    for key in ("layers", "cameras"):
        print(f"{key:>{W}}: {', '.join(report[key]) or 'none'}")
    print(f"{'camera':>{W}}: {report['camera']}")
    film = report["film"]
    print(f"{'film':>{W}}: {film['width']} x {film['height']}")
    for key in ("objects", "triangles", "materials", "lights"):
        print(f"{key:>{W}}: {report[key]}")
    for key in ("imported", "approximated", "ignored", "notes"):
        items = report[key]
        if not items:
            print(f"{key:>{W}}: nothing")
        for item in items:
            print(f"{key:>{W}}: {item}")
    return 0


def run(args) -> int:
    from ..overnight import format_duration
    path = Path(args.file)
    if not path.exists():
        raise ImageError(f"{path}: no such file")
    if path.suffix.lower() in (".gltf", ".glb"):
        return _gltf_info(args)
    from ..scene.usd import is_usd
    if is_usd(path):
        return _usd_info(args)
    info = describe(path)
    if args.json:
        print(json.dumps(info, indent=2, sort_keys=True))
        return 0
    noise = info.pop("noise", None)
    stats = info.pop("stats", {}) or {}
    run_info = info.pop("run", {}) or {}
    checks = run_info.pop("error_checks", None)
    reason = run_info.pop("stop_reason", None)   # shown as 'stop_reason' and 'stopped by'
    channels = info.pop("channels", None)
    slots = info.get("layer_slots")
    for key in sorted(info):
        print(f"{key:>{W}}: {_value(info[key])}")
    if channels is not None:
        print(f"{'channels':>{W}}: {layer_listing(channels)}")
    elif slots:
        print(f"{'layers':>{W}}: {', '.join(slots)}")
    rows = []
    _flat("stats.", stats, rows)
    _flat("run.", run_info, rows)
    for key, value in rows:
        print(f"{key:>{W}}: {_value(value)}")
    if run_info:
        done = "complete" if run_info.get("complete") else "unfinished: resume with --resume"
        print(f"{'stopped by':>{W}}: {reason} ({done})")
    if "seconds" in stats:
        sessions = run_info.get("sessions")
        extra = f" in {sessions} session{'s' if sessions != 1 else ''}" if sessions else ""
        print(f"{'time spent':>{W}}: {format_duration(float(stats['seconds']))}{extra}")
    if checks:
        k, v = checks[-1]
        print(f"{'error checks':>{W}}: {len(checks)}, last at {k} spp: 95th percentile "
              f"{100 * v:.3g}% (target {100 * run_info['budget']['target_error']:.3g}%)"
              if run_info.get("budget", {}).get("target_error") else
              f"{'error checks':>{W}}: {len(checks)}")
    if noise and noise.get("rel_error_mean") is not None:
        print(f"{'noise':>{W}}: relative standard error mean {100 * noise['rel_error_mean']:.3g}%, "
              f"95th percentile {100 * noise['rel_error_p95']:.3g}% (luminance; floor 1e-3 of "
              f"the mean luminance)")
    elif noise is None:
        print(f"{'noise':>{W}}: no variance layer (not a refrender image?)")
    else:
        print(f"{'noise':>{W}}: no estimate (fewer than 2 samples per pixel)")
    return 0
