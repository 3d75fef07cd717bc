"""Starting the command line: CPU seconds of ``inhibkin --help`` against the bare imports.

Each command runs in a fresh interpreter (best of a few runs, user + system CPU of the
child, so a busy machine's waiting is not counted): importing numpy, pandas and
scipy.optimize (the floor any stage pays), ``inhibkin --help``, ``inhibkin report
--help``, and ``import inhibkin.reporting.report`` (what a report stage loads before its work).
"""

from __future__ import annotations

import resource
import subprocess
import sys

_FULL_REPEATS = 5
_SMOKE_REPEATS = 1
# The goal: --help within 1.3x of the bare imports.
_GOAL = 1.3

_COMMANDS = {
    "import numpy, pandas, scipy.optimize": "import numpy, pandas, scipy.optimize",
    "inhibkin --help": "from inhibkin.cli import main; main(['--help'])",
    "inhibkin report --help": "from inhibkin.cli import main; main(['report', '--help'])",
    "import inhibkin.reporting.report": "import inhibkin.reporting.report",
}


def _cpu_seconds(code: str, repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        subprocess.run([sys.executable, "-c", code], check=False, capture_output=True)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        best = min(best, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime))
    return best


def main(smoke: bool = False) -> str:
    """CPU seconds of each command and its ratio to the bare imports."""
    repeats = _SMOKE_REPEATS if smoke else _FULL_REPEATS
    times = {name: _cpu_seconds(code, repeats) for name, code in _COMMANDS.items()}
    floor = times["import numpy, pandas, scipy.optimize"]
    lines = [f"{'command':<40}{'CPU s':>8}{'x imports':>11}"]
    lines += [f"{name:<40}{seconds:>8.2f}{seconds / floor:>10.2f}x"
              for name, seconds in times.items()]
    lines.append(f"goal: --help within {_GOAL:g}x of the bare imports")
    return "\n".join(lines)


if __name__ == "__main__":
    print(main())
