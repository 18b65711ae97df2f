"""Benchmark: building a 10-million-atom FCC supercell.

Targets (issue: foundation): time at most 4x one bare numpy add over the same
(N, 3) float array; peak memory at most 1.5x the output arrays.  Both measured
in this run; medians of several repeats printed with the ratios.
"""
import gc
import statistics
import time
import tracemalloc

import numpy as np

import crystalview as cv

REPEAT = (136, 136, 136)          # 4 * 136^3 = 10,061,824 atoms
RUNS = 5


def bare_add(n):
    a = np.ones((n, 3))
    b = np.ones((n, 3))
    t = time.perf_counter()
    c = a + b                      # the baseline: one add that allocates its (N, 3) result
    dt = time.perf_counter() - t
    del a, b, c
    return dt


def one_build():
    t = time.perf_counter()
    c = cv.build("Cu", repeat=REPEAT)
    dt = time.perf_counter() - t
    n = len(c)
    del c
    return dt, n


def main():
    cv.build("Cu", repeat=(2, 2, 2))            # warm imports and caches
    builds, adds = [], []
    n = 0
    for _ in range(RUNS):
        gc.collect()
        dt, n = one_build()
        builds.append(dt)
        gc.collect()
        adds.append(bare_add(n))
    tb, ta = statistics.median(builds), statistics.median(adds)
    gc.collect()
    tracemalloc.start()
    c = cv.build("Cu", repeat=REPEAT)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    out_bytes = c.positions.nbytes + c.numbers.nbytes + c.roles.nbytes
    print(f"atoms: {n:,}")
    print(f"build median {tb:.3f} s; bare numpy add median {ta:.3f} s; ratio {tb / ta:.2f} (target <= 4)")
    print(f"peak traced memory {peak / 1e6:.0f} MB; output arrays {out_bytes / 1e6:.0f} MB; "
          f"ratio {peak / out_bytes:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
