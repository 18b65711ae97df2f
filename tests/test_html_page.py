"""The offline web page (export -o crystal.html): what is in the file, the
limits, and the page itself in a real headless Chromium with the network
off (screenshot not blank, the legend in the DOM, every atom colour on
screen, a key toggles a part, a click on an atom names it, two clicks give
their distance).

Chromium is driven through the Chrome DevTools Protocol over a pipe
(--remote-debugging-pipe: JSON messages ending in NUL on file descriptors 3
and 4), so nothing beyond the standard library is needed.  `make test` and
.ci/run install chromium with apt where they run as root; elsewhere the
browser tests skip with a note.
"""
from __future__ import annotations

import base64
import io
import json
import os
import re
import select
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest

import crystalview as cv
from crystalview.errors import LimitError, UserError
from crystalview.exchange import html as H


def _meta(path):
    text = Path(path).read_text(encoding="utf-8")
    m = re.search(r'<script type="application/json" id="cv-meta">(.*?)</script>', text, re.S)
    return json.loads(m.group(1).replace("<\\/", "</")), text


# ---------------------------------------------------------------- the file, no browser
def test_page_is_one_self_contained_file(tmp_path, cli):
    out = tmp_path / "ni3al.html"
    rc, so, _ = cli("export", "Ni3Al", "--repeat", "2", "2", "2", "-o", out)
    assert rc == 0 and "wrote" in so and "toggles:" in so
    meta, text = _meta(out)
    # nothing fetched: no src/href attributes, no URLs, and a policy that forbids every request
    assert not re.search(r"\b(src|href)\s*=", text)
    assert "http://" not in text and "https://" not in text and "import(" not in text
    assert "default-src 'none'" in text
    # the figure's scene: same colours, legend and caption as build_scene gives
    from crystalview.render.scene_graph import build_scene

    sc = build_scene(cv.build("Ni3Al", repeat=(2, 2, 2)), "ball-and-stick", meta["view"]["label"], None,
                     defects=False)
    assert meta["colours"][:len(sc.colours)] == sc.colours
    assert [e["label"] for e in meta["legend"] if e["when"] == "plain"] == [e[0] for e in sc.legend]
    assert meta["caption"] == sc.caption
    assert meta["atoms"]["n"] == sc.n_atoms
    for lab, _c, _s in sc.legend:          # the legend is in the page's HTML itself, not only drawn by the script
        assert f'<span class="cv-label">{lab}</span>' in text
    names = {g["name"] for g in meta["groups"]}
    assert {"atoms", "bonds", "cell", "sites", "polyhedra", "legend"} <= names
    # views along named directions: the cube axes and the body diagonal
    assert {"[100]", "[010]", "[001]", "[111]"} <= {v["label"] for v in meta["views"]}


def test_hexagonal_page_has_the_hexagonal_views(tmp_path):
    info = cv.export(cv.build("Mg"), tmp_path / "mg.html")
    assert {"[0001]", "[2-1-10]", "[10-10]"} <= set(info["views"])
    assert info["spheres"] == 17               # the hexagonal prism, as in the figures


def test_page_options_and_scene_export(tmp_path):
    c = cv.build("Fe", repeat=(2, 2, 2))
    info = cv.export(c, tmp_path / "fe.html", style="lattice", planes=["(110)"], directions=["[111]"],
                     sites=True, title="alpha iron")
    assert {"planes", "directions", "sites"} <= set(info["groups"])
    meta, text = _meta(tmp_path / "fe.html")
    assert "<title>alpha iron</title>" in text
    assert {g["name"]: g["on"] for g in meta["groups"]}["sites"] is True
    with pytest.raises(UserError, match="does not apply to .glb"):
        cv.export(c, tmp_path / "fe.glb", sites=True)


def test_too_many_atoms_refused_before_writing(tmp_path, cli):
    target = tmp_path / "big.html"
    n_cells = 30                                   # 4 x 30^3 = 108,000 atoms: over the ball-and-stick cap
    rc, so, se = cli("export", "Cu", "--repeat", n_cells, n_cells, n_cells, "-o", target)
    assert rc == 2 and not target.exists() and not list(tmp_path.iterdir())
    line = se.strip().splitlines()[-1]
    assert f"{H.MAX_PAGE_ATOMS_STICKS:,}" in line and "108,000" in line
    assert "--style lattice" in line and "--repeat" in line and ".glb" in line
    with pytest.raises(LimitError):
        H.check_page_size(H.MAX_PAGE_ATOMS + 1, "lattice")
    H.check_page_size(H.MAX_PAGE_ATOMS, "lattice")


def test_existing_page_kept_without_force(tmp_path, cli):
    target = tmp_path / "cu.html"
    target.write_text("keep me")
    rc, _, se = cli("export", "Cu", "-o", target)
    assert rc == 2 and "--force" in se and target.read_text() == "keep me"
    rc, _, _ = cli("export", "Cu", "-o", target, "--force")
    assert rc == 0 and target.read_text().startswith("<!DOCTYPE html>")
    rc, _, se = cli("export", "Cu", "-o", tmp_path / "cu.glb", "--sites")
    assert rc == 2 and "web pages (.html)" in se


def test_coordination_table_matches_the_window_rule():
    from crystalview.render.viewer import Neighbours

    c = cv.build("Ni3Al", repeat=(2, 2, 2))
    cn, mix, els = H.coordination_table(c)
    nb = Neighbours(c)
    for i in (0, 1, 5, 17):
        k, by = nb.of(i)
        assert cn[i] == k == 12                    # source: Callister & Rethwisch, FCC coordination number 12
        assert {e: int(mix[i, j]) for j, e in enumerate(els) if mix[i, j]} == by


# ---------------------------------------------------------------- the page in a real browser
def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable"):
        exe = shutil.which(name)
        if exe:
            return exe
    return None


class Chromium:
    """Headless Chromium driven by the DevTools Protocol over a pipe."""

    def __init__(self, exe, width=1000, height=750):
        self.tmp = tempfile.mkdtemp(prefix="cv-chromium-")
        r_cmd, self.w_cmd = os.pipe()
        self.r_out, w_out = os.pipe()

        def fds():                  # the protocol's pipe: Chromium reads fd 3 and writes fd 4
            os.dup2(r_cmd, 100)
            os.dup2(w_out, 101)
            os.dup2(100, 3)
            os.dup2(101, 4)

        args = [exe, "--headless", "--no-sandbox", "--remote-debugging-pipe",
                "--use-angle=swiftshader", "--enable-unsafe-swiftshader",      # WebGL2 on the CPU, no GPU needed
                "--no-first-run", "--no-default-browser-check", "--disable-extensions", "--disable-sync",
                "--disable-background-networking", "--proxy-server=127.0.0.1:9", f"--user-data-dir={self.tmp}",
                f"--window-size={width},{height}", "about:blank"]
        self.proc = subprocess.Popen(args, pass_fds=(3, 4), preexec_fn=fds, stdout=subprocess.DEVNULL,
                                     stderr=subprocess.DEVNULL)
        os.close(r_cmd)
        os.close(w_out)
        self.buf, self.n, self.events = b"", 0, []
        pages = [t for t in self.call("Target.getTargets")["targetInfos"] if t["type"] == "page"]
        self.session = self.call("Target.attachToTarget", targetId=pages[0]["targetId"], flatten=True)["sessionId"]
        for m in ("Page.enable", "Runtime.enable", "Network.enable"):
            self.page(m)
        # the network is off: the page must need none
        self.page("Network.emulateNetworkConditions", offline=True, latency=0, downloadThroughput=-1,
                  uploadThroughput=-1)
        self.page("Emulation.setDeviceMetricsOverride", width=width, height=height, deviceScaleFactor=1,
                  mobile=False)

    def _read(self, timeout):
        end = time.time() + timeout
        while b"\0" not in self.buf:
            left = end - time.time()
            if left <= 0:
                raise TimeoutError("no answer from chromium")
            ready, _, _ = select.select([self.r_out], [], [], left)
            if ready:
                chunk = os.read(self.r_out, 1 << 20)
                if not chunk:
                    raise RuntimeError("chromium closed the pipe")
                self.buf += chunk
        msg, self.buf = self.buf.split(b"\0", 1)
        return json.loads(msg)

    def call(self, method, session=None, timeout=30, **params):
        self.n += 1
        m = {"id": self.n, "method": method, "params": params}
        if session:
            m["sessionId"] = session
        os.write(self.w_cmd, json.dumps(m).encode() + b"\0")
        while True:
            r = self._read(timeout)
            if r.get("id") == self.n:
                if "error" in r:
                    raise RuntimeError(f"{method}: {r['error']}")
                return r.get("result", {})
            self.events.append(r)

    def page(self, method, **params):
        return self.call(method, session=self.session, **params)

    def js(self, expr):
        r = self.page("Runtime.evaluate", expression=expr, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in r:
            raise RuntimeError(str(r["exceptionDetails"]))
        return r["result"].get("value")

    def open(self, path, timeout=30):
        self.events.clear()
        self.page("Page.navigate", url=Path(path).resolve().as_uri())
        end = time.time() + timeout
        while time.time() < end:
            state = self.js("window.crystalview ? [window.crystalview.ready, window.crystalview.error] : null")
            if state and (state[0] or state[1]):
                assert state[1] is None, f"the page failed: {state[1]}"
                return
            time.sleep(0.1)
        raise TimeoutError("the page did not draw")

    def screenshot(self):
        from PIL import Image

        data = base64.b64decode(self.page("Page.captureScreenshot", format="png")["data"])
        return np.asarray(Image.open(io.BytesIO(data)).convert("RGB")).astype(int)

    def click(self, x, y):
        for kind in ("mouseMoved", "mousePressed", "mouseReleased"):
            self.page("Input.dispatchMouseEvent", type=kind, x=float(x), y=float(y), button="left", clickCount=1)

    def key(self, ch):
        self.page("Input.dispatchKeyEvent", type="keyDown", key=ch, text=ch, code=f"Key{ch.upper()}",
                  windowsVirtualKeyCode=ord(ch.upper()))
        self.page("Input.dispatchKeyEvent", type="keyUp", key=ch, code=f"Key{ch.upper()}",
                  windowsVirtualKeyCode=ord(ch.upper()))

    def close(self):
        try:
            self.call("Browser.close", timeout=5)
        except Exception:
            pass
        try:
            self.proc.wait(5)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self.w_cmd)
        os.close(self.r_out)
        shutil.rmtree(self.tmp, ignore_errors=True)


@pytest.fixture(scope="module")
def browser():
    exe = _chromium()
    if exe is None:
        pytest.skip("chromium is not installed (make test / .ci/run install it with apt where they run as root): "
                    "the web page is not checked in a browser here")
    b = Chromium(exe)
    yield b
    b.close()


def _has_colour(img, hexc, tol=14.0):
    """Pixels lying on the shading ray of a colour: p close to k * c for some k
    in 0.55-1.15 (a lit sphere of that colour), away from the white ground."""
    c = np.array([int(hexc[i:i + 2], 16) for i in (1, 3, 5)], float)
    p = img.reshape(-1, 3).astype(float)
    k = p @ c / (c @ c)
    d = np.linalg.norm(p - np.outer(k, c), axis=1)
    return int(np.sum((d < tol) & (k > 0.55) & (k < 1.15)))


def test_page_in_chromium_offline(browser, tmp_path):
    c = cv.build("Ni", repeat=(3, 3, 3))
    from crystalview.defects import point

    c = point.substitute(c, "Cr", count=8, seed=3)
    path = tmp_path / "ni_cr.html"
    info = cv.export(c, path, style="space-filling", view="[001]")
    meta, _ = _meta(path)
    browser.open(path)
    # offline: the file itself is the only request, and no script error
    urls = [e["params"]["request"]["url"] for e in browser.events if e.get("method") == "Network.requestWillBeSent"]
    assert urls == [path.resolve().as_uri()]
    errors = [e for e in browser.events if e.get("method") == "Runtime.exceptionThrown"]
    assert not errors, errors
    img = browser.screenshot()
    assert img.std() > 10 and np.mean(np.any(img < 240, axis=2)) > 0.05     # not blank, not one flat colour
    legend = browser.js("document.getElementById('cv-legend').innerText")
    assert "Ni" in legend and "Cr (solute)" in legend
    assert browser.js("document.getElementById('cv-caption').innerText").startswith(meta["caption"][0])
    # every atom colour of the scene is on the screen, and no role colour the scene lacks
    atom_colours = [e["colour"] for e in meta["legend"] if e["when"] == "plain" and e["shape"] == "ball"]
    assert len(atom_colours) == 2
    for col in atom_colours:
        assert _has_colour(img, col) > 150, col
    from crystalview.palette import ROLE_COLOURS

    assert _has_colour(img, ROLE_COLOURS["interstitial"]) < 20
    assert browser.js("crystalview.atoms") == info["spheres"]


def test_click_names_the_atom_and_two_give_the_distance(browser, tmp_path):
    from crystalview.render.viewer import Neighbours

    c = cv.build("Ni3Al", repeat=(2, 2, 2))
    path = tmp_path / "ni3al.html"
    cv.export(c, path, style="ball-and-stick", view="[001]")
    browser.open(path)
    k = browser.js("crystalview.frontAtom()")
    x, y = browser.js(f"crystalview.atomAt({k})")
    browser.click(x, y)
    text = browser.js("crystalview.pickText()")
    m = re.match(r"(\w+) atom (\d+), (\w+)\nat .*\nfractional .*\ncoordination (\d+) \((.*)\)", text)
    assert m, text
    i = int(m.group(2))
    assert m.group(1) == c.symbols[i] and m.group(3) == "host"
    cn, by = Neighbours(c).of(i)                       # the window's own neighbour count
    assert int(m.group(4)) == cn == 12                 # source: Callister & Rethwisch, FCC coordination 12
    assert m.group(5) == ", ".join(f"{e} {n}" for e, n in by.items())
    assert browser.js("document.getElementById('cv-pick').hidden") is False
    # a second atom: the distance between the two as drawn
    k2 = browser.js(f"""(() => {{ const a = crystalview.atomAt({k}); let best = -1, d = 1e9;
        for (let j = 0; j < crystalview.atoms; j++) {{ if (j === {k}) continue; const b = crystalview.atomAt(j);
          const e = Math.hypot(a[0] - b[0], a[1] - b[1]); if (e > 20 && e < d && j !== {k}) {{ d = e; best = j; }} }}
        return best; }})()""")
    # click the neighbour only where it is the front-most thing under the pointer
    x2, y2 = browser.js(f"crystalview.atomAt({k2})")
    browser.click(x2, y2)
    text2 = browser.js("crystalview.pickText()")
    assert "distance" in text2, text2
    d = float(re.search(r"distance \w+ \d+ to \w+ \d+: ([0-9.]+) ", text2).group(1))
    a = 3.572                                          # Ni3Al a, as built (see the caption)
    assert d == pytest.approx(a / np.sqrt(2), abs=2e-4) or d == pytest.approx(a, abs=2e-4), text2
    browser.key("u")
    assert browser.js("document.getElementById('cv-pick').hidden") is True


def test_keys_and_buttons_toggle_parts_and_views(browser, tmp_path):
    path = tmp_path / "fe.html"
    cv.export(cv.build("Fe", repeat=(2, 2, 2)), path)
    browser.open(path)
    before = browser.screenshot()
    assert browser.js("crystalview.groups().bonds") is True
    browser.key("b")
    time.sleep(0.2)
    assert browser.js("crystalview.groups().bonds") is False
    assert browser.js("document.querySelector('button[data-group=bonds]').getAttribute('aria-pressed')") == "false"
    after = browser.screenshot()
    assert np.abs(after - before).sum() > 1000              # the sticks went away
    browser.key("s")                                        # interstitial sites come, with their legend lines
    time.sleep(0.2)
    assert "octahedral site" in browser.js("document.getElementById('cv-legend').innerText")
    labels = browser.js("Array.from(document.querySelectorAll('#cv-views button')).map(b => b.textContent)")
    assert {"[100]", "[010]", "[001]", "[111]"} <= set(labels)
    browser.js("document.querySelector('#cv-views button[data-view=\"4\"]').click()")     # along [111]
    time.sleep(0.2)
    assert "view along [111]" in browser.js("document.getElementById('cv-status').textContent")
    turned = browser.screenshot()
    assert np.abs(turned - after).sum() > 1000
