"""argparse with one-line errors, for every command line of the project."""
from __future__ import annotations

import argparse


class OneLineArgumentParser(argparse.ArgumentParser):
    """An ArgumentParser whose errors are one line on stderr, exit status 2:
    ``PROG: error: MESSAGE (see 'PROG --help')`` instead of the usage block."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {' '.join(str(message).split())} (see '{self.prog} --help')\n")
