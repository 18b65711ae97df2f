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
