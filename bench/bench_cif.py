"""Benchmark: reading and recognising a 500-site CIF.

Target (issue: real structure files): crystalview's read_cif (parse, expand,
screen distances, recognise the lattice type, choose radii) at most 1.5x the
time of gemmi's own read (cif.read + make_small_structure_from_block +
get_all_unit_cell_sites) plus spglib's get_symmetry_dataset of the same
atoms.  Medians of several runs, both measured in this run; three files:
a 500-site P 1 listing of an fcc supercell (recognised as fcc), the same
with every site shared Fe0.5/Ni0.5 (1000 entries), and 500 sites of no
lattice type.
"""
import statistics
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

import crystalview as cv

RUNS = 7


def _write(path, a, frac, symbols, occ=None):
    rows = []
    for k, (f, s) in enumerate(zip(frac, symbols)):
        o = 1.0 if occ is None else occ[k]
        rows.append(f"{s}{k + 1} {s} {f[0]:.6f} {f[1]:.6f} {f[2]:.6f} {o:g}")
    path.write_text(
        f"data_bench\n_cell_length_a {a[0]:.5f}\n_cell_length_b {a[1]:.5f}\n_cell_length_c {a[2]:.5f}\n"
        "_cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 90\n"
        "_symmetry_space_group_name_H-M 'P 1'\nloop_\n_atom_site_label\n_atom_site_type_symbol\n"
        "_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\n_atom_site_occupancy\n"
        + "\n".join(rows) + "\n")


def files(folder):
    c = cv.build("Cu", repeat=(5, 5, 5))                      # 500 sites
    a = np.linalg.norm(c.cell, axis=1)
    f1 = folder / "fcc500.cif"
    _write(f1, a, c.frac, ["Cu"] * len(c))
    f2 = folder / "feni500.cif"
    fr = np.repeat(c.frac, 2, axis=0)
    _write(f2, a, fr, ["Fe", "Ni"] * len(c), [0.5] * (2 * len(c)))
    rng = np.random.default_rng(1)
    pts = []
    while len(pts) < 500:                                      # 500 sites at least 2.2 A apart
        p = rng.random(3)
        d = np.array(pts) - p if pts else np.zeros((0, 3))
        d -= np.round(d)
        if not len(d) or np.min(np.linalg.norm(d * 20.0, axis=1)) > 2.2:
            pts.append(p)
    f3 = folder / "other500.cif"
    _write(f3, (20.0, 20.0, 20.0), np.array(pts), ["Fe"] * 500)
    return [f1, f2, f3]


def baseline(path):
    import gemmi
    import spglib

    t = time.perf_counter()
    st = gemmi.make_small_structure_from_block(gemmi.cif.read(str(path)).sole_block())
    sites = st.get_all_unit_cell_sites()
    cell = np.array(st.cell.orth.mat, float).T
    frac = np.array([[s.fract.x, s.fract.y, s.fract.z] for s in sites])
    types = [s.element.atomic_number for s in sites]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spglib.get_symmetry_dataset((cell, frac, types), symprec=0.01)
    return time.perf_counter() - t


def ours(path):
    from crystalview.exchange.cif import read_cif

    t = time.perf_counter()
    c = read_cif(path)
    return time.perf_counter() - t, c


def main():
    with tempfile.TemporaryDirectory() as tmp:
        for path in files(Path(tmp)):
            ours(path), baseline(path)                         # warm imports
            tb = statistics.median(baseline(path) for _ in range(RUNS))
            runs = [ours(path) for _ in range(RUNS)]
            to = statistics.median(t for t, _ in runs)
            c = runs[0][1]
            print(f"{path.name}: {len(c)} entries, recognised as {c.metadata['recognition']['lattice']}; "
                  f"read_cif median {to * 1e3:.1f} ms; gemmi read + spglib dataset median {tb * 1e3:.1f} ms; "
                  f"ratio {to / tb:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
