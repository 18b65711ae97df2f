"""CIF (IUCr CIF 1.1): write every atom of the cell in space group P 1, and
read any small-molecule/inorganic CIF with gemmi, expanding the asymmetric
unit by the space group's symmetry operations.

Reading is gemmi's job (``gemmi.cif.read`` + ``gemmi.make_small_structure_from_block``
+ ``get_all_unit_cell_sites``); no CIF parsing is done here by hand.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import UserError


# ------------------------------------------------------------------ reading
def _family(a, b, c, al, be, ga, tol_len=1e-3, tol_ang=0.01):
    def eq(x, y):
        return abs(x - y) <= tol_len * max(x, y)

    right = all(abs(x - 90.0) < tol_ang for x in (al, be, ga))
    if right and eq(a, b) and eq(b, c):
        return "cubic"
    if eq(a, b) and abs(al - 90) < tol_ang and abs(be - 90) < tol_ang and abs(ga - 120) < tol_ang:
        return "hexagonal"
    if right and eq(a, b):
        return "tetragonal"
    return "other"


def read_cif(path, block=None):
    """A :class:`~crystalview.crystal.Crystal` from a CIF file: the full unit
    cell (asymmetric unit expanded by the space group), lattice prototype
    "cif", the CIF's cell as the conventional cell.

    Hard-sphere radii: for one species, half the nearest-neighbour distance
    (touching spheres); for several, the CN12 metallic radius from the
    element data where known (interstitial radius for C, N, O, H, B), else
    half the nearest-neighbour distance.
    """
    import gemmi

    from ..crystal import Crystal, LatticeInfo
    from ..elements import atomic_number

    p = Path(path)
    if not p.is_file():
        raise UserError(f"CIF file '{p}' not found")
    try:
        doc = gemmi.cif.read(str(p))
    except (ValueError, RuntimeError) as exc:
        msg = " ".join(str(exc).split())
        raise UserError(f"'{p.name}' is not a readable CIF file ({msg}); check its syntax against CIF 1.1") from None
    blocks = [b for b in doc if b.find_value("_cell_length_a") is not None]
    if block is not None:
        blocks = [b for b in blocks if b.name == block]
    if not blocks:
        raise UserError(f"'{p.name}' has no data block with a unit cell (_cell_length_a ...); "
                        f"give a CIF of a crystal structure")
    b = blocks[0]
    try:
        st = gemmi.make_small_structure_from_block(b)
    except (ValueError, RuntimeError) as exc:
        msg = " ".join(str(exc).split())
        raise UserError(f"'{p.name}': cannot read the structure ({msg})") from None
    cell = st.cell
    pars = (cell.a, cell.b, cell.c, cell.alpha, cell.beta, cell.gamma)
    if not all(math.isfinite(x) and x > 0 for x in pars) or cell.volume <= 0:
        raise UserError(f"'{p.name}' has no valid unit cell (lengths and angles must be positive numbers)")
    if not st.sites:
        raise UserError(f"'{p.name}' lists no atoms (_atom_site_fract_x ... loop); give a CIF with atom sites")
    if st.spacegroup is None:
        hm = b.find_value("_symmetry_space_group_name_H-M") or b.find_value("_space_group_name_H-M_alt")
        if hm not in (None, "?", "."):
            raise UserError(f"'{p.name}': unknown space group {hm}; write it as a Hermann-Mauguin symbol, "
                            f"e.g. 'F m -3 m'")
    sites = st.get_all_unit_cell_sites()
    symbols, frac, partial = [], [], False
    for s in sites:
        el = s.element.name
        if el in ("X", ""):
            raise UserError(f"'{p.name}': atom site '{s.label}' has no element (type '{s.type_symbol}'); "
                            f"give _atom_site_type_symbol")
        f = np.array([s.fract.x, s.fract.y, s.fract.z], float)
        frac.append(f - np.floor(f))
        symbols.append(el)
        if s.occ < 0.999:
            partial = True
    frac = np.array(frac).reshape(-1, 3)
    frac[frac >= 1 - 1e-9] = 0.0
    rows = np.array(cell.orth.mat).T          # rows = lattice vectors; a along x, b in the xy plane
    numbers = np.array([atomic_number(s) for s in symbols], np.uint8)
    family = _family(*pars)
    uniq = sorted(set(symbols), key=symbols.index)
    name = b.find_value("_chemical_formula_sum") or b.name
    name = str(name).strip("'\"")
    sg_num = st.spacegroup.number if st.spacegroup is not None else None
    lat = LatticeInfo(
        prototype="cif", title=f"from CIF {p.name}", cell=rows, a=float(cell.a),
        c=None if family == "cubic" else float(cell.c), elements=tuple(uniq), basis_frac=frac,
        basis_symbols=tuple(symbols), family=family, space_group=sg_num, source=f"CIF file {p.name}",
    )
    meta = {"built_from": str(p), "name": name, "lattice": "cif", "a": float(cell.a), "b": float(cell.b),
            "c": float(cell.c), "angles": [float(cell.alpha), float(cell.beta), float(cell.gamma)],
            "space_group": st.spacegroup.xhm() if st.spacegroup is not None else None,
            "space_group_number": sg_num, "source": f"CIF file {p.name}", "cif_block": b.name,
            "asymmetric_unit_sites": len(st.sites)}
    if partial:
        meta["note"] = "the CIF has partly occupied sites; every site is shown as a full atom"
    crystal = Crystal(rows, frac @ rows, numbers, metadata=meta, lattice=lat)
    crystal.species_radii = _radii(crystal, uniq)
    return crystal


def _radii(crystal, species):
    from ..analysis.neighbours import nearest_neighbour_distance
    from ..elements import solute_radius

    if len(crystal) == 0:
        return {}
    dnn = nearest_neighbour_distance(crystal)
    half = dnn / 2.0 if math.isfinite(dnn) and dnn > 0 else 1.0
    if len(species) == 1:
        return {species[0]: half}
    out = {}
    for s in species:
        try:
            out[s] = float(solute_radius(s)[0])
        except UserError:
            out[s] = half
    return out


# ------------------------------------------------------------------ writing
def _q(text):
    """A CIF 1.1 value: bare when safe, otherwise single-quoted."""
    t = str(text)
    if t and all(ch not in t for ch in " \t'\"#$_;[]") and not t.startswith(("data_", "loop_", "save_")):
        return t
    if "'" not in t:
        return f"'{t}'"
    return f'"{t}"'


def cif_text(crystal):
    from .. import __version__
    from ..crystal import ROLES
    from ..lattice import cell_parameters

    a, b, c, al, be, ga = cell_parameters(crystal.cell)
    frac = crystal.frac
    frac = frac - np.floor(frac)
    frac[np.abs(frac - 1.0) < 1e-10] = 0.0
    name = crystal.metadata.get("name") or "crystal"
    block = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in str(name)) or "crystal"
    counts = crystal.counts()
    formula = " ".join(f"{s}{n if n != 1 else ''}" for s, n in counts.items())
    lines = [
        "#\\#CIF_1.1",
        f"# written by crystalview {__version__}: every atom of the cell, space group P 1",
        f"data_{block}",
        f"_chemical_formula_sum {_q(formula)}",
        f"_cell_length_a {a:.6f}",
        f"_cell_length_b {b:.6f}",
        f"_cell_length_c {c:.6f}",
        f"_cell_angle_alpha {al:.6f}",
        f"_cell_angle_beta {be:.6f}",
        f"_cell_angle_gamma {ga:.6f}",
        f"_cell_volume {crystal.volume:.6f}",
        "_symmetry_space_group_name_H-M 'P 1'",
        "_symmetry_Int_Tables_number 1",
        "loop_",
        "_symmetry_equiv_pos_as_xyz",
        "'x, y, z'",
        "loop_",
        "_atom_site_label",
        "_atom_site_type_symbol",
        "_atom_site_fract_x",
        "_atom_site_fract_y",
        "_atom_site_fract_z",
        "_atom_site_occupancy",
    ]
    syms = crystal.symbols
    seen = {}
    for k in range(len(crystal)):
        s = str(syms[k])
        seen[s] = seen.get(s, 0) + 1
        role = ROLES[int(crystal.roles[k])]
        label = f"{s}{seen[s]}" + ("" if role == "host" else f"_{role}")
        lines.append(f"{label} {s} {frac[k, 0]:.8f} {frac[k, 1]:.8f} {frac[k, 2]:.8f} 1")
    return "\n".join(lines) + "\n"


def write_cif(crystal, path, *, force=False):
    """Write ``crystal`` as an IUCr CIF 1.1 file (P 1, all atoms); returns a summary dict."""
    from ..fileio import atomic_write

    if crystal.pbc != (True, True, True):
        raise UserError("CIF describes a crystal periodic in three directions; this one is not "
                        "(a slab or a finite piece) - export it as .xyz or .glb")
    text = cif_text(crystal)
    atomic_write(path, text, force=force)
    return {"file": str(path), "format": "cif", "atoms": len(crystal), "space_group": "P 1 (all atoms listed)",
            "bytes": len(text.encode("utf-8"))}
