"""`crystalview info` and the shared command-line behaviour."""
import json
import subprocess
import sys

import pytest


def test_info_text(cli):
    rc, out, err = cli("info", "Cu", "--plane", "(111)", "--direction", "[110]", "--part-volume", "1")
    assert rc == 0 and err == ""
    assert "face-centred cubic" in out and "0.7405" in out and "coordination number          12" in out
    assert "(111)" in out and "atoms in 1 mm^3" in out


def test_info_json(cli):
    rc, out, _ = cli("info", "Fe", "--phase", "gamma", "--repeat", "2", "2", "2", "--json")
    d = json.loads(out)
    assert d["atoms"] == 32 and d["lattice_type"] == "fcc" and d["temperature_K"] == 1189
    # source: periodictable density of iron is for alpha-Fe at room temperature (7.874); hot austenite is
    # less dense because of thermal expansion (common practice)
    assert 7.5 < d["density_g_cm3"] < 7.874


def test_info_symmetry(cli):
    rc, out, _ = cli("info", "Zn", "--symmetry", "--json")
    assert json.loads(out)["spglib_space_group"]["number"] == 194


@pytest.mark.parametrize("argv,needle", [
    (["info", "Cx"], "did you mean"),
    (["info", "Fe", "--phase", "omega"], "known phases"),
    (["info", "fcc", "--element", "Ni", "-a", "-3"], "positive"),
    (["info", "Mg", "-c", "40"], "absurd"),
    (["info", "Cu", "--repeat", "0", "1", "1"], "at least 1"),
    (["info", "Cu", "--repeat", "a", "1", "1"], "whole numbers"),
    (["info", "Cu", "--plane", "(000)"], "all zero"),
    (["info", "Cu", "--direction", "[1x0]"], "malformed"),
    (["info", "Cu", "--repeat", "400", "400", "400"], "cap"),
    (["info"], "required"),
    (["info", "Cu", "--bogus"], "unrecognized"),
    (["info", "missing.cif"], "not found"),
])
def test_bad_input_one_line_exit_2(cli, argv, needle):
    rc, out, err = cli(*argv)
    assert rc == 2
    assert err.count("\n") == 1 and needle in err and "Traceback" not in err


def test_console_script_no_traceback():
    r = subprocess.run([sys.executable, "-m", "crystalview", "info", "Xx"], capture_output=True, text=True)
    assert r.returncode == 2 and "Traceback" not in r.stderr and r.stderr.startswith("crystalview: error:")


def test_non_drawing_commands_never_import_vtk():
    code = ("import sys\nfrom crystalview.cli import main\n"
            "for argv in (['info','Cu'], ['info','Mg','--symmetry']):\n    main(argv)\n"
            "bad = [m for m in sys.modules if m.split('.')[0] in ('vtk','vtkmodules','pyvista')]\n"
            "assert not bad, bad\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
