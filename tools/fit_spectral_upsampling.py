"""Fit (or refit) the RGB-to-spectrum coefficient table of the spectral mode.

    python tools/fit_spectral_upsampling.py [--resolution 32] [--white D65] [--out table.npz]

The renderer fits the table itself on first use and caches it (see
refrender/spectral/upsample.py); this script does the same on demand and
reports the fit: resolution, time, and the CIELAB Delta E of the cells.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from refrender.spectral import upsample  # noqa: E402


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--resolution", type=int, default=upsample.RESOLUTION, help="cells per axis (default %(default)s)")
    p.add_argument("--white", default="D65", help="white illuminant (A, D50, D65, F2, F11)")
    p.add_argument("--out", type=Path, help="also write the table to this .npz file")
    a = p.parse_args(argv)
    t0 = time.perf_counter()
    coeffs, errors, zs = upsample.fit_table(a.resolution, a.white)
    seconds = time.perf_counter() - t0
    print(f"resolution {a.resolution} ({3 * a.resolution ** 3} cells), fitted in {seconds:.1f} s")
    print(f"CIELAB Delta E of the cells: median {np.median(errors):.2e}, 99th percentile "
          f"{np.percentile(errors, 99):.2e}, max {errors.max():.2e}")
    if a.out:
        np.savez(a.out, coefficients=coeffs, errors=errors, z_grid=zs)
        print(f"wrote {a.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
