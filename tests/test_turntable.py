"""Turntable animations (render --turntable -o turn.gif|.mp4): frame count and
size as asked, consecutive frames differ while the legend and caption stay
put, the figure's own renderer, and the refusals."""
from __future__ import annotations

import numpy as np
import pytest

import crystalview as cv
from crystalview.errors import LimitError, UserError
from crystalview.render import turntable as TT


def _gif_frames(path):
    from PIL import Image

    im = Image.open(path)
    out = []
    for k in range(im.n_frames):
        im.seek(k)
        out.append(np.asarray(im.convert("RGB")).astype(int))
    return out, im.info


def test_gif_turntable(tmp_path, cli):
    out = tmp_path / "turn.gif"
    rc, so, _ = cli("render", "Ni3Al", "--repeat", "2", "2", "2", "-o", out, "--turntable", "--frames", "8",
                    "--seconds", "2", "--json")
    assert rc == 0
    import json

    info = json.loads(so)
    frames, meta = _gif_frames(out)
    assert len(frames) == info["frames"] == 8
    assert frames[0].shape[1::-1] == tuple(info["size"])
    assert meta.get("duration") == 250 and meta.get("loop") == 0          # 2 s / 8 frames, looping
    H = frames[0].shape[0]
    for a, b in zip(frames, frames[1:] + frames[:1]):
        assert np.abs(a - b).mean() > 0.5                                 # consecutive frames differ
    # legend, scale bar and caption: the strip under the drawing is the same in every frame
    strip = slice(int(H * 0.80), H)
    for f in frames[1:]:
        assert np.abs(f[strip] - frames[0][strip]).mean() < 1.0
    assert frames[0][strip].std() > 5                                     # and it holds text


def test_turn_about_a_named_axis(tmp_path):
    c = cv.build("Cu")
    info = TT.turntable(c, tmp_path / "t.gif", frames=6, seconds=1, axis="[001]", view="[100]", size=(240, 240))
    assert info["axis"] == "[001]" and info["frames"] == 6 and info["size"] == [240, 240]
    # a cube turned by 180 degrees about [001], seen along [100], looks as at the start (common practice)
    frames, _ = _gif_frames(tmp_path / "t.gif")
    assert len(frames) == 6
    assert np.abs(frames[1] - frames[0]).mean() > 0.5
    assert np.abs(frames[3] - frames[0]).mean() < 0.2 * np.abs(frames[1] - frames[0]).mean()


def test_mp4_turntable(tmp_path):
    pytest.importorskip("imageio_ffmpeg", reason="imageio-ffmpeg (MP4) not installed; GIF still works")
    import imageio.v2 as iio

    out = tmp_path / "turn.mp4"
    info = TT.turntable(cv.build("Fe", repeat=(2, 2, 2)), out, frames=10, seconds=1, size=(320, 240))
    r = iio.get_reader(out, format="FFMPEG")
    frames = [f for f in r]
    r.close()
    assert len(frames) == 10 and frames[0].shape[:2] == (240, 320) == tuple(info["size"][::-1])
    assert all(np.abs(a.astype(int) - b.astype(int)).mean() > 0.3 for a, b in zip(frames, frames[1:]))


@pytest.mark.parametrize("argv,needle", [
    (["-o", "{d}/a.gif"], "add --turntable"),
    (["-o", "{d}/a.png", "--turntable"], "use one of .gif, .mp4"),
    (["-o", "{d}/a.png", "--frames", "10"], "add --turntable"),
    (["-o", "{d}/a.gif", "--turntable", "--frames", "1"], "--frames 1 is out of range"),
    (["-o", "{d}/a.gif", "--turntable", "--frames", "ten"], "whole number"),
    (["-o", "{d}/a.gif", "--turntable", "--seconds", "0"], "--seconds 0 is out of range"),
    (["-o", "{d}/a.gif", "--turntable", "--axis", "1x0"], "malformed indices"),
    (["-o", "{d}/a.gif", "--turntable", "--transparent"], "transparent"),
])
def test_bad_requests_one_line_and_nothing_written(tmp_path, cli, argv, needle):
    rc, _, se = cli("render", "Cu", *[a.format(d=tmp_path) for a in argv])
    assert rc == 2 and needle in se and len(se.strip().splitlines()) == 1, se
    assert not list(tmp_path.iterdir())


def test_too_many_atoms_refused_before_drawing(tmp_path, cli):
    rc, _, se = cli("render", "Cu", "--repeat", "30", "30", "30", "-o", tmp_path / "big.gif", "--turntable")
    assert rc == 2 and f"{TT.MAX_TURNTABLE_ATOMS:,}" in se and "108,000" in se and "--repeat" in se
    assert not list(tmp_path.iterdir())
    with pytest.raises(LimitError):
        TT.check_turntable_size(TT.MAX_TURNTABLE_ATOMS + 1)


def test_existing_animation_kept_without_force(tmp_path, cli):
    out = tmp_path / "turn.gif"
    out.write_bytes(b"keep")
    rc, _, se = cli("render", "Cu", "-o", out, "--turntable", "--frames", "4")
    assert rc == 2 and "--force" in se and out.read_bytes() == b"keep"
    rc, _, _ = cli("render", "Cu", "-o", out, "--turntable", "--frames", "4", "--size", "160", "160", "--force")
    assert rc == 0 and out.read_bytes()[:6] == b"GIF89a"
    with pytest.raises(UserError, match="already exists"):
        TT.turntable(cv.build("Cu"), out, frames=4)


def test_swept_extent_holds_every_frame():
    """The layout made once holds the drawing at every angle of the turn."""
    from crystalview.render.scene_graph import build_scene

    sc = build_scene(cv.build("Cu", repeat=(3, 1, 1)), "ball-and-stick", "[001]")
    pts, rad = sc.extent_points()
    centre = (pts.min(axis=0) + pts.max(axis=0)) / 2
    sw, _ = TT.swept_extent(sc, sc.view.up, centre)
    box = sc.view.project(sw)
    for k in range(12):
        rot = TT.rotate_scene(sc, TT.rotation(sc.view.up, 2 * np.pi * k / 12), centre)
        p, r = rot.extent_points()
        q = rot.view.project(p)
        assert np.all(q[:, :2] - r[:, None] >= box[:, :2].min(axis=0) - 1e-9)
        assert np.all(q[:, :2] + r[:, None] <= box[:, :2].max(axis=0) + 1e-9)
