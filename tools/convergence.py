#!/usr/bin/env python3
"""Convergence study (see README, "Convergence studies").

    python tools/convergence.py SCENE --config mis:strategy=mis --config bsdf:strategy=bsdf \
        --max-spp 256 --seeds 0,1,2 [--reference REF.exr] --out DIR
    python tools/convergence.py --study study.json --out DIR
"""
import sys

from refrender.study import main

if __name__ == "__main__":
    sys.exit(main())
