#!/usr/bin/env python3
"""Compare a test frame with a refrender reference (see README, "Comparing a frame").

    python tools/diff.py REFERENCE.exr TEST.exr [--report DIR] [--json FILE] [--fail-if relmse>0.01]
"""
import sys

from refrender.compare.cli import main

if __name__ == "__main__":
    sys.exit(main())
