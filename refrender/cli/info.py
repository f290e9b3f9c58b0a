"""``refrender info FILE``: metadata and a noise summary of an EXR or state file."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..errors import ImageError


def add_parser(sub) -> None:
    p = sub.add_parser("info", help="show the metadata and noise of a rendered EXR or state file")
    p.add_argument("file", help="an EXR written by refrender, or its .state file")
    p.add_argument("--json", action="store_true", help="print machine-readable JSON")
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
    info["size"] = [int(img.shape[1]), int(img.shape[0])]
    if "variance" in img.layers():
        info["noise"] = _noise(img.rgb().astype(np.float64), img.layer("variance").astype(np.float64))
    else:
        info["noise"] = None
    return info


def run(args) -> int:
    path = Path(args.file)
    if not path.exists():
        raise ImageError(f"{path}: no such file")
    info = describe(path)
    if args.json:
        print(json.dumps(info, indent=2, sort_keys=True))
        return 0
    noise = info.pop("noise", None)
    stats = info.pop("stats", {}) or {}
    for key in sorted(info):
        print(f"{key:>16}: {info[key]}")
    for key in sorted(stats):
        print(f"{'stats.' + key:>16}: {stats[key]}")
    if noise and noise.get("rel_error_mean") is not None:
        print(f"{'noise':>16}: relative standard error mean {100 * noise['rel_error_mean']:.3g}%, "
              f"95th percentile {100 * noise['rel_error_p95']:.3g}%")
    elif noise is None:
        print(f"{'noise':>16}: no variance layer (not a refrender image?)")
    return 0
