"""Benchmark: start-up time of a command that draws nothing.

Target (issue: hardening): `crystalview sites Fe` in at most 4x the time of
`python -c "import numpy"`, whole process against whole process, measured in
the same run.  Prints medians and the ratio; also lists the other non-drawing
commands for comparison.
"""
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

RUNS = 9
BIN = Path(sys.executable).parent
CV = shutil.which("crystalview", path=str(BIN)) or "crystalview"


def median_time(cmd):
    times = []
    for _ in range(RUNS):
        t = time.perf_counter()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main():
    base = median_time([sys.executable, "-c", "import numpy"])
    print(f"python -c 'import numpy': median {base * 1000:.0f} ms")
    for argv in (["sites", "Fe"], ["info", "Cu"], ["fit", "C", "Fe"], ["slip", "Cu", "--axis", "[001]"]):
        t = median_time([CV, *argv])
        flag = "  (target <= 4)" if argv == ["sites", "Fe"] else ""
        print(f"crystalview {' '.join(argv)}: median {t * 1000:.0f} ms; ratio {t / base:.2f}{flag}")


if __name__ == "__main__":
    main()
