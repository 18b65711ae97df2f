"""Defect options for every command that takes a SPEC.

Point defects (--vacancies, --substitute, --frenkel) apply on top of the
crystal SPEC describes.  --stack/--fault, --dislocation, --slab and
--tilt-boundary replace it by a new crystal made from the same material (the
element, phase and lattice parameter of SPEC); at most one of them per run.
"""
from __future__ import annotations

import re

from ..errors import UserError, suggest


def add_arguments(p):
    g = p.add_argument_group("defects")
    g.add_argument("--vacancies", metavar="FRACTION_OR_COUNT",
                   help="remove atoms at random: a fraction (0.01, 1%%) or a whole count (5)")
    g.add_argument("--substitute", action="append", default=[], metavar="ELEMENT:AMOUNT",
                   help="random substitutional solutes: Ni:0.1 (atom fraction of the whole crystal's sites) or Ni:5 (count); "
                        "repeatable, each a share of the whole crystal (for weight percent use --alloy)")
    g.add_argument("--interstitial", action="append", default=[], metavar="ELEMENT:AMOUNT",
                   help="interstitial solutes in empty holes: C:3 (count), C:0.01 (fraction of the holes) or "
                        "C:0.4wt%% (weight percent of the crystal); repeatable")
    g.add_argument("--site", metavar="KIND",
                   help="hole kind for --interstitial and --alloy interstitials: octahedral (default), tetrahedral, ...")
    g.add_argument("--frenkel", type=int, metavar="N", help="move N atoms into neighbouring interstitial holes")
    g.add_argument("--seed", type=int, default=0, metavar="N",
                   help="seed for the random choices, 0 or more (default 0)")
    g.add_argument("--stack", metavar="SEQUENCE",
                   help="close-packed layers in this order, at least 2, e.g. ABC, AB, ABCABABC (replaces the SPEC "
                        "cell; any close-packed metal, layer spacing from the metal)")
    g.add_argument("--fault", metavar="NAME",
                   help="named stacking: intrinsic, extrinsic, twin (fcc metals only); I1, I2, E (hcp metals "
                        "only); fcc, hcp, dhcp")
    g.add_argument("--dislocation", choices=["edge", "screw"], help="a straight dislocation (FCC or BCC)")
    g.add_argument("--poisson", type=float, metavar="NU", help="Poisson ratio for --dislocation (default 0.3)")
    g.add_argument("--slab", metavar="(hkl)", help="a surface slab with this plane normal along z, e.g. (111)")
    g.add_argument("--slab-layers", type=int, metavar="N", help="atomic planes in the --slab (default 6)")
    g.add_argument("--slab-thickness", type=float, metavar="A", help="--slab thickness in A instead of --slab-layers")
    g.add_argument("--vacuum", type=float, default=10.0, metavar="A", help="vacuum gap of the --slab in A (default 10)")
    g.add_argument("--tilt-boundary", metavar="(hkl)",
                   help="symmetric tilt grain boundary on this plane, e.g. (310) (cubic metals)")
    g.add_argument("--tilt-axis", default="[001]", metavar="[uvw]", help="tilt axis for --tilt-boundary (default [001])")
    g.add_argument("--defect-size", nargs=3, metavar=("NX", "NY", "NZ"),
                   help="copies of the oriented cell for --dislocation / --tilt-boundary, or in-plane copies "
                        "and sequence copies for --stack / --slab (NZ ignored for --slab)")


def _amount(text, what):
    """'0.01' / '1%' -> ('fraction', 0.01); '5' -> ('count', 5)."""
    s = str(text).strip()
    try:
        if s.endswith("%"):
            return "fraction", float(s[:-1]) / 100.0
        if re.fullmatch(r"[+-]?\d+", s):
            return "count", int(s)
        v = float(s)
    except ValueError:
        raise UserError(f"{what} '{text}' must be a fraction (0.01 or 1%) or a whole count (5)") from None
    return "fraction", v


def _interstitial(crystal, item, site, seed, max_atoms):
    """--interstitial ELEMENT:AMOUNT: a count, a fraction of the holes, or wt% of the crystal."""
    from ..alloy import INTERSTITIAL_ELEMENTS
    from ..defects.interstitial import fill_sites
    from ..elements import _all_symbols, atomic_mass

    if ":" not in item:
        raise UserError(f"--interstitial '{item}' must be ELEMENT:AMOUNT, e.g. C:3, C:0.01 or C:0.4wt%")
    el, amount = (x.strip() for x in item.split(":", 1))
    sym = el[:1].upper() + el[1:].lower()
    if sym not in _all_symbols():
        raise UserError(f"--interstitial '{el}' is not a chemical element symbol{suggest(el, _all_symbols())}")
    if sym not in INTERSTITIAL_ELEMENTS:
        raise UserError(f"--interstitial {el}: {sym} substitutes rather than sitting in holes; use --substitute "
                        f"{el}:{amount} (interstitial elements: {', '.join(INTERSTITIAL_ELEMENTS)})")
    low = amount.lower().replace(" ", "")
    if low.endswith(("wt%", "wt.%", "wt")):
        num = low.rstrip("%").replace("wt.", "").replace("wt", "").rstrip("%")
        try:
            w = float(num) / 100.0
        except ValueError:
            raise UserError(f"--interstitial {item}: '{amount}' must be a weight percent, e.g. 0.4wt%") from None
        if not (0 < w < 0.5):
            raise UserError(f"--interstitial {item}: {w * 100:g} wt% is not an interstitial content; give 0 to 50 wt%")
        mass = crystal.mass_amu
        n = int(round(w / (1 - w) * mass / atomic_mass(sym)))
        return fill_sites(crystal, sym, kind=site or "octahedral", count=n, seed=seed, max_atoms=max_atoms)
    kind, val = _amount(amount, f"--interstitial amount for {el}")
    return fill_sites(crystal, sym, kind=site or "octahedral", seed=seed, max_atoms=max_atoms, **{kind: val})


def _size(args, n):
    if not getattr(args, "defect_size", None):
        return None
    from .values import _ints

    vals = _ints(args.defect_size, "--defect-size", "--defect-size 12 6 2")
    return tuple(vals[:n])


def apply(crystal, args):
    from ..defects import point

    replacing = [name for name, val in (("--stack", getattr(args, "stack", None)),
                                        ("--fault", getattr(args, "fault", None)),
                                        ("--dislocation", getattr(args, "dislocation", None)),
                                        ("--slab", getattr(args, "slab", None)),
                                        ("--tilt-boundary", getattr(args, "tilt_boundary", None)))
                 if val is not None]
    if len(replacing) > 1:
        raise UserError(f"{' and '.join(replacing)} each make a new crystal; give only one of them")
    if replacing and getattr(args, "orient", None):
        raise UserError(f"{replacing[0]} sets its own orientation; leave out --orient")
    if replacing and getattr(args, "supercell", None):
        raise UserError(f"{replacing[0]} makes its own cell; leave out --supercell (use --defect-size)")
    if replacing and getattr(args, "repeat", None):
        raise UserError(f"{replacing[0]} makes its own cell; use --defect-size instead of --repeat")
    for flag, val in (("--slab-layers", getattr(args, "slab_layers", None)),
                      ("--slab-thickness", getattr(args, "slab_thickness", None))):
        if val is not None and getattr(args, "slab", None) is None:
            raise UserError(f"{flag} goes with --slab, e.g. --slab (111) {flag} 6")
    if getattr(args, "poisson", None) is not None and getattr(args, "dislocation", None) is None:
        raise UserError("--poisson goes with --dislocation, e.g. --dislocation edge --poisson 0.34")
    max_atoms = _cap(args.max_atoms) if getattr(args, "max_atoms", None) is not None else None
    seed = getattr(args, "seed", 0)
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
        raise UserError(f"--seed {seed} must be a whole number of 0 or more, e.g. --seed 42")
    from ..occupancy import is_average, realise

    if is_average(crystal) and any(getattr(args, k, None) not in (None, [], False) for k in
                                   ("stack", "fault", "dislocation", "slab", "tilt_boundary", "substitute",
                                    "vacancies", "frenkel", "interstitial")):
        crystal = realise(crystal, seed)          # defects act on real atoms
    if getattr(args, "fault", None) is not None:
        from ..defects.planar import FCC_FAULTS, HCP_FAULTS, NAMED_SEQUENCES

        if args.fault.strip().lower() not in {k.lower() for k in NAMED_SEQUENCES}:
            raise UserError(f"--fault '{args.fault}' is not a named stacking; use {', '.join(FCC_FAULTS)} (fcc metals), "
                            f"{', '.join(HCP_FAULTS)} (hcp metals) or fcc, hcp, dhcp, or give the layers with "
                            f"--stack, e.g. --stack ABCABABC")
    if getattr(args, "stack", None) is not None or getattr(args, "fault", None) is not None:
        from ..defects.planar import stack

        size = _size(args, 3)
        seq = args.stack if getattr(args, "stack", None) is not None else args.fault
        crystal = stack(crystal, seq, repeat=size or (1, 1), max_atoms=max_atoms)
    elif getattr(args, "dislocation", None) is not None:
        from ..defects.dislocation import dislocation

        crystal = dislocation(crystal, args.dislocation, size=_size(args, 3), poisson=args.poisson,
                              max_atoms=max_atoms)
    elif getattr(args, "slab", None) is not None:
        from ..defects.surface import slab

        size = _size(args, 2)
        crystal = slab(crystal, args.slab, layers=args.slab_layers, thickness=args.slab_thickness, vacuum=args.vacuum,
                       repeat=size or (1, 1), max_atoms=max_atoms)
    elif getattr(args, "tilt_boundary", None) is not None:
        from ..defects.boundary import tilt_boundary

        crystal = tilt_boundary(crystal, axis=args.tilt_axis, plane=args.tilt_boundary, size=_size(args, 3),
                                max_atoms=max_atoms)
    for k, item in enumerate(getattr(args, "substitute", None) or []):
        if ":" not in item:
            raise UserError(f"--substitute '{item}' must be ELEMENT:AMOUNT, e.g. Ni:0.1 or Ni:5")
        el, amount = item.split(":", 1)
        kind, val = _amount(amount, f"--substitute amount for {el}")
        kw = {kind: val}
        crystal = point.substitute(crystal, el.strip(), seed=seed + k, **kw)
    for k, item in enumerate(getattr(args, "interstitial", None) or []):
        crystal = _interstitial(crystal, item, getattr(args, "site", None), seed + 100 + k, max_atoms)
    if getattr(args, "site", None) is not None and not getattr(args, "interstitial", None) \
            and not getattr(args, "alloy", None):
        raise UserError("--site goes with --interstitial or --alloy, e.g. --interstitial C:3 --site octahedral")
    if getattr(args, "vacancies", None) is not None:
        kind, val = _amount(args.vacancies, "--vacancies")
        crystal = point.add_vacancies(crystal, seed=seed, **{kind: val})
    if getattr(args, "frenkel", None) is not None:
        crystal = point.frenkel_pairs(crystal, args.frenkel, seed=seed)
    return crystal




def _cap(value):
    from ..limits import cap_value

    return cap_value(value)
