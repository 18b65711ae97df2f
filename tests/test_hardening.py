"""Hardening: crash-safe writes under SIGKILL, fast start, resource caps."""
import os
import random
import signal
import subprocess
import sys
import time

import pytest

import crystalview as cv


def _kill_during_writes(target, crystal, tries, max_delay, force):
    rng = random.Random(1234)
    for _ in range(tries):
        pid = os.fork()
        if pid == 0:                       # child: write, then leave without cleanup
            try:
                cv.export(crystal, target, force=force)
            finally:
                os._exit(0)
        time.sleep(rng.uniform(0, max_delay))
        os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
        yield


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs fork")
def test_sigkill_during_export_never_leaves_a_partial_file(tmp_path):
    # 100 kills at random moments during a 6 MB export; the target is always either absent or whole
    crystal = cv.build("Cu", repeat=(30, 30, 30))
    ref_path = tmp_path / "ref.xyz"
    t = time.perf_counter()
    cv.export(crystal, ref_path)
    write_time = time.perf_counter() - t
    ref = ref_path.read_bytes()
    target = tmp_path / "big.xyz"
    seen_whole = 0
    for _ in _kill_during_writes(target, crystal, 100, 1.3 * write_time, force=True):
        if target.exists():
            assert target.read_bytes() == ref
            seen_whole += 1
    # a file that existed before is never damaged either
    for _ in _kill_during_writes(ref_path, crystal, 10, 1.3 * write_time, force=True):
        assert ref_path.read_bytes() == ref
    # temporary files of killed writers are swept up by the next write
    cv.export(crystal, target, force=True)
    cv.export(crystal, ref_path, force=True)
    leftovers = [p.name for p in tmp_path.iterdir() if p.name not in ("ref.xyz", "big.xyz")]
    assert leftovers == []


def test_non_drawing_commands_never_import_vtk_or_pyvista():
    code = (
        "import sys\nfrom crystalview.cli import main\n"
        "for argv in (['info','Cu'], ['build','Fe','--repeat','2','2','2'], ['sites','Fe'], ['fit','C','Fe'],"
        " ['slip','Cu','--axis','[001]'],):\n"
        "    assert main(argv) == 0, argv\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('vtk', 'vtkmodules', 'pyvista'))\n"
        "assert not bad, bad[:5]\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr[-2000:]


def test_atom_cap_from_environment(monkeypatch):
    monkeypatch.setenv("CRYSTALVIEW_MAX_ATOMS", "100")
    with pytest.raises(cv.LimitError, match="108"):
        cv.build("Cu", repeat=(3, 3, 3))


def test_internal_fault_exits_1_with_hint(cli, monkeypatch):
    import crystalview.analysis.properties as props

    def broken(*a, **k):
        raise ZeroDivisionError("simulated fault")

    monkeypatch.setattr(props, "summary", broken)
    rc, out, err = cli("info", "Cu")
    assert rc == 1 and "internal error" in err and "--debug" in err and "Traceback" not in err


def test_bad_numbers_and_places_are_one_line_errors(tmp_path, cli, monkeypatch):
    """Cases that used to end as internal faults (exit 1): now one line, exit 2, nothing written."""
    cases = [
        ("render", "Cu", "-o", tmp_path / "x.png", "--size", "inf", "100"),
        ("build", "Cu", "--max-atoms", "nan"),
        ("build", "Cu", "--max-atoms", "inf"),
        ("export", "Cu", "-o", tmp_path / ("a" * 250 + ".cif")),
        ("export", "Cu", "-o", "/proc/x.cif"),
        ("build", "Cu", "--slab", "(111)", "--vacuum", "1e300"),
        ("info", "Cu", "--direction", "[12345678901234567890 1 1]"),
    ]
    for argv in cases:
        rc, out, err = cli(*argv)
        assert rc == 2 and err.count("\n") == 1 and "internal" not in err, (argv, err)
    monkeypatch.setenv("CRYSTALVIEW_MAX_ATOMS", "inf")
    rc, out, err = cli("build", "Cu")
    assert rc == 2 and "CRYSTALVIEW_MAX_ATOMS" in err
    monkeypatch.delenv("CRYSTALVIEW_MAX_ATOMS")
    deep = tmp_path / "deep.toml"
    deep.write_text('[scene]\nname = "d"\n[structure]\nelement = "Cu"\nx = ' + "[" * 600 + "]" * 600 + "\n")
    rc, out, err = cli("run", deep, "--out", tmp_path / "o")
    assert rc == 2 and "internal" not in err
    assert not list(tmp_path.glob("*.png")) and not list(tmp_path.glob("*.cif"))


def test_full_disk_is_a_one_line_error_and_leaves_nothing(tmp_path, cli, monkeypatch):
    import errno
    import os

    real = os.fsync

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "fsync", full)
    rc, out, err = cli("export", "Cu", "-o", tmp_path / "cu.cif")
    monkeypatch.setattr(os, "fsync", real)
    assert rc == 2 and "No space left" in err and list(tmp_path.iterdir()) == []


def test_sheared_supercells_and_huge_repeats_refused_or_cheap(cli):
    import time

    t = time.perf_counter()
    rc, out, err = cli("build", "Cu", "--supercell", "999", "998", "0", "1000", "999", "0", "0", "0", "1")
    assert rc == 0 and "4 atoms" in out and time.perf_counter() - t < 10      # was 27 s and 2.8 GB
    rc, out, err = cli("build", "Cu", "--repeat", "2097152", "2097152", "2097152")
    assert rc == 2 and "36,893,488,147,419,103,232 atoms" in err                # exact, no 64-bit overflow
    rc, out, err = cli("build", "Cu", "--max-atoms", "3")
    assert rc == 2 and "4 atoms" in err


def _limited(argv, gb):
    """Run the CLI in a child process whose address space is capped at ``gb`` GB."""
    import subprocess
    import sys

    code = ("import resource, sys; resource.setrlimit(resource.RLIMIT_AS, ({0}, {0})); "
            "from crystalview.cli import main; sys.exit(main(sys.argv[1:]))").format(int(gb * 2 ** 30))
    return subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True, timeout=300)


def test_just_under_the_atom_cap_finishes_within_memory():
    """A build just under the 50-million-atom cap finishes in a child process capped at 6 GB of address
    space (the atoms need 1.3 GB); just over it is refused before anything is allocated (exit 2); never
    killed (the review drove a process to 24 GB before)."""
    r = _limited(["build", "Cu", "--repeat", "232", "232", "232", "--json"], 6)       # 49,948,672 atoms
    assert r.returncode == 0, r.stderr[-500:]
    r = _limited(["build", "Cu", "--repeat", "233", "233", "233"], 6)                 # 50,597,348 atoms
    assert r.returncode == 2 and "over the cap" in r.stderr
    r = _limited(["build", "Cu", "--repeat", "2097152", "2097152", "2097152"], 2)
    assert r.returncode == 2 and "over the cap" in r.stderr


@pytest.mark.parametrize("name,argv,gb,over", [
    # (output, arguments just under the format's cap, address-space limit in GB, arguments just over it)
    ("sf.glb", ["--repeat", "105", "105", "105", "--style", "space-filling"], 4,      # 4,630,500 atoms, ~0.9 GB
     ["--repeat", "108", "108", "108", "--style", "space-filling"]),
    ("bs.glb", ["--repeat", "55", "55", "55"], 4, ["--repeat", "57", "57", "57"]),     # 665,500 atoms, ~1.3 GB
    ("big.xyz", ["--repeat", "100", "100", "100"], 3, None),                             # 4 million atoms, streamed
    ("page.html", ["--repeat", "22", "22", "22"], 3, ["--repeat", "24", "24", "24"]),  # 42,592 atoms
])
def test_each_export_just_under_its_cap_finishes_within_memory(tmp_path, name, argv, gb, over):
    """Just under each format's cap the export finishes in a child process with a capped address space;
    just over it, it is refused in one line before the crystal is built; never killed."""
    target = tmp_path / name
    r = _limited(["export", "Cu", *argv, "-o", str(target), "--quiet"], gb)
    assert r.returncode == 0, r.stderr[-800:]
    assert target.stat().st_size > 0
    if over:
        t2 = tmp_path / ("over-" + name)
        r = _limited(["export", "Cu", *over, "-o", str(t2), "--quiet"], gb)
        assert r.returncode == 2 and r.stderr.count("\n") == 1 and "the crystal would have" in r.stderr
        assert not t2.exists()


def test_overlapping_atoms_big_files_and_bond_estimates_refused_early(tmp_path, cli):
    import time

    import numpy as np

    import crystalview as cv
    from crystalview.errors import LimitError, UserError

    dup = cv.Crystal(np.eye(3) * 3.6, [[0, 0, 0], [0, 0, 0]], symbols=["Cu", "Cu"])
    with pytest.raises(UserError, match="apart"):                    # used to crash the boolean library (139)
        cv.print_model(dup, tmp_path / "d.stl")
    assert not (tmp_path / "d.stl").exists()
    big = tmp_path / "big.cif"
    with open(big, "wb") as fh:
        fh.truncate(60_000_000)                                       # a sparse 60 MB file
    rc, out, err = cli("info", big)
    assert rc == 2 and "MB" in err
    from crystalview.exchange.gltf import gltf_document

    t = time.perf_counter()
    with pytest.raises(LimitError, match="about"):                    # estimated before any bond is found
        gltf_document(cv.build("Cu", repeat=(30, 30, 30)), max_instances=200_000)
    assert time.perf_counter() - t < 10


def test_review_round_two_one_line_exit_2(tmp_path, cli, monkeypatch):
    """Cases of the second adversarial review: each gets one line and exit 2 (they were exit 1, a traceback,
    gigabytes, or Infinity in the JSON)."""
    import json

    from crystalview.render import figure as F

    long_dir = tmp_path / ("b" * 300)
    rc, out, err = cli("export", "Cu", "-o", long_dir / "x.cif")
    assert rc == 2 and err.count("\n") == 1
    rc, out, err = cli("info", str(tmp_path / ("c" * 300)) + ".cif")
    assert rc == 2 and "255 bytes" in err and err.count("\n") == 1
    for argv in (("slip", "Cu", "--json"), ("info", "Cu", "--json", "--bogus"), ("sites", "Cu", "--json", "--max-atoms", "abc")):
        rc, out, err = cli(*argv)
        assert rc == 2 and "error" in json.loads(out) and err.count("\n") == 1, argv
    rc, out, err = cli("print", "Cu", "-o", tmp_path / "x.stl", "--material-density", "1e308", "--json")
    assert rc == 2 and "0.1-30" in json.loads(out)["error"] and not (tmp_path / "x.stl").exists()
    rc, out, err = cli("render", "Cu", "-o", tmp_path / "t.mp4", "--turntable", "--frames", "10", "--size", "8192", "8192")
    assert rc == 2 and "4096 x 4096" in err and not (tmp_path / "t.mp4").exists()
    monkeypatch.setattr(F, "available_memory", lambda: 500_000_000)             # a machine with 0.5 GB free
    rc, out, err = cli("render", "Cu", "--repeat", "60", "60", "60", "-o", tmp_path / "r.png", "--style", "space-filling")
    assert rc == 2 and "GB of memory" in err and not (tmp_path / "r.png").exists()
    rc, out, err = cli("export", "Cu", "-o", tmp_path / "t.html", "--title", "A\x1b[2J\x01B")
    assert rc == 0 and "<title>A [2J B</title>" in (tmp_path / "t.html").read_text()


def test_tolerance_and_thickness_bounded(cli):
    """A NaN alloy tolerance built Cu-10Ni as 4 Cu and 0 Ni (every comparison with NaN is false); a slab
    1e300 A thick printed a 300-digit atom count."""
    for tol in ("nan", "inf", "0", "-1", "80"):
        rc, out, err = cli("build", "Cu", "--alloy", "Cu-10Ni", "--alloy-tolerance", tol)
        assert rc == 2 and "alloy tolerance" in err and err.count("\n") == 1, tol
    rc, out, err = cli("build", "Cu", "--slab", "(111)", "--slab-thickness", "1e300")
    assert rc == 2 and "0 to 10000 A" in err and len(err) < 200


def test_sigterm_leaves_no_temporary_file(tmp_path):
    """SIGTERM during a large export: exit 143 and no temporary file left (the review found a 117 MB
    '.a.xyz.<pid>.tmp' after SIGTERM; Ctrl-C already cleaned up)."""
    import signal
    import subprocess
    import sys
    import time

    p = subprocess.Popen([sys.executable, "-m", "crystalview", "export", "Cu", "--repeat", "100", "100", "100",
                          "-o", str(tmp_path / "a.xyz"), "--quiet"], stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 60
    while time.time() < deadline and not any(tmp_path.iterdir()):
        time.sleep(0.05)                       # until the writer has started its temporary file
    p.send_signal(signal.SIGTERM)
    err = p.communicate(timeout=60)[1]
    assert p.returncode in (143, 0), err
    if p.returncode == 143:
        assert list(tmp_path.iterdir()) == [] and "terminated" in err
