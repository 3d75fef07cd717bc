"""Starting the command line: CPU seconds of ``inhibkin --help`` against the bare imports.

Each command runs in a fresh interpreter (best of a few runs, user + system CPU of the
child, so a busy machine's waiting is not counted): importing numpy, pandas and
scipy.optimize (the floor any stage pays), ``inhibkin --help``, ``inhibkin <stage>
--help`` for every stage, and ``import inhibkin.reporting.report`` (what a report stage
loads before its work).
"""

from __future__ import annotations

import resource
import subprocess
import sys

_FULL_REPEATS = 3
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


def _stage_commands(smoke: bool) -> dict:
    """``inhibkin <stage> --help`` of every stage (of two in the smoke run)."""
    from inhibkin.cli import SUBCOMMANDS

    names = [c.name for c in SUBCOMMANDS if c.name != "report"]
    return {f"inhibkin {name} --help": f"from inhibkin.cli import main; main([{name!r}, '--help'])"
            for name in names[:2 if smoke else None]}


def main(smoke: bool = False) -> str:
    """CPU seconds of each command and its ratio to the bare imports."""
    repeats = _SMOKE_REPEATS if smoke else _FULL_REPEATS
    commands = {**_COMMANDS, **_stage_commands(smoke)}
    times = {name: _cpu_seconds(code, repeats) for name, code in commands.items()}
    floor = times["import numpy, pandas, scipy.optimize"]
    lines = [f"{'command':<40}{'CPU s':>8}{'x imports':>11}"]
    lines += [f"{name:<40}{seconds:>8.2f}{seconds / floor:>10.2f}x"
              for name, seconds in times.items()]
    helps = {name: seconds for name, seconds in times.items() if name.endswith("--help")}
    worst = max(helps, key=helps.get)
    lines.append(f"slowest --help: {worst}, {helps[worst] / floor:.2f}x the bare imports "
                 f"(goal ≤ {_GOAL:g}x: {'met' if helps[worst] / floor <= _GOAL else 'NOT met'})")
    return "\n".join(lines)


if __name__ == "__main__":
    print(main(smoke="--smoke" in sys.argv[1:]))
