"""Labels on the base (embossed / engraved from a real font outline, legible
at the minimum feature) and meeting sets (several models on one bed, one 3MF
object each, an STL per model)."""
from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import trimesh

import crystalview as cv
from crystalview.errors import UserError

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_print import _read_3mf  # noqa: E402  (zipfile + ElementTree reader, not our writer)
from test_print_bed import _analytic_ball_and_stick  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def _stl(path):
    return trimesh.load(str(path), force="mesh")     # trimesh's own reader


def _text_contours(lines, size):
    """The label's outline contours (mm) from matplotlib's TextPath of the
    same font, flattened by matplotlib itself at 20x the size (fine chords),
    lines stacked 1.2 em apart; independent of crystalview's own flattening."""
    import matplotlib
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextPath

    fp = FontProperties(fname=os.path.join(matplotlib.get_data_path(), "fonts", "ttf", "DejaVuSans-Bold.ttf"))
    out = []
    for k, line in enumerate(lines):
        tp = TextPath((0, -k * 1.2 * size * 20), line, size=size * 20, prop=fp)
        for p in tp.to_polygons(closed_only=True):
            out.append(np.asarray(p, float) / 20)
    return out


def _even_odd_area(contours):
    """Area of the region inside an odd number of contours (shoelace areas,
    signed by nesting depth found with point-in-polygon tests)."""
    from matplotlib.path import Path as MPath

    total = 0.0
    for i, c in enumerate(contours):
        a = 0.5 * abs(np.dot(c[:, 0], np.roll(c[:, 1], -1)) - np.dot(c[:, 1], np.roll(c[:, 0], -1)))
        probe = c[0]
        depth = sum(MPath(o).contains_point(probe) for j, o in enumerate(contours) if j != i)
        total += a if depth % 2 == 0 else -a
    return total


def _raster(contours, px):
    """Even-odd raster of the contours on a px-mm grid (matplotlib Path tests)."""
    from matplotlib.path import Path as MPath

    allp = np.vstack(contours)
    lo = allp.min(axis=0) - 4 * px
    hi = allp.max(axis=0) + 4 * px
    nx, ny = (np.ceil((hi - lo) / px)).astype(int)
    xs = lo[0] + (np.arange(nx) + 0.5) * px
    ys = lo[1] + (np.arange(ny) + 0.5) * px
    mask = np.zeros((ny, nx), bool)
    for c in contours:
        cl, ch = c.min(axis=0), c.max(axis=0)
        ix = np.nonzero((xs >= cl[0]) & (xs <= ch[0]))[0]
        iy = np.nonzero((ys >= cl[1]) & (ys <= ch[1]))[0]
        if not len(ix) or not len(iy):
            continue
        X, Y = np.meshgrid(xs[ix], ys[iy])
        inside = MPath(c).contains_points(np.column_stack([X.ravel(), Y.ravel()])).reshape(X.shape)
        mask[np.ix_(iy, ix)] ^= inside
    return mask


def _thin_pixels(mask, w, px):
    """Our own medial test, on a raster with scipy's exact distance transform:
    a point lies in a stroke at least w wide when a disc of diameter w inside
    the text covers it (the opening).  Convex corner tips escape every such
    disc but stay within 0.75 w of the opening; a stroke thinner than w is
    lost whole, farther away.  Returns the count of text pixels farther than
    0.75 w from the opening."""
    from scipy.ndimage import distance_transform_edt as edt

    r = w / 2 / px
    core = edt(mask) >= r                       # centres of discs of radius r inside the text
    opened = edt(~core) <= r                    # the union of those discs
    far = mask & (edt(~opened) > 0.75 * w / px)
    return int(far.sum())


def _up_area(m, z, tol=1e-3):
    sel = (m.face_normals[:, 2] > 0.999) & (np.abs(m.vertices[m.faces][:, :, 2] - z) < tol).all(axis=1)
    return float(m.area_faces[sel].sum())


def _cap(R, h):
    return math.pi * h * h * (3 * R - h) / 3


@pytest.fixture(scope="module")
def fe_pair(tmp_path_factory):
    d = tmp_path_factory.mktemp("label")
    c = cv.build("Fe")
    r0 = cv.print_model(c, d / "plain.stl", edges=False, label="none")
    r1 = cv.print_model(c, d / "emboss.stl", edges=False)                     # auto label, embossed
    r2 = cv.print_model(c, d / "engrave.stl", edges=False, label_style="engrave")
    return c, d, r0, r1, r2


def test_label_volume_and_area(fe_pair):
    c, d, r0, r1, r2 = fe_pair
    m0, m1, m2 = (_stl(d / f) for f in ("plain.stl", "emboss.stl", "engrave.stl"))
    for m in (m0, m1, m2):
        assert m.is_watertight and m.is_volume and m.body_count == 1
    lab = r1["label"]
    assert r0["label"] is None and lab["text"] == "Fe bcc a=2.866 A 10 mm/A" and lab["style"] == "emboss"
    t, relief = r1["base_mm"][2], lab["relief_mm"]
    # the text's area, from matplotlib's own outline of the same lines at the reported size
    area = _even_odd_area(_text_contours(lab["lines"], lab["size_mm"]))
    assert lab["area_mm2"] == pytest.approx(area, rel=0.01)
    # ... and on the printed mesh: the top faces of the raised letters, the floor of the cut ones
    assert _up_area(m1, t + relief) == pytest.approx(area, rel=0.01)
    assert _up_area(m2, t - r2["label"]["relief_mm"]) == pytest.approx(area, rel=0.01)
    # volumes: the analytic balls and rods, plus the plate (its footprint measured on the mesh) less the
    # four bottom balls' caps sunk into it, plus or minus the letters
    R = 0.45 * c.species_radii["Fe"] * 10.0
    sink = r0["base_sink_mm"]
    model = _analytic_ball_and_stick(c)
    for m, sign, rep in ((m0, 0, r0), (m1, 1, r1), (m2, -1, r2)):
        X, Y = m.extents[:2]
        depth = relief if sign >= 0 else rep["label"]["relief_mm"]
        want = model + X * Y * t - 4 * _cap(R, sink) + sign * area * depth
        assert m.volume == pytest.approx(want, rel=0.01)
    # the strip enlarged the base; the label's own volume, from the difference of the two prints
    assert m1.volume - m0.volume == pytest.approx(
        (m1.extents[0] * m1.extents[1] - m0.extents[0] * m0.extents[1]) * t + area * relief, rel=0.01)
    text = (d / "emboss.report.txt").read_text()
    assert "label strip" in text and "Fe bcc a=2.866 A 10 mm/A" in text and cv.CAUTION in text


def test_label_legible_at_the_minimum_feature(fe_pair):
    c, d, r0, r1, r2 = fe_pair
    lab = r1["label"]
    # the text's stroke: two lines of a 0.4 mm nozzle (common practice), not the rods' structural 2 mm
    from crystalview.mesh.printable import LABEL_STROKE_MM as W

    assert lab["stroke_mm"] >= W and r1["min_feature_mm"] == 2.0
    px = 0.02
    mask = _raster(_text_contours(lab["lines"], lab["size_mm"]), px)
    # every stroke at least the label stroke, less a pixel of raster error
    assert _thin_pixels(mask, W - 2 * px, px) == 0
    # the test tells: at 85 % of the size the thinnest strokes (the slash, the crossbar of 'e') fail
    small = _raster(_text_contours(lab["lines"], 0.85 * lab["size_mm"]), px)
    assert _thin_pixels(small, W - 2 * px, px) > 100


def test_label_options(tmp_path):
    c = cv.build("Fe")
    # an explicit text puts a base under a model that stands on its own (a clipped cell)
    rep = cv.print_model(c, tmp_path / "a.stl", style="space-filling", clip_to_cell=True, label="Fe 1:1e8")
    assert rep["base"] and rep["label"]["text"] == "Fe 1:1e8"
    assert any("carry the label" in a for a in rep["adjustments"])
    assert _stl(tmp_path / "a.stl").is_watertight
    # auto: no label where no base is made
    rep = cv.print_model(c, tmp_path / "b.stl", style="space-filling", clip_to_cell=True)
    assert not rep["base"] and rep["label"] is None
    # too big for a small bed at a legible size: left out with one note
    rep = cv.print_model(c, tmp_path / "c.stl", bed=(70, 70, 70))
    assert rep["label"] is None and sum("label left out" in a for a in rep["adjustments"]) == 1
    for bad, kw in (("no-base", dict(label="Fe", base=False)), ("glyph", dict(label="Fe \u4e2d")),
                    ("style", dict(label_style="stamp")), ("empty", dict(label="  ")),
                    ("kit", dict(label="Fe", kit=True))):
        with pytest.raises(UserError):
            cv.print_model(c, tmp_path / f"{bad}.stl", **kw)
        assert not (tmp_path / f"{bad}.stl").exists()


def _cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "crystalview", *args], cwd=cwd, capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})


def test_set_on_one_bed(tmp_path):
    r = _cli("print", "--set", "fcc,bcc,hcp", "--element", "Fe,Fe,Ti", "-o", "set.3mf", "--json", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    rep = json.loads(r.stdout)
    unit, bases, objects = _read_3mf(tmp_path / "set.3mf")
    assert unit == "millimeter" and len(objects) == 3 == rep["count"]
    bed = rep["bed_mm"]
    boxes = []
    for (m, col), sub in zip(objects, rep["models"]):
        assert m.is_watertight and m.is_volume and m.body_count == 1
        lo, hi = m.bounds
        assert (lo >= -1e-6).all() and (hi <= np.array(bed) + 1e-6).all()      # inside the bed
        boxes.append((lo, hi))
        assert sub["label"] and sub["label"]["stroke_mm"] >= 0.8             # every model labelled
        assert len(set(col)) >= 3                                             # atoms, rods, base, label colours
        stl = _stl(tmp_path / Path(sub["file"]).name)                         # the STL beside it: same solid
        assert stl.is_watertight and stl.volume == pytest.approx(m.volume, rel=1e-4)
    for i in range(3):
        for j in range(i + 1, 3):
            (a0, a1), (b0, b1) = boxes[i], boxes[j]
            overlap = (np.minimum(a1[:2], b1[:2]) - np.maximum(a0[:2], b0[:2]) > 0).all()
            assert not overlap
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == ["set-fe-bcc.stl", "set-fe-fcc.stl", "set-ti-hcp.stl", "set.3mf", "set.report.txt"]
    text = (tmp_path / "set.report.txt").read_text()
    assert text.startswith("print set") and "Ti hcp" in text and cv.CAUTION in text


def test_set_refused_when_it_does_not_fit(tmp_path):
    r = _cli("print", "--set", "Cu,Fe,Mg", "--bed", "120", "120", "100", "-o", "s.3mf", cwd=tmp_path)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "more than the bed" in r.stderr
    assert list(tmp_path.iterdir()) == []
    for bad in (["--set", "Cu,,Fe"], ["--set", "fcc,bcc", "--element", "Fe,Fe,Ti"], ["Cu", "--set", "Cu,Fe"],
                ["--set", "Cu,Fe", "--label", "hello"]):
        r = _cli("print", *bad, "-o", "s.3mf", cwd=tmp_path)
        assert r.returncode == 2 and r.stderr.count("\n") == 1, (bad, r.stderr)
    r = _cli("print", "--set", "Cu,Fe", "-o", "s.stl", cwd=tmp_path)
    assert r.returncode == 2 and ".3mf" in r.stderr
    assert list(tmp_path.iterdir()) == []
