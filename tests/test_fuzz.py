"""Fuzzing every input surface with hypothesis: command-line arguments, scene
files and CIF text.  Whatever comes in, the tool answers with status 0 or a
one-line error and status 2: never a traceback (status 1), never a hang.

The suite runs a bounded number of cases (CRYSTALVIEW_FUZZ_EXAMPLES, default
300 per surface); `make fuzz` runs a long session.
"""
import os

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

N = int(os.environ.get("CRYSTALVIEW_FUZZ_EXAMPLES", "300"))
FUZZ = settings(max_examples=N, deadline=10_000, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])

SPECS = ["Cu", "Fe", "Mg", "Ti", "Po", "Ni3Al", "TiAl", "fcc", "bcc", "hcp", "hex", "diamond", "B2", "L1_2",
         "L1_0", "Zz", "", "cu", "FE", "-1", "1e9", "[111]", "x.cif", "y.toml", "ñ", "Fe\x00", "Cu ", "   "]
WORDS = st.sampled_from(["1", "0", "-1", "2", "3.5", "1e9", "nan", "inf", "-0", "abc", "[1-10]", "[11-2]",
                         "[111]", "(111)", "(000)", "[1x0]", "<110>", "{111}", "[2-1-10]", "(10-12)",
                         "[0001]", "alpha", "gamma", "fcc", "Ni,Al", "Ni", "C", "H", "octahedral", ""])
OPTIONS = {
    "info": ["--phase", "--lattice", "--element", "-a", "-c", "--repeat", "--orient", "--plane",
             "--direction", "--angle", "--part-volume", "--max-atoms", "--json", "--symmetry", "--supercell"],
    "build": ["--phase", "--element", "-a", "-c", "--repeat", "--orient", "--json", "--max-atoms"],
    "sites": ["--phase", "-a", "-c", "--repeat", "--json"],
    "fit": ["--phase", "-a", "--repeat", "--json"],
    "slip": ["--axis", "--stress", "--crss", "--family", "--json", "--phase"],
}
NARGS = {"--repeat": 3, "--orient": 3, "--angle": 2, "--supercell": 9}
FLAGS = {"--json", "--symmetry"}


@st.composite
def argv(draw):
    cmd = draw(st.sampled_from(sorted(OPTIONS)))
    args = [cmd]
    if cmd == "fit":
        args.append(draw(st.sampled_from(["C", "N", "H", "O", "B", "Cr", "Xx", "Ni", "", "c"])))
    args.append(draw(st.one_of(st.sampled_from(SPECS), st.text(max_size=6))))
    for _ in range(draw(st.integers(0, 4))):
        opt = draw(st.sampled_from(OPTIONS[cmd]))
        args.append(opt)
        if opt in FLAGS:
            continue
        for _ in range(NARGS.get(opt, 1) if draw(st.booleans()) else draw(st.integers(0, 3))):
            args.append(draw(st.one_of(WORDS, st.text(max_size=5))))
    return args


@pytest.fixture
def small_caps(monkeypatch, tmp_path):
    monkeypatch.setenv("CRYSTALVIEW_MAX_ATOMS", "20000")
    monkeypatch.chdir(tmp_path)


def _check(cli, args):
    rc, out, err = cli(*args)
    assert rc in (0, 2), (args, err)
    assert "Traceback" not in err and "internal error" not in err, (args, err)
    if rc == 2:
        assert err.strip() and err.count("\n") == 1, (args, err)


@FUZZ
@given(args=argv())
def test_fuzz_cli_arguments(cli, small_caps, args):
    _check(cli, args)


SCENE_KEYS = st.sampled_from(["scene", "structure", "defects", "analysis", "figures", "models", "exports",
                              "name", "element", "phase", "repeat", "a", "c", "kind", "fraction", "count",
                              "seed", "sequence", "fit", "sites", "file", "view", "style", "size", "bogus"])
TOML_VALUES = st.sampled_from(['"Fe"', '"Cu"', '"gamma"', "1", "0", "-3", "0.5", "2.5", "true", "[1, 1, 1]",
                               "[0, 1]", '["C", "N"]', '"vacancies"', '"stack"', '"ABCABABC"', '"AAB"',
                               '"x.png"', '"../x.png"', "{ axis = \"[001]\" }", '""', "1e400", '"[1x0]"'])


@st.composite
def scene_text(draw):
    lines = ['[scene]', 'name = "fuzz"'] if draw(st.booleans()) else []
    if draw(st.booleans()):
        el = draw(st.sampled_from(['"Fe"', '"Cu"', '"Zz"', "1"]))
        lines += ["[structure]", "element = " + el]
    for _ in range(draw(st.integers(0, 6))):
        if draw(st.integers(0, 4)) == 0:
            lines.append(draw(st.sampled_from(["[analysis]", "[[defects]]", "[[figures]]", "[structure]",
                                               "[[models]]", "[bogus]", "[scene]"])))
        lines.append(f"{draw(SCENE_KEYS)} = {draw(TOML_VALUES)}")
    if draw(st.integers(0, 5)) == 0:
        lines.append(draw(st.text(max_size=20)))
    return "\n".join(lines) + "\n"


@FUZZ
@given(text=scene_text())
def test_fuzz_scene_files(tmp_path_factory, text):
    from crystalview.errors import UserError
    from crystalview.scene import load

    d = tmp_path_factory.mktemp("scene")
    p = d / "fuzz.toml"
    p.write_text(text)
    try:
        load(p)
    except UserError as exc:
        assert "\n" not in str(exc).strip()


@FUZZ
@given(text=st.text(max_size=400))
def test_fuzz_scene_free_text(tmp_path_factory, text):
    from crystalview.errors import UserError
    from crystalview.scene import load

    p = tmp_path_factory.mktemp("scene") / "free.toml"
    p.write_text(text)
    try:
        load(p)
    except UserError:
        pass
