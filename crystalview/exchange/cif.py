"""CIF (IUCr CIF 1.1): write a crystal with its space group, read any
small-molecule/inorganic CIF with gemmi.

Writing
    spglib finds the crystal's symmetry in the cell exactly as the user has
    it (no standardising, so a 2x2x2 repeat stays a 2x2x2 repeat).  The file
    lists the atoms of the asymmetric unit, the space group's operations
    expressed in that cell (``_space_group_symop_operation_xyz``), the IT
    number, and the Hermann-Mauguin symbol where the operations are a
    tabulated setting of International Tables Vol. A (then readers that go by
    the symbol expand it the same way).  Role information (solute,
    interstitial) is kept: roles take part in the symmetry search, each label
    carries a non-host role as a suffix (``C1_interstitial``), and a local
    column ``_[local]_atom_site_role`` (CIF 1.1's reserved prefix for local
    data names) lists the role of every site.

    Every atom is listed in P 1 instead when the crystal records defects (a
    vacancy or a substituted atom is about one atom, not about a symmetry
    class), when spglib finds no symmetry beyond the lattice translations,
    when the cell holds over SYMMETRY_MAX_ATOMS atoms, or when the cell's
    operations would be over SYMMETRY_MAX_OPS lines; a comment says which,
    and names spglib's space group where one was found.

Reading
    gemmi does the parsing (``gemmi.cif.read`` + ``make_small_structure_from_block``
    + ``get_all_unit_cell_sites``); nothing here parses CIF by hand.  The
    expanded atom count is estimated (operations x listed sites) and checked
    against the atom cap BEFORE gemmi expands anything.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import LimitError, UserError

#: Above this many atoms in the cell the writer does not search for symmetry
#: (spglib's cost grows with atoms x operations) and lists every atom in P 1.
SYMMETRY_MAX_ATOMS = 1000
#: At most this many symmetry operations are written: 192 (the largest
#: conventional-cell group, e.g. F m -3 m, International Tables Vol. A) x 8,
#: i.e. a 2x2x2 repeat of any cell.  Larger repeats are listed in P 1.
SYMMETRY_MAX_OPS = 1536
#: Operations read from a file beyond which it is refused (every real space
#: group has at most 192 in its conventional cell).
READ_MAX_OPS = 10000
#: Cap on operations^2 x sites, the comparisons gemmi's expansion makes (about
#: 2e7 a second): keeps a pathological file from hanging the reader.
READ_MAX_WORK = 500_000_000
#: Bounds on a cell read from a file, A: outside them the numbers are not a
#: crystal's cell (and a cell thinner than this makes periodic searches blow up).
MIN_CELL_HEIGHT, MAX_CELL_LENGTH, MAX_CELL_ASPECT = 0.5, 10000.0, 1000.0
ROLE_TAG = "_[local]_atom_site_role"
#: Largest CIF file read (bytes): structure files of metals and alloys are kilobytes; this keeps a
#: database dump or a runaway file from taking minutes and gigabytes.
MAX_CIF_BYTES = 50_000_000


def symprec_for(cell):
    """spglib's distance tolerance (A) for a cell: 1e-4 A, growing as
    1e-5 x the longest cell edge for cells over 10 A (coordinates are written
    with 8 decimals, so an exactly built crystal sits far inside it).

    >>> symprec_for(np.eye(3) * 3.6149), round(symprec_for(np.eye(3) * 36.149), 7)
    (0.0001, 0.0003615)
    """
    lengths = np.linalg.norm(np.asarray(cell, float), axis=1)
    return float(max(1e-4, 1e-5 * lengths.max()))


# ------------------------------------------------------------------ reading
_SYSTEMS = ((2, "triclinic"), (15, "monoclinic"), (74, "orthorhombic"), (142, "tetragonal"),
            (167, "trigonal"), (194, "hexagonal"), (230, "cubic"))


def crystal_system(number):
    """Crystal system of a space-group number (International Tables Vol. A).

    >>> crystal_system(225), crystal_system(194), crystal_system(139)
    ('cubic', 'hexagonal', 'tetragonal')
    """
    for top, name in _SYSTEMS:
        if number <= top:
            return name
    raise ValueError(number)


def _family(a, b, c, al, be, ga, tol_len=1e-3, tol_ang=0.01, number=None):
    """cubic / hexagonal / tetragonal / other from the cell's metric, never
    higher than the space group's crystal system allows."""
    def eq(x, y):
        return abs(x - y) <= tol_len * max(x, y)

    right = all(abs(x - 90.0) < tol_ang for x in (al, be, ga))
    if right and eq(a, b) and eq(b, c):
        fam = "cubic"
    elif eq(a, b) and abs(al - 90) < tol_ang and abs(be - 90) < tol_ang and abs(ga - 120) < tol_ang:
        fam = "hexagonal"
    elif right and eq(a, b):
        fam = "tetragonal"
    else:
        fam = "other"
    if number is not None and 1 <= number <= 230:
        system = crystal_system(number)
        if fam == "cubic" and system != "cubic":
            fam = "tetragonal" if system == "tetragonal" else "other"
        elif (fam == "hexagonal" and system not in ("hexagonal", "trigonal")) or \
                (fam == "tetragonal" and system not in ("tetragonal", "cubic")):
            fam = "other"
    return fam


def _clean(exc, path=None):
    text = "".join(ch if ch.isprintable() or ch in " \t\n" else "?" for ch in str(exc))
    if path is not None:
        text = text.replace(str(path), Path(path).name)
    return " ".join(text.split())[:200]


def _int_or_none(text):
    if text in (None, "?", "."):
        return None
    try:
        v = float(str(text).strip("'\""))
    except ValueError:
        return None
    return int(v) if math.isfinite(v) and v == int(v) else None


def read_cif(path, block=None, max_atoms=None, tolerance=None):
    r"""A :class:`~crystalview.crystal.Crystal` from a CIF file (CIF 1.1 or
    2.0): the full unit cell (asymmetric unit expanded by the space group), in
    the file's own cell, with the lattice type recognised from the atoms
    (:mod:`crystalview.recognise`; ``tolerance`` in A, default 0.01).

    The space group comes from the file: its symmetry operations (gemmi
    recognises a tabulated setting; otherwise the operations are used as
    listed and the number from ``_space_group_IT_number``), else its
    Hermann-Mauguin symbol, else its IT number (standard setting).  The
    expanded atom count (operations x listed sites) is checked against the
    atom cap (``max_atoms``, default crystalview.build's) before expanding.
    Coordinates within 2.5e-4 of a sixth (0.3333, 0.6667) are read as exact.

    Partly occupied or shared sites make an *average* structure (one entry
    per species and site, with ``crystal.occupancy``; see
    :mod:`crystalview.occupancy`); :func:`crystalview.build` realises it.

    ``block``: the data block to read; a file with several crystal structures
    needs one.  Hard-sphere radii are chosen by bonding
    (:func:`crystalview.radii.structure_radii`) and recorded in
    ``metadata['radii']``.

    >>> import crystalview as cv, pathlib, tempfile
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "w.cif"
    >>> _ = f.write_text("data_W\n_cell_length_a 3.1652\n_cell_length_b 3.1652\n_cell_length_c 3.1652\n"
    ...                  "_cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 90\n"
    ...                  "_symmetry_space_group_name_H-M 'I m -3 m'\nloop_\n_atom_site_label\n"
    ...                  "_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nW1 0 0 0\n")
    >>> c = read_cif(f)
    >>> len(c), c.lattice.prototype
    (2, 'bcc')
    """
    from ..limits import check_atom_count
    from ..crystal import ROLES, Crystal, LatticeInfo
    from ..elements import atomic_number
    from ..recognise import DEFAULT_TOLERANCE, attach_lattice

    tol = DEFAULT_TOLERANCE if tolerance is None else tolerance
    p = Path(path)
    _notes.clear()
    b = _structure_block(p, block)
    _check_values(b, p)
    st = _small_structure(b, p)
    cell = st.cell
    pars = (cell.a, cell.b, cell.c, cell.alpha, cell.beta, cell.gamma)
    if not all(math.isfinite(x) and x > 0 for x in pars) or not math.isfinite(cell.volume) or cell.volume <= 0:
        raise UserError(f"'{p.name}' block '{b.name}' has no valid unit cell (lengths and angles must be positive "
                        f"numbers making a cell of positive volume)")
    rows = np.array(cell.orth.mat, float).T          # rows = lattice vectors; a along x, b in the xy plane
    from ..analysis.neighbours import cell_heights

    with np.errstate(all="ignore"):
        heights = cell_heights(rows) if np.all(np.isfinite(rows)) else np.zeros(3)
    if max(pars[:3]) > MAX_CELL_LENGTH or not np.all(np.isfinite(heights)) or heights.min() < MIN_CELL_HEIGHT \
            or max(pars[:3]) > MAX_CELL_ASPECT * heights.min():
        raise UserError(f"'{p.name}': the cell {pars[0]:.4g} x {pars[1]:.4g} x {pars[2]:.4g} A, angles "
                        f"{pars[3]:.4g} {pars[4]:.4g} {pars[5]:.4g} deg is not a crystal's cell; give edges of at most "
                        f"{MAX_CELL_LENGTH:g} A, at least {MIN_CELL_HEIGHT} A between opposite faces, and no edge "
                        f"over {MAX_CELL_ASPECT:g} times that thickness")
    if not st.sites:
        raise UserError(f"'{p.name}' block '{b.name}' lists no atoms (_atom_site_fract_x ... loop); give a CIF "
                        f"with atom sites")
    for s in st.sites:
        f = (s.fract.x, s.fract.y, s.fract.z)
        if not all(math.isfinite(x) and abs(x) < 1e6 for x in f):
            raise UserError(f"'{p.name}': atom site '{s.label}' has no valid fractional coordinates "
                            f"({', '.join(f'{x:g}' for x in f)}); give three numbers")
        if not (math.isfinite(s.occ) and 0 <= s.occ <= 1 + 1e-3):
            raise UserError(f"'{p.name}' block '{b.name}': atom site '{_clean(s.label)[:40]}' has occupancy "
                            f"{s.occ:g}; give _atom_site_occupancy between 0 and 1")
    empty = [s.label for s in st.sites if s.occ <= 0]
    if empty:
        if len(empty) == len(st.sites):
            raise UserError(f"'{p.name}' block '{b.name}': every atom site has occupancy 0; give the occupancies")
        keep = [s for s in st.sites if s.occ > 0]
        st.sites.clear()
        for s in keep:
            st.add_site(s)
    _snap_sixths(st)
    number_tag = _int_or_none(b.find_value("_space_group_IT_number")) or \
        _int_or_none(b.find_value("_symmetry_Int_Tables_number"))
    if number_tag is not None and not 1 <= number_tag <= 230:
        raise UserError(f"'{p.name}': space-group number {number_tag} does not exist; "
                        f"International Tables number 1 to 230")
    n_ops = 1
    if len(st.symops) > READ_MAX_OPS:
        raise UserError(f"'{p.name}' lists {len(st.symops):,} symmetry operations; a space group has at most "
                        f"192 in its conventional cell - check the file")
    if st.spacegroup is not None:
        n_ops = _order(st.spacegroup.operations())
    elif st.symops:
        n_ops = len(cell.images) + 1
        if n_ops != len(st.symops):
            raise UserError(f"'{p.name}': its {len(st.symops)} symmetry operations (_space_group_symop_operation_xyz) "
                            f"do not form a complete space group; list all of them as x,y,z triplets")
    else:
        hm = b.find_value("_symmetry_space_group_name_H-M") or b.find_value("_space_group_name_H-M_alt")
        ref = b.find_value("_space_group_name_H-M_ref") or b.find_value("_space_group_name_H-M_full")
        if hm in (None, "?", ".") and ref not in (None, "?", "."):
            import gemmi

            st.spacegroup_hm = gemmi.cif.as_string(ref)
            st.determine_and_set_spacegroup("1")
            hm = None if st.spacegroup is not None else ref
            if st.spacegroup is not None:
                n_ops = _order(st.spacegroup.operations())
        if hm not in (None, "?", "."):
            raise UserError(f"'{p.name}': unknown space group {_clean(hm)[:40]}; write it as a Hermann-Mauguin "
                            f"symbol, e.g. 'F m -3 m'")
        if st.spacegroup is None and number_tag is not None and number_tag > 1:
            st.determine_and_set_spacegroup("N")          # only a number: its standard setting
            if st.spacegroup is not None:
                n_ops = _order(st.spacegroup.operations())
    est = n_ops * len(st.sites)
    check_atom_count(est, max_atoms, what=f"'{p.name}' ({len(st.sites):,} sites x {n_ops} symmetry operations)")
    if n_ops * n_ops * len(st.sites) > READ_MAX_WORK:     # gemmi compares each image with the site's others
        raise LimitError(f"'{p.name}': expanding {len(st.sites):,} sites by {n_ops:,} symmetry operations would take "
                         f"about {n_ops * n_ops * len(st.sites):,} comparisons, over {READ_MAX_WORK:,}; give the "
                         f"crystal in a smaller cell (a real space group has at most 192 operations)")
    sites = st.get_all_unit_cell_sites()
    symbols, frac, occ, labels = [], [], [], []
    for s in sites:
        el = s.element.name
        if el in ("X", ""):
            raise UserError(f"'{p.name}': atom site '{_clean(s.label)[:40]}' has no element (type "
                            f"'{_clean(s.type_symbol)[:20]}'); give _atom_site_type_symbol")
        if el == "D":
            el = "H"
        frac.append([s.fract.x, s.fract.y, s.fract.z])
        symbols.append(el)
        labels.append(s.label)
        occ.append(min(float(s.occ), 1.0))
    frac = np.array(frac, float).reshape(-1, 3)
    frac -= np.floor(frac)
    frac[frac >= 1 - 1e-9] = 0.0
    occ = np.array(occ, float)
    uniq = sorted(set(symbols), key=symbols.index)
    z_of = {s: atomic_number(s) for s in uniq}
    numbers = np.array([z_of[s] for s in symbols], np.uint8)
    roles = _roles_from_block(b, labels, ROLES)
    if st.spacegroup is not None:
        sg_num, sg_name = int(st.spacegroup.number), st.spacegroup.xhm()
    else:
        sg_num = number_tag if (st.symops or number_tag == 1) else None
        sg_name = None
        if sg_num is None and len(st.symops) <= 1:
            sg_num, sg_name = 1, "P 1"
    family = _family(*pars, number=sg_num)
    name = _block_name(b)
    lat = LatticeInfo(
        prototype="cif", title=f"structure from CIF {p.name}", cell=rows, a=float(cell.a),
        c=None if family == "cubic" else float(cell.c), elements=tuple(uniq), basis_frac=frac,
        basis_symbols=tuple(symbols), family=family, space_group=sg_num, source=f"CIF file {p.name}",
    )
    meta = {"built_from": str(p), "name": name, "lattice": "cif", "a": float(cell.a), "b": float(cell.b),
            "c": None if family == "cubic" else float(cell.c), "angles": [float(cell.alpha), float(cell.beta), float(cell.gamma)],
            "space_group": sg_name, "space_group_number": sg_num, "symmetry_operations": n_ops,
            "source": f"CIF file {p.name}, block {b.name}", "cif_block": b.name,
            "asymmetric_unit_sites": len(st.sites)}
    average = bool(np.any(occ < 1.0 - 1e-6))
    if _notes:
        meta["note"] = "; ".join(_notes)
        _notes.clear()
    crystal = Crystal(rows, frac @ rows, numbers, roles=roles, metadata=meta, lattice=lat,
                      occupancy=occ if average else None)
    listed = {}
    for s_ in st.sites:
        listed.setdefault(s_.label, [s_.fract.x, s_.fract.y, s_.fract.z])
    drop = _check_distances(crystal, p, b.name, labels,
                            listed_frac=np.array([listed.get(x, [np.nan] * 3) for x in labels], float).reshape(-1, 3))
    if drop:
        keep = np.setdiff1d(np.arange(len(crystal)), np.fromiter(drop, np.int64, len(drop)))
        crystal = crystal.select(keep)
        crystal.lattice = replace_lattice(crystal.lattice, basis_frac=frac[keep],
                                          basis_symbols=tuple(symbols[k] for k in keep))
        crystal.metadata["note"] = (f"{len(drop)} atom(s) listed twice in the file (repeated lines of one site, or "
                                    f"symmetry copies of a site) were read once")
    from ..occupancy import average_record, site_groups

    if average:
        try:
            site_groups(crystal, labels=[labels[k] for k in range(len(labels)) if k not in drop])
        except UserError as exc:
            raise UserError(f"'{p.name}' block '{b.name}': {exc}") from None
        crystal.metadata["average"] = average_record(crystal)
    crystal = attach_lattice(crystal, tol)
    rec = crystal.metadata["recognition"]
    if rec["lattice"] != "other":
        crystal.metadata["a"] = rec["a_A"]
        crystal.metadata["c"] = rec["c_A"]
        from dataclasses import replace

        crystal.lattice = replace(crystal.lattice, source=f"CIF file {p.name}",
                                  title=crystal.lattice.title)
    from ..radii import structure_radii

    radii = structure_radii(crystal)
    crystal.species_radii = {s: r["radius_A"] for s, r in radii.items()}
    crystal.metadata["radii"] = radii
    return crystal


def replace_lattice(lat, **kw):
    """A copy of a LatticeInfo with the given fields replaced.

    >>> import crystalview as cv
    >>> lat = replace_lattice(cv.build("Cu").lattice, source="my.cif")
    >>> lat.prototype, lat.source
    ('fcc', 'my.cif')
    """
    from dataclasses import replace

    return replace(lat, **kw)


def _check_values(b, p):
    """The cell fully given, every occupancy a number in [0, 1] or unknown."""
    import gemmi

    missing = [t for t in ("_cell_length_a", "_cell_length_b", "_cell_length_c", "_cell_angle_alpha",
                           "_cell_angle_beta", "_cell_angle_gamma") if b.find_value(t) in (None, "?", ".")]
    if missing:
        raise UserError(f"'{p.name}' block '{b.name}' does not give its whole cell ({', '.join(missing)} missing); "
                        f"give the three lengths and the three angles")
    labels = list(b.find_values("_atom_site_label"))
    occ = list(b.find_values("_atom_site_occupancy"))
    unknown = 0
    for k, v in enumerate(occ):
        if v in ("?", "."):
            unknown += 1
            continue
        x = gemmi.cif.as_number(v)
        if not math.isfinite(x) or x < 0 or x > 1 + 1e-3:
            who = _clean(labels[k])[:30] if k < len(labels) else f"number {k + 1}"
            raise UserError(f"'{p.name}' block '{b.name}': atom site '{who}' has occupancy '{_clean(v)[:20]}'; give "
                            f"_atom_site_occupancy as a number between 0 and 1")
    if unknown:
        _notes.append(f"{unknown} site(s) with unknown occupancy ('?') read as fully occupied")


_notes = []


def _norm_tag(tag):
    """A CIF 2.0 / DDLm dotted name as its CIF 1.1 equivalent
    ('_cell.length_a' -> '_cell_length_a')."""
    return tag.replace(".", "_", 1) if "." in tag else tag


def _normalised(block):
    """A copy of a block with dotted (CIF 2.0 / DDLm) names written as CIF 1.1
    names, so gemmi's small-structure reader finds them; None when the block
    has no dotted names."""
    import gemmi

    if not any("." in (item.pair[0] if item.pair is not None else (item.loop.tags[0] if item.loop else ""))
               for item in block):
        return None
    doc = gemmi.cif.Document()
    nb = doc.add_new_block(block.name)
    seen = set()
    for item in block:
        if item.pair is not None:
            tag = _norm_tag(item.pair[0])
            if tag not in seen:
                seen.add(tag)
                nb.set_pair(tag, item.pair[1])
        elif item.loop is not None:
            lp = item.loop
            tags = [_norm_tag(t) for t in lp.tags]
            if any(t in seen for t in tags):
                continue
            seen.update(tags)
            prefix = _common_prefix(tags)
            new = nb.init_loop(prefix, [t[len(prefix):] for t in tags])
            width = lp.width()
            for r in range(lp.length()):
                new.add_row([lp[r, c] for c in range(width)])
    return doc, nb


def _common_prefix(tags):
    import os

    pre = os.path.commonprefix(tags)
    if "_" in pre[1:]:
        return pre[: pre.rindex("_") + 1]
    return "_"


def _is_structure(block):
    return block.find_value("_cell_length_a") is not None or block.find_value("_cell.length_a") is not None


def _has_atoms(block):
    return any(len(block.find_values(t)) for t in ("_atom_site_fract_x", "_atom_site.fract_x"))


def _structure_block(p, block):
    """The data block to read (normalised to CIF 1.1 names); refuses a file
    without one and asks for --block when several crystal structures are in it."""
    import gemmi

    if not p.is_file():
        raise UserError(f"CIF file '{p}' not found")
    size = p.stat().st_size
    if size > MAX_CIF_BYTES:
        raise LimitError(f"'{p.name}' is {size / 1e6:.0f} MB; a crystal structure's CIF is far smaller (the cap is "
                         f"{MAX_CIF_BYTES / 1e6:.0f} MB); give the structure's own file, not a database dump")
    try:
        doc = gemmi.cif.read(str(p))
    except (ValueError, RuntimeError, UnicodeError, OSError) as exc:
        if "duplicate" not in str(exc):
            raise UserError(f"'{p.name}' is not a readable CIF file ({_clean(exc, p)}); "
                            f"check its syntax against CIF 1.1 or 2.0") from None
        # a repeated block name or tag: read it anyway (blocks can be picked by number)
        doc = gemmi.cif.Document()
        try:
            doc.parse_string(p.read_text(encoding="utf-8", errors="replace"))
        except (ValueError, RuntimeError) as exc2:
            raise UserError(f"'{p.name}' is not a readable CIF file ({_clean(exc2, p)}); "
                            f"check its syntax against CIF 1.1 or 2.0") from None
    cands = [b for b in doc if b.name and _is_structure(b)]
    names = [b.name for b in doc if b.name]
    if block is not None and str(block).strip().isdigit():
        k = int(str(block).strip())
        if not 1 <= k <= len(cands):
            raise UserError(f"'{p.name}' has {len(cands)} crystal structure(s); --block {k} must be 1 to "
                            f"{len(cands)} (or a block name: {', '.join(b.name for b in cands) or 'none'})")
        b = cands[k - 1]
    elif block is not None:
        pick = [b for b in doc if b.name.lower() == str(block).lower()]
        if not pick:
            raise UserError(f"'{p.name}' has no data block '{block}'; its blocks: {', '.join(names) or 'none'}")
        if len(pick) > 1:
            raise UserError(f"'{p.name}' has {len(pick)} blocks named '{block}'; pick one by its number among "
                            f"the structures, --block 1 to --block {len(cands)}")
        if not _is_structure(pick[0]):
            raise UserError(f"'{p.name}' block '{pick[0].name}' is not a crystal structure (no _cell_length_a); "
                            f"blocks with a unit cell: {', '.join(b.name for b in cands) or 'none'}")
        b = pick[0]
    else:
        if not cands:
            raise UserError(f"'{p.name}' has no data block with a unit cell (_cell_length_a or _cell.length_a); "
                            f"give a CIF of a crystal structure")
        with_atoms = [b for b in cands if _has_atoms(b)] or cands
        if len(with_atoms) > 1:
            listed = ", ".join(f"{cands.index(b) + 1}: {b.name} ({_block_name(b)})" for b in with_atoms[:12])
            raise UserError(f"'{p.name}' holds {len(with_atoms)} crystal structures ({listed}"
                            f"{' ...' if len(with_atoms) > 12 else ''}); choose one with --block NAME or --block N")
        b = with_atoms[0]
    for tag in ("_cell_modulation_dimension", "_cell.modulation_dimension"):
        v = b.find_value(tag)
        if v is not None and _int_or_none(v) not in (None, 0):
            raise UserError(f"'{p.name}' block '{b.name}' is an incommensurately modulated structure "
                            f"(superspace group); crystalview reads 3-dimensional crystal structures only")
    norm = _normalised(b)
    if norm is not None:
        _keep_alive.append(norm[0])          # the block lives as long as its document
        return norm[1]
    _keep_alive.append(doc)
    return b


#: Documents whose blocks were handed out (gemmi blocks refer into them);
#: only the last few are kept.
_keep_alive = []


def _small_structure(b, p):
    import gemmi

    del _keep_alive[:-4]
    try:
        return gemmi.make_small_structure_from_block(b)
    except (ValueError, RuntimeError, IndexError) as exc:
        raise UserError(f"'{p.name}' block '{b.name}': cannot read the structure ({_clean(exc, p)})") from None


def _block_name(b):
    """The structure's name: its formula, else its mineral or common name,
    else the block name (never a CIF null '?' or '.')."""
    for tag in ("_chemical_formula_sum", "_chemical_name_mineral", "_chemical_name_common",
                "_chemical_name_systematic", "_chemical_formula_structural"):
        v = b.find_value(tag)
        if v is not None:
            import gemmi

            text = " ".join(gemmi.cif.as_string(v).split())
            text = "".join(ch for ch in text if ch.isprintable())        # no escape codes reach a terminal
            if text and text not in ("?", "."):
                # a formula sum 'B2 Mg' reads as MgB2's elements, not as the B2 structure type: close it up
                return text.replace(" ", "") if tag == "_chemical_formula_sum" and len(text) < 60 else text
    return b.name


def _snap_sixths(st):
    """Coordinates within 2.5e-4 of a multiple of 1/6 (0.3333, 0.6667,
    0.1667) are set to it exactly: files round thirds, and a rounded third
    expanded by symmetry gives near-duplicate atoms."""
    import gemmi

    for s in st.sites:
        f = [s.fract.x, s.fract.y, s.fract.z]
        g = [round(x * 6) / 6 if abs(x * 6 - round(x * 6)) < 6 * 2.5e-4 else x for x in f]
        if g != f:
            s.fract = gemmi.Fractional(*g)


#: Two fully occupied atoms closer than this (A) are not a real structure
#: (the shortest bond, H-H in H2, is 0.74 A).
MIN_ATOM_DISTANCE = 0.5
#: Entries of one species closer than this (A) are the same atom listed twice.
DUPLICATE_DISTANCE = 0.02


#: More entries than this within MIN_ATOM_DISTANCE of one atom (after repeated
#: entries are merged) is no real structure: a disordered site has a few
#: alternatives, not dozens.  Bounds the work and memory of the check.
MAX_CLOSE_ENTRIES = 64


def _check_distances(crystal, p, block_name, labels, listed_frac=None):
    """Refuse atoms closer than MIN_ATOM_DISTANCE after symmetry expansion,
    unless both are partly occupied (alternative positions of one site).
    Entries of the same label, species and occupancy within
    DUPLICATE_DISTANCE of each other are one atom listed twice (a repeated
    line, or a symmetry copy of a site on a special position): returns the
    indices to drop.  Two entries of different labels at the same place are
    refused, naming both, when they are listed at the same place in the file
    (``listed_frac``, the listed coordinates of each entry's site); a site
    listed as the symmetry copy of another (SHELX's 'Nd1A*') is read once.  Memory and time grow as N log N: exact repeats are
    merged by sorting first, and each remaining atom looks at its own
    neighbours only.

    >>> import crystalview as cv
    >>> _check_distances(cv.build("Cu"), None, "x", ["Cu"] * 4)
    set()
    """
    from scipy.spatial import cKDTree

    from ..analysis.neighbours import with_images

    n = len(crystal)
    drop = set()
    if n < 1:
        return drop
    name = getattr(p, "name", p)
    occ = np.asarray(crystal.occupancy if crystal.occupancy is not None else np.ones(n), float)
    nums = np.asarray(crystal.numbers)
    lab_ids = {}
    lab = np.array([lab_ids.setdefault(str(x), len(lab_ids)) for x in labels], np.int64)
    # 1. exact repeats (same label, species, occupancy, position to 1e-6): merged by sorting, O(N log N)
    frac = crystal.frac % 1.0
    q = np.round(frac * 1e6).astype(np.int64) % 1_000_000
    key = np.column_stack([lab, nums.astype(np.int64), np.round(occ * 1e6).astype(np.int64), q])
    _, first = np.unique(key, axis=0, return_index=True)
    keep0 = np.zeros(n, bool)
    keep0[first] = True
    drop.update(np.flatnonzero(~keep0).tolist())
    live = np.flatnonzero(keep0)
    # 2. the rest: each atom's neighbours within MIN_ATOM_DISTANCE (periodic images included)
    pos = crystal.positions[live]
    pts, which_l = with_images(pos, crystal.cell, crystal.pbc, MIN_ATOM_DISTANCE)
    which = live[which_l]
    tree = cKDTree(pts)
    dropped = ~keep0

    def refuse(i, j, d):
        what = (f"sites '{_clean(labels[i])[:30]}' and '{_clean(labels[j])[:30]}'" if j != i
                else f"site '{_clean(labels[i])[:30]}' and its own symmetry image")
        raise UserError(f"'{name}' block '{block_name}': {what} are {d:.3f} A apart after symmetry "
                        f"expansion (below {MIN_ATOM_DISTANCE} A, no real structure); check the coordinates, "
                        f"the space group, or give the occupancies of alternative positions")

    for i in live.tolist():
        if dropped[i]:
            continue
        lst = np.asarray(tree.query_ball_point(crystal.positions[i], MIN_ATOM_DISTANCE), np.int64)
        j = which[lst]
        d = np.linalg.norm(pts[lst] - crystal.positions[i], axis=1)
        other = ~((j == i) & (d < 1e-9))
        j, d = j[other], d[other]
        near = (d < DUPLICATE_DISTANCE) & (j != i) & (nums[j] == nums[i]) & (np.abs(occ[j] - occ[i]) < 1e-6)
        if near.any():
            twin = near & (lab[j] != lab[i])
            if twin.any() and listed_frac is not None:
                df = listed_frac[j] - listed_frac[i]
                df -= np.round(df)
                same_line = np.linalg.norm(df @ crystal.cell, axis=1) < DUPLICATE_DISTANCE
                twin &= same_line       # NaN (unknown) compares False: read once
            elif listed_frac is None:
                twin[:] = False
            if twin.any():
                k = int(np.argmax(twin))
                jj = int(j[k])
                raise UserError(f"'{name}' block '{block_name}': sites '{_clean(labels[i])[:30]}' and "
                                f"'{_clean(labels[jj])[:30]}' are the same {crystal.symbols[i]} atom listed twice "
                                f"under different names ({d[k]:.3f} A apart); remove one of them")
            later = j[near & (j > i)]
            dropped[later] = True
            drop.update(later.tolist())
        rest = ~near & ~dropped[j]
        j, d = j[rest], d[rest]
        if len(j) > MAX_CLOSE_ENTRIES:
            raise UserError(f"'{name}' block '{block_name}': site '{_clean(labels[i])[:30]}' has {len(j):,} other "
                            f"entries within {MIN_ATOM_DISTANCE} A (more than {MAX_CLOSE_ENTRIES}; no real structure); "
                            f"check the coordinates")
        full = ~((occ[i] < 1 - 1e-6) & (occ[j] < 1 - 1e-6))
        if full.any():
            k = int(np.argmax(full))
            refuse(i, int(j[k]), float(d[k]))
    return drop


def _order(gops):
    return len(gops.sym_ops) * len(gops.cen_ops)


def _roles_from_block(b, labels, roles_table):
    """Per-atom role codes from the local role column (all host without it)."""
    import gemmi

    out = np.zeros(len(labels), np.uint8)
    try:
        lab_col, role_col = b.find_values("_atom_site_label"), b.find_values(ROLE_TAG)
        pairs = [(gemmi.cif.as_string(x), gemmi.cif.as_string(y)) for x, y in zip(lab_col, role_col)]
    except (ValueError, RuntimeError, TypeError):
        return out
    if len(lab_col) != len(role_col):
        return out
    table = {}
    for lab, role in pairs:
        if role in roles_table:
            table[lab] = roles_table.index(role)
    if table:
        out[:] = [table.get(lab, 0) for lab in labels]
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


def _triplet(rot, tran24):
    """'x,y,z' text of an operation: integer rotation, translation in 1/24."""
    import gemmi

    op = gemmi.Op()
    op.rot = (np.asarray(rot, int) * op.DEN).tolist()
    op.tran = [int(x) % op.DEN for x in tran24]
    return op


def symmetry_of(crystal, types=None):
    """How the crystal would be written: a dict with ``mode`` "symmetry" or
    "P1", ``reason`` (for P1), the space group found by spglib
    (``spglib_number``, ``spglib_symbol``) and, for "symmetry": ``ops``
    (gemmi Ops in the crystal's own cell), ``number``/``hm``/``hall`` of the
    group those operations form, ``sites`` (indices of one atom per
    asymmetric-unit site) and ``frac`` (their symmetrised fractional
    coordinates).

    >>> import crystalview as cv
    >>> s = symmetry_of(cv.build("Mg"))
    >>> s["mode"], s["spglib_number"], s["hm"], len(s["sites"])
    ('symmetry', 194, 'P 63/m m c', 1)
    """
    from ..crystal import ROLES

    n = len(crystal)
    out = {"mode": "P1", "reason": "", "spglib_number": None, "spglib_symbol": None}
    if n == 0:
        out["reason"] = "the crystal has no atoms"
        return out
    if crystal.metadata.get("defects"):
        kinds = sorted({str(d.get("kind", "defect")) for d in crystal.metadata["defects"]})
        out["reason"] = f"the crystal carries defects ({', '.join(kinds)}); every atom is listed"
        return out
    if n > SYMMETRY_MAX_ATOMS:
        out["reason"] = f"over {SYMMETRY_MAX_ATOMS} atoms: no symmetry search, every atom is listed"
        return out
    import spglib

    cell = np.asarray(crystal.cell, float)
    frac = crystal.frac
    frac -= np.floor(frac)
    frac[frac >= 1 - 1e-12] = 0.0
    if types is None:
        types = crystal.numbers.astype(int) * len(ROLES) + crystal.roles.astype(int)
    prec = symprec_for(cell)
    import warnings

    spglib_errors = (RuntimeError, ValueError, TypeError, getattr(getattr(spglib, "error", None), "SpglibError",
                                                                  RuntimeError))
    try:
        with warnings.catch_warnings():          # spglib 2.x warns about its error-handling switch
            warnings.simplefilter("ignore", DeprecationWarning)
            ds = spglib.get_symmetry_dataset((cell, frac, types), symprec=prec)
    except spglib_errors:
        ds = None
    if ds is None:
        out["reason"] = "spglib found no space group"
        return out
    out["spglib_number"], out["spglib_symbol"] = int(ds.number), _hm_of(int(ds.number))
    rots = np.asarray(ds.rotations, int)
    trans = np.asarray(ds.translations, float) % 1.0
    if len(rots) <= 1:
        out["reason"] = "no symmetry beyond the lattice translations (P 1)"
        return out
    if len(rots) > SYMMETRY_MAX_OPS:
        out["reason"] = (f"this cell has {len(rots):,} symmetry operations (a large repeat of a smaller cell), "
                         f"over {SYMMETRY_MAX_OPS}; every atom is listed")
        return out
    t24 = trans * 24.0
    if np.abs(t24 - np.round(t24)).max() > 0.02:
        out["reason"] = "the symmetry translations of this cell are not multiples of 1/24; every atom is listed"
        return out
    t24 = np.round(t24).astype(int) % 24
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            sg_type = spglib.get_spacegroup_type_from_symmetry(rots, t24 / 24.0, lattice=cell, symprec=prec)
    except spglib_errors:
        sg_type = None
    if sg_type is None:
        out["reason"] = "spglib could not name the group of this cell's operations"
        return out
    import gemmi

    ops = [_triplet(r, t) for r, t in zip(rots, t24)]
    try:
        tab = gemmi.find_spacegroup_by_ops(gemmi.GroupOps(ops))
    except (ValueError, RuntimeError):
        tab = None
    if tab is None:
        # operations that are no tabulated setting (a supercell, an oriented cell): readers that expand
        # by the symbol would lose atoms, so every atom is listed (common practice)
        out["reason"] = (f"this cell is no tabulated setting of {_hm_of(int(sg_type.number))} (a supercell or an "
                         f"oriented cell); every atom is listed so that every reader expands it alike")
        return out
    # one atom per orbit, moved exactly onto its special position: the mean of
    # its images under the operations that keep it (its site-symmetry group)
    reps = sorted({int(k) for k in ds.equivalent_atoms})
    tf = t24 / 24.0
    sym = np.empty((len(reps), 3))
    for m, k in enumerate(reps):
        img = np.einsum("oij,j->oi", rots, frac[k]) + tf
        d = img - frac[k]
        d -= np.round(d)
        fixed = np.linalg.norm(d @ cell, axis=1) < 2 * prec
        sym[m] = (frac[k] + d[fixed].mean(axis=0)) % 1.0
    sym[sym >= 1 - 1e-12] = 0.0
    # the operations applied to the sites must give back exactly these atoms
    if not _expands_to(sym, types[reps], rots, tf, frac, types, cell, prec):
        out["reason"] = "the symmetry-expanded sites do not reproduce the atoms; every atom is listed"
        return out
    out.update(mode="symmetry", ops=ops, number=int(sg_type.number),
               hm=tab.xhm() if tab is not None else None, hall=tab.hall.strip() if tab is not None else None,
               system=crystal_system(int(sg_type.number)), choice=tab.ext if tab is not None else "",
               sites=reps, frac=sym, symprec=prec, type_symbol=_hm_of(int(sg_type.number)))
    return out


def _hm_of(number):
    import gemmi

    sg = gemmi.find_spacegroup_by_number(number)
    return sg.hm if sg is not None else str(number)


def _expands_to(site_frac, site_types, rots, tf, frac, types, cell, prec):
    from scipy.spatial import cKDTree

    img = (np.einsum("oij,sj->soi", rots, site_frac) + tf[None, :, :]) % 1.0
    img[img >= 1 - 1e-12] = 0.0
    img_types = np.repeat(site_types, len(rots))
    img = img.reshape(-1, 3)
    tree = cKDTree(frac, boxsize=1.0)
    # a fractional tolerance covering 4 x symprec along the shortest cell height
    from ..analysis.neighbours import cell_heights

    tol = 4 * prec / cell_heights(cell).min()
    d, idx = tree.query(img, k=1, distance_upper_bound=tol)
    if not np.all(np.isfinite(d)):
        return False
    if np.any(types[idx] != img_types):
        return False
    return len(np.unique(idx)) == len(frac)


def cif_text(crystal, *, symmetry=True):
    """The CIF 1.1 text of a crystal (see the module docstring).

    >>> import crystalview as cv
    >>> "_space_group_IT_number 229" in cif_text(cv.build("Fe"))
    True
    """
    head, rows, _info = _cif_text(crystal, symmetry=symmetry)
    return head + "".join(rows)


def _cif_text(crystal, *, symmetry=True):
    from ..about import __version__
    from ..crystal import ROLES
    from ..lattice import cell_parameters

    a, b, c, al, be, ga = cell_parameters(crystal.cell)
    from ..occupancy import is_average, site_groups

    average = is_average(crystal)
    groups = site_groups(crystal) if average else None
    if not symmetry:
        info = {"mode": "P1", "reason": "symmetry search switched off", "spglib_number": None, "spglib_symbol": None}
    elif average:
        # the symmetry of the sites, each site's kind its occupancy signature
        reps = crystal.select(groups.first)
        reps.occupancy = None
        info = symmetry_of(reps, types=groups.site_type * len(ROLES) + reps.roles.astype(int))
    else:
        info = symmetry_of(crystal)
    name = crystal.metadata.get("name") or "crystal"
    block = "".join(ch if ch.isascii() and (ch.isalnum() or ch in "-_") else "_" for ch in str(name)) or "crystal"
    counts = crystal.counts()
    formula = " ".join(f"{s}{'' if n == 1 else format(n, 'g')}" for s, n in counts.items())
    lines = ["#\\#CIF_1.1", f"# written by crystalview {__version__}"]
    if info["mode"] == "symmetry":
        sg_line = f"space group {info['hm'] or info['type_symbol']} (No. {info['number']})"
        lines.append(f"# {sg_line} found by spglib (symprec {info['symprec']:.0e} A) in this cell as given; "
                     f"{len(info['sites'])} site(s) of the asymmetric unit, {len(crystal)} atoms in the cell")
        if info["hm"] is None:
            lines.append(f"# the operations below are {info['type_symbol']} expressed in this cell, not its "
                         f"standard setting: expand the sites with them, not with the symbol")
        if info["spglib_number"] != info["number"]:
            lines.append(f"# the crystal itself has space group {info['spglib_symbol']} (No. "
                         f"{info['spglib_number']}); this cell keeps the operations of its subgroup "
                         f"{info['type_symbol']}")
    else:
        lines.append(f"# every atom of the cell, space group P 1: {info['reason']}")
        if info["spglib_number"] and info["spglib_number"] > 1:
            lines.append(f"# spglib finds space group {info['spglib_symbol']} (No. {info['spglib_number']}) "
                         f"for this crystal")
    lines += [
        f"data_{block}",
        f"_chemical_formula_sum {_q(formula)}",
        f"_cell_length_a {a:.6f}",
        f"_cell_length_b {b:.6f}",
        f"_cell_length_c {c:.6f}",
        f"_cell_angle_alpha {al:.6f}",
        f"_cell_angle_beta {be:.6f}",
        f"_cell_angle_gamma {ga:.6f}",
        f"_cell_volume {crystal.volume:.6f}",
    ]
    if info["mode"] == "symmetry":
        lines.append(f"_space_group_crystal_system {info['system']}")
        lines.append(f"_space_group_IT_number {info['number']}")
        lines.append(f"_symmetry_Int_Tables_number {info['number']}")
        if info["hm"]:
            lines.append(f"_space_group_name_H-M_alt {_q(info['hm'])}")
            lines.append(f"_symmetry_space_group_name_H-M {_q(info['hm'])}")
            lines.append(f"_space_group_name_Hall {_q(info['hall'])}")
        lines += ["loop_", "_space_group_symop_id", "_space_group_symop_operation_xyz"]
        lines += [f"{k + 1} {_q(op.triplet())}" for k, op in enumerate(info["ops"])]
        idx, frac = info["sites"], info["frac"]
        if average:          # every entry of each listed site, at the site's symmetrised place
            shift = frac - crystal.frac[groups.first[idx]]
            ent = [(e, m) for m, k in enumerate(idx) for e in np.nonzero(groups.site_of == k)[0]]
            idx = [e for e, _ in ent]
            frac = np.array([crystal.frac[e] + shift[m] for e, m in ent]).reshape(-1, 3) % 1.0
            frac[frac >= 1 - 1e-12] = 0.0
    else:
        lines += ["_space_group_crystal_system triclinic", "_space_group_IT_number 1",
                  "_symmetry_Int_Tables_number 1", "_space_group_name_H-M_alt 'P 1'",
                  "_symmetry_space_group_name_H-M 'P 1'", "loop_", "_space_group_symop_id",
                  "_space_group_symop_operation_xyz", "1 x,y,z"]
        idx = None                     # every atom, streamed in chunks below
        frac = None
    roles = crystal.roles if idx is None else (crystal.roles[idx] if len(idx) else np.zeros(0, np.uint8))
    with_roles = bool(np.any(roles != 0))
    if with_roles:
        lines.append(f"# {ROLE_TAG}: the crystalview role of each site ({', '.join(ROLES)}); "
                     f"the label ends in the role too")
    lines += ["loop_", "_atom_site_label", "_atom_site_type_symbol", "_atom_site_fract_x", "_atom_site_fract_y",
              "_atom_site_fract_z", "_atom_site_occupancy"]
    if with_roles:
        lines.append(ROLE_TAG)
    head = "\n".join(lines) + "\n"
    return head, _atom_rows(crystal, idx, frac, average, with_roles), info


#: Atoms formatted per chunk when the whole cell is listed (bounds the memory of large exports).
ROW_CHUNK = 100_000


def _atom_rows(crystal, idx, frac, average, with_roles):
    """The atom-site rows as text chunks: the listed sites (``idx`` with their
    ``frac``), or every atom in chunks when ``idx`` is None."""
    from ..crystal import ROLES

    syms = crystal.symbols
    seen = {}
    if idx is None:
        spans = [(a, min(a + ROW_CHUNK, len(crystal))) for a in range(0, len(crystal), ROW_CHUNK)]
    else:
        spans = [None]
    for span in spans:
        if span is None:
            ks, fr = list(idx), frac
        else:
            ks = range(span[0], span[1])
            fr = crystal.to_fractional(crystal.positions[span[0]:span[1]])
            fr = fr - np.floor(fr)
            fr[np.abs(fr - 1.0) < 1e-10] = 0.0
        rows = []
        fl = fr.tolist()
        for m, k in enumerate(ks):
            s = str(syms[k])
            seen[s] = seen.get(s, 0) + 1
            role = ROLES[int(crystal.roles[k])]
            label = f"{s}{seen[s]}" + ("" if role == "host" else f"_{role}")
            occ = "1" if not average else format(float(crystal.occupancy[k]), ".6g")
            f = fl[m]
            rows.append(f"{label} {s} {f[0]:.8f} {f[1]:.8f} {f[2]:.8f} {occ}" + (f" {role}" if with_roles else ""))
        yield "\n".join(rows) + ("\n" if rows else "")


def write_cif(crystal, path, *, force=False, symmetry=True):
    """Write ``crystal`` as an IUCr CIF 1.1 file: its space group and the
    asymmetric unit in the crystal's own cell, or every atom in P 1 (see the
    module docstring for when); returns a summary dict.

    >>> import crystalview as cv, os, tempfile
    >>> p = os.path.join(tempfile.mkdtemp(), "cu.cif")
    >>> out = write_cif(cv.build("Cu", repeat=(2, 2, 2)), p)
    >>> out["format"], out["atoms"]
    ('cif', 32)
    >>> read_cif(p)
    <Crystal fcc Cu32 (32 atoms) cell 7.2298 x 7.2298 x 7.2298 A>
    """
    from ..fileio import atomic_write

    if crystal.pbc != (True, True, True):
        raise UserError("CIF describes a crystal periodic in three directions; this one is not "
                        "(a slab or a finite piece) - export it as .xyz or .glb")
    head, rows, info = _cif_text(crystal, symmetry=symmetry)
    size = [0]

    def writer(tmp):
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(head)
            size[0] += len(head.encode("utf-8"))
            for part in rows:                     # streamed: memory stays near the crystal's own
                fh.write(part)
                size[0] += len(part.encode("utf-8"))

    atomic_write(path, writer=writer, force=force)
    if info["mode"] == "symmetry":
        sg = f"{info['hm'] or info['type_symbol']} (No. {info['number']})"
        sites, ops = len(info["sites"]), len(info["ops"])
    else:
        sg, sites, ops = "P 1 (all atoms listed)", len(crystal), 1
    out = {"file": str(path), "format": "cif", "atoms": len(crystal), "space_group": sg,
           "space_group_number": info.get("number", 1) if info["mode"] == "symmetry" else 1,
           "sites_listed": sites, "symmetry_operations": ops, "bytes": size[0]}
    if info["mode"] != "symmetry":
        out["note"] = info["reason"]
    from ..occupancy import is_average

    if is_average(crystal):
        out["atoms"] = round(sum(crystal.counts().values()), 6)
        out["entries"] = len(crystal)
        out["occupancies"] = "written as read (partly occupied or shared sites)"
    return out
