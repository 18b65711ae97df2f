"""Extended XYZ: the atom count, a comment line carrying the lattice
(``Lattice="ax ay az bx by bz cx cy cz"``), the column layout
(``Properties=species:S:1:pos:R:3:role:S:1``) and ``pbc``, then one line per
atom: element, x y z in angstrom, role."""
from __future__ import annotations


def xyz_text(crystal):
    from ..crystal import ROLES

    cell = " ".join(f"{x:.8f}" for x in crystal.cell.reshape(-1))
    pbc = " ".join("T" if p else "F" for p in crystal.pbc)
    # one line whatever the name holds: control characters (a multi-line formula from a CIF) become spaces
    name = "".join(ch if ch.isprintable() else " " for ch in str(crystal.metadata.get("name") or "crystal"))
    name = " ".join(name.replace('"', "'").split()) or "crystal"
    head = (f'Lattice="{cell}" Properties=species:S:1:pos:R:3:role:S:1 pbc="{pbc}" '
            f'name="{name}" units="angstrom"')
    import io

    import numpy as np

    out = io.StringIO()
    out.write(f"{len(crystal)}\n{head}\n")
    if len(crystal):
        table = np.empty((len(crystal), 5), dtype=object)
        table[:, 0] = crystal.symbols
        table[:, 1:4] = crystal.positions
        table[:, 4] = np.array(ROLES, dtype=object)[crystal.roles]
        np.savetxt(out, table, fmt=["%-2s", "%15.8f", "%15.8f", "%15.8f", "%s"])
    return out.getvalue()


def write_xyz(crystal, path, *, force=False):
    """Write extended XYZ with the lattice and a role column; returns a summary dict."""
    from ..build import check_atom_count
    from ..fileio import atomic_write

    check_atom_count(len(crystal), what="this XYZ export")
    text = xyz_text(crystal)
    atomic_write(path, text, force=force)
    return {"file": str(path), "format": "xyz", "atoms": len(crystal), "bytes": len(text.encode("utf-8"))}
