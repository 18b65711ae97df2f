"""The interactive window (crystalview show).

The pick logic is tested without a display.  The window itself is tested on
a virtual X display (Xvfb) when that program is installed: a real on-screen
VTK window is opened in a subprocess, driven through its interactor (key
presses, a left click at an atom's pixel), read back and closed; and the
command itself is started and closed with a real 'q' key through xdotool.
"""
import json
import os
import shutil
import subprocess
import sys
import time

import numpy as np
import pytest

import crystalview as cv
from crystalview.analysis.neighbours import coordination_numbers
from crystalview.render import viewer as V

CU_A = 3.6149   # source: the project's data file crystalview/data/elements.toml (Cu, 293 K); checked below


# ---------------------------------------------------------------- pick logic, no display
def test_atom_info_fcc():
    c = cv.build("Cu", repeat=(2, 2, 2))
    i = 5
    info = V.atom_info(c, i)
    assert info["element"] == "Cu" and info["role"] == "host"
    assert np.allclose(info["position"], c.positions[i])
    assert np.allclose(info["fractional"], c.frac[i])
    # common practice: every atom of a perfect FCC crystal has 12 nearest neighbours (Callister, CN of FCC = 12)
    assert info["coordination"] == 12 and info["neighbours_by_element"] == {"Cu": 12}
    text = V.describe_pick(c, [(i, c.positions[i])])
    assert "Cu atom 5, host" in text and "coordination 12" in text
    assert f"{c.positions[i][0]:.3f}" in text


def test_pair_distance_fcc_neighbours():
    c = cv.build("Cu", repeat=(2, 2, 2))
    a = float(np.linalg.norm(c.cell[0])) / 2
    assert a == pytest.approx(CU_A, abs=1e-3)
    d = np.linalg.norm(c.positions - c.positions[0], axis=1)
    d[0] = np.inf
    j = int(np.argmin(d))
    nb = V.Neighbours(c)
    text, dist = V.describe_pair(V.atom_info(c, 0, neighbours=nb), V.atom_info(c, j, neighbours=nb))
    # common practice: FCC nearest neighbours sit along <110> at a/sqrt(2)
    assert dist == pytest.approx(a / np.sqrt(2), rel=1e-9)
    two = V.describe_pick(c, [(0, c.positions[0]), (j, c.positions[j])], nb)
    assert f"{a / np.sqrt(2):.4f} \u00c5" in two and two.count("coordination 12") == 2


def test_coordination_next_to_vacancy_matches_brute_force():
    c = cv.build("Ni", repeat=(3, 3, 3))
    c = c.delete([0])
    nb = V.Neighbours(c)
    # independent count: minimum-image distances in plain numpy (cubic cell)
    L = np.diag(c.cell)
    a = L[0] / 3
    for i in range(len(c)):
        dv = c.positions - c.positions[i]
        dv -= L * np.round(dv / L)
        r = np.linalg.norm(dv, axis=1)
        brute = int(np.sum((r > 1e-6) & (r < a / np.sqrt(2) * 1.05)))
        assert nb.of(i)[0] == brute
    cns = np.array([nb.of(i)[0] for i in range(len(c))])
    # the 12 neighbours of the removed atom have lost one each
    assert sorted(set(cns.tolist())) == [11, 12] and int(np.sum(cns == 11)) == 12
    assert np.array_equal(cns, coordination_numbers(c))


def test_pick_atom_ray():
    pos = np.array([[0, 0, 0], [0, 0, 3.0], [5, 0, 0]])
    rad = np.array([1.0, 1.0, 1.0])
    # looking down -z from above: the nearer sphere (z = 3) is hit first
    assert V.pick_atom(pos, rad, [0.2, 0.1, 50], [0, 0, -1]) == 1
    assert V.pick_atom(pos, rad, [5.5, 0, 50], [0, 0, -1]) == 2
    assert V.pick_atom(pos, rad, [2.5, 0, 50], [0, 0, -1]) is None
    assert V.pick_atom(pos, rad, [0, 0, -50], [0, 0, -1]) is None      # behind the eye


def test_show_refuses_without_display(monkeypatch):
    monkeypatch.delenv("DISPLAY", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    if sys.platform == "darwin" or os.name == "nt":
        pytest.skip("macOS and Windows always have a display")
    with pytest.raises(cv.errors.UserError, match="render"):
        V.show(cv.build("Cu"))


# ---------------------------------------------------------------- a real window on a virtual display
@pytest.fixture(scope="module")
def xdisplay():
    xvfb = shutil.which("Xvfb")
    if not xvfb:
        pytest.skip("Xvfb is not installed (apt-get install xvfb); the on-screen window is not tested")
    r, w = os.pipe()
    proc = subprocess.Popen([xvfb, "-displayfd", str(w), "-screen", "0", "1024x768x24", "-nolisten", "tcp"],
                            pass_fds=(w,), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    os.close(w)
    num = b""
    deadline = time.time() + 15
    while not num.endswith(b"\n") and time.time() < deadline:
        chunk = os.read(r, 16)
        if not chunk:
            break
        num += chunk
    os.close(r)
    if not num.strip():
        proc.kill()
        pytest.skip("Xvfb did not start")
    env = {k: v for k, v in os.environ.items() if k not in ("WAYLAND_DISPLAY", "VTK_DEFAULT_OPENGL_WINDOW")}
    env["DISPLAY"] = ":" + num.decode().strip()
    yield env
    proc.terminate()
    proc.wait(10)


DRIVER = r"""
import json, sys
import numpy as np
import crystalview as cv
from crystalview.analysis.neighbours import coordination_numbers
from crystalview.render.viewer import Viewer

c = cv.build("Ni", repeat=(2, 2, 2)).delete([0])
v = Viewer(c, size=(640, 480))
out = {"window": v.pl.render_window.GetClassName(), "keys0": v.text()["keys"]}
im0 = v.image()
v.press("c")
out["keys1"] = v.text()["keys"]
im1 = v.image()
out["cell_pixels_changed"] = int((im0 != im1).any(axis=2).sum())
out["colours"] = int(len(np.unique(im0.reshape(-1, 3), axis=0)))
# click the atom drawn nearest the window centre (in front along the view)
px = v.to_pixels(v.base.atom_pos)
toward = v.base.view.toward
score = np.linalg.norm(px - [320, 240], axis=1) - 1e-3 * (v.base.atom_pos @ toward)
k = int(np.argmin(score))
i = int(v.base.atom_src[k])
v.click(*px[k])
out["pick"] = v.text()["pick"]
out["expected"] = dict(index=i, element=c.symbols[i], role=["host", "solute", "interstitial"][int(c.roles[i])],
                       coordination=int(coordination_numbers(c)[i]))
im2 = v.image()
out["pick_pixels_changed"] = int((im1 != im2).any(axis=2).sum())
v.press("q")
out["closed"] = v.closed
print("RESULT " + json.dumps(out))
"""


def test_window_keys_and_pick(xdisplay):
    r = subprocess.run([sys.executable, "-c", DRIVER], capture_output=True, text=True, env=xdisplay, timeout=120)
    assert r.returncode == 0, r.stderr[-3000:]
    out = json.loads([ln for ln in r.stdout.splitlines() if ln.startswith("RESULT ")][-1][7:])
    assert "XOpenGL" in out["window"]                          # a real X window, not an off-screen fallback
    assert "c  cell outline: on" in out["keys0"] and "q  close (or Esc)" in out["keys0"]
    assert "click an atom" in out["keys0"]
    assert "c  cell outline: off" in out["keys1"]
    assert out["colours"] > 50                                 # shaded spheres, not a blank window
    assert out["cell_pixels_changed"] > 200
    e = out["expected"]
    assert f"{e['element']} atom {e['index']}, {e['role']}" in out["pick"]
    assert f"coordination {e['coordination']}" in out["pick"]
    assert out["pick_pixels_changed"] > 100                    # the picked atom is outlined
    assert out["closed"] is True


def test_command_opens_and_closes_on_q(xdisplay):
    xdotool = shutil.which("xdotool")
    if not xdotool:
        pytest.skip("xdotool is not installed; the real key press is not tested")
    p = subprocess.Popen([sys.executable, "-m", "crystalview", "show", "Cu"], env=xdisplay,
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        s = subprocess.run([xdotool, "search", "--sync", "--name", "^crystalview$"], env=xdisplay,
                           capture_output=True, text=True, timeout=90)
        win = s.stdout.split()[0]
        time.sleep(1.0)
        subprocess.run([xdotool, "key", "--window", win, "q"], env=xdisplay, capture_output=True, timeout=10)
        _, err = p.communicate(timeout=30)
    finally:
        if p.poll() is None:
            p.kill()
    assert p.returncode == 0, err[-2000:]
