"""The benchmark runner finds every bench_*.py and runs it at smoke size."""

import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_runner_runs_the_rates_benchmark_at_smoke_size():
    done = subprocess.run([sys.executable, "-m", "benchmarks", "--smoke", "rates"], cwd=ROOT,
                          capture_output=True, text=True, timeout=300, stdin=subprocess.DEVNULL)
    assert done.returncode == 0, done.stderr
    assert "## rates" in done.stdout
    # Both methods report a speed-up ratio of the vectorised pass over a per-well loop.
    assert len(re.findall(r"w/s\s+\d+\.\dx", done.stdout)) == 2
