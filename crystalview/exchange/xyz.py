"""Extended XYZ: the atom count, a comment line carrying the lattice
(``Lattice="ax ay az bx by bz cx cy cz"``), the column layout
(``Properties=species:S:1:pos:R:3:role:S:1``) and ``pbc``, then one line per
atom: element, x y z in angstrom, role."""
from __future__ import annotations


#: Atoms formatted per chunk while streaming (bounds the memory of a large export).
CHUNK = 100_000


def _header(crystal):
    cell = " ".join(f"{x:.8f}" for x in crystal.cell.reshape(-1))
    pbc = " ".join("T" if p else "F" for p in crystal.pbc)
    # one line whatever the name holds: control characters (a multi-line formula from a CIF) become spaces
    name = "".join(ch if ch.isprintable() else " " for ch in str(crystal.metadata.get("name") or "crystal"))
    name = " ".join(name.replace('"', "'").split()) or "crystal"
    head = (f'Lattice="{cell}" Properties=species:S:1:pos:R:3:role:S:1 pbc="{pbc}" '
            f'name="{name}" units="angstrom"')
    return f"{len(crystal)}\n{head}\n"


def _chunks(crystal):
    """The atom lines, CHUNK atoms at a time (bounded memory)."""
    from ..crystal import ROLES

    syms = crystal.symbols
    for a in range(0, len(crystal), CHUNK):
        b = min(a + CHUNK, len(crystal))
        pos = crystal.positions[a:b].tolist()
        rl = crystal.roles[a:b].tolist()
        sy = syms[a:b].tolist()
        yield "".join(f"{s:<2s} {p[0]:15.8f} {p[1]:15.8f} {p[2]:15.8f} {ROLES[r]}\n"
                      for s, p, r in zip(sy, pos, rl))


def xyz_text(crystal):
    """The extended XYZ text of a crystal (whole, for small crystals).

    >>> import crystalview as cv
    >>> print(xyz_text(cv.build("Fe")).splitlines()[2])
    Fe      0.00000000      0.00000000      0.00000000 host
    """
    return _header(crystal) + "".join(_chunks(crystal))


def write_xyz(crystal, path, *, force=False):
    """Write extended XYZ with the lattice and a role column, streamed in
    chunks (memory stays near the crystal's own); returns a summary dict.

    >>> import crystalview as cv, os, tempfile
    >>> p = os.path.join(tempfile.mkdtemp(), "fe.xyz")
    >>> out = write_xyz(cv.build("Fe"), p)
    >>> out["atoms"], open(p).read().splitlines()[0]
    (2, '2')
    """
    from ..limits import check_atom_count
    from ..fileio import atomic_write

    check_atom_count(len(crystal), what="this XYZ export")
    size = [0]

    def writer(tmp):
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            for part in [_header(crystal)]:
                fh.write(part)
                size[0] += len(part.encode("utf-8"))
            for part in _chunks(crystal):
                fh.write(part)
                size[0] += len(part.encode("utf-8"))

    atomic_write(path, writer=writer, force=force)
    return {"file": str(path), "format": "xyz", "atoms": len(crystal), "bytes": size[0]}
