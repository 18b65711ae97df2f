"""Recognise the lattice type of any crystal from its atom positions.

A crystal read from a file (or built by hand as a bare :class:`Crystal`) is
compared with the tool's lattice types (:data:`crystalview.prototypes.PROTOTYPES`):
spglib finds the space group and the standardised conventional cell
(International Tables Vol. A settings); each lattice type with that space group
is then tried: its conventional cell is expressed in the crystal's own frame,
every atom's position in that cell is compared with the type's Wyckoff
positions (any origin), and the species must sit one per sublattice.  A match
gives a :class:`~crystalview.crystal.LatticeInfo` exactly like the one
:func:`crystalview.build` makes for the built-in structure, plus the origin of
the lattice in the crystal, so named sites, slip systems, planes and
directions work the same.

Sites shared by several species (partial or mixed occupancy, see
:mod:`crystalview.occupancy`) count as one site whose "species" is its
occupancy signature: a disordered Fe-Ni solid solution on a face-centred cubic
lattice is recognised as fcc (the A1 solid solution).

The tolerance is a distance in angstrom (spglib's ``symprec``), 0.01 A by
default: far above the rounding of coordinates written with four decimals
(0.3333 of a 3.2 A cell is 1e-4 A off), far below the displacement of any real
distortion of a metal lattice.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from .errors import UserError

#: Default recognition tolerance (A), see the module docstring.
DEFAULT_TOLERANCE = 0.01
#: Above this many sites the recognition is not tried (spglib's cost grows
#: with atoms x operations; a CIF of a metal lists a few sites).
MAX_SITES = 20_000

#: Conventional cell of a lattice type from spglib's standardised cell (rows):
#: identity except L1_0, whose standard cell is the primitive tetragonal one
#: (a/sqrt2, 2 atoms) while the trade draws the face-centred setting.
_FROM_STANDARD = {"L1_0": np.array([[1.0, 1.0, 0.0], [-1.0, 1.0, 0.0], [0.0, 0.0, 1.0]])}


@dataclass(frozen=True)
class Recognition:
    """The lattice type found for a crystal.

    lattice : key of :data:`~crystalview.prototypes.PROTOTYPES` ("fcc", ...) or
        "other".
    space_group : number found by spglib (None when spglib found none).
    conventional_cell : (3, 3) rows, the type's conventional cell in the
        crystal's frame (None for "other").
    origin : (3,) the lattice origin in conventional-cell fractions.
    elements : species on each sublattice (an occupancy signature such as
        "Fe0.5Ni0.5" for a shared site).
    deviation : largest distance (A) of an atom from its ideal position.
    tolerance : the tolerance used (A).
    reason : why the crystal is "other" (empty when recognised).

    >>> import crystalview as cv
    >>> r = recognise(cv.build("Fe", repeat=(2, 2, 2)))
    >>> r.lattice, r.space_group, r.recognised
    ('bcc', 229, True)
    """

    lattice: str
    space_group: int | None
    conventional_cell: np.ndarray | None
    origin: np.ndarray
    elements: tuple
    deviation: float
    tolerance: float
    reason: str = ""

    @property
    def recognised(self):
        return self.lattice != "other"


def _other(reason, number, tol):
    return Recognition("other", number, None, np.zeros(3), (), float("nan"), tol, reason)


def _dataset(cell, frac, types, tol):
    import spglib

    errors = (RuntimeError, ValueError, TypeError, getattr(getattr(spglib, "error", None), "SpglibError",
                                                             RuntimeError))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            return spglib.get_symmetry_dataset((cell, frac, types), symprec=tol)
    except errors:
        return None


def recognise_sites(cell, frac, types, tolerance=DEFAULT_TOLERANCE, names=None):
    """Recognise the lattice type of sites at fractional positions ``frac``
    in ``cell`` (rows, A) with integer site ``types``; ``names`` maps a type
    to the text reported for it (an element symbol or an occupancy signature).

    >>> import numpy as np
    >>> r = recognise_sites(np.diag([3.6, 3.6, 3.6]), [[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]], [1] * 4)
    >>> r.lattice, r.space_group
    ('fcc', 225)
    """
    from .prototypes import PROTOTYPES

    tol = float(tolerance)
    if not (np.isfinite(tol) and 0 < tol < 1.0):
        raise UserError(f"recognition tolerance {tolerance} must be a distance between 0 and 1 A, e.g. 0.01")
    cell = np.asarray(cell, float)
    frac = np.asarray(frac, float).reshape(-1, 3) % 1.0
    types = np.asarray(types, int)
    names = names or {}
    if len(frac) == 0:
        return _other("no atoms", None, tol)
    if len(frac) > MAX_SITES:
        return _other(f"over {MAX_SITES:,} sites: too many to recognise; give the conventional cell", None, tol)
    if len(set(types.tolist())) > 2:
        return _other(f"{len(set(types.tolist()))} kinds of site; the built-in lattice types have at most 2",
                      None, tol)
    spread = _nn_spread(cell, frac)
    if spread > 4 * tol:
        return _other(f"the atoms' nearest-neighbour distances differ by up to {spread:.3f} A; in every built-in "
                      f"lattice type they are equal", None, tol)
    ds = _dataset(cell, frac, types, tol)
    if ds is None:
        return _other("spglib found no space group at this tolerance", None, tol)
    number = int(ds.number)
    cands = [p for p in PROTOTYPES.values() if p.space_group == number]
    if not cands:
        return _other(f"space group {number} is not that of any built-in lattice type", number, tol)
    P = np.asarray(ds.transformation_matrix, float)
    std_rows = np.linalg.inv(P).T @ cell           # the standard cell, in the crystal's own frame
    cart = frac @ cell
    for proto in cands:
        conv = _FROM_STANDARD.get(proto.name, np.eye(3)) @ std_rows
        hit = _match(conv, cart, types, proto, tol, abs(np.linalg.det(cell)))
        if hit is None:
            continue
        origin, species, dev = hit
        elements = tuple(names.get(t, str(t)) for t in species)
        return Recognition(proto.name, number, conv, origin, elements, dev, tol)
    return _other(f"space group {number}, but the atoms do not sit on the Wyckoff positions of "
                  f"{' or '.join(p.name for p in cands)}", number, tol)


def _nn_spread(cell, frac):
    """Spread (A) of the atoms' nearest-neighbour distances (periodic)."""
    from scipy.spatial import cKDTree

    from .analysis.neighbours import with_images

    pos = np.asarray(frac, float) @ cell
    n = len(pos)
    if n == 1:
        return 0.0
    reach = 2.5 * (abs(np.linalg.det(cell)) / n) ** (1 / 3)
    pts, _ = with_images(pos, cell, (True, True, True), reach)
    d, _ = cKDTree(pts).query(pos, k=2)
    nn = d[:, 1]
    if not np.all(np.isfinite(nn)):
        return float("inf")
    return float(nn.max() - nn.min())


def _match(conv, cart, types, proto, tol, cell_volume):
    """(origin, species per sublattice, deviation) when the atoms are the
    prototype's basis in cell ``conv`` under some origin shift, else None."""
    basis = proto.frac
    F = np.linalg.solve(conv.T, cart.T).T
    for j in range(len(basis)):
        off = F[0] - basis[j]
        d = F[:, None, :] - off - basis[None, :, :]
        d -= np.round(d)
        dist = np.linalg.norm(d @ conv, axis=2)              # (atoms, basis)
        k = np.argmin(dist, axis=1)
        dev = dist[np.arange(len(F)), k]
        if dev.max() > 4 * tol:
            continue
        species = []
        ok = True
        for s in range(proto.n_species):
            on = types[np.isin(k, np.nonzero(np.asarray(proto.sublattice) == s)[0])]
            if len(on) == 0 or len(set(on.tolist())) != 1:
                ok = False
                break
            species.append(int(on[0]))
        if not ok or len(set(species)) != len(species):
            continue
        # as many sites as the lattice has in this volume (no position left empty)
        if abs(len(F) - len(basis) * cell_volume / abs(np.linalg.det(conv))) > 1e-3:
            continue
        # refine: the origin as the mean offset, so a rounded file does not bias it
        d0 = F - basis[k]
        d0 -= np.round(d0 - off)
        origin = d0.mean(axis=0)
        origin -= np.floor(origin)
        origin[origin > 1 - 1e-9] = 0.0
        return origin, species, float(dev.max())
    return None


def recognise(crystal, tolerance=DEFAULT_TOLERANCE):
    """The :class:`Recognition` of a crystal's lattice type, from its atoms
    alone (sites shared by several species count as one site).

    >>> import crystalview as cv
    >>> recognise(cv.build("Mg")).lattice
    'hcp'
    """
    from .occupancy import site_groups

    if len(crystal) == 0:
        return _other("no atoms", None, float(tolerance))
    groups = site_groups(crystal)
    frac = crystal.frac[groups.first]
    names = {t: n for t, n in enumerate(groups.signatures)}
    rec = recognise_sites(crystal.cell, frac, groups.site_type, tolerance, names)
    if rec.recognised or len(frac) > MAX_SITES or not all(crystal.pbc):
        return rec
    host = recognise_host(crystal.cell, frac, groups.site_type, tolerance, names)
    return host if host is not None else rec


#: A crystal is "lightly defected" when at least this fraction of its sites
#: sit on the host lattice found from its most common translations.
MIN_ON_LATTICE = 0.9


def recognise_host(cell, frac, types, tolerance=DEFAULT_TOLERANCE, names=None):
    """The lattice type of the host of a lightly defected crystal (a few
    vacancies, solutes or interstitials in a supercell listed atom by atom),
    or None.  The lattice translations are the neighbour vectors that carry
    most sites onto sites of the same kind; the three shortest independent
    ones span a primitive cell; the positions most sites take in it are the
    motif, recognised as in :func:`recognise_sites`.  At least
    MIN_ON_LATTICE of the sites must sit on the host lattice.

    >>> import crystalview as cv
    >>> c = cv.build("Cu", repeat=(3, 3, 3)).delete([0, 5])
    >>> recognise_host(c.cell, c.frac, [0] * len(c)).lattice
    'fcc'
    """
    from scipy.spatial import cKDTree

    from .analysis.neighbours import with_images

    tol = float(tolerance)
    cell = np.asarray(cell, float)
    frac = np.asarray(frac, float) % 1.0
    types = np.asarray(types, int)
    n = len(frac)
    if n < 8:
        return None
    pos = frac @ cell
    reach = 3.0 * (abs(np.linalg.det(cell)) / n) ** (1 / 3)
    pts, which = with_images(pos, cell, (True, True, True), reach)
    tree = cKDTree(pts)
    d, _ = tree.query(pos, k=2)
    dnn = float(np.median(d[:, 1]))
    if not np.isfinite(dnn) or dnn <= 0:
        return None
    # candidate translations: neighbour vectors of a sample of sites, counted on a grid of the tolerance
    rng = np.random.default_rng(0)
    sample = rng.choice(n, size=min(n, 200), replace=False)
    grid = max(4 * tol, 0.02 * dnn)
    votes = {}
    for i, lst in zip(sample, tree.query_ball_point(pos[sample], 2.05 * dnn)):
        for j in lst:
            v = pts[j] - pos[i]
            if v @ v < 0.25 * dnn * dnn:
                continue
            key = tuple(np.round(v / grid).astype(int))
            votes[key] = votes.get(key, 0) + 1
    cands = [np.array(k, float) * grid for k, c in votes.items() if c >= 0.6 * len(sample)]
    if len(cands) < 3:
        return None
    # keep the vectors that carry most sites onto a site of the same kind
    trans = []
    for v in sorted(cands, key=lambda x: float(x @ x)):
        dd, jj = tree.query(pos + v, distance_upper_bound=max(4 * tol, 0.15 * dnn))
        hit = np.isfinite(dd)
        same = hit & (types[which[np.minimum(jj, len(which) - 1)]] == types)
        if same.mean() >= MIN_ON_LATTICE - 0.05:
            # the exact vector: the mean displacement of the matched pairs
            trans.append((pts[jj[same]] - pos[same]).mean(axis=0))
    if len(trans) < 3:
        return None
    basis = _shortest_basis(trans)
    if basis is None:
        return None
    # the motif: where the sites sit in that primitive cell, most common positions first
    f = pos @ np.linalg.inv(basis)
    f -= np.floor(f)
    motif, counts = [], []
    for k in range(n):
        for m, q in enumerate(motif):
            dq = f[k] - q
            dq -= np.round(dq)
            if np.linalg.norm(dq @ basis) < max(4 * tol, 0.15 * dnn):
                counts[m].append(k)
                break
        else:
            motif.append(f[k].copy())
            counts.append([k])
    n_cells = abs(np.linalg.det(cell) / np.linalg.det(basis))
    keep = [m for m, c in enumerate(counts) if len(c) >= 0.5 * n_cells]
    on = sum(len(counts[m]) for m in keep)
    if not keep or on < MIN_ON_LATTICE * n:
        return None
    mfrac, mtypes = [], []
    for m in keep:
        members = np.array(counts[m])
        t = np.bincount(types[members]).argmax()
        mtypes.append(int(t))
        dq = f[members] - f[members[0]]
        dq -= np.round(dq)
        mfrac.append((f[members[0]] + dq.mean(axis=0)) % 1.0)
    rec = recognise_sites(basis, np.array(mfrac), mtypes, tol, names)
    if not rec.recognised:
        return None
    from dataclasses import replace

    empty = int(round(n_cells)) * len(keep) - on
    return replace(rec, reason=f"lightly defected: {n - on} of {n} sites off the host lattice, "
                               f"{max(empty, 0)} host lattice points empty")


def _shortest_basis(trans):
    """Three shortest linearly independent vectors of ``trans`` that generate
    every vector of it with whole numbers (a primitive cell), or None."""
    import itertools

    vs = sorted((np.asarray(v, float) for v in trans), key=lambda x: float(x @ x))[:24]
    for i, j, k in itertools.combinations(range(len(vs)), 3):
        B = np.array([vs[i], vs[j], vs[k]])
        vol = abs(np.linalg.det(B))
        if vol < 1e-3 * np.linalg.norm(B, axis=1).prod():
            continue
        coeff = np.array(vs) @ np.linalg.inv(B)
        if np.all(np.abs(coeff - np.round(coeff)) < 0.05):
            if np.linalg.det(B) < 0:
                B[2] = -B[2]
            return B
    return None


def attach_lattice(crystal, tolerance=DEFAULT_TOLERANCE, title_note=""):
    """The crystal with ``lattice`` set from :func:`recognise` when it is one
    of the lattice types (the crystal itself, unchanged, when it is not);
    ``metadata['recognition']`` records the outcome either way.

    >>> import crystalview as cv
    >>> c = attach_lattice(cv.Crystal(np.diag([2.87] * 3), [[0, 0, 0], [1.435] * 3], symbols=["Fe"] * 2))
    >>> c.lattice.prototype, c.metadata["recognition"]["lattice"]
    ('bcc', 'bcc')
    """
    from .crystal import LatticeInfo
    from .prototypes import PROTOTYPES

    rec = recognise(crystal, tolerance)
    out = crystal.copy()
    info = {"lattice": rec.lattice, "space_group": rec.space_group, "tolerance_A": rec.tolerance}
    if not rec.recognised:
        info["reason"] = rec.reason
        out.metadata["recognition"] = info
        return out
    proto = PROTOTYPES[rec.lattice]
    conv = rec.conventional_cell
    a = float(np.linalg.norm(conv[0]))
    c = None if proto.family == "cubic" else float(np.linalg.norm(conv[2]))
    info.update(deviation_A=rec.deviation, elements=list(rec.elements), a_A=a, c_A=c)
    if rec.reason:
        info["note"] = rec.reason
    out.metadata["recognition"] = info
    symbols = tuple(_majority(e) for e in rec.elements)
    basis_symbols = tuple(symbols[s] for s in proto.sublattice)
    old = crystal.lattice
    lat = LatticeInfo(
        prototype=proto.name, title=proto.title, cell=conv, a=a, c=c, elements=symbols,
        basis_frac=proto.frac, basis_symbols=basis_symbols, family=proto.family,
        space_group=proto.space_group, phase=old.phase if old is not None else None,
        temperature_K=old.temperature_K if old is not None else None,
        source=old.source if old is not None else "", origin=np.asarray(rec.origin, float),
        site_species=tuple(rec.elements),
    )
    out.lattice = lat
    out.metadata["lattice"] = proto.name
    if rec.reason and len(out) and not np.any(out.roles):
        out.roles = _roles_on_lattice(out)
    return out


def _roles_on_lattice(crystal):
    """Roles from where the atoms sit: off the lattice points -> interstitial,
    on them with a species other than the sublattice's -> solute."""
    from .crystal import role_code
    from .occupancy import parse_signature

    lat = crystal.lattice
    conv = np.asarray(lat.cell, float)
    F = np.linalg.solve(conv.T, crystal.positions.T).T - lat.origin_frac
    basis = np.asarray(lat.basis_frac, float)
    d = F[:, None, :] - basis[None, :, :]
    d -= np.round(d)
    dist = np.linalg.norm(d @ conv, axis=2)
    k = np.argmin(dist, axis=1)
    near = dist[np.arange(len(F)), k]
    dnn = min(float(np.linalg.norm((basis[i] - basis[j] - np.round(basis[i] - basis[j])) @ conv))
              for i in range(len(basis)) for j in range(len(basis)) if i != j) if len(basis) > 1 else \
        float(np.linalg.norm(conv, axis=1).min())
    roles = np.zeros(len(crystal), np.uint8)
    syms = crystal.symbols
    allowed = [{s for s, _ in parse_signature(lat.site_species[sub])} if lat.site_species else {lat.elements[sub]}
               for sub in _sublattice_of(lat)]
    for i in range(len(crystal)):
        if near[i] > 0.25 * dnn:
            roles[i] = role_code("interstitial")
        elif syms[i] not in allowed[k[i]]:
            roles[i] = role_code("solute")
    return roles


def _sublattice_of(lat):
    from .prototypes import PROTOTYPES

    return PROTOTYPES[lat.prototype].sublattice


def _majority(signature):
    """The species with the largest occupancy in a signature ('Fe0.6Ni0.4' -> 'Fe')."""
    from .occupancy import parse_signature

    parts = parse_signature(signature)
    return max(parts, key=lambda kv: kv[1])[0] if parts else signature


def with_origin(lattice, origin):
    """A copy of a LatticeInfo with another origin (conventional fractions).

    >>> import crystalview as cv
    >>> lat = with_origin(cv.build("Cu").lattice, [0.5, 0.5, 0.5])
    >>> lat.origin_frac.tolist(), lat.prototype
    ([0.5, 0.5, 0.5], 'fcc')
    """
    return replace(lattice, origin=np.asarray(origin, float))
