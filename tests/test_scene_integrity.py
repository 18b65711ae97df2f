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
