"""The ``inhibkin`` command line: one subcommand per stage, a thin layer over the API."""

from __future__ import annotations

import argparse
import sys

__all__ = ["main"]


def _demo(args) -> int:
    from .demo import run_demo

    print(run_demo())
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="inhibkin", description=__doc__)
    sub = parser.add_subparsers(dest="command", required=True)
    demo = sub.add_parser("demo", help="run the demo flow on invented data")
    demo.set_defaults(handler=_demo)
    return parser


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    return args.handler(args)


if __name__ == "__main__":
    sys.exit(main())
