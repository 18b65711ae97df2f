"""Benchmark: a small report figure as a whole command.  One cell of Cu at
85 mm, 300 dpi: `crystalview render Cu -o cu.png --width 85mm --dpi 300`
against the same figure as SVG and against `python -c "import numpy"`, all
in the same run.  Prints the medians and the ratios (targets: PNG <= 6x
numpy's import, PNG <= 1.5x the SVG).

    .venv/bin/python bench/bench_figure_small.py [--runs 5]
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time


def timed(cmd):
    t = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True)
    dt = time.perf_counter() - t
    if r.returncode != 0:
        sys.exit(f"failed: {' '.join(cmd)}\n{r.stderr[-2000:]}")
    return dt


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    a = ap.parse_args()
    py = sys.executable
    with tempfile.TemporaryDirectory() as d:
        base, png, svg = [], [], []
        for k in range(a.runs):
            base.append(timed([py, "-c", "import numpy"]))
            png.append(timed([py, "-m", "crystalview", "render", "Cu", "--width", "85mm", "--dpi", "300",
                              "-o", os.path.join(d, f"c{k}.png")]))
            svg.append(timed([py, "-m", "crystalview", "render", "Cu", "--width", "85mm", "--dpi", "300",
                              "-o", os.path.join(d, f"c{k}.svg")]))
        mb, mp, ms = (statistics.median(x) for x in (base, png, svg))
        print(f"runs: {a.runs}; one cell of Cu, 85 mm at 300 dpi")
        print(f"python -c 'import numpy':      median {mb:.3f} s  {['%.3f' % x for x in base]}")
        print(f"crystalview render ... .png:   median {mp:.3f} s  {['%.3f' % x for x in png]}")
        print(f"crystalview render ... .svg:   median {ms:.3f} s  {['%.3f' % x for x in svg]}")
        print(f"ratio PNG / import numpy: {mp / mb:.1f} (target <= 6)")
        print(f"ratio PNG / SVG:          {mp / ms:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
