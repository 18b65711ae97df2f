"""Benchmark: a 5x5x5 FCC ball-and-stick print model (Cu, 10 mm per A), all
measured in the same run:

* today's model: the old tessellation (sphere segments from a 2-D chord
  rule, rods from centre to centre, one batch union), ``tessellation="legacy"``;
* the model at the default resolution (0.05 mm chord error), same balls and
  rods (no cell-edge struts, no base), and with the defaults (struts, base);
* the bare manifold3d batch union of the same parts as the new model
  (spheres and rods at the new tessellation), plus ``to_mesh``.

Targets: the new model at most 0.25x today's time, and at most 1.2x the
bare union of the same parts.  Prints medians, ratios and triangle counts.
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
    from crystalview.mesh.printable import DEFAULT_MIN_FEATURE, _inner_radius, _plan, _rod_between, build_model

    crystal = cv.build("Cu", repeat=(5, 5, 5))
    scale = 10.0
    plan = _plan(crystal, "ball-and-stick", scale, False, DEFAULT_MIN_FEATURE, False, 10**9, None)
    c = plan["centres"]
    sseg, rseg = plan["sphere_seg"], plan["rod_seg_fn"]

    def parts():
        T = P.Templates()
        prims = [P.place_sphere(T.sphere(g, r, sseg(r)), x) for x, r, g in zip(c, plan["balls"], plan["groups"])]
        for i, j, r, g in plan["rods"]:
            prims.append(_rod_between(T, g, r, rseg(r), c[i], c[j], _inner_radius(plan["balls"][i], sseg(plan["balls"][i])),
                                      _inner_radius(plan["balls"][j], sseg(plan["balls"][j]))))
        return prims

    def timed(fn):
        t0 = time.perf_counter()
        out = fn()
        return time.perf_counter() - t0, out

    old, new, full, bare = [], [], [], []
    for _ in range(runs):
        t, m = timed(lambda: build_model(crystal, style="ball-and-stick", scale=scale, base=False, edges=False,
                                         tessellation="legacy"))
        old.append(t)
        old_tris = len(m.bodies[0].mesh.faces)
        t, m = timed(lambda: build_model(crystal, style="ball-and-stick", scale=scale, base=False, edges=False))
        new.append(t)
        new_tris = len(m.bodies[0].mesh.faces)
        new_info = m.info
        t, m = timed(lambda: build_model(crystal, style="ball-and-stick", scale=scale))
        full.append(t)
        full_tris = len(m.bodies[0].mesh.faces)
        prims = parts()
        t, mesh = timed(lambda: m3.Manifold.batch_boolean(prims, m3.OpType.Add).to_mesh())
        bare.append(t)
        bare_tris = len(mesh.tri_verts)
    o, n, f, b = (statistics.median(x) for x in (old, new, full, bare))
    print(f"5x5x5 FCC Cu ball-and-stick, 10 mm/A: {len(c)} balls, {len(plan['rods'])} rods")
    print(f"today's tessellation (legacy):     median {o:.3f} s over {runs} runs, {old_tris:,} triangles")
    print(f"default resolution 0.05 mm:        median {n:.3f} s, {new_tris:,} triangles, chord error "
          f"{new_info['chord_error_mm']:.3f} mm ({new_info['sphere_segments']} sphere segments, "
          f"{new_info['rod_sides']} rod sides, {new_info['assembly']})")
    print(f"  with the defaults (struts, base): median {f:.3f} s, {full_tris:,} triangles")
    print(f"bare manifold3d union, same parts: median {b:.3f} s, {bare_tris:,} triangles")
    print(f"ratio new / today {n / o:.2f}x (target <= 0.25x); new / bare union {n / b:.2f}x (target <= 1.2x)")
    return 0 if (n / o <= 0.25 and n / b <= 1.2) else 1


if __name__ == "__main__":
    sys.exit(main())
