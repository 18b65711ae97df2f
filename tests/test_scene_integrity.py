"""Scenes stay inside their output folder, never leave a half-written run, and never write one name twice."""
from pathlib import Path

import pytest

HEAD = '[scene]\nname = "{name}"\n[structure]\nelement = "Cu"\n'


def _scene(tmp_path, name, body, fname=None):
    p = tmp_path / (fname or f"{name}.toml")
    p.write_text(HEAD.format(name=name) + body)
    return p


@pytest.mark.parametrize("file", ["../../x.png", "/tmp/abs.png", "../x.cif", "a/../../b.png", "~/x.png"])
def test_outputs_outside_the_folder_refused(tmp_path, cli, file):
    p = _scene(tmp_path, "esc", f'[[figures]]\nfile = "{file}"\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    assert rc == 2 and err.count("\n") == 1
    assert "outside the scene's output folder" in err or "not a valid value" in err      # the schema: no leading /
    assert not list(tmp_path.glob("**/x.png")) and not Path("/tmp/abs.png").exists()


def test_subfolders_inside_are_fine(tmp_path, cli):
    p = _scene(tmp_path, "sub", '[[exports]]\nfile = "files/cu.cif"\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    assert rc == 0, err
    assert (tmp_path / "o" / "files" / "cu.cif").is_file()


def test_failing_scene_leaves_nothing_and_the_rerun_works(tmp_path, cli):
    """A bad fit solute after info.json used to leave info.json and no manifest; the corrected rerun was
    then refused because info.json existed."""
    p = _scene(tmp_path, "half", '[analysis]\ninfo = true\nfit = ["Xq"]\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    assert rc == 2
    assert [f for f in (tmp_path / "o").rglob("*") if not f.is_dir()] == []
    p.write_text(HEAD.format(name="half") + '[analysis]\ninfo = true\nfit = ["C"]\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    assert rc == 0, err
    assert (tmp_path / "o" / "manifest.json").is_file() and (tmp_path / "o" / "fit-C.json").is_file()
    assert not list((tmp_path / "o").glob(".cv-stage-*"))


def test_model_reports_and_case_clashes_refused_up_front(tmp_path, cli):
    p = _scene(tmp_path, "two", '[[models]]\nfile = "cu.stl"\n[[models]]\nfile = "cu.3mf"\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    assert rc == 2 and "cu.report.txt" in err
    p = _scene(tmp_path, "case", '[[exports]]\nfile = "Cu.cif"\n[[exports]]\nfile = "cu.cif"\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "p")
    assert rc == 2 and "more than once" in err


def test_two_scenes_of_one_name_refused(tmp_path, cli):
    a = _scene(tmp_path, "same", "", "a.toml")
    b = _scene(tmp_path, "same", "", "b.toml")
    rc, out, err = cli("run", a, b, "--out", tmp_path / "o")
    assert rc == 2 and "both named 'same'" in err
    assert not (tmp_path / "o" / "same").exists()


# ---------------------------------------------------------------- issue 18, the review's re-check
GOOD = ('[analysis]\ninfo = true\nfit = ["C"]\n[[exports]]\nfile = "sub/a.cif"\n[[exports]]\nfile = "a.xyz"\n')


def _snapshot(folder):
    """{relative path: bytes} of every file under ``folder`` (staging folders included)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(Path(folder).rglob("*")) if p.is_file()}


def _one_line_refusal(rc, err):
    assert rc == 2, err
    assert err.count("\n") == 1 and err.startswith("crystalview: error:") and "Traceback" not in err


@pytest.mark.parametrize("folder", ["/proc", "/proc/self/fd"])
def test_b10_an_output_folder_that_cannot_hold_files(tmp_path, cli, folder):
    if not Path(folder).is_dir():
        pytest.skip("no /proc here")
    p = _scene(tmp_path, "race", '[[exports]]\nfile = "a.cif"\n')
    rc, out, err = cli("run", p, "--out", folder)
    _one_line_refusal(rc, err)
    assert "cannot hold files" in err and folder in err


def test_b12_a_file_name_used_as_a_folder_by_another_output(tmp_path, cli):
    p = _scene(tmp_path, "b12", '[[exports]]\nfile = "x.cif"\n[[exports]]\nfile = "X.cif/y.cif"\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    _one_line_refusal(rc, err)
    assert "'x.cif'" in err and "as a folder" in err
    assert not (tmp_path / "o").exists()


def test_b13_a_folder_where_an_output_file_goes_is_refused_up_front_even_with_force(tmp_path, cli):
    o = tmp_path / "o"
    p = _scene(tmp_path, "b13", '[[exports]]\nfile = "b.xyz"\n')
    assert cli("run", p, "--out", o)[0] == 0
    before = _snapshot(o)
    (o / "a.cif").mkdir()
    p = _scene(tmp_path, "b13", '[[exports]]\nfile = "a.cif"\n[[exports]]\nfile = "b.xyz"\n')
    rc, out, err = cli("run", p, "--out", o, "--force")
    _one_line_refusal(rc, err)
    assert "a.cif' is a folder" in err
    assert _snapshot(o) == before and (o / "a.cif").is_dir()
    assert not list(o.glob(".cv-stage-*"))


def test_b14_a_file_where_an_output_folder_goes_keeps_the_previous_results(tmp_path, cli):
    o = tmp_path / "o"
    p = _scene(tmp_path, "good", GOOD)
    assert cli("run", p, "--out", o)[0] == 0
    (o / "sub" / "a.cif").unlink()
    (o / "sub").rmdir()
    (o / "sub").write_text("not a folder\n")
    before = _snapshot(o)
    rc, out, err = cli("run", p, "--out", o, "--force")
    _one_line_refusal(rc, err)
    assert "sub' is a file where the scene needs a folder" in err and "appeared" not in err
    assert _snapshot(o) == before


def test_b14_a_file_appearing_in_the_way_while_the_scene_runs_changes_nothing(tmp_path, cli, monkeypatch):
    import crystalview.scene as scene

    o = tmp_path / "o"
    p = _scene(tmp_path, "good", GOOD)
    assert cli("run", p, "--out", o)[0] == 0
    before = _snapshot(o)
    build = scene.crystal_from_scene

    def build_and_swap(*a, **k):      # someone replaces the folder sub with a file while the scene runs
        if (o / "sub").is_dir():
            (o / "sub" / "a.cif").unlink()
            (o / "sub").rmdir()
            (o / "sub").write_text("in the way\n")
        return build(*a, **k)

    monkeypatch.setattr(scene, "crystal_from_scene", build_and_swap)
    rc, out, err = cli("run", p, "--out", o, "--force")
    _one_line_refusal(rc, err)
    assert "sub' is a file" in err and "nothing was changed" in err
    after = _snapshot(o)
    assert after.pop("sub") == b"in the way\n"
    assert after == {k: v for k, v in before.items() if k != "sub/a.cif"}


def test_b14_a_move_failing_half_way_puts_the_previous_results_back(tmp_path, cli, monkeypatch):
    import os

    o = tmp_path / "o"
    p = _scene(tmp_path, "good", GOOD)
    assert cli("run", p, "--out", o)[0] == 0
    before = _snapshot(o)
    p.write_text(HEAD.format(name="good") + "repeat = [2, 2, 2]\n" + GOOD)      # new results differ
    rename, calls = os.rename, []

    def flaky(src, dst):
        calls.append(dst)
        if len(calls) == 3:
            raise OSError(5, "Input/output error", str(dst))
        return rename(src, dst)

    monkeypatch.setattr(os, "rename", flaky)
    rc, out, err = cli("run", p, "--out", o, "--force")
    _one_line_refusal(rc, err)
    assert "nothing was changed" in err and ".cv-" not in err
    assert _snapshot(o) == before
    monkeypatch.setattr(os, "rename", rename)
    assert cli("run", p, "--out", o, "--force")[0] == 0
    assert _snapshot(o)["info.json"] != before["info.json"]


def test_a5_a_scene_larger_than_the_free_space_is_refused_before_anything_is_written(tmp_path, cli, monkeypatch):
    import crystalview.scene as scene

    monkeypatch.setattr(scene, "_free_bytes", lambda path: 10_000_000)
    body = "repeat = [10, 10, 10]\n" + "".join(f'[[exports]]\nfile = "f{i}.xyz"\n' for i in range(40))
    p = _scene(tmp_path, "big", body)
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    _one_line_refusal(rc, err)
    assert "would write about" in err and "10.0 MB free" in err
    assert not (tmp_path / "o").exists()
    # the review's scene (50 million atoms, 40 XYZ files, ~112 GB): refused without building the crystal
    import time

    monkeypatch.setattr(scene, "_free_bytes", lambda path: 50 * 10**9)
    monkeypatch.setattr(scene, "_run_staged", lambda *a, **k: pytest.fail("the scene ran"))
    p = _scene(tmp_path, "huge", "repeat = [232, 232, 232]\n" + "".join(f'[[exports]]\nfile = "f{i}.xyz"\n'
                                                                        for i in range(40)))
    t0 = time.perf_counter()
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    _one_line_refusal(rc, err)
    assert "111.9 GB" in err and "50.0 GB free" in err and time.perf_counter() - t0 < 5
    # what fits is written
    monkeypatch.setattr(scene, "_free_bytes", lambda path: 10**9)
    monkeypatch.undo()
    p = _scene(tmp_path, "fits", '[[exports]]\nfile = "a.xyz"\n')
    assert cli("run", p, "--out", tmp_path / "o")[0] == 0


def test_c15_control_characters_are_escaped_in_everything_run_echoes(tmp_path, cli):
    p = tmp_path / "ctl.toml"
    p.write_text('[scene]\nname = "ctl"\ntitle = "T\\u001b[2Jitle"\n[structure]\nelement = "Cu\\u001b[31m"\n')
    for extra in ((), ("--quiet",)):
        rc, out, err = cli("run", p, "--out", tmp_path / "o", *extra)
        assert rc == 2
        assert "\x1b" not in out + err and "\\x1b[31m" in err
        if extra:
            assert "summary:" in out and "\\x1b[31m" in out


def test_24_a_link_inside_the_output_folder_pointing_outside_is_refused(tmp_path, cli):
    o, elsewhere = tmp_path / "o", tmp_path / "elsewhere"
    o.mkdir()
    elsewhere.mkdir()
    (o / "sub").symlink_to(elsewhere, target_is_directory=True)
    p = _scene(tmp_path, "link", '[[exports]]\nfile = "sub/a.cif"\n')
    for extra in ((), ("--force",)):
        rc, out, err = cli("run", p, "--out", o, *extra)
        _one_line_refusal(rc, err)
        assert "outside the output folder" in err and "is a link" in err
    assert list(elsewhere.iterdir()) == [] and sorted(x.name for x in o.iterdir()) == ["sub"]
    # a link that stays inside is fine
    (o / "figs").mkdir()
    (o / "in").symlink_to(o / "figs", target_is_directory=True)
    p = _scene(tmp_path, "link", '[[exports]]\nfile = "in/a.cif"\n')
    assert cli("run", p, "--out", o)[0] == 0 and (o / "figs" / "a.cif").is_file()


def test_25_errors_name_final_paths_and_a_failed_run_leaves_no_folder_of_its_own(tmp_path, cli):
    o = tmp_path / "o_fig3"
    p = _scene(tmp_path, "fig3", '[[figures]]\nfile = "f.gif"\n')
    rc, out, err = cli("run", p, "--out", o)
    _one_line_refusal(rc, err)
    assert ".cv-stage" not in err and f"'{o / 'f.gif'}'" in err
    assert not o.exists()
    # several scenes: the folder --out and the scenes' folders made by a failed run go too
    q = _scene(tmp_path, "other", '[analysis]\nfit = ["Xq"]\n')
    rc, out, err = cli("run", p, q, "--out", tmp_path / "many" / "deeper")
    assert rc == 2 and not (tmp_path / "many").exists()
    # the Python API: the same
    from crystalview.errors import UserError
    from crystalview.scene import run_scene

    with pytest.raises(UserError):
        run_scene(p, out=tmp_path / "api" / "x", log=lambda *a: None)
    assert not (tmp_path / "api").exists()
    # a folder that was there before stays
    (tmp_path / "kept").mkdir()
    assert cli("run", p, "--out", tmp_path / "kept")[0] == 2 and (tmp_path / "kept").is_dir()


@pytest.mark.parametrize("name", [".", "./", "a/.", "sub/", " "])
def test_25_a_folder_is_not_a_file_name(tmp_path, cli, name):
    p = _scene(tmp_path, "fn", f'[analysis]\ninfo = false\n[[exports]]\nfile = "{name}"\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o_fn")
    _one_line_refusal(rc, err)
    assert "not a file name" in err and "already exists" not in err


def test_23_sigterm_cleans_up_the_staging_folder(tmp_path):
    import os
    import signal
    import subprocess
    import sys
    import time

    p = _scene(tmp_path, "slow", "repeat = [40, 40, 40]\n[analysis]\nsites = true\n"
               + "".join(f'[[exports]]\nfile = "f{i}.xyz"\n' for i in range(30)))
    o = tmp_path / "o"
    o.mkdir()
    child = ("import signal, sys; signal.signal(signal.SIGTERM, signal.SIG_DFL); signal.pthread_sigmask("
             "signal.SIG_SETMASK, []); from crystalview.cli import main; sys.exit(main())")
    proc = subprocess.Popen([sys.executable, "-c", child, "run", str(p), "--out", str(o)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.time() + 60
    while time.time() < deadline and proc.poll() is None:
        if list(o.glob(".cv-stage-*/info.json")):      # partial results are being written
            break
        time.sleep(0.02)
    assert proc.poll() is None, proc.communicate()
    proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 128 + signal.SIGTERM, err
    assert b"terminated" in err and b"Traceback" not in err
    assert list(o.iterdir()) == []
    assert os.path.isdir(o)          # it was there before the run


def test_27_scene_figure_limits_are_the_command_lines(tmp_path, cli):
    from crystalview.render.style import MAX_DPI, MAX_SIDE, MIN_DPI, MIN_SIDE
    from crystalview.scene import load

    ok = _scene(tmp_path, "lim", f'[[figures]]\nfile = "a.png"\nsize = [{MIN_SIDE}, {MAX_SIDE}]\n'
                f'[[figures]]\nfile = "b.png"\ndpi = {MIN_DPI}\n[[figures]]\nfile = "c.png"\ndpi = {MAX_DPI}\n')
    load(ok)
    for bad, needle in ((f'size = [{MIN_SIDE - 1}, 100]', f"at least {MIN_SIDE}"),
                        (f'size = [100, {MAX_SIDE + 1}]', f"at most {MAX_SIDE}"),
                        (f"dpi = {MIN_DPI - 1}", f"at least {MIN_DPI}"), (f"dpi = {MAX_DPI + 1}", f"at most {MAX_DPI}")):
        p = _scene(tmp_path, "lim", f'[[figures]]\nfile = "a.png"\n{bad}\n')
        rc, out, err = cli("run", p, "--out", tmp_path / "o")
        _one_line_refusal(rc, err)
        assert needle in err
    # a width and dpi that give too many pixels: refused before anything runs, naming the figure
    p = _scene(tmp_path, "lim", '[[figures]]\nfile = "a.png"\n[[figures]]\nfile = "big.png"\nwidth = "900mm"\n'
               'dpi = 2400\n')
    rc, out, err = cli("run", p, "--out", tmp_path / "o")
    _one_line_refusal(rc, err)
    assert "figures[2]" in err and "big.png" in err and not (tmp_path / "o").exists()


def test_23_sigterm_during_the_final_move_waits_until_it_is_complete(tmp_path, cli, monkeypatch):
    import hashlib
    import json
    import os
    import signal

    o = tmp_path / "o"
    p = _scene(tmp_path, "good", GOOD)
    assert cli("run", p, "--out", o)[0] == 0
    p.write_text(HEAD.format(name="good") + "repeat = [2, 2, 2]\n" + GOOD)
    link, calls = os.link, []

    def link_then_sigterm(src, dst):
        calls.append(dst)
        if len(calls) == 2:
            os.kill(os.getpid(), signal.SIGTERM)
        return link(src, dst)

    monkeypatch.setattr(os, "link", link_then_sigterm)
    with pytest.raises(SystemExit) as e:
        cli("run", p, "--out", o, "--force")
    assert e.value.code == 128 + signal.SIGTERM
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL          # the handler is taken down again
    m = json.loads((o / "manifest.json").read_text())                   # the whole new result is in place
    for w in m["written"]:
        assert hashlib.sha256(Path(w["file"]).read_bytes()).hexdigest() == w["sha256"]
    assert not list(o.glob(".cv-*"))


def test_a_scene_asks_for_at_most_200_outputs_of_a_kind(tmp_path):
    """20,000 exports in one scene ran for minutes (about 22 ms each); refused at once, without echoing the
    whole list."""
    import subprocess
    import sys

    scene = tmp_path / "many.toml"
    scene.write_text('[scene]\nname = "many"\n[structure]\nelement = "Cu"\n'
                     + "".join(f'[[exports]]\nfile = "f{i}.cif"\n' for i in range(300)))
    p = subprocess.run([sys.executable, "-m", "crystalview", "run", str(scene), "--out", str(tmp_path / "o")],
                       capture_output=True, text=True, timeout=120)
    assert p.returncode == 2 and "at most 200" in p.stderr and len(p.stderr) < 400
    assert not (tmp_path / "o").exists()
