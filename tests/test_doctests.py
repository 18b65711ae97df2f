"""The examples in the public docstrings run as written (doctest)."""
import doctest
import importlib

import pytest

MODULES = [
    "crystalview.recognise",
    "crystalview.prism",
    "crystalview.alloy",
    "crystalview.defects.point",
    "crystalview.cli",
    "crystalview.progress",
    "crystalview.limits",
    "crystalview.exchange.xyz",
    "crystalview.defects.boundary",
    "crystalview.occupancy",
    "crystalview.elements",
    "crystalview.radii",
    "crystalview.build",
    "crystalview.analysis.properties",
    "crystalview.exchange.cif",
    "crystalview.analysis.slip",
    "crystalview.lattice",
    "crystalview.mesh.printable",
    "crystalview.exchange.model",
    "crystalview.about",
    "crystalview.cli.values",
    "crystalview.exchange",
    "crystalview.render.layout",
    "crystalview.render.draw2d",
    "crystalview.render.raster3d",
    "crystalview.render.figure",
    "crystalview.render.text",
    "crystalview.render.scene_graph",
    "crystalview.analysis.fit",
    "crystalview.analysis.neighbours",
    "crystalview.analysis.sites",
    "crystalview.crystal",
    "crystalview.defects.dislocation",
    "crystalview.defects.interstitial",
    "crystalview.defects.planar",
    "crystalview.defects.surface",
    "crystalview.errors",
    "crystalview.exchange.gltf",
    "crystalview.exchange.html",
    "crystalview.exchange.html_page",
    "crystalview.exchange.stl",
    "crystalview.exchange.threemf",
    "crystalview.fileio",
    "crystalview.mesh.bed",
    "crystalview.mesh.label",
    "crystalview.mesh.primitives",
    "crystalview.mesh.printset",
    "crystalview.mesh.report",
    "crystalview.mesh.stitch",
    "crystalview.palette",
    "crystalview.prototypes",
    "crystalview.scene",
    "crystalview.render.style",
    "crystalview.render.cells",
    "crystalview.render.turntable",
    "crystalview.render.viewer",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    mod = importlib.import_module(name)
    res = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert res.failed == 0
    assert res.attempted > 0
