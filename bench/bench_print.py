"""Benchmark: a 5x5x5 FCC ball-and-stick print model against one bare
manifold3d batch union of the same spheres and rods, measured in the same run.

Target: the whole model build (neighbour search, layout, union, mesh out) at
most 1.2x the bare union.  Prints the median of a few runs, the ratio and the
triangle count.
"""
from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def main(runs=3):
    import manifold3d as m3

    import crystalview as cv
    from crystalview.mesh import primitives as P
    from crystalview.mesh.printable import DEFAULT_MIN_FEATURE, _lay_flat_rotation, _plan, build_model

    crystal = cv.build("Cu", repeat=(5, 5, 5))
    scale = 10.0
    plan = _plan(crystal, "ball-and-stick", scale, False, DEFAULT_MIN_FEATURE, False, 10**9, None)
    R = _lay_flat_rotation(plan["centres"])
    c = plan["centres"] @ R.T

    def primitives():
        T = P.Templates()
        prims = [P.place_sphere(T.sphere(g, r, plan["seg"]), x) for x, r, g in zip(c, plan["balls"], plan["groups"])]
        prims += [P.place_rod(T.rod(g, r, plan["rod_seg"]), c[i], c[j]) for i, j, r, g in plan["rods"]]
        return prims

    bare, ours, tris = [], [], 0
    for _ in range(runs):
        prims = primitives()
        t0 = time.perf_counter()
        u = m3.Manifold.batch_boolean(prims, m3.OpType.Add)
        mesh = u.to_mesh()
        bare.append(time.perf_counter() - t0)
        bare_tris = len(mesh.tri_verts)

        t0 = time.perf_counter()
        model = build_model(crystal, style="ball-and-stick", scale=scale)
        ours.append(time.perf_counter() - t0)
        tris = len(model.bodies[0].mesh.faces)
    b, o = statistics.median(bare), statistics.median(ours)
    print(f"5x5x5 FCC Cu ball-and-stick: {len(c)} balls, {len(plan['rods'])} rods, {tris:,} triangles "
          f"(bare union {bare_tris:,})")
    print(f"bare manifold3d batch union: median {b:.3f} s over {runs} runs")
    print(f"crystalview build_model:      median {o:.3f} s over {runs} runs")
    print(f"ratio {o / b:.2f}x (target <= 1.2x)")
    return 0 if o / b <= 1.2 else 1


if __name__ == "__main__":
    sys.exit(main())
