"""Entry point and the one error boundary of the command line.

Every subcommand is a function ``run(args) -> int``.  A RefrenderError (bad
scene, bad option, unreadable file) becomes one line on stderr and exit
status 2; Ctrl-C exits 130; anything else is a bug and shows its traceback.
"""
from __future__ import annotations

import argparse
import sys
import warnings
from typing import Sequence

from .. import __version__
from ..errors import RefrenderError


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors: ``refrender: error: …`` and a hint to --help."""

    def error(self, message):
        self.exit(2, f"refrender: error: {self.prog.split()[-1]}: {message} "
                     f"(see '{self.prog} --help')\n")


def _parser() -> argparse.ArgumentParser:
    from . import info, render, suite, validate
    from . import merge as merge_cli
    p = _Parser(prog="refrender", description="Ground-truth Monte Carlo path tracing "
                                "with per-pixel error bars.")
    p.add_argument("--version", action="version", version=f"refrender {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    render.add_parser(sub)
    info.add_parser(sub)
    validate.add_parser(sub)
    merge_cli.add_parser(sub)
    suite.add_parser(sub)
    return p


def _warning_line(message, category, filename, lineno, file=None, line=None):
    print(f"refrender: warning: {message}", file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:          # argparse printed help, the version or a one-line error
        return 2 if exc.code else 0
    previous, warnings.showwarning = warnings.showwarning, _warning_line
    try:
        return int(args.run(args))
    except RefrenderError as exc:
        print(f"refrender: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("refrender: interrupted", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = previous


def entry() -> None:
    raise SystemExit(main())
