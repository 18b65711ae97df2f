"""crystalview: supercells, defects, hole sizes, report figures and printable
models of metal lattices, built from real lattice parameters.

The public API is imported lazily so that commands which draw nothing never
load vtk or pyvista::

    import crystalview as cv
    c = cv.build("Fe", phase="gamma", repeat=(3, 3, 3))
    cv.interstitial_sites(c)
"""
from __future__ import annotations

import importlib

from .about import CAUTION, __version__  # noqa: F401

# public name -> "module:attribute"
_API = {
    "build": "crystalview.build:build",
    "Crystal": "crystalview.crystal:Crystal",
    "LatticeInfo": "crystalview.crystal:LatticeInfo",
    "ROLES": "crystalview.crystal:ROLES",
    "UserError": "crystalview.errors:UserError",
    "LimitError": "crystalview.errors:LimitError",
    "parse_indices": "crystalview.lattice:parse_indices",
    "d_spacing": "crystalview.lattice:d_spacing",
    "planar_density": "crystalview.lattice:planar_density",
    "linear_density": "crystalview.lattice:linear_density",
    "angle_between": "crystalview.lattice:angle_between",
    "miller_to_mb_direction": "crystalview.lattice:miller_to_mb_direction",
    "mb_to_miller_direction": "crystalview.lattice:mb_to_miller_direction",
    "miller_to_mb_plane": "crystalview.lattice:miller_to_mb_plane",
    "mb_to_miller_plane": "crystalview.lattice:mb_to_miller_plane",
    "summary": "crystalview.analysis.properties:summary",
    "packing_factor": "crystalview.analysis.properties:packing_factor",
    "density": "crystalview.analysis.properties:density",
    "coordination": "crystalview.analysis.properties:coordination",
    "symmetry": "crystalview.analysis.properties:symmetry",
    "neighbour_pairs": "crystalview.analysis.neighbours:neighbour_pairs",
    "nearest_neighbour_distance": "crystalview.analysis.neighbours:nearest_neighbour_distance",
    # sites and fit (analysis/sites.py, voids.py, fit.py)
    "interstitial_sites": "crystalview.analysis.sites:interstitial_sites",
    "find_voids": "crystalview.analysis.voids:find_voids",
    "fit": "crystalview.analysis.fit:fit",
    # defects (defects/)
    "add_vacancies": "crystalview.defects.point:add_vacancies",
    "substitute": "crystalview.defects.point:substitute",
    "fill_sites": "crystalview.defects.interstitial:fill_sites",
    "frenkel_pairs": "crystalview.defects.point:frenkel_pairs",
    "stack": "crystalview.defects.planar:stack",
    "stacking_sequence": "crystalview.defects.planar:stacking_sequence",
    "dislocation": "crystalview.defects.dislocation:dislocation",
    "slab": "crystalview.defects.surface:slab",
    "tilt_boundary": "crystalview.defects.boundary:tilt_boundary",
    # slip (analysis/slip.py)
    "slip_systems": "crystalview.analysis.slip:slip_systems",
    "schmid_factors": "crystalview.analysis.slip:schmid_factors",
    "slip_overlay": "crystalview.analysis.slip:slip_overlay",
    "slip_report": "crystalview.analysis.slip:slip_report",
    "taylor_factor": "crystalview.analysis.slip:taylor_factor",
    "independent_slip_systems": "crystalview.analysis.slip:independent_slip_systems",
    # figures, meshes, files
    "render": "crystalview.render.figure:render",
    "show": "crystalview.render.viewer:show",
    "print_model": "crystalview.exchange.model:print_model",
    "export": "crystalview.exchange:export",
    "read_cif": "crystalview.exchange.cif:read_cif",
    "run_scene": "crystalview.scene:run_scene",
    "burgers_circuit": "crystalview.defects.dislocation:burgers_circuit",
}

__all__ = sorted(_API) + ["CAUTION", "__version__"]

# The function must win over the submodule of the same name: importing
# crystalview.build anywhere would otherwise rebind cv.build to the module.
# (crystalview.render is a callable package for the same reason.)
from .build import build  # noqa: E402,F401


def __getattr__(name):
    target = _API.get(name)
    if target is None:
        raise AttributeError(f"module 'crystalview' has no attribute '{name}'")
    mod, attr = target.split(":")
    value = getattr(importlib.import_module(mod), attr)
    globals()[name] = value
    return value


def __dir__():
    return __all__
