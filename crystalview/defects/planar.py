"""Close-packed stacking: build any sequence of close-packed layers (A, B, C)
as a periodic cell, and read the sequence back from any close-packed crystal.

Geometry (common practice, e.g. Hull & Bacon, Introduction to Dislocations,
ch. 5): every layer is the same triangular net of spacing d (the
nearest-neighbour distance); the three possible in-plane positions are
A = (0, 0), B = (1/3, 2/3), C = (2/3, 1/3) in units of the in-plane cell
vectors a1 = d (1, 0, 0) and a2 = d (-1/2, sqrt(3)/2, 0).  The third cell
vector is along the stacking normal (z) and holds the whole sequence once, so
the periodic cell closes the sequence onto itself.

Layer spacing (our choice, stated in the records): for an element whose
close-packed phase is FCC, the ideal sqrt(2/3) d; for an element whose
close-packed phase is HCP, half its measured c, so "AB" of Mg or Zn gives the
element's own c/a.  ``spacing=`` overrides both.

"ABC" stacked this way is the FCC lattice with x = [1-10], y = [11-2],
z = [111] and an atom at the origin; "AB" is HCP with a1 along x and c
along z.
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..crystal import Crystal
from ..errors import UserError, suggest
from .point import parent_crystal, repeats, rotation_to_frame

#: Named sequences.  Each periodic cell closes onto itself, so faults that
#: cannot stand alone in a periodic cell (the HCP I1 and I2 basal faults)
#: come in pairs.
#: h/c notation: a layer whose two neighbours are alike is 'h', else 'c'.
NAMED_SEQUENCES = {
    "fcc": ("ABC", "perfect FCC: ...ABCABC..."),
    "hcp": ("AB", "perfect HCP: ...ABAB..."),
    "dhcp": ("ABAC", "double-hexagonal close packing"),
    # FCC faults (Hull & Bacon ch. 5; Hirth & Lothe ch. 10)
    "intrinsic": ("ABCABABCABC", "one intrinsic stacking fault (a C layer missing: ...ABCAB|ABC...) per 11 layers"),
    "extrinsic": ("ABCABCBABCABC", "one extrinsic stacking fault (an extra B layer: ...ABC|B|ABC...) per 13 layers"),
    "twin": ("ABCABCACBACB", "two coherent twin boundaries per 12 layers: ABCABC|ACBACB, twins 6 layers thick"),
    # HCP basal faults (Hirth & Lothe ch. 10), two per periodic cell
    "I1": ("ABABABCBCBCB", "two I1 basal faults (...ABAB|CBCB...) per 12 layers"),
    "I2": ("ABABABCACACACB", "two I2 basal faults (...ABAB|CACA...) per 14 layers"),
    "E": ("ABABABABABC", "one extrinsic E basal fault (...ABAB|C|ABAB...) per 11 layers"),
}

#: Fault names belong to one parent lattice: the FCC faults are faults of the
#: ABC stacking, the HCP basal faults of the AB stacking.  'fcc', 'hcp',
#: 'dhcp' and raw letter sequences are allowed for any close-packed metal.
FCC_FAULTS = ("intrinsic", "extrinsic", "twin")
HCP_FAULTS = ("I1", "I2", "E")

_OFFSETS = {"A": (0.0, 0.0), "B": (1.0 / 3.0, 2.0 / 3.0), "C": (2.0 / 3.0, 1.0 / 3.0)}


def check_sequence(sequence):
    """(the sequence as upper-case letters, the name it was given by or None), or UserError.

    >>> check_sequence("abcab")
    ('ABCAB', None)
    >>> check_sequence("dhcp")
    ('ABAC', 'dhcp')
    >>> try:
    ...     check_sequence("AAB")
    ... except UserError:
    ...     print("refused")
    ...
    refused
    """
    if not isinstance(sequence, str):
        raise UserError("a stacking sequence is a string of the letters A, B and C, e.g. 'ABC' (FCC) or 'AB' (HCP)")
    if not sequence.strip():
        raise UserError("the stacking sequence is empty; give at least two layers of A, B and C, "
                        "e.g. 'ABC' (FCC) or 'AB' (HCP)")
    key = sequence.strip()
    for name, (seq, _) in NAMED_SEQUENCES.items():
        if key.lower() == name.lower():
            return seq, name
    s = key.upper()
    bad = sorted(set(s) - set("ABC"))
    if bad:
        raise UserError(f"stacking sequence '{sequence}' holds {', '.join(repr(b) for b in bad)}; use only the "
                        f"letters A, B and C, or a name ({', '.join(NAMED_SEQUENCES)})"
                        f"{suggest(sequence, list(NAMED_SEQUENCES))}")
    if len(s) < 2:
        raise UserError(f"stacking sequence '{sequence}' has one layer: a periodic cell of it puts {s} on {s}, which "
                        f"is not close-packed; give at least two layers, e.g. 'AB' (HCP) or 'ABC' (FCC)")
    for i in range(len(s) - 1):
        if s[i] == s[i + 1]:
            raise UserError(f"stacking sequence '{sequence}' puts layer {s[i]} on {s[i]} (layers {i + 1} and {i + 2}); "
                            f"two equal neighbouring layers are not close-packed")
    if s[-1] == s[0]:
        raise UserError(f"stacking sequence '{sequence}' ends with {s[-1]} and starts with {s[0]}: the periodic cell "
                        f"would put {s[0]} on {s[0]}; drop the last layer (e.g. '{s[:-1]}')")
    return s, None


def hc_notation(sequence):
    """h/c notation of a periodic sequence: 'h' where the two neighbouring
    layers are alike, 'c' where they differ (Hirth & Lothe).

    >>> hc_notation("ABC"), hc_notation("AB"), hc_notation("ABCACB")
    ('ccc', 'hh', 'hcchcc')
    """
    n = len(sequence)
    return "".join("h" if sequence[i - 1] == sequence[(i + 1) % n] else "c" for i in range(n))


def _close_packed_parent(element, phase=None, a=None):
    """(parent conventional Crystal, its lattice type 'fcc'|'hcp')."""
    from .. import elements as E
    from ..build import build

    if isinstance(element, Crystal):
        parent = parent_crystal(element, what="stacking")
        if parent.lattice.prototype not in ("fcc", "hcp"):
            raise UserError(f"stacking needs a close-packed (fcc or hcp) crystal; this one is {parent.lattice.prototype}")
        return parent, parent.lattice.prototype
    if not isinstance(element, str):
        raise UserError("stack needs an element symbol (e.g. 'Cu') or a Crystal")
    el = E.element(element)
    if phase is not None:
        ph = E.phase(el.symbol, phase)
        if ph.lattice not in ("fcc", "hcp"):
            raise UserError(f"{el.symbol} phase '{ph.name}' is {ph.lattice}, not close-packed; choose an fcc or hcp phase")
    else:
        order = [el.reference_phase] + [p for p in el.phases if p != el.reference_phase]
        ph = next((el.phases[p] for p in order if p and el.phases[p].lattice in ("fcc", "hcp")), None)
    if ph is None:
        if a is None:
            raise UserError(f"{el.symbol} has no close-packed (fcc or hcp) phase in the element data; give the "
                            f"nearest-neighbour distance with a= (A) or choose a close-packed metal")
        return build("fcc", element=el.symbol, a=float(a) * math.sqrt(2.0)), "fcc"
    if a is not None:
        aa = float(a) * (math.sqrt(2.0) if ph.lattice == "fcc" else 1.0)
        return build(el.symbol, phase=ph.name, a=aa), ph.lattice
    return build(el.symbol, phase=ph.name), ph.lattice


def _check_fault_matches(named, kind, parent, element):
    """UserError when a named fault belongs to the other close-packed lattice."""
    if named in FCC_FAULTS and kind != "fcc":
        wrong, fault_lat, valid_kind, names = "an FCC stacking fault", "fcc", "HCP basal faults", HCP_FAULTS
    elif named in HCP_FAULTS and kind != "hcp":
        wrong, fault_lat, valid_kind, names = "an HCP basal fault", "hcp", "FCC stacking faults", FCC_FAULTS
    else:
        return
    sym = parent.elements[0] if len(parent) else "this metal"
    other = ""
    try:
        from .. import elements as E

        el = E.element(element if isinstance(element, str) else sym)
        alt = [p for p, ph in el.phases.items() if ph.lattice == fault_lat]
    except UserError:
        alt = []
    if alt:
        other = f", or choose {sym}'s {fault_lat} phase '{alt[0]}'"
    raise UserError(f"fault '{named}' is {wrong} but {sym} is {kind}: for {sym} use "
                    f"{', '.join(names[:-1])} or {names[-1]} ({valid_kind}){other}, or give the layers as a "
                    f"sequence of A, B and C")


def stack(element, sequence, a=None, repeat=(1, 1), spacing=None, phase=None, max_atoms=None) -> Crystal:
    """A periodic cell of close-packed layers in the given sequence.

    Parameters
    ----------
    element : element symbol (its FCC or HCP phase is used) or a Crystal
        whose lattice is fcc or hcp.
    sequence : letters A, B, C (e.g. 'ABC' FCC, 'AB' HCP, 'ABCABABC' an
        intrinsic fault, 'ABCACB' twins) or a name from NAMED_SEQUENCES
        ('fcc', 'hcp', 'dhcp', 'intrinsic', 'extrinsic', 'twin', 'I1', 'I2', 'E').
        Fault names must match the parent: 'intrinsic', 'extrinsic', 'twin'
        only for an fcc parent, 'I1', 'I2', 'E' only for an hcp parent
        (UserError otherwise).  Letter sequences and 'fcc', 'hcp', 'dhcp'
        are allowed for any close-packed parent; the layer spacing then
        still follows the parent (so 'ABC' of Mg has Mg's c/2 spacing).
    a : in-plane nearest-neighbour distance (A); default from the element.
    repeat : (nx, ny) in-plane copies, or (nx, ny, nz) with nz copies of the
        whole sequence along the normal.
    spacing : layer spacing (A); default ideal sqrt(2/3) d for FCC metals,
        c/2 of the element for HCP metals.

    >>> c = stack("Cu", "ABCABABC")
    >>> len(c), c.metadata["defects"][0]["kind"]
    (8, 'stacking')
    """
    from ..limits import check_atom_count

    seq, named = check_sequence(sequence)
    rep = tuple(repeat) if repeat is not None else (1, 1)
    if len(rep) == 2:
        rep = rep + (1,)
    nx, ny, nz = repeats(rep, 3, "repeat", "(3, 3) or (3, 3, 2)")
    check_atom_count(len(seq) * nx * ny * nz, max_atoms, what="this stack")
    parent, kind = _close_packed_parent(element, phase=phase, a=a)
    _check_fault_matches(named, kind, parent, element)
    lat = parent.lattice
    if kind == "fcc":
        d = lat.a / math.sqrt(2.0)
        h = math.sqrt(2.0 / 3.0) * d
        how = "ideal sqrt(2/3) d"
        from ..lattice import direction_vector

        Rm = rotation_to_frame(direction_vector(lat.cell, "[1-10]"), direction_vector(lat.cell, "[111]"))
    else:
        d = lat.a
        h = lat.c / 2.0
        how = "c/2 of the HCP phase"
        Rm = rotation_to_frame(lat.cell[0], np.cross(lat.cell[0], lat.cell[1]))
    if spacing is not None:
        try:
            h = float(spacing)
        except (TypeError, ValueError):
            h = float("nan")
        if not (math.isfinite(h) and h > 0):
            raise UserError(f"layer spacing {spacing!r} must be a positive length in A, e.g. 2.08")
        how = "given"
    n_layers = len(seq)
    a1 = np.array([d, 0.0, 0.0])
    a2 = np.array([-d / 2.0, d * math.sqrt(3.0) / 2.0, 0.0])
    one = np.array([[_OFFSETS[ch][0], _OFFSETS[ch][1], k] for k, ch in enumerate(seq)])
    frac_layers = np.vstack([one + [0, 0, n_layers * m] for m in range(nz)])
    grid = np.array([(i, j) for i in range(nx) for j in range(ny)], float)
    pos = []
    for i, j in grid:
        p = ((frac_layers[:, 0] + i)[:, None] * a1 + (frac_layers[:, 1] + j)[:, None] * a2)
        p[:, 2] = frac_layers[:, 2] * h
        pos.append(p)
    pos = np.vstack(pos)
    order = np.lexsort((pos[:, 0], pos[:, 1], np.round(pos[:, 2], 6)))
    pos = pos[order]
    cell = np.array([a1 * nx, a2 * ny, [0.0, 0.0, n_layers * nz * h]])
    z = parent.numbers[0]
    meta = {k: v for k, v in parent.metadata.items()}
    if (nx, ny, nz) != (1, 1, 1):
        meta["repeat"] = [nx, ny, nz]
    new_lat = replace(lat, cell=lat.cell @ Rm)
    out = Crystal(cell, pos, np.full(len(pos), z, np.uint8), pbc=(True, True, True), metadata=meta,
                  lattice=new_lat, species_radii={parent.elements[0]: d / 2.0})
    hc = hc_notation(seq)
    extra = {"name": named} if named else {}
    out.record_defect("stacking", sequence=seq, **extra, layers=n_layers, hc=hc,
                      faulted=not (set(hc) == {"c"} or set(hc) == {"h"}),
                      layer_spacing_A=round(h, 6), layer_spacing_rule=how, in_plane_spacing_A=round(d, 6),
                      parent_lattice=kind)
    return out


# ------------------------------------------------------------------ reading a sequence back
def _canonical(v, tol=1e-6):
    for x in v:
        if abs(x) > tol:
            return v if x > 0 else -v
    return v


def stacking_sequence(crystal: Crystal, details=False, sample=400):
    """The stacking sequence of a close-packed crystal, read from its atoms.

    1. The close-packed normal: among the normals of pairs of nearest-neighbour
       bonds at 60/120 degrees, the one for which (nearly) every atom has
       exactly six neighbours in the plane normal to it.  FCC has four such
       normals; ties go to the one closest to the third cell vector, then to
       the first found.
    2. Atoms are grouped into layers by their height along the normal.
    3. Each layer's in-plane offset from the lowest layer, in units of the
       triangular net, is classified as 0, (1/3, 2/3) or (2/3, 1/3).

    The letters are canonical: the lowest layer is 'A', the next 'B'.  For a
    crystal periodic in all three directions the shortest repeating part is
    returned (a cubic FCC cell gives 'ABC'); otherwise every layer from bottom
    to top.  ``details=True`` returns a dict with the normal, the layer
    heights and the per-layer agreement too.

    >>> import crystalview as cv
    >>> stacking_sequence(stack("Cu", "ABCABABC"))
    'ABCABABC'
    >>> stacking_sequence(cv.build("Mg"))
    'AB'
    """
    from scipy.spatial import cKDTree

    from ..analysis.neighbours import nearest_neighbour_distance, with_images

    n = len(crystal)
    if n < 2:
        raise UserError("a stacking sequence needs a crystal with at least two atoms")
    dnn = nearest_neighbour_distance(crystal)
    cutoff = 1.06 * dnn
    pts, _ = with_images(crystal.positions, crystal.cell, crystal.pbc, cutoff)
    tree = cKDTree(pts)
    samp = np.unique(np.linspace(0, n - 1, min(n, sample)).astype(int))
    lists = tree.query_ball_point(crystal.positions[samp], cutoff)
    vecs = []
    for k, lst in zip(samp, lists):
        v = pts[lst] - crystal.positions[k]
        vecs.append(v[np.linalg.norm(v, axis=1) > 1e-6])
    # candidate normals from the bonds of the first few sampled atoms
    cands = []
    for v in vecs[:12]:
        u = v / np.linalg.norm(v, axis=1)[:, None]
        c = u @ u.T
        ii, jj = np.nonzero(np.triu(np.abs(np.abs(c) - 0.5) < 0.06, 1))
        if len(ii):
            nr = np.cross(u[ii], u[jj])
            cands.append(nr / np.linalg.norm(nr, axis=1)[:, None])
    if not cands:
        raise UserError("no close-packed planes found: this crystal is not close-packed (fcc, hcp or a stack of them)")
    cands = np.vstack(cands)
    lead = np.argmax(np.abs(cands) > 1e-6, axis=1)
    cands *= np.sign(cands[np.arange(len(cands)), lead])[:, None]
    _, first = np.unique(np.round(cands, 2), axis=0, return_index=True)
    cands = cands[np.sort(first)]
    tol = 0.12 * dnn
    allv = np.vstack(vecs)
    owner = np.repeat(np.arange(len(vecs)), [len(v) for v in vecs])
    inplane_counts = np.stack([np.bincount(owner, weights=(np.abs(allv @ nrm) < tol), minlength=len(vecs))
                               for nrm in cands])
    scores = np.mean(inplane_counts == 6, axis=1)
    best = scores.max()
    if best < 0.5:
        raise UserError("this crystal is not close-packed: no plane holds six neighbours around most atoms "
                        "(stacking sequences are for fcc, hcp and their stacks)")
    c3 = crystal.cell[2] / np.linalg.norm(crystal.cell[2])
    top = np.nonzero(scores >= best - 1e-9)[0]
    align = np.abs(cands[top] @ c3)
    nrm = cands[top[int(np.argmax(align + 1e-9 * -np.arange(len(top))))]]
    if nrm @ c3 < 0:
        nrm = -nrm
    # in-plane net from a bond of the first sampled atom lying in the plane
    inplane = None
    for v in vecs:
        sel = v[np.abs(v @ nrm) < tol]
        if len(sel):
            inplane = sel[0] - (sel[0] @ nrm) * nrm
            break
    d = np.linalg.norm(inplane)
    a1 = inplane
    a2 = -0.5 * a1 + (math.sqrt(3.0) / 2.0) * np.cross(nrm, a1)
    G = np.array([[a1 @ a1, a1 @ a2], [a1 @ a2, a2 @ a2]])

    def classify(vectors):
        """0, 1, 2 for in-plane offsets 0, (1/3, 2/3), (2/3, 1/3) of the net; -1 off it."""
        v = np.atleast_2d(vectors)
        v = v - np.outer(v @ nrm, nrm)
        uv = np.linalg.solve(G, np.vstack([v @ a1, v @ a2])).T
        kk = np.mod(np.round(3.0 * uv[:, 0]), 3).astype(int)
        ru = uv[:, 0] - kk / 3.0
        rv = uv[:, 1] - 2.0 * kk / 3.0
        off = np.maximum(np.abs(ru - np.round(ru)), np.abs(rv - np.round(rv)))
        kk[off > 0.12] = -1
        return kk

    heights = crystal.positions @ nrm
    order = np.argsort(heights, kind="stable")
    hs = heights[order]
    breaks = np.nonzero(np.diff(hs) > 0.3 * dnn)[0] + 1
    groups = np.split(order, breaks)
    ref = crystal.positions[groups[0][0]]
    k = classify(crystal.positions - ref)
    classes, agree, layer_h = [], [], []
    for g in groups:
        vals, cnt = np.unique(k[g], return_counts=True)
        m = int(np.argmax(cnt))
        if vals[m] < 0 or cnt[m] / len(g) < 0.8:
            raise UserError(f"the atoms at height {heights[g].mean() - hs[0]:.3f} A along the close-packed normal do "
                            f"not sit on one close-packed position; this crystal is not a stack of close-packed layers")
        classes.append(int(vals[m]))
        agree.append(float(cnt[m] / len(g)))
        layer_h.append(float(heights[g].mean() - hs[0]))
    period = _period_along(crystal, nrm) if all(crystal.pbc) else None
    if period is not None:
        # Every cell vector is a translation of the crystal: it moves a layer
        # up by its height along the normal and shifts its letter by its own
        # in-plane offset.  Unfold the layers found in the cell into one
        # period of the pure translation along the normal.

        H = crystal.cell @ nrm
        kc = classify(crystal.cell)
        if np.all(kc >= 0):
            span = np.arange(-12, 13)
            M = np.stack(np.meshgrid(span, span, span, indexing="ij"), -1).reshape(-1, 3)
            dh = M @ H
            dk = M @ kc
            h2 = (np.asarray(layer_h)[None, :] + dh[:, None]).ravel()
            k2 = np.mod(np.asarray(classes)[None, :] + dk[:, None], 3).ravel()
            inside = (h2 >= -0.15 * dnn) & (h2 < period - 0.15 * dnn)
            h2, k2 = h2[inside], k2[inside]
            key = np.round(h2 / (0.05 * dnn)).astype(np.int64)
            found = {}
            for kk, hh, cc in zip(key.tolist(), h2.tolist(), k2.tolist()):
                prev = found.get(kk)
                if prev is not None and prev[1] != cc:
                    raise UserError("the layers of this crystal do not repeat consistently along the "
                                    "close-packed normal; it is not a periodic stack of close-packed layers")
                found[kk] = (hh, cc)
            items = sorted(found.values())
            layer_h = [h for h, _ in items]
            classes = [c for _, c in items]
            agree = [1.0] * len(classes)
    # canonical letters: first layer A, next B
    names = {}
    for c in classes:
        if c not in names:
            names[c] = "ABC"[len(names)]
    seq = "".join(names[c] for c in classes)
    if period is not None:
        for p in range(1, len(seq)):
            if len(seq) % p == 0 and seq == seq[:p] * (len(seq) // p):
                seq = seq[:p]
                break
    if details:
        return {"sequence": seq, "normal": nrm.tolist(), "layer_heights_A": layer_h,
                "layer_agreement": agree, "in_plane_spacing_A": float(d), "hc": hc_notation(seq)}
    return seq


def _period_along(crystal, nrm, span=16):
    """Length of the shortest translation of the periodic cell along ``nrm``
    (A), or None when none is found among integer combinations up to ``span``."""
    r = np.arange(-span, span + 1)
    M = np.stack(np.meshgrid(r, r, r, indexing="ij"), -1).reshape(-1, 3)
    M = M[np.any(M != 0, axis=1)]
    T = M @ crystal.cell
    L = np.linalg.norm(T, axis=1)
    par = np.linalg.norm(np.cross(T, nrm), axis=1) < 1e-4 * np.maximum(L, 1.0)
    if not par.any():
        return None
    return float(L[par].min())
