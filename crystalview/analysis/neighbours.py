"""Neighbour search with periodic boundaries, for any cell shape.

Periodic images are added as ghost atoms within the cut-off of each periodic
face (the cell's face-to-face heights decide how many image layers are needed,
so thin and non-orthogonal (hexagonal) cells are handled), then scipy's
cKDTree finds every pair in one vectorised call.
"""
from __future__ import annotations

import itertools

import numpy as np

from ..errors import LimitError


def cell_heights(cell):
    """Distances between opposite faces of the cell (A).

    >>> cell_heights(np.diag([2.0, 3.0, 4.0])).round(6).tolist()
    [2.0, 3.0, 4.0]
    """
    cell = np.asarray(cell, float)
    vol = abs(np.linalg.det(cell))
    return np.array([vol / np.linalg.norm(np.cross(cell[(k + 1) % 3], cell[(k + 2) % 3])) for k in range(3)])


def with_images(positions, cell, pbc, cutoff):
    """(points, index) : the atoms plus every periodic image within ``cutoff``
    of the cell; ``index`` maps each point back to its atom.

    >>> points, index = with_images([[0.5, 0.5, 0.5]], np.eye(3) * 3.0, (True, True, False), 1.0)
    >>> points.tolist(), index.tolist()
    ([[0.5, 0.5, 0.5], [0.5, 3.5, 0.5], [3.5, 0.5, 0.5], [3.5, 3.5, 0.5]], [0, 0, 0, 0])
    """
    positions = np.asarray(positions, float)
    cell = np.asarray(cell, float)
    frac = np.linalg.solve(cell.T, positions.T).T
    h = cell_heights(cell)
    pad = cutoff / h
    nimg = [int(np.ceil(p)) if pbc[k] else 0 for k, p in enumerate(pad)]
    pts, idx = [positions], [np.arange(len(positions))]
    for shift in itertools.product(*[range(-n, n + 1) for n in nimg]):
        if shift == (0, 0, 0):
            continue
        s = np.array(shift, float)
        f = frac + s
        keep = np.ones(len(f), bool)
        for k in range(3):
            if nimg[k]:
                keep &= (f[:, k] > -pad[k]) & (f[:, k] < 1 + pad[k])
        if keep.any():
            pts.append(positions[keep] + s @ cell)
            idx.append(np.nonzero(keep)[0])
    return np.vstack(pts), np.concatenate(idx)


def neighbour_pairs(crystal, cutoff, max_pairs=200_000_000):
    """All pairs (i, j) with |r_j - r_i| <= cutoff, periodic images included.

    Returns (i, j, vectors, distances): each unordered pair appears twice
    (i->j and j->i); an atom may neighbour several images of another atom.

    >>> import crystalview as cv
    >>> i, j, vectors, distances = neighbour_pairs(cv.build("Cu"), 2.6)
    >>> len(i), sorted(set(distances.round(4).tolist()))
    (48, [2.5561])
    """
    n = len(crystal)
    if n == 0:
        return (np.zeros(0, int),) * 2 + (np.zeros((0, 3)), np.zeros(0))
    density = n / crystal.volume
    est = int(n * density * 4.19 * cutoff ** 3)
    if est > max_pairs:
        raise LimitError(f"a neighbour search to {cutoff:.2f} A over {n:,} atoms would list about {est:,} pairs; "
                         f"use a smaller cut-off or a smaller crystal")
    from scipy.spatial import cKDTree

    # images padded a hair beyond the cut-off, so a neighbour at exactly the cut-off is found both ways
    pts, idx = with_images(crystal.positions, crystal.cell, crystal.pbc, cutoff * (1 + 1e-9) + 1e-9)
    t_all = cKDTree(pts)
    t_own = cKDTree(crystal.positions)
    m = t_own.sparse_distance_matrix(t_all, cutoff, output_type="ndarray")
    i = m["i"].astype(np.int64)
    k = m["j"].astype(np.int64)
    d = m["v"]
    keep = d > 1e-8
    i, k, d = i[keep], k[keep], d[keep]
    vec = pts[k] - crystal.positions[i]
    return i, idx[k], vec, d


def nearest_neighbour_distance(crystal):
    """Shortest interatomic distance (A), periodic images included.

    >>> import crystalview as cv
    >>> round(nearest_neighbour_distance(cv.build("Fe")), 4)
    2.4825
    """
    n = len(crystal)
    if n == 0:
        return float("nan")
    from scipy.spatial import cKDTree

    guess = max(2.0 * (crystal.volume / max(n, 1)) ** (1 / 3), 1.0)
    cutoff = guess
    for _ in range(6):
        sample = crystal if n <= 20000 else crystal.select(np.arange(0, n, max(1, n // 20000)))
        # distances from sampled atoms to all atoms
        pts, _ = with_images(crystal.positions, crystal.cell, crystal.pbc, cutoff)
        d, _ = cKDTree(pts).query(sample.positions, k=2, distance_upper_bound=cutoff)
        d = d[:, 1]
        d = d[np.isfinite(d)]
        if len(d):
            return float(d.min())
        cutoff *= 2
    return float("nan")


def coordination_numbers(crystal, tolerance=0.05, shell=None):
    """Per-atom coordination number: neighbours within (1 + tolerance) x the
    nearest-neighbour distance (or within ``shell`` A).

    >>> import crystalview as cv
    >>> coordination_numbers(cv.build("Fe")).tolist()
    [8, 8]
    >>> coordination_numbers(cv.build("Fe"), shell=2.9).tolist()
    [14, 14]
    """
    if shell is None:
        shell = nearest_neighbour_distance(crystal) * (1.0 + tolerance)
    i, _, _, _ = neighbour_pairs(crystal, shell)
    return np.bincount(i, minlength=len(crystal))
