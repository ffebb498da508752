"""Wall time of `iqdemod --help` and `iqdemod --version` (issue 11: median of 10 runs at most 0.3 s).

Each run is a fresh process of the installed script, as a user would start it. For comparison the
same help is timed with every command module imported first, which is what a group that imported
its commands to list them would cost (the reason the listing comes from a table instead).

    python benchmarks/cli_startup.py [--runs 10]

Prints one line per case: median, min and max wall seconds. Exit status 0 when both medians of the
installed script are within the target.
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import subprocess
import sys
import time

TARGET_S = 0.3
EAGER = ("import sys\nfrom iqdemod_cli.commands import COMMANDS\nimport importlib\n"
         "[importlib.import_module('iqdemod_cli.commands.' + n) for n in COMMANDS]\n"
         "from iqdemod_cli.main import main\nmain(['--help'], prog_name='iqdemod')\n")


def wall(cmd: list[str], runs: int) -> list[float]:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
        times.append(time.perf_counter() - t0)
    return times


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=10)
    args = parser.parse_args()
    exe = shutil.which("iqdemod")
    if exe is None:
        print("the iqdemod script is not installed (pip install -e .)", file=sys.stderr)
        return 2
    cases = [
        ("iqdemod --help", [exe, "--help"]),
        ("iqdemod --version", [exe, "--version"]),
        ("python -c pass (interpreter alone)", [sys.executable, "-c", "pass"]),
        ("help with every command module imported", [sys.executable, "-c", EAGER]),
    ]
    medians = {}
    for name, cmd in cases:
        wall(cmd, 1)  # warm the file cache
        t = wall(cmd, args.runs)
        medians[name] = statistics.median(t)
        print(f"{name:42s} median {medians[name]:.3f} s  (min {min(t):.3f}, max {max(t):.3f}, {args.runs} runs)")
    ok = medians["iqdemod --help"] <= TARGET_S and medians["iqdemod --version"] <= TARGET_S
    print(f"target {TARGET_S} s: {'met' if ok else 'NOT met'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
