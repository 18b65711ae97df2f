"""Benchmark: a 1,000,000-atom FCC crystal with true radii to a 1920x1080 PNG
(`crystalview render`, whole process) against pyvista's fixed-size point
sprites (render_points_as_spheres=True) for the same positions, whole
process, in the same run.  Prints the medians and the ratio (target <= 1.5).

    .venv/bin/python bench/bench_render.py [--runs 3] [--repeat 63]
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time

BASELINE = r'''
import sys
import crystalview as cv
import pyvista as pv
pv.OFF_SCREEN = True
c = cv.build("Cu", repeat=(N, N, N))
p = pv.Plotter(off_screen=True, window_size=(1920, 1080))
p.set_background("white")
p.add_points(c.positions, color="#7d8fa3", point_size=4, render_points_as_spheres=True)
p.enable_parallel_projection()
p.view_vector((1, 1, 1))
p.screenshot(sys.argv[1])
'''


def timed(cmd):
    t = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True)
    dt = time.perf_counter() - t
    if r.returncode != 0:
        sys.exit(f"failed: {' '.join(cmd)}\n{r.stderr[-2000:]}")
    return dt


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--repeat", type=int, default=63, help="cells per side (63 -> 1,000,188 atoms)")
    a = ap.parse_args()
    py = sys.executable
    n = a.repeat
    with tempfile.TemporaryDirectory() as d:
        base, ours = [], []
        for k in range(a.runs):
            base.append(timed([py, "-c", BASELINE.replace("N, N, N", f"{n}, {n}, {n}"), os.path.join(d, f"b{k}.png")]))
            ours.append(timed([py, "-m", "crystalview", "render", "Cu", "--repeat", str(n), str(n), str(n),
                               "--style", "space-filling", "--view", "[111]", "--size", "1920", "1080",
                               "-o", os.path.join(d, f"o{k}.png")]))
        mb, mo = statistics.median(base), statistics.median(ours)
        atoms = 4 * n ** 3
        print(f"atoms: {atoms:,}; image 1920 x 1080; runs: {a.runs}")
        print(f"pyvista point sprites (fixed size), whole process: median {mb:.2f} s  {['%.2f' % x for x in base]}")
        print(f"crystalview render, true radii, whole process:    median {mo:.2f} s  {['%.2f' % x for x in ours]}")
        print(f"ratio ours / sprites: {mo / mb:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
