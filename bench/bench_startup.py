"""Benchmark: CPU time of `sweeper --help` and of `sweeper check --help` in a fresh interpreter.

Run:  .venv/bin/python bench/bench_startup.py [--repeats 10]

Each command runs as a child process (the installed console script's module, `python -m`
style, so no shell is timed); its user + system CPU time comes from the operating system's
accounting of the finished child (resource.getrusage(RUSAGE_CHILDREN) before and after), which
counts CPU seconds, not wall time, so other load on the machine changes it little. Printed:
median, lowest and highest over the repeats; the bare interpreter (`python -c pass`) beside
them as the floor. Target for `sweeper --help`: at most 0.35 s of CPU.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys

COMMANDS = {
    "python -c pass (floor)": [sys.executable, "-c", "pass"],
    "sweeper --help": [sys.executable, "-c", "from sweeper.cli import main; main(['--help'])"],
    "sweeper check --help": [sys.executable, "-c", "from sweeper.cli import main; main(['check', '--help'])"],
}


def cpu_seconds(argv: list[str]) -> float:
    """User + system CPU seconds of one finished child process."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=10)
    args = parser.parse_args()
    samples: dict[str, list[float]] = {name: [] for name in COMMANDS}
    for _ in range(args.repeats):  # interleaved, so a burst of load hits every command alike
        for name, argv in COMMANDS.items():
            samples[name].append(cpu_seconds(argv))
    print(f"CPU time per command (user + system), {args.repeats} runs each, interleaved")
    print(f"{'command':<26}{'median s':>10}{'min s':>8}{'max s':>8}")
    for name, values in samples.items():
        print(f"{name:<26}{statistics.median(values):>10.3f}{min(values):>8.3f}{max(values):>8.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
