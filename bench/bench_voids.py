"""Benchmark: void analysis of a 100,000-atom FCC cell with 1 % vacancies
against one bare scipy.spatial.Delaunay of the same atom positions displaced
by 1e-6 A (a perfect lattice triangulates several times slower undisplaced,
only because its points are co-spherical).

Target: find_voids at most 1.5x the time and 2x the peak memory of that
triangulation, both measured in the same run.  Each measurement runs in a
fresh child process; its peak memory is the peak resident set size
(ru_maxrss) less the resident size just before the call, so the interpreter,
the libraries and the crystal are not counted.  Prints the medians of --runs
runs and the ratios.  --big also runs find_voids once on 1,000,000 atoms
(about 1.5 min on 2 cores) and prints its time and peak.

    .venv/bin/python bench/bench_voids.py [--runs 3] [--atoms 100000] [--big]
"""
from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time


def _crystal(n_atoms):
    import numpy as np

    import crystalview as cv

    m = max(1, int((n_atoms / 4) ** (1 / 3)))
    c = cv.build("Cu", repeat=(m, m, -(-n_atoms // (4 * m * m))))
    rng = np.random.default_rng(0)
    gone = rng.choice(len(c), size=len(c) // 100, replace=False)
    d = c.delete(gone)
    d.record_defect("vacancy", count=int(len(gone)), seed=0)
    return d


def _rss_now_mb():
    with open("/proc/self/statm") as f:
        import os

        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2 ** 20


def _child(mode, n_atoms):
    import resource

    import numpy as np

    d = _crystal(n_atoms)
    if mode == "delaunay":
        from scipy.spatial import Delaunay

        pts = d.positions + np.random.default_rng(1).uniform(-1e-6, 1e-6, d.positions.shape)
    else:
        from crystalview.analysis.voids import find_voids
    before = _rss_now_mb()
    t0 = time.perf_counter()
    if mode == "delaunay":
        Delaunay(pts)
        extra = {}
    else:
        v = find_voids(d, max_atoms=len(d))
        extra = {"holes": len(v), "channels": int(len(v.channels)),
                 "kinds": {k: r["count"] for k, r in v.summary().items()}}
    dt = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps({"seconds": dt, "peak_rss_MB": peak_mb, "peak_above_MB": peak_mb - before,
                      "atoms": len(d), **extra}))


def _run(mode, atoms):
    out = subprocess.run([sys.executable, __file__, "--child", mode, "--atoms", str(atoms)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--atoms", type=int, default=100_000)
    ap.add_argument("--big", action="store_true", help="also one find_voids of 1,000,000 atoms")
    ap.add_argument("--child", choices=["delaunay", "voids"])
    a = ap.parse_args()
    if a.child:
        _child(a.child, a.atoms)
        return
    res = {"delaunay": [], "voids": []}
    for _ in range(a.runs):
        for mode in ("delaunay", "voids"):
            res[mode].append(_run(mode, a.atoms))
    tb = statistics.median(r["seconds"] for r in res["delaunay"])
    tv = statistics.median(r["seconds"] for r in res["voids"])
    mb = statistics.median(r["peak_above_MB"] for r in res["delaunay"])
    mv = statistics.median(r["peak_above_MB"] for r in res["voids"])
    last = res["voids"][-1]
    print(f"atoms: {last['atoms']:,} (FCC Cu, 1 % vacancies); runs: {a.runs}")
    print(f"baseline, scipy Delaunay of the positions displaced by 1e-6 A: median {tb:.2f} s, "
          f"peak {mb:.0f} MB above the start (peak RSS {res['delaunay'][-1]['peak_rss_MB']:.0f} MB)")
    print(f"find_voids: median {tv:.2f} s, peak {mv:.0f} MB above the start "
          f"(peak RSS {last['peak_rss_MB']:.0f} MB; {last['holes']:,} holes {last['kinds']}, "
          f"{last['channels']:,} channels)")
    print(f"time ratio find_voids / Delaunay: {tv / tb:.2f}  (target <= 1.5)")
    print(f"peak memory ratio find_voids / Delaunay: {mv / mb:.2f}  (target <= 2.0)")
    if a.big:
        r = _run("voids", 1_000_000)
        print(f"1,000,000-atom cell ({r['atoms']:,} atoms): find_voids {r['seconds']:.1f} s, "
              f"peak {r['peak_above_MB']:.0f} MB above the start (peak RSS {r['peak_rss_MB']:.0f} MB), "
              f"{r['holes']:,} holes")


if __name__ == "__main__":
    main()
