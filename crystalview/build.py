"""build(): crystals from element names, phases, compounds or lattice types,
as conventional cells, diagonal supercells, general supercells or oriented
supercells whose x, y, z follow given crystal directions."""
from __future__ import annotations

import itertools
import math
from pathlib import Path

import numpy as np

from . import elements as E
from .crystal import Crystal, LatticeInfo
from .errors import UserError, suggest
from .lattice import _gcd_reduce, cell_from_parameters, cell_nn_distance, cell_parameters, parse_indices
from .prototypes import PROTOTYPES, is_lattice, prototype

from .limits import (BYTES_PER_ATOM, DEFAULT_MAX_ATOMS, GIVEN, cap_value, check_atom_count,  # noqa: F401
                     max_atoms_default)

# ------------------------------------------------------------------ resolving a spec
def _resolve(spec, phase=None, element=None, elements=None, a=None, c=None, lattice=None):
    """-> dict(proto, elements, a, c, phase, temperature_K, source, note)."""
    spec = str(spec).strip()
    if not spec:
        raise UserError("empty structure name; give an element (Cu), a compound (Ni3Al) or a lattice type (fcc)")
    info = dict(phase=None, temperature_K=None, source="", note="", estimated=False)
    if lattice is not None and not is_lattice(spec):
        # build("Fe", lattice="fcc"): the phase of Fe with that lattice
        proto = prototype(lattice)
        if E.is_compound(spec):
            raise UserError(f"'{spec}' is a compound with a fixed lattice; leave out the lattice option")
        el = E.element(spec)
        if phase is None:
            matches = [p for p in el.phases.values() if p.lattice == proto.name]
            if matches:
                phase = matches[0].name
        if phase is not None:
            ph = E.phase(spec, phase)
            if ph.lattice != proto.name:
                raise UserError(f"{el.symbol} phase '{ph.name}' is {ph.lattice}, not {proto.name}; "
                                f"leave out the phase or the lattice option")
        return _from_lattice(proto, element=el.symbol, elements=elements, a=a, c=c, phase=phase, info=info)
    if is_lattice(spec):
        return _from_lattice(prototype(spec), element=element, elements=elements, a=a, c=c, phase=phase, info=info)
    if phase is not None and not E.is_compound(spec) and not is_lattice(spec):
        canon0 = spec[:1].upper() + spec[1:].lower()
        if canon0 in E.metal_symbols():
            alias = E.phase_alias(canon0, phase)
            if isinstance(alias, tuple):            # a trade name for an ordered compound (gamma-prime: Ni3Al)
                return _resolve(alias[1], a=a, c=c)
    if E.is_compound(spec):
        if phase is not None:
            raise UserError(f"'{spec}' is a compound; it has no named phases (leave out the phase option)")
        cp = E.compound(spec)
        proto = prototype(cp.lattice)
        info.update(source=cp.source if a is None else GIVEN, note=cp.note, phase=None)
        aa = float(a) if a is not None else cp.a
        cc = float(c) if c is not None else (cp.c if cp.c is not None else None)
        return dict(proto=proto, elements=cp.elements, a=aa, c=cc, name=cp.name, **info)
    # an element symbol
    sym_known = E.metal_symbols()
    canon = spec[:1].upper() + spec[1:].lower()
    if canon not in sym_known:
        choices = sym_known + E.compound_names() + list(PROTOTYPES)
        raise UserError(
            f"unknown element or structure '{spec}'{suggest(spec, choices)}; give an element "
            f"({', '.join(sym_known)}), a compound ({', '.join(E.compound_names())}), "
            f"a lattice type ({', '.join(PROTOTYPES)}) or a .cif/.toml file"
        )
    ph = E.phase(canon, phase)
    proto = prototype(ph.lattice)
    info.update(phase=ph.name, temperature_K=ph.temperature_K, source=ph.source, note=ph.note)
    if a is not None:            # the user's value: no other value's source or temperature
        info.update(temperature_K=None, source=GIVEN, note="")
    aa = float(a) if a is not None else ph.a
    if c is not None:
        cc = float(c)
    elif ph.c is not None and a is None:
        cc = ph.c
    elif ph.c is not None:
        cc = aa * ph.c / ph.a      # keep the phase's c/a when only a is changed
    else:
        cc = None
    return dict(proto=proto, elements=(canon,), a=aa, c=cc, name=canon, **info)


def _from_lattice(proto, element, elements, a, c, phase, info):
    if proto.n_species == 2:
        els = elements
        if els is None and element is not None:
            if isinstance(element, str) and E.is_compound(element):
                els = E.compound(element).elements
            elif isinstance(element, (tuple, list)):
                els = element
        if els is None or len(els) != 2:
            raise UserError(f"lattice type {proto.name} needs two elements, e.g. elements=('Ni', 'Al') "
                            f"or --element Ni,Al (majority sublattice first)")
        els = tuple(E._canon(x) for x in els)
        for s in els:
            E.atomic_number(s)
        if a is None:
            raise UserError(f"lattice type {proto.name} needs a lattice parameter a (in A), e.g. -a 3.57")
        return dict(proto=proto, elements=els, a=float(a), c=None if c is None else float(c),
                    name=f"{proto.name} {'-'.join(els)}", **info)
    if element is None:
        if elements and len(elements) == 1:
            element = elements[0]
        else:
            raise UserError(f"lattice type '{proto.name}' needs an element, e.g. element='Ni' (or --element Ni)")
    sym = E._canon(element)
    E.atomic_number(sym)
    if a is None:
        # a known phase of the element with this lattice, else estimated from the metallic radius
        if sym in E.metal_symbols():
            el = E.element(sym)
            ph = None
            if phase is not None:
                ph = E.phase(sym, phase)
            else:
                for p in el.phases.values():
                    if p.lattice == proto.name:
                        ph = p
                        break
            if ph is not None and ph.lattice == proto.name:
                info.update(phase=ph.name, temperature_K=ph.temperature_K, source=ph.source, note=ph.note)
                return dict(proto=proto, elements=(sym,), a=ph.a, c=ph.c if c is None else float(c), name=sym, **info)
            if el.metallic_radius:
                a = _a_from_radius(proto, el.metallic_radius)
                info.update(estimated=True, source=el.sources["metallic_radius"],
                            note=f"{sym} has no {proto.name} phase in the data: a estimated from its CN12 metallic "
                                 f"radius {el.metallic_radius} A (touching hard spheres); give -a for a measured value")
        if a is None:
            raise UserError(f"no lattice parameter known for {sym} as {proto.name}; give one with a= (-a), in A")
    elif not info.get("source"):
        info.update(source=GIVEN)
    return dict(proto=proto, elements=(sym,), a=float(a), c=None if c is None else float(c), name=sym, **info)


def _a_from_radius(proto, r):
    unit = proto.cell(1.0, None if not proto.needs_c else proto.default_c_over_a)
    d = _nn_distance(unit, proto.frac)
    return 2.0 * r / d


_nn_distance = cell_nn_distance     # the old private name


#: Accepted conventional-cell edge a (A): every element's conventional cell lies
#: well inside (common practice: Be hcp 2.29 A to Cs bcc 6.14 A and grey tin 6.49 A).
A_RANGE = (1.5, 10.0)


def _validate_params(proto, a, c):
    if not (isinstance(a, (int, float)) and math.isfinite(a)) or a <= 0:
        raise UserError(f"lattice parameter a = {a} must be a positive length in A (metals: about 2.5 to 5)")
    if a < A_RANGE[0] or a > A_RANGE[1]:
        raise UserError(f"lattice parameter a = {a:g} A is outside {A_RANGE[0]:g}-{A_RANGE[1]:g} A; conventional cells "
                        f"of the metals lie between about 2.3 (Be) and 6.5 A (grey tin); give a in angstrom")
    if c is not None:
        if not math.isfinite(c) or c <= 0:
            raise UserError(f"lattice parameter c = {c} must be a positive length in A")
        if not proto.needs_c:
            raise UserError(f"lattice type {proto.name} is cubic and takes no c; leave c out")
        ratio = c / a
        if ratio < 0.5 or ratio > 3.0:
            raise UserError(f"c/a = {ratio:.3f} is absurd for {proto.name}; it should lie between 0.5 and 3 "
                            f"(ideal close packing is 1.633)")


# ------------------------------------------------------------------ geometry helpers
def centering_vectors(frac, species):
    """Pure translations (fractional, in [0,1)) that map the basis onto itself.

    >>> import crystalview as cv
    >>> lat = cv.build("Fe").lattice
    >>> centering_vectors(lat.basis_frac, lat.basis_symbols).tolist()
    [[0.0, 0.0, 0.0], [0.5, 0.5, 0.5]]
    """
    frac = np.asarray(frac, float) % 1.0
    out = []
    for j in range(len(frac)):
        t = (frac[j] - frac[0]) % 1.0
        moved = (frac + t) % 1.0
        ok = True
        for i in range(len(frac)):
            diff = moved[i] - frac
            diff -= np.round(diff)
            hit = np.where(np.all(np.abs(diff) < 1e-6, axis=1))[0]
            if len(hit) == 0 or species[hit[0]] != species[i]:
                ok = False
                break
        if ok:
            out.append(t)
    return np.array(out)


def lattice_period(direction, centerings):
    """Shortest lattice translation along ``direction`` (conventional frac).

    >>> lattice_period((1, 1, 1), [np.zeros(3), np.full(3, 0.5)]).tolist()
    [0.5, 0.5, 0.5]
    >>> lattice_period((1, 0, 0), [np.zeros(3), np.full(3, 0.5)]).tolist()
    [1.0, 0.0, 0.0]
    """
    d = np.array(_gcd_reduce(direction), dtype=float)
    best = d
    for m in (2, 3, 4, 6):
        cand = d / m
        for t in centerings:
            diff = cand - t
            if np.all(np.abs(diff - np.round(diff)) < 1e-9):
                if np.linalg.norm(cand) < np.linalg.norm(best):
                    best = cand
    return best


def _fill(conv_cell, conv_frac, conv_species, P, return_index=False):
    """Atoms of the supercell whose rows (in conventional fractional units) are
    P, by enumerating conventional cells over its bounding box (with
    ``return_index``, also the basis entry each atom comes from)."""
    P = np.asarray(P, float)
    vol_ratio = abs(np.linalg.det(P))
    expected = int(round(vol_ratio * len(conv_frac)))
    corners = np.array(list(itertools.product((0, 1), repeat=3)), float) @ P
    lo = np.floor(corners.min(axis=0) - 1e-9).astype(int)
    hi = np.ceil(corners.max(axis=0) + 1e-9).astype(int)
    grid = np.stack(np.meshgrid(*[np.arange(l, h) for l, h in zip(lo, hi)], indexing="ij"), -1).reshape(-1, 3)
    fc = (grid[:, None, :] + conv_frac[None, :, :]).reshape(-1, 3)
    sp = np.tile(conv_species, len(grid))
    src = np.tile(np.arange(len(conv_frac)), len(grid))
    fn = fc @ np.linalg.inv(P)
    eps = 1e-7
    keep = np.all((fn > -eps) & (fn < 1 - eps), axis=1)
    fn = fn[keep]
    fn[np.abs(fn) < eps] = 0.0
    sp = sp[keep]
    src = src[keep]
    if len(fn) != expected:
        raise UserError(f"the supercell rows {P.tolist()} are not lattice translations of this structure "
                        f"(found {len(fn)} atoms, expected {expected}); use integer rows or orientation "
                        f"directions that are lattice vectors")
    order = np.lexsort((fn[:, 0], fn[:, 1], fn[:, 2]))
    if return_index:
        return fn[order], sp[order], src[order]
    return fn[order], sp[order]


def _tile(cell, frac, species, repeat):
    """Fast diagonal tiling: one broadcast add writes the (N, 3) output."""
    nx, ny, nz = repeat
    base = frac @ cell                                     # (nb, 3)
    nb = len(base)
    jk = (np.arange(ny)[:, None, None, None] * cell[1] + np.arange(nz)[None, :, None, None] * cell[2]
          + base[None, None, :, :])                          # (ny, nz, nb, 3), small
    out = np.empty((nx, ny, nz, nb, 3), dtype=float)
    np.add((np.arange(nx)[:, None] * cell[0])[:, None, None, None, :], jk[None], out=out)
    species = np.tile(np.asarray(species, np.uint8), nx * ny * nz)
    return out.reshape(-1, 3), species


# ------------------------------------------------------------------ build()
def build(spec, phase=None, *, element=None, elements=None, lattice=None, a=None, c=None,
          repeat=None, supercell=None, orient=None, max_atoms=None, seed=0, block=None,
          tolerance=None, realise=True) -> Crystal:
    """Build a crystal.

    Parameters
    ----------
    spec : element symbol ('Cu'), compound ('Ni3Al'), lattice type ('fcc',
        'bcc', 'hcp', 'sc', 'hex', 'diamond', 'B2', 'L1_2', 'L1_0') or a path
        to a .cif file.
    phase : named phase of an element ('alpha', 'gamma', ...).
    element / elements : the species for an explicit lattice type.
    lattice : pick the element's phase with this lattice type.
    a, c : lattice parameters in A (override the data file).
    repeat : (nx, ny, nz) copies of the (conventional or oriented) cell.
    supercell : 3x3 integer matrix; its rows are the new cell vectors in
        units of the conventional cell vectors.
    orient : three directions (e.g. ('[1-10]', '[11-2]', '[111]')) that become
        the new x, y, z; each cell edge is the shortest lattice period along it.
    max_atoms : atom cap (default 50 million).
    seed : for a CIF with partly occupied or shared sites, the seed of the
        draw that realises them over the supercell (see :mod:`crystalview.occupancy`).
    block : the data block of a CIF file holding several structures.
    tolerance : lattice recognition tolerance for a CIF, in A (default 0.01).
    realise : False keeps a CIF's partly occupied sites as an average
        structure (for writing it back with its occupancies).

    >>> c = build("Cu", repeat=(2, 2, 2))
    >>> len(c), c.lattice.prototype
    (32, 'fcc')
    """
    if max_atoms is not None:
        check_atom_count(0, max_atoms)          # the cap itself must make sense
    if isinstance(spec, (str, Path)) and str(spec).lower().endswith(".cif"):
        from .exchange.cif import read_cif

        from .occupancy import average_record, is_average
        from .occupancy import realise as _realise

        base = read_cif(spec, max_atoms=max_atoms, block=block, tolerance=tolerance)
        out = _supercell_of(base, repeat=repeat, supercell=supercell, orient=orient, max_atoms=max_atoms)
        if is_average(out):
            out.metadata["average"] = average_record(out)
            if realise:
                out = _realise(out, seed)
        return out
    if isinstance(spec, (str, Path)) and str(spec).lower().endswith(".toml"):
        raise UserError(f"'{spec}' is a scene file; run it with `crystalview run {spec}` or crystalview.scene.load_crystal()")
    r = _resolve(spec, phase=phase, element=element, elements=elements, a=a, c=c, lattice=lattice)
    proto = r["proto"]
    aa, cc = r["a"], r["c"]
    if proto.needs_c and cc is None:
        cc = aa * proto.default_c_over_a
    _validate_params(proto, aa, cc)
    conv = proto.cell(aa, cc)
    frac = proto.frac
    species_z = np.array([E.atomic_number(r["elements"][s]) for s in proto.sublattice], np.uint8)
    dnn = _nn_distance(conv, frac)
    radius = dnn / 2.0
    symbols = tuple(r["elements"][s] for s in proto.sublattice)
    lat = LatticeInfo(
        prototype=proto.name, title=proto.title, cell=conv, a=aa, c=cc, elements=tuple(r["elements"]),
        basis_frac=frac, basis_symbols=symbols, family=proto.family, space_group=proto.space_group,
        phase=r["phase"], temperature_K=r["temperature_K"], source=r["source"],
    )
    meta = {
        "built_from": str(spec), "name": r["name"], "lattice": proto.name, "phase": r["phase"],
        "a": aa, "c": cc, "temperature_K": r["temperature_K"], "source": r["source"],
        "note": r["note"], "a_estimated": r["estimated"], "hard_sphere_radius": radius,
        "nearest_neighbour_distance": dnn,
    }
    radii = {s: radius for s in r["elements"]}
    base = Crystal(conv, frac @ conv, species_z, metadata=meta, lattice=lat, species_radii=radii)
    return _supercell_of(base, repeat=repeat, supercell=supercell, orient=orient, max_atoms=max_atoms)


def _check_repeat(repeat):
    try:
        rep = tuple(int(x) for x in repeat)
        if any(float(x) != int(x) for x in repeat):
            raise ValueError
    except (TypeError, ValueError):
        raise UserError(f"repeat {repeat!r} must be three whole numbers, e.g. (3, 3, 3)") from None
    if len(rep) != 3:
        raise UserError(f"repeat {repeat!r} must be three whole numbers, e.g. (3, 3, 3)")
    if any(x < 1 for x in rep):
        raise UserError(f"repeat {rep} must be at least 1 along each axis, e.g. (3, 3, 3)")
    return rep


#: Largest supercell matrix entry accepted (a sheared matrix with huge entries
#: but a small determinant would still be filled through floating point).
MAX_SUPERCELL_ENTRY = 10 ** 9


def exact_cell_count(P, n_basis):
    """Exact number of atoms in the supercell whose rows are ``P`` (in
    conventional fractional units; entries whole or simple fractions such as
    1/2, 1/3 for centred lattices) of a conventional cell holding
    ``n_basis`` atoms: |det P| x n_basis in Python rationals, no overflow.

    >>> exact_cell_count([[0.5, -0.5, 0], [0.5, 0.5, -1], [1, 1, 1]], 4)
    6
    """
    from fractions import Fraction

    m = [[Fraction(float(x)).limit_denominator(24) for x in row] for row in P]
    d = (m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
         + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0]))
    return math.ceil(abs(d) * n_basis)


def orient_count(base, orient):
    """(exact atom count, P) of the oriented cell of ``base`` (directions for
    x, y and z), computed without building it.

    >>> import crystalview as cv
    >>> orient_count(cv.build("Cu"), ["[1-10]", "[11-2]", "[111]"])[0]
    6
    """
    lat = base.lattice
    if lat is not None and not np.allclose(np.asarray(lat.cell, float), base.cell, atol=1e-6):
        base = _to_conventional(base)
    P, _ = _orient_rows(orient, base.lattice, base.frac, base.numbers)
    return exact_cell_count(P, len(base)), P


def _supercell_ints(supercell):
    """A supercell matrix (9 numbers, 3 rows or 3 diagonal numbers, as
    numbers or text) as a 3x3 list of Python integers, checked before numpy
    sees it: no overflow, no cast warnings.

    >>> _supercell_ints(["2", "0", "0", "0", "2", "0", "0", "0", "2"])
    [[2, 0, 0], [0, 2, 0], [0, 0, 2]]
    >>> _supercell_ints([3, 3, 1])
    [[3, 0, 0], [0, 3, 0], [0, 0, 1]]
    """
    bad = UserError("the supercell matrix must be 3x3 whole numbers, rows = new cell vectors "
                    "in units of the conventional ones, e.g. [[1,-1,0],[1,1,0],[0,0,1]]")
    flat = []

    def walk(x):
        if isinstance(x, (list, tuple)) or (isinstance(x, np.ndarray) and x.ndim):
            for y in x:
                walk(y)
        else:
            flat.append(x)

    walk(supercell)
    out = []
    for x in flat:
        try:
            v = int(str(x).strip()) if isinstance(x, str) else None
        except ValueError:
            v = None
        if v is None:
            try:
                f = float(x)
            except (TypeError, ValueError):
                raise bad from None
            if not math.isfinite(f) or f != int(f):
                raise bad
            v = int(f)
        out.append(v)
    if len(out) == 3:
        out = [out[0], 0, 0, 0, out[1], 0, 0, 0, out[2]]
    if len(out) != 9:
        raise bad
    return [out[0:3], out[3:6], out[6:9]]


def _int_det(P, signed=False):
    """Exact |determinant| (or the signed one) of an integer 3x3 matrix (Python integers).

    >>> _int_det([[1, 1, 0], [-1, 1, 0], [0, 0, 1]])
    2
    """
    m = [[int(x) if isinstance(x, (int, np.integer)) else int(round(float(x))) for x in row] for row in P]
    d = (m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
         + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0]))
    return d if signed else abs(d)


def _fill_reduced(conv, frac, species, P):
    """_fill for any supercell matrix, however sheared: the cell is first
    reduced (pairwise Gauss reduction of the integer rows, exact) to an
    equivalent compact cell of the same lattice, whose bounding box holds few
    conventional cells; the atoms
    are then expressed in the user's cell and wrapped into it."""
    P = np.asarray(P, float)
    if np.all(np.abs(P) <= 8):
        return _fill(conv, frac, species, P, return_index=True)
    Pr = _reduce_rows(P, conv)
    fn, sp, src = _fill(conv, frac, species, np.round(Pr), return_index=True)
    f_user = (fn @ np.round(Pr)) @ np.linalg.inv(P)
    f_user -= np.floor(f_user)
    f_user[f_user > 1 - 1e-9] = 0.0
    f_user[np.abs(f_user) < 1e-9] = 0.0
    order = np.lexsort((f_user[:, 0], f_user[:, 1], f_user[:, 2]))
    return f_user[order], sp[order], src[order]


def _reduce_rows(P, conv, max_rounds=10_000):
    """Integer rows spanning the same lattice as P's, made short and nearly
    orthogonal by repeated pairwise reduction b_i -= round(b_i.b_j / b_j.b_j) b_j
    (unimodular steps: the lattice and the determinant are unchanged)."""
    rows = [[int(round(float(x))) for x in r] for r in np.asarray(P)]
    conv = np.asarray(conv, float)
    for _ in range(max_rounds):
        changed = False
        for i in range(3):
            for j in range(3):
                if i == j:
                    continue
                vi, vj = np.array(rows[i], float) @ conv, np.array(rows[j], float) @ conv
                q = round(float(vi @ vj) / float(vj @ vj))
                if q:
                    rows[i] = [a - q * b for a, b in zip(rows[i], rows[j])]
                    changed = True
        if not changed:
            break
    R = np.array(rows, float)
    if np.linalg.det(R) < 0:
        R[2] = -R[2]
    return R


def _to_conventional(base: Crystal) -> Crystal:
    """The crystal re-expressed in its lattice's conventional cell (a crystal
    read from a file in a primitive or other cell), so supercell rows and
    orientations are in conventional units as for the built-in structures."""
    lat = base.lattice
    P0 = np.asarray(lat.cell, float) @ np.linalg.inv(base.cell)
    if np.abs(P0 - np.round(P0)).max() > 1e-4:
        raise UserError("this crystal's cell is not a lattice cell of its recognised conventional cell; "
                        "give --repeat instead of --supercell or --orient")
    fn, sp, src = _fill(base.cell, base.frac % 1.0, base.numbers, np.round(P0), return_index=True)
    out = base.select(src)
    out.cell = np.asarray(lat.cell, float).copy()
    out.positions = fn @ out.cell
    out.numbers = np.asarray(sp, np.uint8)
    return out


def _supercell_of(base: Crystal, repeat=None, supercell=None, orient=None, max_atoms=None) -> Crystal:
    lat = base.lattice
    if (supercell is not None or orient is not None) and lat is not None \
            and not np.allclose(np.asarray(lat.cell, float), base.cell, atol=1e-6):
        base = _to_conventional(base)
    conv = base.cell
    frac = base.frac
    species = base.numbers
    src = np.arange(len(base))
    meta = dict(base.metadata)
    if supercell is not None and orient is not None:
        raise UserError("give either a supercell matrix or orientation directions, not both")
    rot = np.eye(3)
    new_cell = conv
    if supercell is not None or orient is not None:
        if supercell is not None:
            m = _supercell_ints(supercell)
            det = _int_det(m, signed=True)
            if det == 0:
                raise UserError("the supercell matrix is singular (its rows are coplanar); give three independent rows")
            if det < 0:
                raise UserError("the supercell matrix is left-handed (negative determinant); swap two rows or negate one")
            # exact count first (Python ints), so numpy never sees a matrix whose fill would not fit
            check_atom_count(det * len(frac) * (math.prod(_check_repeat(repeat)) if repeat is not None else 1),
                             max_atoms)
            big = max(abs(v) for row in m for v in row)
            if big > MAX_SUPERCELL_ENTRY:
                raise UserError(f"supercell matrix entry {big if big < 10 ** 12 else f'{float(big):.3g}'} is beyond "
                                f"+-{MAX_SUPERCELL_ENTRY:,}; shear the cell less (an equivalent matrix with "
                                f"small entries makes the same crystal)")
            P = np.array(m, dtype=float)
            meta["supercell"] = m
        else:
            P, labels = _orient_rows(orient, lat, frac, species)
            meta["orient"] = labels
        n_est = exact_cell_count(P, len(frac))
        rep = _check_repeat(repeat) if repeat is not None else (1, 1, 1)
        check_atom_count(n_est * math.prod(rep), max_atoms)
        fn, species, src = _fill_reduced(conv, frac, species, P)
        cell_c = P @ conv
        a_, b_, c_, al, be, ga = cell_parameters(cell_c)
        if orient is not None:
            new_cell = cell_from_parameters(a_, b_, c_, al, be, ga)
            rot = np.linalg.solve(cell_c, new_cell)      # v_new = v_old @ rot
        else:
            new_cell = cell_c
        frac = fn
    if repeat is not None:
        rep = _check_repeat(repeat)
        check_atom_count(len(frac) * math.prod(rep), max_atoms)
        positions, numbers = _tile(new_cell, frac, species, rep)
        src = np.tile(src, math.prod(rep))
        cell = new_cell * np.array(rep)[:, None]
        meta["repeat"] = list(rep)
    else:
        check_atom_count(len(frac), max_atoms)
        positions, numbers = frac @ new_cell, np.asarray(species, np.uint8)
        cell = new_cell
    if lat is not None and not np.allclose(rot, np.eye(3)):
        from dataclasses import replace

        lat = replace(lat, cell=lat.cell @ rot)
    same = len(src) == len(base) and np.array_equal(src, np.arange(len(base)))
    return Crystal(cell, positions, numbers, pbc=base.pbc, metadata=meta, lattice=lat,
                   species_radii=base.species_radii, roles=base.roles if same else base.roles[src],
                   occupancy=None if base.occupancy is None else base.occupancy[src])


def _orient_rows(orient, lat, frac, species):
    if lat is None:
        raise UserError("orientation needs a crystal with a known lattice")
    if len(orient) != 3:
        raise UserError("orientation needs three directions for x, y and z, e.g. [1-10] [11-2] [111]")
    cents = centering_vectors(frac, species)
    rows, labels = [], []
    for d in orient:
        ind = parse_indices(d, kind="direction") if isinstance(d, str) else None
        if ind is None:
            vals = tuple(int(v) for v in d)
            from .lattice import Indices

            ind = Indices("direction", vals)
        if ind.four and not lat.is_hexagonal:
            raise UserError(f"four-index direction {ind} is only for hexagonal cells; use [uvw]")
        rows.append(lattice_period(ind.three().values, cents))
        labels.append(str(ind))
    P = np.array(rows)
    cart = P @ lat.cell
    det = np.linalg.det(cart)
    if abs(det) < 1e-9:
        raise UserError(f"orientation directions {' '.join(labels)} are coplanar; give three independent directions")
    if det < 0:
        raise UserError(f"orientation {' '.join(labels)} is left-handed; negate the last direction")
    if lat.family == "cubic":
        cosines = [abs(np.dot(cart[i], cart[j])) / np.linalg.norm(cart[i]) / np.linalg.norm(cart[j])
                   for i, j in ((0, 1), (0, 2), (1, 2))]
        if max(cosines) > 1e-6:
            raise UserError(f"orientation directions {' '.join(labels)} are not mutually perpendicular; "
                            f"e.g. x=[1-10] y=[11-2] z=[111]")
    return P, labels
