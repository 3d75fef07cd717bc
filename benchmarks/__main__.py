"""Run every benchmark module ``benchmarks/bench_*.py``: ``python -m benchmarks [--smoke]``.

Each module exposes ``main(smoke: bool = False) -> str`` returning its printed table;
``--smoke`` runs tiny sizes (the test suite uses it to prove the benchmarks still run).
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys

import benchmarks


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__)
    parser.add_argument("--smoke", action="store_true", help="tiny sizes, seconds not minutes")
    parser.add_argument("names", nargs="*", help="only these benchmarks (e.g. engine rates)")
    args = parser.parse_args(argv)
    found = sorted(m.name for m in pkgutil.iter_modules(benchmarks.__path__)
                   if m.name.startswith("bench_"))
    wanted = [n for n in found if not args.names or n.removeprefix("bench_") in args.names]
    for name in wanted:
        module = importlib.import_module(f"benchmarks.{name}")
        print(f"## {name.removeprefix('bench_')}", flush=True)
        print(module.main(smoke=args.smoke), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
