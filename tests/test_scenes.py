"""Scene files: validation, running, manifests, the demo scenes."""
import json
from pathlib import Path

import pytest

from crystalview.errors import UserError
from crystalview.scene import load, plan_outputs, run_scene

SCENES = sorted((Path(__file__).parents[1] / "scenes").glob("*.toml"))


def test_at_least_five_scenes_shipped():
    assert len(SCENES) >= 5


@pytest.mark.parametrize("path", SCENES, ids=lambda p: p.stem)
def test_every_shipped_scene_runs_and_writes_what_it_declares(path, tmp_path):
    import pyvista

    pyvista.OFF_SCREEN = True
    data = load(path)
    out = tmp_path / data["scene"]["name"]
    manifest = run_scene(path, out=out, log=lambda *a: None)
    for f in plan_outputs(data, out):
        assert f.is_file() and f.stat().st_size > 0, f
    m = json.loads((out / "manifest.json").read_text())
    assert m["inputs"][0]["sha256"] == manifest["inputs"][0]["sha256"]
    assert {Path(w["file"]).name for w in m["written"]} >= {f.name for f in plan_outputs(data, out)} - {"manifest.json"}
    assert "numpy" in m["versions"] and "crystalview" in m["versions"]


BASE = '[scene]\nname = "t"\n[structure]\nelement = "Fe"\n'


@pytest.mark.parametrize("text,needle", [
    (BASE + "repet = [1, 1, 1]\n", "[structure] unknown key 'repet'"),
    (BASE.replace('element = "Fe"', 'element = 26'), "[structure.element] 26 is a int; it must be a string"),
    ('[scene]\nname = "t"\n', "'structure' is missing"),
    ('[structure]\nelement = "Fe"\n', "'scene' is missing"),
    (BASE + "[[defects]]\nkind = \"vacancies\"\nfraction = 1.5\n", "[defects[1].fraction] 1.5 is out of range"),
    (BASE + "[[defects]]\nkind = \"stack\"\n", "'sequence' is missing"),
    (BASE + "[[figures]]\nfile = \"a.png\"\nstyle = \"cartoon\"\n", "not one of ball-and-stick"),
    (BASE + "[[figures]]\nfile = \"a.png\"\n[[figures]]\nfile = \"a.png\"\n", "more than once"),
    (BASE + "[[exports]]\nfile = \"/etc/x.glb\"\n", "[exports[1].file]"),
    (BASE + "[bogus]\nx = 1\n", "unknown key 'bogus'"),
    ("[scene\n", "not valid TOML"),
    ('[scene]\nname = "t"\n[structure]\nphase = "gamma"\n', "needs one of element"),
])
def test_bad_scenes_one_line_error(tmp_path, text, needle):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(UserError) as e:
        data = load(p)
        plan_outputs(data, tmp_path)
    msg = str(e.value)
    assert needle in msg and str(p) in msg and "\n" not in msg


def test_manifest_hash_follows_the_scene(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(BASE)
    m1 = run_scene(p, out=tmp_path / "o1", log=lambda *a: None)
    p.write_text(BASE + "repeat = [2, 2, 2]\n")
    m2 = run_scene(p, out=tmp_path / "o2", log=lambda *a: None)
    assert m1["inputs"][0]["sha256"] != m2["inputs"][0]["sha256"]
    assert json.loads((tmp_path / "o2" / "info.json").read_text())["atoms"] == 16


def test_existing_outputs_kept_without_force(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(BASE)
    run_scene(p, out=tmp_path / "o", log=lambda *a: None)
    before = (tmp_path / "o" / "info.json").read_bytes()
    with pytest.raises(UserError, match="--force"):
        run_scene(p, out=tmp_path / "o", log=lambda *a: None)
    assert (tmp_path / "o" / "info.json").read_bytes() == before
    run_scene(p, out=tmp_path / "o", force=True, log=lambda *a: None)


def test_one_failing_scene_does_not_stop_the_others(tmp_path, cli):
    good = tmp_path / "good.toml"
    good.write_text(BASE)
    bad = tmp_path / "bad.toml"
    bad.write_text(BASE + "oops = 1\n")
    rc, out, err = cli("run", bad, good, "--out", tmp_path / "runs")
    assert rc == 2
    assert (tmp_path / "runs" / "t" / "manifest.json").is_file()
    assert "unknown key 'oops'" in err and "summary:" in out


@pytest.mark.parametrize("defect,check", [
    ('kind = "vacancies"\ncount = 2\nseed = 3', lambda c: len(c) == 6),
    ('kind = "substitute"\nelement = "Cr"\ncount = 3', lambda c: c.counts().get("Cr") == 3),
    ('kind = "interstitials"\nelement = "C"\nsite = "octahedral"\nfraction = 0.5', lambda c: c.counts().get("C") == 4),
    ('kind = "frenkel"\ncount = 1', lambda c: len(c) == 8 and "frenkel_pair" in str(c.metadata["defects"])),
    ('kind = "stack"\nsequence = "ABCABABC"', lambda c: len(c) == 8),
    ('kind = "slab"\nplane = "(111)"\nlayers = 4', lambda c: not c.pbc[2]),
    ('kind = "dislocation"\ncharacter = "edge"', lambda c: c.metadata["defects"][-1]["kind"] == "dislocation"),
    ('kind = "tilt-boundary"\naxis = "[001]"\nplane = "(310)"', lambda c: "grain_boundary" in str(c.metadata["defects"])
     or "boundary" in str(c.metadata["defects"])),
])
def test_every_defect_kind_from_a_scene(tmp_path, defect, check):
    from crystalview.scene import load_crystal

    text = '[scene]\nname = "d"\n[structure]\nelement = "Ni"\nrepeat = [2, 1, 1]\n[[defects]]\n' + defect + "\n"
    p = tmp_path / "d.toml"
    p.write_text(text)
    c = load_crystal(p)
    assert check(c), c
