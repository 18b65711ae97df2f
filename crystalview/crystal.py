"""The Crystal value: a periodic (or partly periodic) set of atoms.

Species and roles are stored as small-integer arrays, never as per-atom Python
objects, so a Crystal holds tens of millions of atoms: 24 bytes of position
plus 2 bytes of species and role per atom.
"""
from __future__ import annotations

import copy as _copy
from dataclasses import dataclass

import numpy as np

from .errors import UserError

#: Role names; an atom's role is an index into this tuple.  Append only.
ROLES = ("host", "solute", "interstitial")


def role_code(name):
    """The index of a role name in :data:`ROLES` (a UserError for an unknown name).

    >>> role_code("host"), role_code("interstitial")
    (0, 2)
    """
    try:
        return ROLES.index(name)
    except ValueError:
        raise UserError(f"unknown role '{name}'; known roles: {', '.join(ROLES)}") from None


@dataclass(frozen=True)
class LatticeInfo:
    """What the crystal was built from: the lattice type and its conventional
    cell expressed in the crystal's own Cartesian frame, so Miller indices
    relative to the conventional cell map straight to Cartesian vectors.

    >>> import crystalview as cv
    >>> lat = cv.build("Mg").lattice
    >>> lat.prototype, lat.family, lat.atoms_per_cell, round(lat.c / lat.a, 3)
    ('hcp', 'hexagonal', 2, 1.624)
    """

    prototype: str                 # key in prototypes.PROTOTYPES, or "cif"
    title: str
    cell: np.ndarray               # conventional cell in the crystal frame (rows, A)
    a: float
    c: float | None
    elements: tuple                # species on each sublattice
    basis_frac: np.ndarray         # conventional-cell fractional positions
    basis_symbols: tuple
    family: str                    # cubic / hexagonal / tetragonal / other
    space_group: int | None = None
    phase: str | None = None
    temperature_K: float | None = None
    source: str = ""
    #: lattice origin in the crystal, in conventional-cell fractions (None: at 0)
    origin: np.ndarray | None = None
    #: what stands on each sublattice when sites are shared ("Fe0.5Ni0.5"); None: the elements
    site_species: tuple | None = None

    @property
    def origin_frac(self):
        return np.zeros(3) if self.origin is None else np.asarray(self.origin, float)

    @property
    def atoms_per_cell(self):
        return len(self.basis_frac)

    @property
    def is_hexagonal(self):
        return self.family == "hexagonal"


class Crystal:
    """Atoms in a cell.

    Attributes
    ----------
    cell : (3, 3) float array, rows are the lattice vectors in A.
    positions : (N, 3) float array, Cartesian A.
    numbers : (N,) uint8 atomic numbers.
    roles : (N,) uint8 indices into :data:`ROLES`.
    pbc : three bools, periodic along each cell vector.
    metadata : dict recording how the crystal was made (and its defects).
    lattice : :class:`LatticeInfo` or None.
    species_radii : dict symbol -> hard-sphere radius (A) used for geometry.
    occupancy : None, or (N,) float array: the fraction of the time each entry
        is there (a CIF's ``_atom_site_occupancy``).  In an *average* structure
        several entries may share one site (see :mod:`crystalview.occupancy`);
        in a realised one it keeps each atom's occupancy on its shared site.

    >>> c = Crystal(np.eye(3) * 2.8665, [[0, 0, 0], [1.4333] * 3], symbols=["Fe", "Fe"])
    >>> c
    <Crystal Fe2 (2 atoms) cell 2.8665 x 2.8665 x 2.8665 A>
    >>> c.counts(), round(c.volume, 3)
    ({'Fe': 2}, 23.554)
    """

    __slots__ = ("cell", "positions", "numbers", "roles", "pbc", "metadata", "lattice",
                 "species_radii", "occupancy", "_symbols_cache")

    def __init__(self, cell, positions, numbers=None, *, symbols=None, roles=None, pbc=(True, True, True),
                 metadata=None, lattice=None, species_radii=None, occupancy=None):
        from .elements import atomic_number

        self.cell = np.array(cell, dtype=float).reshape(3, 3)
        pos = np.asarray(positions, dtype=float)
        if pos.ndim != 2 or (pos.size and pos.shape[1] != 3):
            pos = pos.reshape(-1, 3)
        self.positions = pos
        n = len(pos)
        if numbers is None:
            if symbols is None:
                raise UserError("a Crystal needs numbers= or symbols=")
            symbols = np.asarray(symbols)
            uniq, inv = np.unique(symbols, return_inverse=True)
            table = np.array([atomic_number(s) for s in uniq], dtype=np.uint8)
            numbers = table[inv] if n else np.zeros(0, np.uint8)
        self.numbers = np.asarray(numbers, dtype=np.uint8).reshape(-1)
        if roles is None:
            roles = np.zeros(n, dtype=np.uint8)
        self.roles = np.asarray(roles, dtype=np.uint8).reshape(-1)
        if len(self.numbers) != n or len(self.roles) != n:
            raise UserError("positions, numbers and roles must have the same length")
        self.pbc = tuple(bool(x) for x in pbc)
        self.metadata = dict(metadata or {})
        self.lattice = lattice
        self.species_radii = dict(species_radii or {})
        self._symbols_cache = None
        self.occupancy = None
        if occupancy is not None:
            occ = np.asarray(occupancy, dtype=float).reshape(-1)
            if len(occ) != n or not np.all(np.isfinite(occ)) or np.any(occ <= 0) or np.any(occ > 1 + 1e-6):
                raise UserError("occupancy must hold one number in (0, 1] per atom")
            self.occupancy = np.minimum(occ, 1.0)
        if abs(np.linalg.det(self.cell)) < 1e-9:
            raise UserError("the cell vectors are coplanar (zero volume); give three independent vectors")

    # ------------------------------------------------------------- basics
    def __len__(self):
        return len(self.positions)

    def __repr__(self):
        counts = self.counts()
        formula = " ".join(f"{s}{n}" for s, n in counts.items()) or "empty"
        lengths = np.linalg.norm(self.cell, axis=1)
        lt = f" {self.lattice.prototype}" if self.lattice else ""
        rep = self.metadata.get("repeat")
        rep = f" repeat={tuple(rep)}" if rep else ""
        defects = self.metadata.get("defects") or []
        d = f" defects={[x.get('kind') for x in defects]}" if defects else ""
        return (f"<Crystal{lt} {formula} ({len(self)} atoms) cell "
                f"{lengths[0]:.4f} x {lengths[1]:.4f} x {lengths[2]:.4f} A{rep}{d}>")

    @property
    def symbols(self):
        """Element symbols, one per atom (a numpy array of str)."""
        if self._symbols_cache is None or len(self._symbols_cache) != len(self):
            from .elements import symbol_of

            uniq, inv = np.unique(self.numbers, return_inverse=True)
            table = np.array([symbol_of(z) for z in uniq], dtype="<U2")
            self._symbols_cache = table[inv] if len(self) else np.zeros(0, "<U2")
        return self._symbols_cache

    @property
    def elements(self):
        """Element symbols present, in order of first appearance by atomic number."""
        from .elements import symbol_of

        return [symbol_of(z) for z in np.unique(self.numbers)]

    def counts(self):
        """Atoms of each species; for an average structure (partly occupied
        sites) the occupancy-weighted numbers."""
        from .elements import symbol_of

        if self.occupancy is not None and not self.metadata.get("realisation"):
            from .occupancy import composition

            return {s: round(v, 6) for s, v in composition(self).items()}
        z, n = np.unique(self.numbers, return_counts=True)
        return {symbol_of(a): int(b) for a, b in zip(z, n)}

    def role_counts(self):
        r, n = np.unique(self.roles, return_counts=True)
        return {ROLES[a]: int(b) for a, b in zip(r, n)}

    @property
    def volume(self):
        """Cell volume in A^3."""
        return float(abs(np.linalg.det(self.cell)))

    @property
    def mass_amu(self):
        from .elements import atomic_mass, symbol_of

        if self.occupancy is not None and not self.metadata.get("realisation"):
            return float(sum(atomic_mass(s) * n for s, n in self.counts().items()))
        z, n = np.unique(self.numbers, return_counts=True)
        return float(sum(atomic_mass(symbol_of(a)) * b for a, b in zip(z, n)))

    # ------------------------------------------------------------- coordinates
    @property
    def frac(self):
        """Fractional coordinates (N, 3)."""
        return self.to_fractional(self.positions)

    def to_fractional(self, cart):
        return np.linalg.solve(self.cell.T, np.asarray(cart, dtype=float).T).T

    def to_cartesian(self, frac):
        return np.asarray(frac, dtype=float) @ self.cell

    def wrapped(self):
        """A copy with every atom moved into the cell along periodic axes."""
        f = self.frac
        for k in range(3):
            if self.pbc[k]:
                f[:, k] -= np.floor(f[:, k])
                f[:, k][f[:, k] >= 1.0 - 1e-12] = 0.0
        out = self.copy()
        out.positions = f @ self.cell
        return out

    # ------------------------------------------------------------- radii
    def radius_of(self, symbol):
        """Hard-sphere radius (A) used for this species."""
        if symbol in self.species_radii:
            return float(self.species_radii[symbol])
        from .elements import solute_radius

        return float(solute_radius(symbol)[0])

    def atom_radii(self):
        """Per-atom hard-sphere radius (A), (N,) float array."""
        from .elements import symbol_of

        uniq, inv = np.unique(self.numbers, return_inverse=True)
        table = np.array([self.radius_of(symbol_of(z)) for z in uniq], dtype=float)
        return table[inv] if len(self) else np.zeros(0)

    # ------------------------------------------------------------- edits (return new crystals)
    def copy(self):
        out = Crystal.__new__(Crystal)
        out.cell = self.cell.copy()
        out.positions = self.positions.copy()
        out.numbers = self.numbers.copy()
        out.roles = self.roles.copy()
        out.pbc = self.pbc
        out.metadata = _copy.deepcopy(self.metadata)
        out.lattice = self.lattice
        out.species_radii = dict(self.species_radii)
        out.occupancy = None if self.occupancy is None else self.occupancy.copy()
        out._symbols_cache = None
        return out

    def select(self, which):
        """A new crystal with only the atoms picked by a boolean mask or index array."""
        out = self.copy()
        out.positions = self.positions[which]
        out.numbers = self.numbers[which]
        out.roles = self.roles[which]
        if self.occupancy is not None:
            out.occupancy = self.occupancy[which]
        return out

    def delete(self, indices):
        mask = np.ones(len(self), bool)
        mask[np.asarray(indices, dtype=int)] = False
        return self.select(mask)

    def add_atoms(self, positions, symbols, role="host", radius=None):
        """A new crystal with atoms appended (Cartesian positions)."""
        from .elements import atomic_number

        pos = np.asarray(positions, dtype=float).reshape(-1, 3)
        if isinstance(symbols, str):
            symbols = [symbols] * len(pos)
        nums = np.array([atomic_number(s) for s in symbols], dtype=np.uint8)
        out = self.copy()
        out.positions = np.vstack([self.positions, pos])
        out.numbers = np.concatenate([self.numbers, nums])
        out.roles = np.concatenate([self.roles, np.full(len(pos), role_code(role), np.uint8)])
        if self.occupancy is not None:
            out.occupancy = np.concatenate([self.occupancy, np.ones(len(pos))])
        if radius is not None:
            for s in set(symbols):
                out.species_radii[s] = float(radius)
        return out

    def with_metadata(self, **kw):
        out = self.copy()
        out.metadata.update(kw)
        return out

    def record_defect(self, kind, **info):
        """Append a defect record to metadata['defects'] (in place); returns self."""
        self.metadata.setdefault("defects", []).append({"kind": kind, **info})
        return self
