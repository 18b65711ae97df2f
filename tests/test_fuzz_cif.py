"""Fuzzing CIF text with hypothesis: random mutations of valid CIF files
(dropped, duplicated and garbled lines; 0, negative, nan, inf and huge
numbers in the cell and the coordinates; unknown space-group symbols; missing
loops; binary junk; empty files; requests for huge cells or multiplicities)
read through crystalview.exchange.cif.read_cif and through
`crystalview info FILE.cif` in-process.

The only allowed outcomes are success or one UserError line (command-line
exit status 2): never another exception, never a hang (the hypothesis
deadline), never a memory blow-up (the atom cap is applied to operations x
sites before gemmi expands anything).

The suite runs CRYSTALVIEW_FUZZ_EXAMPLES cases per test (default 300),
derandomised so every run is the same.
"""
import os

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

N = int(os.environ.get("CRYSTALVIEW_FUZZ_EXAMPLES", "300"))
FUZZ = settings(max_examples=N, deadline=10_000, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
CAP = 20000

HEAD = ("data_{name}\n_cell_length_a {a}\n_cell_length_b {b}\n_cell_length_c {c}\n"
        "_cell_angle_alpha {al}\n_cell_angle_beta {be}\n_cell_angle_gamma {ga}\n")
ATOM_LOOP = ("loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n"
             "_atom_site_fract_z\n_atom_site_occupancy\n")

# valid seeds: an asymmetric unit with a symbol, one with listed operations, a P 1 file
SEEDS = [
    HEAD.format(name="Cu", a="3.6149", b="3.6149", c="3.6149", al=90, be=90, ga=90)
    + "_symmetry_space_group_name_H-M 'F m -3 m'\n" + ATOM_LOOP + "Cu1 Cu 0 0 0 1\n",
    HEAD.format(name="Ti", a="2.9508", b="2.9508", c="4.6855", al=90, be=90, ga=120)
    + "_space_group_IT_number 194\nloop_\n_space_group_symop_id\n_space_group_symop_operation_xyz\n"
    + "".join(f"{k + 1} {op}\n" for k, op in enumerate(
        ["x,y,z", "x-y,x,z+1/2", "-y,x-y,z", "-x,-y,z+1/2", "-x+y,-x,z", "y,-x+y,z+1/2", "y,x,-z", "x-y,-y,-z",
         "-x,-x+y,-z", "-y,-x,-z+1/2", "-x+y,y,-z+1/2", "x,x-y,-z+1/2", "-x,-y,-z", "-x+y,-x,-z+1/2", "y,-x+y,-z",
         "x,y,-z+1/2", "x-y,x,-z", "-y,x-y,-z+1/2", "-y,-x,z", "-x+y,y,z", "x,x-y,z", "y,x,z+1/2", "x-y,-y,z+1/2",
         "-x,-x+y,z+1/2"]))
    + ATOM_LOOP + "Ti1 Ti 1/3 2/3 1/4 1\n",
    HEAD.format(name="NiAl", a="2.887", b="2.887", c="2.887", al=90, be=90, ga=90)
    + "_symmetry_space_group_name_H-M 'P 1'\n" + ATOM_LOOP + "Ni1 Ni 0 0 0 1\nAl1 Al 0.5 0.5 0.5 1\n",
]
# Ti seed: the 1/3 2/3 coordinates as text fractions are not CIF numbers; use decimals
SEEDS[1] = SEEDS[1].replace("1/3 2/3 1/4", "0.333333 0.666667 0.25")

NUMBERS = st.sampled_from(["0", "-0", "-1", "-3.6", "nan", "NaN", "inf", "-inf", "1e308", "1e-308", "1e9",
                           "100000", "0.0001", "?", ".", "1.5(3)", "3.6149", "90", "120", "180", "179.999",
                           "0.5", "1e6", "-1e6", "2", "x", ""])
SYMBOLS = st.sampled_from(["'F m -3 m'", "'Q 9 9'", "'P 1'", "'I m -3 m'", "'P 63/m m c'", "Fm-3m", "'F d -3 m'",
                           "'P 42/n'", "'?'", "''", "'P -1'", "'A b c'", "'P 1 21/c 1'", "'R -3 m'", "'H 3'"])
OPS = st.sampled_from(["x,y,z", "-x,-y,-z", "y,z,x", "x+1/2,y+1/2,z", "x+1/5,y,z", "2*x,y,z", "foo", "x,y",
                       "-x+y,-x,z", "x,y,z+1/2", "z,x,y", "'x, y, z'", "x+1/24,y,z", "-y,x,z"])
JUNK = st.sampled_from(["\x00\x01\x02", "\xff\xfe", ";", "loop_", "data_", "save_", "_cell_length_a",
                        "'", '"', "#", "_atom_site_fract_x", "global_", "stop_", "\t", "\ud7ff", "é"])


@st.composite
def mutated_cif(draw):
    """A valid seed, then a few random edits."""
    text = draw(st.sampled_from(SEEDS))
    lines = text.splitlines()
    for _ in range(draw(st.integers(0, 5))):
        # mostly edits that keep the CIF syntax (so the reader's checks are reached), some that break it
        kind = draw(st.sampled_from([0, 1, 2, 3, 3, 4, 4, 5, 5, 5, 6, 6, 7, 7, 8, 9, 10, 10]))
        k = draw(st.integers(1 if len(lines) > 1 else 0, max(len(lines) - 1, 0))) if lines else 0
        if not lines:
            lines = [draw(JUNK)]
        elif kind == 0:                                  # drop a line
            del lines[k]
        elif kind == 1:                                  # duplicate a line
            lines.insert(k, lines[k])
        elif kind == 2:                                  # garble a line
            s = lines[k]
            i = draw(st.integers(0, len(s)))
            lines[k] = s[:i] + draw(st.one_of(JUNK, st.text(max_size=6))) + s[i + draw(st.integers(0, 3)):]
        elif kind == 4 and draw(st.booleans()):          # a cell parameter dropped or doubled in size
            tags = [i for i, ln in enumerate(lines) if ln.startswith("_cell_length")]
            if tags:
                i = draw(st.sampled_from(tags))
                if draw(st.booleans()):
                    del lines[i]
                else:
                    lines[i] = lines[i].split()[0] + " " + draw(st.sampled_from(["7.2298", "36.149", "1.8"]))
        elif kind in (3, 4):                             # a random number in a cell parameter
            tags = [i for i, ln in enumerate(lines) if ln.startswith("_cell_")]
            if tags:
                i = draw(st.sampled_from(tags))
                lines[i] = lines[i].split()[0] + " " + draw(NUMBERS)
        elif kind == 5:                                  # a random number in an atom coordinate
            rows = [i for i, ln in enumerate(lines) if ln and ln[0].isupper() and len(ln.split()) >= 5]
            if rows:
                i = draw(st.sampled_from(rows))
                parts = lines[i].split()
                parts[draw(st.integers(1, len(parts) - 1))] = draw(NUMBERS)
                lines[i] = " ".join(parts)
        elif kind == 6:                                  # another space-group symbol or number
            at = 1 if draw(st.integers(0, 3)) else k
            lines.insert(at, draw(st.sampled_from(["_symmetry_space_group_name_H-M ", "_space_group_name_H-M_alt ",
                                                  "_space_group_IT_number ", "_symmetry_Int_Tables_number "]))
                         + draw(st.one_of(SYMBOLS, NUMBERS, st.integers(-5, 300).map(str))))
        elif kind == 7:                                  # a list of symmetry operations
            ops = draw(st.lists(OPS, min_size=0, max_size=6))
            lines += ["loop_", "_space_group_symop_operation_xyz"] + ops
        elif kind == 8:                                  # a loop header without its loop_ / values
            lines = [ln for ln in lines if ln != "loop_"] if draw(st.booleans()) else lines[:k]
        elif kind == 9:                                  # binary junk
            lines.insert(k, draw(st.binary(max_size=12)).decode("latin-1"))
        else:                                            # an odd element in the type column
            rows = [i for i, ln in enumerate(lines) if ln and ln[0].isupper() and len(ln.split()) >= 5]
            if rows:
                i = draw(st.sampled_from(rows))
                parts = lines[i].split()
                parts[1] = draw(st.sampled_from(["Xx", "X", "D", "Og", "H", "C", "?", "Cu2+", "u", "Q"]))
                lines[i] = " ".join(parts)
    return "\n".join(lines) + ("\n" if draw(st.booleans()) else "")


@pytest.fixture(scope="module")
def capped():
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("CRYSTALVIEW_MAX_ATOMS", str(CAP))
        yield


def _read(path):
    from crystalview.errors import UserError
    from crystalview.exchange.cif import read_cif

    try:
        c = read_cif(path)
    except UserError as exc:
        msg = str(exc).strip()
        assert msg and "\n" not in msg, msg
        return None
    assert 0 < len(c) <= CAP
    assert c.volume > 0
    return c


def _cli_info(cli, path):
    rc, _out, err = cli("info", path)
    assert rc in (0, 2), err
    assert "Traceback" not in err and "internal error" not in err, err
    if rc == 2:
        assert err.strip() and err.count("\n") == 1, err
    return rc


def _write(tmp_path_factory, text, binary=False):
    p = tmp_path_factory.mktemp("cif") / "fuzz.cif"
    if binary:
        p.write_bytes(text)
    else:
        p.write_text(text, encoding="utf-8", errors="surrogatepass")
    return p


def test_seeds_are_valid(tmp_path_factory, capped):
    import gemmi

    # the seeds read as the right crystals (multiplicities: International Tables Vol. A,
    # Fm-3m 4a = 4 atoms, P6_3/mmc 2c = 2 atoms; P 1 lists every atom)
    for text, n, number in zip(SEEDS, (4, 2, 2), (225, 194, 1)):
        p = _write(tmp_path_factory, text)
        c = _read(p)
        assert c is not None and len(c) == n and c.metadata["space_group_number"] == number
        # gemmi, read directly, agrees
        st_ = gemmi.make_small_structure_from_block(gemmi.cif.read(str(p)).sole_block())
        assert len(st_.get_all_unit_cell_sites()) == n


@FUZZ
@given(text=mutated_cif())
def test_fuzz_cif_mutations(tmp_path_factory, cli, capped, text):
    p = _write(tmp_path_factory, text)
    _read(p)
    _cli_info(cli, p)


@FUZZ
@given(data=st.binary(max_size=300))
def test_fuzz_cif_binary(tmp_path_factory, cli, capped, data):
    p = _write(tmp_path_factory, data, binary=True)
    _read(p)
    _cli_info(cli, p)


@FUZZ
@given(sites=st.integers(1, 4000), symbol=st.sampled_from(["'F m -3 m'", "'I m -3 m'", "'P 63/m m c'", "'P 1'"]),
       a=st.sampled_from(["3.6", "1000", "9999", "20000", "0.4", "1e-3"]))
def test_fuzz_cif_huge_requests(tmp_path_factory, capped, sites, symbol, a):
    """Many sites x a big group, or a huge / tiny cell: refused with the estimate, or read within the cap."""
    rows = "".join(f"Cu{k} Cu {(k * 0.6180339) % 1:.6f} {(k * 0.4142135) % 1:.6f} {(k * 0.7320508) % 1:.6f} 1\n"
                   for k in range(sites))
    text = (HEAD.format(name="big", a=a, b=a, c=a, al=90, be=90, ga=90)
            + f"_symmetry_space_group_name_H-M {symbol}\n" + ATOM_LOOP + rows)
    p = _write(tmp_path_factory, text)
    from crystalview.errors import LimitError, UserError
    from crystalview.exchange.cif import read_cif

    order = {"'F m -3 m'": 192, "'I m -3 m'": 96, "'P 63/m m c'": 24, "'P 1'": 1}[symbol]
    try:
        c = read_cif(p)
    except LimitError as exc:
        assert sites * order > CAP and "\n" not in str(exc)
        return
    except UserError as exc:
        assert "\n" not in str(exc)
        return
    assert sites * order <= CAP and len(c) <= sites * order


def test_many_operations_refused_quickly(tmp_path_factory, capped):
    """Thousands of listed operations: refused by count, by the comparisons
    the expansion would need, or read - always within seconds."""
    import time

    from crystalview.errors import LimitError, UserError
    from crystalview.exchange.cif import read_cif

    head = HEAD.format(name="ops", a=30, b=30, c=30, al=90, be=90, ga=90)
    atoms = ATOM_LOOP + "".join(f"Cu{k} Cu 0.{k + 1} 0.2 0.3 1\n" for k in range(8))
    for n in (20000, 4000):
        ops = "".join(f"x+{k % 24}/24,y+{(k // 24) % 24}/24,z+{k // 576}/24\n" for k in range(n))
        p = _write(tmp_path_factory, head + "loop_\n_space_group_symop_operation_xyz\n" + ops + atoms)
        t = time.perf_counter()
        with pytest.raises((LimitError, UserError)) as e:
            read_cif(p)
        assert time.perf_counter() - t < 5 and "\n" not in str(e.value)


def test_empty_and_blank_files(tmp_path_factory, cli, capped):
    for text in ("", "\n", "   \n\n", "data_x\n", "#\\#CIF_1.1\n", "data_x\n_cell_length_a 3\n"):
        p = _write(tmp_path_factory, text)
        assert _read(p) is None
        assert _cli_info(cli, p) == 2


# Inputs the fuzzing found: the earlier reader crashed (nan / '?' coordinates reached scipy's
# cKDTree: ValueError) or hung for minutes in the periodic neighbour search (thin, huge or
# needle-shaped cells).  Each now gives one line, at once.
REGRESSIONS = [("3.6", "3.6", "90", "nan"), ("3.6", "3.6", "90", "?"), ("3.6", "3.6", "0.01", "0"),
               ("1e9", "3.6", "90", "0"), ("9999", "0.5", "90", "0"), ("1e-308", "3.6", "90", "0")]


@pytest.mark.parametrize("a,b,gamma,x", REGRESSIONS)
def test_found_by_fuzzing(tmp_path_factory, cli, capped, a, b, gamma, x):
    import time

    text = (HEAD.format(name="r", a=a, b=b, c=b, al=90, be=90, ga=gamma) + "_symmetry_space_group_name_H-M 'P 1'\n"
            + ATOM_LOOP + f"Cu1 Cu {x} 0 0 1\n")
    p = _write(tmp_path_factory, text)
    t = time.perf_counter()
    assert _read(p) is None
    assert _cli_info(cli, p) == 2
    assert time.perf_counter() - t < 5
