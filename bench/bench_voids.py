"""Benchmark: void analysis of a 100,000-atom FCC cell with 1 % vacancies
against one bare scipy.spatial.Delaunay of the same atom positions displaced
by 1e-6 A (a perfect lattice triangulates several times slower undisplaced,
only because its points are co-spherical).

Target: find_voids at most 1.5x the time and 2x the peak memory of that
triangulation, both measured in the same run.  Each measurement runs in a
fresh child process (scipy.spatial imported before the clock starts, for
both).  find_voids triangulates its slabs in forked worker processes, so its
memory is that of the whole process tree: this script samples, every few
milliseconds, the proportional set size (Pss, shared pages split between the
processes that share them) of the child and of its workers (read at each new
high of their resident sizes, which are read every 4 ms), and reports the
peak of the sum less the child's Pss just before the call, so the
interpreter, the libraries and the crystal are not counted.  The child's own
peak resident set size (ru_maxrss) is printed beside it.  Prints the medians
of --runs runs and the ratios, and where find_voids spends its time (points
and images, slab triangulations in the workers, join and holes).  --big also
runs find_voids once on 1,000,000 atoms (about 50 s on two free cores, 70-85 s
when other jobs hold a core; 3.4 GB) and prints its time, split and peak;
--big-alloy the same for 1,000,000 atoms of Cu-10 % Ni with 1 % vacancies
(mixed radii: about 75-90 s and 3.8 GB).

    .venv/bin/python bench/bench_voids.py [--runs 3] [--atoms 100000] [--big] [--big-alloy]
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time


def _crystal(n_atoms, alloy=False):
    import numpy as np

    import crystalview as cv

    m = max(1, int((n_atoms / 4) ** (1 / 3)))
    c = cv.build("Cu", repeat=(m, m, -(-n_atoms // (4 * m * m))))
    if alloy:           # a solid solution: 10 % Ni on random sites (mixed radii)
        c = cv.substitute(c, "Ni", fraction=0.1, seed=1)
    rng = np.random.default_rng(0)
    gone = rng.choice(len(c), size=len(c) // 100, replace=False)
    d = c.delete(gone)
    d.record_defect("vacancy", count=int(len(gone)), seed=0)
    return d


def _rss_now_mb():
    with open("/proc/self/statm") as f:
        import os

        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2 ** 20


def _pss_mb(pid):
    """Proportional set size of one process (MB), 0 when it is gone."""
    try:
        with open(f"/proc/{pid}/smaps_rollup") as f:
            for line in f:
                if line.startswith("Pss:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return 0.0


def _rss_mb(pid):
    """Resident set size of one process (MB), 0 when it is gone."""
    try:
        with open(f"/proc/{pid}/statm") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2 ** 20
    except (OSError, IndexError, ValueError):
        return 0.0


def _tree_pids(pid):
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        out.append(p)
        try:
            with open(f"/proc/{p}/task/{p}/children") as f:
                todo.extend(int(x) for x in f.read().split())
        except OSError:
            pass
    return out


def _child(mode, n_atoms):
    import resource

    import numpy as np

    import scipy.spatial  # noqa: F401  (imported before the clock starts, for both)

    d = _crystal(n_atoms, alloy=mode == "voids-alloy")
    if mode == "delaunay":
        from scipy.spatial import Delaunay

        pts = d.positions + np.random.default_rng(1).uniform(-1e-6, 1e-6, d.positions.shape)
    else:
        from crystalview.analysis.voids import _find_voids
    before = _rss_now_mb()
    before_pss = _pss_mb("self")
    print(json.dumps({"start": True}), flush=True)
    t0 = time.perf_counter()
    if mode == "delaunay":
        Delaunay(pts)
        extra = {}
    else:
        info = {}
        v = _find_voids(d, max_atoms=len(d), info=info)      # find_voids, with the split of its time
        extra = {"holes": len(v), "channels": int(len(v.channels)),
                 "kinds": {k: r["count"] for k, r in v.summary().items()},
                 "split": info["seconds"], "slabs": info["slabs"], "points": info["points"],
                 "redone": info["slabs_redone"], "attempts": info["attempts"]}
    dt = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps({"seconds": dt, "peak_rss_MB": peak_mb, "rss_above_MB": peak_mb - before,
                      "before_pss_MB": before_pss, "atoms": len(d), **extra}), flush=True)


def _run(mode, atoms):
    import threading

    proc = subprocess.Popen([sys.executable, __file__, "--child", mode, "--atoms", str(atoms)],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    lines, started, peak = [], threading.Event(), [0.0]

    def read():
        for line in proc.stdout:
            lines.append(line)
            if '"start"' in line:
                started.set()

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    # The resident sizes (statm, cheap) are read every 4 ms; the Pss (smaps_rollup walks the page
    # tables: milliseconds to tens of milliseconds per GB, so reading it every 4 ms would take a core
    # from the run) is read whenever their sum reaches a new high and at least every 100 ms, but
    # never more often than 20 times its own reading time (under 5 % of one core).
    rss_peak, last_pss, rss_at_pss, pss_cost = 0.0, 0.0, 0.0, 0.0
    while proc.poll() is None:
        if started.is_set():
            pids = _tree_pids(proc.pid)
            rss = sum(_rss_mb(p) for p in pids)
            now = time.perf_counter()
            gap = now - last_pss
            if gap >= 20 * pss_cost and ((rss > max(rss_peak, rss_at_pss) and gap >= 0.01) or gap >= 0.1):
                peak[0] = max(peak[0], sum(_pss_mb(p) for p in pids))
                pss_cost = time.perf_counter() - now
                last_pss, rss_at_pss = now, rss
            rss_peak = max(rss_peak, rss)
        time.sleep(0.004)
    reader.join()
    if proc.returncode:
        raise SystemExit(f"benchmark child {mode} failed ({proc.returncode})")
    res = json.loads(lines[-1])
    res["peak_above_MB"] = peak[0] - res["before_pss_MB"]
    return res


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--atoms", type=int, default=100_000)
    ap.add_argument("--big", action="store_true", help="also one find_voids of 1,000,000 atoms")
    ap.add_argument("--big-alloy", action="store_true",
                    help="also one find_voids of 1,000,000 atoms of Cu-10 % Ni (mixed radii)")
    ap.add_argument("--child", choices=["delaunay", "voids", "voids-alloy"])
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
          f"peak {mb:.0f} MB above the start (Pss; its ru_maxrss {res['delaunay'][-1]['rss_above_MB']:.0f} MB above)")
    print(f"find_voids: median {tv:.2f} s, peak {mv:.0f} MB above the start, workers included "
          f"(Pss; the main process's ru_maxrss {last['rss_above_MB']:.0f} MB above; "
          f"{last['holes']:,} holes {last['kinds']}, "
          f"{last['channels']:,} channels)")
    sp = {k: statistics.median(r["split"][k] for r in res["voids"]) for k in last["split"]}
    print(f"find_voids split (medians): points and images {sp['prepare']:.2f} s, {last['slabs']} slab "
          f"triangulations {sp['slabs']:.2f} s, join and holes {sp['holes']:.2f} s; {last['points']:,} points")
    print(f"time ratio find_voids / Delaunay: {tv / tb:.2f}  (target <= 1.5)")
    print(f"peak memory ratio find_voids / Delaunay: {mv / mb:.2f}  (target <= 2.0)")
    for mode, flag, what in (("voids", a.big, "FCC Cu"), ("voids-alloy", a.big_alloy, "FCC Cu-10 % Ni")):
        if not flag:
            continue
        r = _run(mode, 1_000_000)
        print(f"1,000,000-atom cell of {what}, 1 % vacancies ({r['atoms']:,} atoms): find_voids {r['seconds']:.1f} s, "
              f"peak {r['peak_above_MB']:.0f} MB above the start, workers included (peak RSS of the main "
              f"process {r['peak_rss_MB']:.0f} MB), "
              f"{r['holes']:,} holes")
        sp = r["split"]
        print(f"  split: points and images {sp['prepare']:.1f} s, {r['slabs']} slab triangulations {sp['slabs']:.1f} s "
              f"(slabs redone: {r['redone']}, paddings: {r['attempts']}), join and holes {sp['holes']:.1f} s; "
              f"{r['points']:,} points")


if __name__ == "__main__":
    main()
