"""House standard: every public function carries a doctest example.

Every public top-level function and class (name not starting with '_') of
every crystalview module has a short ``>>>`` example in its docstring, and
every module that has such functions or classes is listed in
``tests/test_doctests.MODULES``, so the suite runs those examples.

Not checked here (others are working on them): ``crystalview/render/*``,
``crystalview/analysis/voids.py`` and ``crystalview/cli/*``.
"""
import ast
import pathlib

import pytest

from test_doctests import MODULES

ROOT = pathlib.Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "crystalview"
EXCLUDED_DIRS = ("cli",)   # the command-line modules are internal plumbing: register/run per command
EXCLUDED_FILES = ("analysis/voids.py",)


def _module_name(path):
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _covered_files():
    out = []
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE).as_posix()
        if rel.split("/")[0] in EXCLUDED_DIRS or rel in EXCLUDED_FILES:
            continue
        out.append(path)
    return out


def _public_defs(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    return [node for node in tree.body
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef))
            and not node.name.startswith("_")]


FILES = _covered_files()


def test_the_scan_sees_the_package():
    names = {_module_name(p) for p in FILES}
    assert {"crystalview.build", "crystalview.lattice", "crystalview.mesh.printable",
            "crystalview.render.draw2d"} <= names
    assert not any(n.startswith("crystalview.cli") for n in names)
    assert "crystalview.analysis.voids" not in names


@pytest.mark.parametrize("path", FILES, ids=_module_name)
def test_every_public_def_has_an_example(path):
    missing = [node.name for node in _public_defs(path) if ">>>" not in (ast.get_docstring(node) or "")]
    assert not missing, (f"{path.relative_to(ROOT)}: no '>>>' example in the docstring of "
                         f"{', '.join(missing)} (house standard: every public function carries a doctest example)")


@pytest.mark.parametrize("path", [p for p in FILES if _public_defs(p)], ids=_module_name)
def test_module_examples_are_run(path):
    name = _module_name(path)
    assert name in MODULES, f"{name} has public functions but is not in tests/test_doctests.py MODULES"
