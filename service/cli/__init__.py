"""The ``veramp`` command line: one module per command group, thin over the same engine functions
the REST service calls.

Bad input prints one line ``veramp: error: ...`` on stderr and exits with status 2; nothing the
user types produces a traceback.
"""

from __future__ import annotations

import importlib
import sys

from contraction.errors import VerampError

from .parser import build_parser

__all__ = ["build_parser", "main"]


def main(argv: list[str] | None = None) -> int:
    """Run one command; returns the exit status (0 ok, 1 unhealthy service, 2 bad input, 130 interrupted)."""
    args = build_parser().parse_args(argv)
    module, function = args.func.split(":")
    try:
        run = getattr(importlib.import_module(f"{__name__}.{module}"), function)
        return run(args)
    except VerampError as exc:
        print(f"veramp: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("veramp: interrupted", file=sys.stderr)
        return 130
    except MemoryError:
        print("veramp: error: out of memory; lower the problem size or use the network engine",
              file=sys.stderr)
        return 2
