"""Benchmark: void analysis of a 100,000-atom FCC cell with 1 % vacancies
against one bare scipy.spatial.Delaunay of the same atom positions.

Target: find_voids at most 2x the bare Delaunay, measured in the same run.
Each measurement runs in a fresh child process so that its peak memory
(peak resident set size) is its own.  Prints the median of --runs runs.

    .venv/bin/python bench/bench_voids.py [--runs 3] [--atoms 100000]
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


def _child(mode, n_atoms):
    import resource

    d = _crystal(n_atoms)
    t0 = time.perf_counter()
    if mode == "delaunay":
        from scipy.spatial import Delaunay

        Delaunay(d.positions)
        extra = {}
    else:
        from crystalview.analysis.voids import find_voids

        v = find_voids(d)
        extra = {"holes": len(v), "channels": int(len(v.channels)),
                 "kinds": {k: r["count"] for k, r in v.summary().items()}}
    dt = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps({"seconds": dt, "peak_rss_MB": peak_mb, "atoms": len(d), **extra}))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--atoms", type=int, default=100_000)
    ap.add_argument("--child", choices=["delaunay", "voids"])
    a = ap.parse_args()
    if a.child:
        _child(a.child, a.atoms)
        return
    res = {"delaunay": [], "voids": []}
    for _ in range(a.runs):
        for mode in ("delaunay", "voids"):
            out = subprocess.run([sys.executable, __file__, "--child", mode, "--atoms", str(a.atoms)],
                                 capture_output=True, text=True, check=True)
            res[mode].append(json.loads(out.stdout.strip().splitlines()[-1]))
    tb = statistics.median(r["seconds"] for r in res["delaunay"])
    tv = statistics.median(r["seconds"] for r in res["voids"])
    last = res["voids"][-1]
    print(f"atoms: {last['atoms']:,} (FCC Cu, 1 % vacancies); runs: {a.runs}")
    print(f"bare scipy Delaunay: median {tb:.2f} s, peak RSS {max(r['peak_rss_MB'] for r in res['delaunay']):.0f} MB")
    print(f"find_voids:          median {tv:.2f} s, peak RSS {max(r['peak_rss_MB'] for r in res['voids']):.0f} MB "
          f"({last['holes']:,} holes {last['kinds']}, {last['channels']:,} channels)")
    print(f"ratio find_voids / Delaunay: {tv / tb:.2f}  (target <= 2.0)")


if __name__ == "__main__":
    main()
