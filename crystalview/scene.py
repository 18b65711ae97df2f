"""Scene files: a small TOML file that says, reproducibly, what crystal to
build, which defects to add, which analyses to run and which figures, models
and exchange files to write.

The whole file is validated (JSON Schema, with the `jsonschema` library)
before any work starts; an error names the file, the key path and what would
be valid, in one line.  Nothing in a scene is ever executed as code.
"""
from __future__ import annotations

import hashlib
import json
import platform
import time
from pathlib import Path

from .errors import UserError
from .render.style import MAX_DPI, MAX_SIDE, MIN_DPI, MIN_SIDE

try:
    import tomllib
except ModuleNotFoundError:  # Python < 3.11
    import tomli as tomllib

INDEX = {"type": "string", "minLength": 3, "maxLength": 40}
POS_NUM = {"type": "number", "exclusiveMinimum": 0}
FRACTION = {"type": "number", "minimum": 0, "maximum": 1}
SEED = {"type": "integer", "minimum": 0}
COUNT = {"type": "integer", "minimum": 0}
REPEAT3 = {"type": "array", "items": {"type": "integer", "minimum": 1, "maximum": 10000}, "minItems": 3, "maxItems": 3}
#: Most figures, models or exports one scene may ask for (each), so a scene cannot queue hours of work.
MAX_OUTPUTS = 200
FILE = {"type": "string", "minLength": 1, "maxLength": 200, "pattern": r"^[^/\\][^\\]*$"}

#: per defect kind: its keys (all optional unless listed in "required")
DEFECT_KINDS = {
    "vacancies": ({"count": COUNT, "fraction": FRACTION, "seed": SEED, "element": {"type": "string"}}, []),
    "substitute": ({"element": {"type": "string"}, "count": COUNT, "fraction": FRACTION, "seed": SEED,
                    "host": {"type": "string"}}, ["element"]),
    "interstitials": ({"element": {"type": "string"}, "site": {"type": "string"}, "fraction": FRACTION,
                       "count": COUNT, "seed": SEED}, ["element"]),
    "frenkel": ({"count": {"type": "integer", "minimum": 1}, "seed": SEED}, ["count"]),
    "stack": ({"sequence": {"type": "string", "minLength": 2}, "repeat": {"type": "array", "items": {"type": "integer", "minimum": 1}, "minItems": 2, "maxItems": 2}},
              ["sequence"]),
    "dislocation": ({"character": {"enum": ["edge", "screw"]}, "size": REPEAT3, "poisson": {"type": "number", "exclusiveMinimum": -1, "exclusiveMaximum": 0.5}},
                    ["character"]),
    "slab": ({"plane": INDEX, "layers": {"type": "integer", "minimum": 1, "maximum": 1000},
              "thickness": POS_NUM, "vacuum": {"type": "number", "minimum": 0}, "repeat": {"type": "array", "items": {"type": "integer", "minimum": 1}, "minItems": 2, "maxItems": 2}},
             ["plane"]),
    "tilt-boundary": ({"axis": INDEX, "plane": INDEX, "size": {"type": "array"}, "overlap": POS_NUM}, ["axis", "plane"]),
}


def _defect_schema():
    rules = []
    for kind, (props, required) in DEFECT_KINDS.items():
        p = {"kind": {"const": kind}, **props}
        rules.append({"if": {"properties": {"kind": {"const": kind}}, "required": ["kind"]},
                      "then": {"properties": p, "required": ["kind", *required], "additionalProperties": False}})
    return {"type": "object", "required": ["kind"],
            "properties": {"kind": {"enum": list(DEFECT_KINDS)}}, "allOf": rules}


SCHEMA = {
    "type": "object",
    "additionalProperties": False,
    "required": ["scene", "structure"],
    "properties": {
        "scene": {"type": "object", "additionalProperties": False, "required": ["name"],
                  "properties": {"name": {"type": "string", "pattern": r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$"},
                                 "title": {"type": "string"}, "description": {"type": "string"},
                                 "caution": {"type": "boolean"}}},
        "structure": {"type": "object", "additionalProperties": False,
                      "properties": {"element": {"type": "string"}, "compound": {"type": "string"},
                                     "lattice": {"type": "string"}, "phase": {"type": "string"},
                                     "elements": {"type": "array", "items": {"type": "string"}, "minItems": 1, "maxItems": 2},
                                     "cif": FILE, "a": POS_NUM, "c": POS_NUM, "repeat": REPEAT3,
                                     "supercell": {"type": "array", "minItems": 3, "maxItems": 3,
                                                   "items": {"type": "array", "items": {"type": "integer"}, "minItems": 3, "maxItems": 3}},
                                     "orient": {"type": "array", "items": INDEX, "minItems": 3, "maxItems": 3},
                                     "max_atoms": {"type": "integer", "minimum": 1},
                                     "block": {"type": "string"}, "seed": SEED,
                                     "alloy": {"type": "string", "minLength": 1}, "alloy_unit": {"enum": ["wt", "at"]},
                                     "alloy_tolerance": POS_NUM, "site": {"type": "string"},
                                     "tolerance": {"type": "number", "exclusiveMinimum": 0, "maximum": 1}}},
        "defects": {"type": "array", "items": _defect_schema()},
        "analysis": {"type": "object", "additionalProperties": False,
                     "properties": {"info": {"type": "boolean"}, "sites": {"type": "boolean"},
                                    "fit": {"type": "array", "items": {"type": "string"}},
                                    "planes": {"type": "array", "items": INDEX},
                                    "directions": {"type": "array", "items": INDEX},
                                    "slip": {"type": "object", "additionalProperties": False, "required": ["axis"],
                                             "properties": {"axis": INDEX, "stress": POS_NUM, "crss": POS_NUM,
                                                            "families": {"type": "array", "items": {"type": "string"}}}}}},
        "figures": {"type": "array", "maxItems": MAX_OUTPUTS, "items": {
            "type": "object", "additionalProperties": False, "required": ["file"],
            "properties": {"file": FILE, "view": INDEX, "up": INDEX,
                           "style": {"enum": ["ball-and-stick", "space-filling", "lattice", "cell-cut"]},
                           "size": {"type": "array", "items": {"type": "integer", "minimum": MIN_SIDE, "maximum": MAX_SIDE},
                                    "minItems": 2, "maxItems": 2},
                           "dpi": {"type": "integer", "minimum": MIN_DPI, "maximum": MAX_DPI},
                           "transparent": {"type": "boolean"}, "caption": {"type": ["boolean", "string"]},
                           "sites": {"type": "boolean"}, "polyhedra": {"enum": ["coordination", "sites", "both"]},
                           "layers": {"type": ["boolean", "string"]}, "cell": {"type": "boolean"},
                           "legend": {"type": "boolean"}, "scale_bar": {"type": "boolean"},
                           "defects": {"type": "boolean"},
                           "width": {"type": "string", "pattern": r"^\s*[0-9.]+\s*(mm|cm|in|pt)?\s*$"},
                           "height": {"type": "string", "pattern": r"^\s*[0-9.]+\s*(mm|cm|in|pt)?\s*$"},
                           "font_size": {"type": "number", "minimum": 4, "maximum": 36},
                           "cell_shape": {"enum": ["prism", "primitive"]},
                           "planes": {"type": "array", "items": INDEX},
                           "directions": {"type": "array", "items": INDEX},
                           "slip_axis": INDEX}}},
        "models": {"type": "array", "maxItems": MAX_OUTPUTS, "items": {
            "type": "object", "additionalProperties": False, "required": ["file"],
            "properties": {"file": FILE, "style": {"enum": ["ball-and-stick", "space-filling"]},
                           "scale": POS_NUM, "clip_to_cell": {"type": "boolean"}, "base": {"type": "boolean"},
                           "kit": {"type": "boolean"}, "min_feature": POS_NUM,
                           "bed": {"type": "array", "items": POS_NUM, "minItems": 3, "maxItems": 3},
                           "material_density": POS_NUM, "clearance": {"type": "number", "minimum": 0},
                           "resolution": POS_NUM, "edges": {"type": "boolean"},
                           "cell": {"enum": ["prism", "primitive"]},
                           "overhang_angle": {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 90},
                           "label": {"type": "string", "minLength": 1, "maxLength": 60},
                           "label_style": {"enum": ["emboss", "engrave"]},
                           "label_stroke": {"type": "number", "minimum": 0.2, "maximum": 10}}}},
        "exports": {"type": "array", "maxItems": MAX_OUTPUTS, "items": {
            "type": "object", "additionalProperties": False, "required": ["file"],
            "properties": {"file": FILE, "scale": POS_NUM,
                           # web pages (.html): the figure's options, on when the page opens
                           "style": {"enum": ["ball-and-stick", "space-filling", "lattice", "cell-cut"]},
                           "view": INDEX, "up": INDEX, "sites": {"type": "boolean"},
                           "polyhedra": {"enum": ["coordination", "sites", "both"]},
                           "planes": {"type": "array", "items": INDEX},
                           "directions": {"type": "array", "items": INDEX},
                           "layers": {"type": ["boolean", "string"]}, "slip_axis": INDEX,
                           "title": {"type": "string", "maxLength": 200}}}},
    },
}


def _keypath(path):
    parts = []
    for p in path:
        if isinstance(p, int):
            parts.append(f"[{p + 1}]")
        else:
            parts.append(("." if parts else "") + str(p))
    return "".join(parts) or "(top level)"


def _explain(err):
    """One line: what was wrong and what would be valid."""
    v = err.validator
    inst = err.instance
    if v == "additionalProperties":
        allowed = sorted(err.schema.get("properties", {}))
        extra = sorted(set(inst) - set(allowed)) if isinstance(inst, dict) else []
        return f"unknown key {', '.join(repr(e) for e in extra)}; valid keys here: {', '.join(allowed)}"
    if v == "required":
        return f"{err.message.split(' is ')[0]} is missing; this table needs {', '.join(err.validator_value)}"
    if v == "type":
        want = err.validator_value
        want = " or ".join(want) if isinstance(want, list) else want
        return f"{inst!r} is a {type(inst).__name__}; it must be {'an' if str(want)[0] in 'aeiou' else 'a'} {want}"
    if v == "enum":
        return f"{inst!r} is not one of {', '.join(map(str, err.validator_value))}"
    if v == "const":
        return f"{inst!r} should be {err.validator_value!r}"
    if v in ("minimum", "exclusiveMinimum", "maximum", "exclusiveMaximum"):
        word = {"minimum": "at least", "exclusiveMinimum": "more than", "maximum": "at most",
                "exclusiveMaximum": "less than"}[v]
        return f"{inst!r} is out of range; it must be {word} {err.validator_value}"
    if v in ("minItems", "maxItems"):
        shown = repr(inst) if len(repr(inst)) <= 80 else "the list"
        return f"{shown} has {len(inst)} items; it must have {'at least' if v == 'minItems' else 'at most'} {err.validator_value}"
    if v in ("minLength", "maxLength", "pattern"):
        shown = repr(inst) if len(repr(inst)) <= 80 else repr(inst)[:60] + "...'"
        return f"{shown} is not a valid value here ({' '.join(err.message.split())[:160]})"
    return " ".join(str(err.message).split())[:200]


def validate(data, path="scene"):
    """``data`` checked against the scene schema: returned as it is, or a one-line UserError.

    >>> data = {"scene": {"name": "cu"}, "structure": {"element": "Cu"}}
    >>> validate(data) is data
    True
    >>> try:
    ...     validate({"scene": {"name": "cu"}, "structure": {"repeat": [2, 2]}})
    ... except UserError as e:
    ...     print("refused")
    ...
    refused
    """
    import jsonschema

    validator = jsonschema.Draft202012Validator(SCHEMA)
    errors = list(validator.iter_errors(data))
    if not errors:
        return data
    err = jsonschema.exceptions.best_match(errors)
    # descend into the if/then branches for the precise message
    while err.context:
        err = jsonschema.exceptions.best_match(err.context)
    raise UserError(f"{path}: [{_keypath(err.absolute_path)}] {_explain(err)}")


def load(path):
    """Read and validate a scene file; returns the dict.

    >>> import os, tempfile
    >>> p = os.path.join(tempfile.mkdtemp(), "cu.toml")
    >>> _ = open(p, "w").write('[scene]\\nname = "cu"\\n[structure]\\nelement = "Cu"\\n')
    >>> load(p)
    {'scene': {'name': 'cu'}, 'structure': {'element': 'Cu'}}
    """
    p = Path(path)
    if not p.is_file():
        raise UserError(f"scene file '{p}' not found")
    try:
        raw = p.read_bytes()
        if len(raw) > 1_000_000:
            raise UserError(f"{p}: a scene file of {len(raw):,} bytes is too large; scenes are small text files (< 1 MB)")
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise UserError(f"{p}: not a UTF-8 text file; a scene is a TOML text file") from None
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{p}: not valid TOML: {exc}") from None
    except RecursionError:
        raise UserError(f"{p}: values nested too deeply; a scene is a flat TOML file") from None
    validate(data, str(p))
    s = data["structure"]
    keys = [k for k in ("element", "compound", "lattice", "cif") if k in s]
    if not keys:
        raise UserError(f"{p}: [structure] needs one of element, compound, lattice or cif")
    if "cif" in s and len(keys) > 1:
        raise UserError(f"{p}: [structure] gives cif together with {', '.join(k for k in keys if k != 'cif')}; give one")
    extra = [k for k in ("block", "tolerance") if k in s]
    if extra and "cif" not in s:
        raise UserError(f"{p}: [structure] {', '.join(extra)} go with cif = \"FILE.cif\"; leave them out")
    extra = [k for k in ("alloy_unit", "alloy_tolerance", "site") if k in s]
    if extra and "alloy" not in s:
        raise UserError(f"{p}: [structure] {', '.join(extra)} go with alloy = \"Fe-18Cr-8Ni\"; leave them out")
    if "alloy" in s and "element" not in s:
        raise UserError(f"{p}: [structure] alloy goes with element = the alloy's base (e.g. element = \"Fe\")")
    try:
        plan_outputs(data, Path("."))
    except UserError as exc:
        raise UserError(f"{p}: {exc}") from None
    return data


def crystal_from_scene(data, base_dir="."):
    """Build the scene's crystal and apply its defects in order.

    >>> data = {"scene": {"name": "cu"}, "structure": {"element": "Cu", "repeat": [2, 2, 2]},
    ...         "defects": [{"kind": "vacancies", "count": 1}]}
    >>> c = crystal_from_scene(data)
    >>> len(c), c.metadata["scene"]
    (31, 'cu')
    """
    from .build import build

    s = data["structure"]
    kw = {k: s[k] for k in ("a", "c", "repeat", "supercell", "orient", "max_atoms") if k in s}
    if "cif" in s:
        cif = Path(base_dir) / s["cif"]
        crystal = build(str(cif), **{k: v for k, v in kw.items() if k in ("repeat", "supercell", "orient", "max_atoms")},
                        block=s.get("block"), tolerance=s.get("tolerance"), seed=s.get("seed", 0))
    elif "alloy" in s:
        from .alloy import alloy_crystal

        crystal = alloy_crystal(s["element"], s["alloy"], s.get("alloy_unit", "wt"), phase=s.get("phase"),
                                lattice=s.get("lattice"), seed=s.get("seed", 0), site=s.get("site"),
                                tolerance=s.get("alloy_tolerance"), **kw)
    elif "compound" in s:
        crystal = build(s["compound"], **kw)
    elif "element" in s and "lattice" in s and s["lattice"] not in ("",):
        crystal = build(s["element"], phase=s.get("phase"), lattice=s["lattice"], **kw)
    elif "element" in s:
        crystal = build(s["element"], phase=s.get("phase"), **kw)
    else:
        crystal = build(s["lattice"], elements=tuple(s["elements"]) if "elements" in s else None, **kw)
    for d in data.get("defects", []):
        crystal = apply_defect(crystal, d, s)
    crystal.metadata["scene"] = data["scene"]["name"]
    return crystal


def _element_of(structure):
    return structure.get("element") or structure.get("compound") or (structure.get("elements") or [None])[0]


def apply_defect(crystal, d, structure):
    """The crystal with one [[defects]] entry ``d`` of a scene applied to it.

    >>> import crystalview as cv
    >>> d = {"kind": "substitute", "element": "Ni", "count": 2}
    >>> apply_defect(cv.build("Cu", repeat=(2, 2, 2)), d, {"element": "Cu"}).counts()
    {'Ni': 2, 'Cu': 30}
    """
    import crystalview as cv

    kind = d["kind"]
    opts = {k: v for k, v in d.items() if k != "kind"}
    if kind == "vacancies":
        return cv.add_vacancies(crystal, **opts)
    if kind == "substitute":
        return cv.substitute(crystal, opts.pop("element"), **opts)
    if kind == "interstitials":
        site = opts.pop("site", "octahedral")
        return cv.fill_sites(crystal, opts.pop("element"), kind=site, **opts)
    if kind == "frenkel":
        return cv.frenkel_pairs(crystal, **opts)
    el = _element_of(structure)
    if el is None:
        raise UserError(f"a {kind} defect needs [structure] element")
    extra = {k: structure[k] for k in ("phase", "a") if k in structure}
    if kind == "stack":
        rep = tuple(opts.pop("repeat", (1, 1)))
        return cv.stack(el, opts["sequence"], repeat=rep, **extra)
    if kind == "dislocation":
        return cv.dislocation(el, **opts, **extra)
    if kind == "slab":
        return cv.slab(crystal, opts.pop("plane"), **opts)
    if kind == "tilt-boundary":
        return cv.tilt_boundary(el, **opts, **extra)
    raise UserError(f"unknown defect kind '{kind}'; known: {', '.join(DEFECT_KINDS)}")


def load_crystal(path):
    """The crystal a scene file describes (structure + defects).

    >>> import os, tempfile
    >>> p = os.path.join(tempfile.mkdtemp(), "fe.toml")
    >>> _ = open(p, "w").write('[scene]\\nname = "fe"\\n[structure]\\nelement = "Fe"\\nrepeat = [2, 2, 2]\\n')
    >>> len(load_crystal(p))
    16
    """
    data = load(path)
    return crystal_from_scene(data, Path(path).parent)


# ------------------------------------------------------------------ running
def _sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _versions():
    import importlib.metadata as md

    from .about import __version__

    out = {"crystalview": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "scipy", "spglib", "gemmi", "periodictable", "pyvista", "vtk", "trimesh", "manifold3d"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            pass
    return out


def _plain(obj):
    """JSON-ready form of a result object (dataclass, to_dict(), list of them)."""
    import dataclasses

    if isinstance(obj, (list, tuple)):
        return [_plain(o) for o in obj]
    if hasattr(obj, "to_dict"):
        return obj.to_dict()
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return dataclasses.asdict(obj)
    return obj


def _write_json(path, obj, force):
    from .fileio import json_default as _json_default
    from .fileio import atomic_write

    atomic_write(path, json.dumps(obj, indent=2, default=_json_default) + "\n", force=force)


def _inside(out, name, section):
    """``out / name`` for a scene's output name, refused in one line unless it
    is a file name that stays inside the output folder (a plain name or a
    sub-folder path)."""
    import os

    text = str(name)
    if not text.strip() or any(not ch.isprintable() for ch in text):
        raise UserError(f"[{section}] file {text!r} is not a file name; give a plain name such as cu.png")
    pp = Path(text)
    if pp.is_absolute() or (os.sep != "/" and ":" in text) or ".." in pp.parts or text.startswith("~"):
        raise UserError(f"[{section}] file '{text}' would be written outside the scene's output folder; give a plain "
                        f"name or a sub-folder inside it, e.g. figures/cu.png")
    if not pp.parts or pp.name in (".", "..") or text.rstrip().endswith(("/", "/.")):
        raise UserError(f"[{section}] file '{text}' is not a file name (it names a folder); give a plain name "
                        f"such as cu.png or figures/cu.png")
    if any(len(part) > 200 for part in pp.parts):
        raise UserError(f"[{section}] file name '{text[:40]}...' is over 200 characters; give a shorter name")
    return out / pp


def plan_outputs(data, out_dir):
    """The files a scene will write (checked before any work starts): every
    name inside the output folder, none twice (case-insensitive, the print
    reports written beside models included), and no name used both as a
    file and as a folder.

    >>> data = {"scene": {"name": "cu"}, "structure": {"element": "Cu"},
    ...         "analysis": {"fit": ["C"]}}
    >>> [f.as_posix() for f in plan_outputs(data, "out")]
    ['out/info.json', 'out/fit-C.json', 'out/manifest.json']
    """
    out = Path(out_dir)
    files = []
    a = data.get("analysis", {})
    if a.get("info", True):
        files.append(out / "info.json")
    if a.get("sites"):
        files.append(out / "sites.json")
    for sol in a.get("fit", []):
        files.append(_inside(out, f"fit-{sol}.json", "analysis"))
    if "slip" in a:
        files.append(out / "slip.json")
    for sec in ("figures", "models", "exports"):
        for item in data.get(sec, []):
            f = _inside(out, item["file"], sec)
            files.append(f)
            if sec == "models":
                files.append(f.with_name(f.stem + ".report.txt"))
    files.append(out / "manifest.json")
    names = [f.relative_to(out).as_posix().lower() for f in files]
    from collections import Counter

    dup = sorted(n for n, k in Counter(names).items() if k > 1)
    if dup:
        raise UserError(f"the scene writes {', '.join(dup)} more than once (names compared without case; a model "
                        f"writes MODEL.report.txt beside it); give each output its own file name")
    taken = set(names)
    for f, n in zip(files, names):
        parts = n.split("/")
        for k in range(1, len(parts)):
            head = "/".join(parts[:k])
            if head in taken:
                raise UserError(f"the scene writes a file '{head}' and also uses it as a folder for "
                                f"'{f.relative_to(out).as_posix()}'; give them different names")
    return files


def _check_figures(data):
    """Every figure's size, width, height and dpi checked against the limits of
    ``crystalview render`` before any work starts (one line naming the figure)."""
    from .render import style as S
    from .render.layout import figure_size

    for i, fig in enumerate(data.get("figures", []), 1):
        if not any(k in fig for k in ("size", "width", "height", "dpi")):
            continue
        try:
            dpi = S.check_dpi(fig.get("dpi", 300))
            figure_size(tuple(fig["size"]) if "size" in fig else None, fig.get("width"), fig.get("height"), dpi)
        except UserError as exc:
            raise UserError(f"[figures[{i}]] ({fig['file']}): {exc}") from None


def _link_on_the_way(out, final):
    """The first symbolic link between ``out`` and ``final`` (or None)."""
    import os

    cur = Path(out)
    for part in Path(final).relative_to(out).parts:
        cur = cur / part
        if os.path.islink(cur):
            return cur
        if not os.path.lexists(cur):
            return None
    return None


def _place_problem(final, out_dir):
    """Why the output file ``final`` cannot be put into ``out_dir`` as things
    are now (a file where a folder goes, a folder where the file goes, a link
    leading outside the output folder), or None.  An existing plain file is
    not a problem here (--force decides)."""
    import os

    out, final = Path(out_dir), Path(final)
    cur = out
    for part in final.relative_to(out).parts[:-1]:
        cur = cur / part
        if not os.path.lexists(cur):
            break
        if not os.path.isdir(cur):
            return (f"'{cur}' is a file where the scene needs a folder (for '{final}'); move it away or choose "
                    f"another --out")
    real_out = os.path.realpath(out)
    real = os.path.join(os.path.realpath(final.parent), final.name)
    if os.path.commonpath([real_out, real]) != real_out:
        link = _link_on_the_way(out, final.parent)
        return (f"'{final}' would be written to '{real}', outside the output folder '{out}'"
                + (f" ('{link}' is a link to '{os.path.realpath(link)}')" if link else "")
                + "; remove the link or choose another --out")
    if os.path.isdir(final):
        return (f"'{final}' is a folder where the scene writes a file; move it away or choose another --out "
                f"(--force replaces files, never folders)")
    return None


def _check_places(files, out_dir, force=False):
    """Refuse, in one line and before anything is written, a run whose files
    cannot all be put in place: see :func:`_place_problem`; two names that are
    one file through a link; without ``force``, files that exist."""
    import os

    problems = [m for f in files if (m := _place_problem(f, out_dir))]
    if problems:
        more = f" (and {len(problems) - 1} more)" if len(problems) > 1 else ""
        raise UserError(problems[0] + more)
    seen = {}
    for f in files:
        key = os.path.join(os.path.realpath(Path(f).parent), Path(f).name).lower()
        if key in seen:
            raise UserError(f"'{seen[key]}' and '{f}' are one file (through a link inside the output folder); "
                            f"give each output its own name")
        seen[key] = f
    if not force:
        existing = [str(f) for f in files if os.path.lexists(f)]
        if existing:
            raise UserError(f"{existing[0]} already exists (and {len(existing) - 1} more); "
                            f"pass --force to overwrite or --out to write elsewhere")


#: Free space left on the output folder's disk beyond a scene's estimated output (at most a tenth of the
#: free space on a nearly full disk).
SPACE_MARGIN = 64 * 2**20
#: Bytes per atom of the text formats that list every atom (measured on Cu: XYZ 56, CIF 45).
BYTES_PER_ATOM_OUT = {".xyz": 56, ".cif": 48}
#: Allowance for every other output: JSON reports and the manifest are small; figures, models and
#: web files are capped by their own limits.
SMALL_FILE = 64 * 1024


def output_bytes(data, files, atoms):
    """Estimated bytes a scene writes for a crystal of ``atoms`` atoms.

    >>> data = {"exports": [{"file": "a.xyz"}, {"file": "b.cif"}, {"file": "c.glb"}]}
    >>> output_bytes(data, ["a.xyz", "b.cif", "c.glb", "manifest.json"], 1000) == 104 * 1000 + 4 * SMALL_FILE
    True
    """
    per = sum(BYTES_PER_ATOM_OUT.get(Path(e["file"]).suffix.lower(), 0) for e in data.get("exports", []))
    return per * int(atoms) + SMALL_FILE * len(files)


def _free_bytes(path):
    """Free bytes on the disk holding ``path`` (or its nearest existing folder); None if unknown."""
    import os
    import shutil

    p = Path(os.path.abspath(path))
    while not p.exists() and p != p.parent:
        p = p.parent
    try:
        return shutil.disk_usage(p).free
    except OSError:
        return None


def _size(n):
    for unit, k in (("GB", 10**9), ("MB", 10**6), ("kB", 10**3)):
        if n >= k:
            return f"{n / k:,.1f} {unit}"
    return f"{n} bytes"


def _check_space(data, files, out_dir, atoms):
    """Refuse a run whose estimated output does not fit on the output folder's disk."""
    need = output_bytes(data, files, atoms)
    free = _free_bytes(out_dir)
    if free is None:
        return
    margin = min(SPACE_MARGIN, free // 10)
    if need > free - margin:
        raise UserError(f"the scene would write about {_size(need)} ({len(files)} files, crystal of {atoms:,} atoms) "
                        f"but the disk of '{out_dir}' has {_size(free)} free (keeping {_size(margin)} spare); "
                        f"write fewer or smaller files, or choose another --out")


def _atoms_before_build(data, base_dir):
    """The scene's atom count, known without building the supercell (from its
    conventional cell), where the structure and defects allow; else None.
    Defects that add atoms make this a lower bound."""
    s = data["structure"]
    if any(k in s for k in ("cif", "alloy", "orient")):
        return None
    if any(d["kind"] not in ("substitute", "interstitials", "frenkel") for d in data.get("defects", [])):
        return None
    cell = {k: v for k, v in s.items() if k not in ("repeat", "supercell", "max_atoms")}
    n = len(crystal_from_scene({"scene": data["scene"], "structure": cell}, base_dir))
    for r in s.get("repeat", (1, 1, 1)):
        n *= int(r)
    if "supercell" in s:
        m = [[int(x) for x in row] for row in s["supercell"]]
        n *= abs(m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
                 + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0]))
    return n


def missing_folders(path):
    """The folders, deepest first, that creating the folder ``path`` makes.

    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> [os.path.relpath(p, d) for p in missing_folders(os.path.join(d, "a", "b"))]
    ['a/b', 'a']
    """
    import os

    out = []
    p = Path(os.path.abspath(path))
    while not os.path.lexists(p) and p != p.parent:
        out.append(p)
        p = p.parent
    return out


def remove_folders(folders):
    """Remove folders a failed run created (deepest first), each only while empty.

    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> made = missing_folders(os.path.join(d, "a", "b"))
    >>> make_folder(os.path.join(d, "a", "b"))
    >>> remove_folders(made)
    >>> os.listdir(d)
    []
    """
    import os

    for d in folders:
        try:
            os.rmdir(d)
        except OSError:
            break


def make_folder(path):
    """Create an output folder, or a one-line UserError saying why not.

    >>> import os, tempfile
    >>> d = os.path.join(tempfile.mkdtemp(), "exports", "cu")
    >>> make_folder(d)
    >>> os.path.isdir(d)
    True
    """
    try:
        Path(path).mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"cannot create the output folder '{path}': {exc.strerror or exc}; "
                        f"choose a writable folder with --out") from None
    if not Path(path).is_dir():
        raise UserError(f"'{path}' is a file, not a folder; choose a folder with --out")


def existing_outputs(paths, out=None):
    """Files that running these scenes would overwrite (for an up-front check).

    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> p = os.path.join(d, "cu.toml")
    >>> _ = open(p, "w").write('[scene]\\nname = "cu"\\n[structure]\\nelement = "Cu"\\n')
    >>> existing_outputs([p], out=d)
    []
    """
    import os

    found = []
    for path in paths:
        data = load(path)
        name = data["scene"]["name"]
        out_dir = (Path(out) / name if len(paths) > 1 else Path(out)) if out is not None else Path("exports") / name
        found += [str(f) for f in plan_outputs(data, out_dir) if os.path.lexists(f)]
    return found


class Terminated(SystemExit):
    """A run stopped by SIGTERM: raised by the command line's signal handler
    (and again at the next step, should the first be lost inside a library),
    so that the same cleanup runs as for Ctrl-C.

    >>> issubclass(Terminated, SystemExit), Terminated(143).code
    (True, 143)
    """


#: Signals received by the command line's SIGTERM handler; checked between the steps of a run.
_STOP = []


def request_stop(signum):
    """Record a termination request (from a signal handler); the run stops at its next step.

    >>> request_stop(15)
    >>> try:
    ...     check_stop()
    ... except Terminated as e:
    ...     print(e.code)
    ...
    143
    >>> _STOP.clear()
    """
    _STOP.append(signum)


def check_stop():
    """Raise :class:`Terminated` if a termination was requested (see :func:`request_stop`).

    >>> check_stop()        # nothing requested: nothing happens
    """
    if _STOP:
        raise Terminated(128 + _STOP[0])


def _final_names(text, stage, out_dir):
    """An error message with the staging folder's paths shown as the outputs' final paths."""
    import os

    for s, o in ((str(stage) + os.sep, str(out_dir) + os.sep), (str(stage), str(out_dir))):
        text = text.replace(s, o)
    return text


def run_scene(path, out=None, force=False, log=print):
    """Do everything a scene file asks; returns the manifest dict.

    Everything is checked before the first file is written (names, places,
    figure sizes, the disk space the output needs); the files are written into
    a staging folder inside the output folder and moved into place only when
    the whole scene has succeeded, so a failing scene changes nothing: earlier
    results stay as they were, and a folder the run created is removed.

    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> p = os.path.join(d, "cu.toml")
    >>> _ = open(p, "w").write('[scene]\\nname = "cu"\\n[structure]\\nelement = "Cu"\\n')
    >>> manifest = run_scene(p, out=os.path.join(d, "out"), log=lambda *a: None)
    >>> sorted(os.listdir(os.path.join(d, "out")))
    ['info.json', 'manifest.json']
    """
    import shutil
    import tempfile

    t0 = time.perf_counter()
    path = Path(path)
    data = load(path)
    name = data["scene"]["name"]
    out_dir = Path(out) if out is not None else Path("exports") / name
    files = plan_outputs(data, out_dir)
    try:
        _check_figures(data)
        _check_places(files, out_dir, force)
    except UserError as exc:
        raise UserError(f"{path}: {exc}") from None
    created = missing_folders(out_dir)
    make_folder(out_dir)
    try:
        stage = Path(tempfile.mkdtemp(prefix=".cv-stage-", dir=out_dir))
    except OSError as exc:
        remove_folders(created)
        raise UserError(f"the output folder '{out_dir}' cannot hold files ({exc.strerror or exc}); choose another "
                        f"folder with --out") from None
    ok = False
    try:
        try:
            if any(Path(e["file"]).suffix.lower() in BYTES_PER_ATOM_OUT for e in data.get("exports", [])):
                n = _atoms_before_build(data, path.parent)      # a huge output refused before building it
                if n is not None:
                    _check_space(data, files, out_dir, n)
            crystal = crystal_from_scene(data, path.parent)     # bad structure or defects: fail before writing
            check_stop()
            _check_space(data, files, out_dir, len(crystal))
            manifest = _run_staged(data, path, name, out_dir, stage, files, crystal, force, log, t0)
        except UserError as exc:
            text = _final_names(str(exc), stage, out_dir)     # the outputs' final paths, not the staging folder's
            if text != str(exc):
                exc.args = (text,) + exc.args[1:]
            raise
        ok = True
    finally:
        shutil.rmtree(stage, ignore_errors=True)
        if not ok:
            remove_folders(created)
    return manifest


def _run_staged(data, path, name, out_dir, stage, files, crystal, force, log, t0):
    import crystalview as cv

    final_of = {}

    def at(rel):
        """The staging path of an output name (sub-folders made)."""
        check_stop()
        p = stage / Path(rel)
        p.parent.mkdir(parents=True, exist_ok=True)
        final_of[str(p)] = out_dir / Path(rel)
        return p
    inputs = [{"file": str(path), "sha256": _sha256(path)}]
    if "cif" in data["structure"]:
        cif = path.parent / data["structure"]["cif"]
        inputs.append({"file": str(cif), "sha256": _sha256(cif)})
    written = []

    staged = []

    def done(p, what):
        p = Path(p)
        final = final_of.get(str(p), out_dir / p.relative_to(stage))
        written.append({"file": str(final), "what": what, "bytes": p.stat().st_size, "sha256": _sha256(p)})
        staged.append((p, final, what))

    a = data.get("analysis", {})
    caution = False
    if a.get("info", True):
        s = cv.summary(crystal, planes=a.get("planes", ()), directions=a.get("directions", ()))
        _write_json(at("info.json"), s, True)
        done(at("info.json"), "structure numbers")
    if a.get("sites"):
        from .analysis.sites import sites_report

        _write_json(at("sites.json"), sites_report(crystal), True)
        done(at("sites.json"), "interstitial sites")
    for sol in a.get("fit", []):
        rep = cv.fit(sol, crystal)
        _write_json(at(f"fit-{sol}.json"), _plain(rep), True)
        done(at(f"fit-{sol}.json"), f"fit of {sol}")
        caution = True
    if "slip" in a:
        sl = a["slip"]
        from .analysis.slip import slip_report

        res = slip_report(crystal, sl["axis"], families=sl.get("families"), stress=sl.get("stress"),
                          crss=sl.get("crss"))
        _write_json(at("slip.json"), _plain(res), True)
        done(at("slip.json"), f"Schmid factors along {sl['axis']}")
        caution = caution or "crss" in sl
    for fig in data.get("figures", []):
        opts = {k: v for k, v in fig.items() if k != "file"}
        if "size" in opts:
            opts["size"] = tuple(opts["size"])
        target = at(fig["file"])
        info = cv.render(crystal, target, force=True, **opts)
        used = info.get("view") if isinstance(info, dict) else None         # the view actually drawn
        done(target, f"figure, {opts.get('style', 'ball-and-stick')}, view {used or opts.get('view', 'default')}")
    for m in data.get("models", []):
        opts = {k: v for k, v in m.items() if k != "file"}
        if "bed" in opts:
            opts["bed"] = tuple(opts["bed"])
        target = at(m["file"])
        rep = cv.print_model(crystal, target, force=True, **opts)
        caution = True
        done(target, f"print model, {opts.get('style', 'ball-and-stick')}")
        for extra in _report_files(rep):
            if Path(extra).exists() and all(str(q) != str(extra) for q, _f, _w in staged):
                # the report names the model's final place, not the staging folder
                text = Path(extra).read_text(encoding="utf-8")
                Path(extra).write_text(text.replace(str(stage), str(out_dir)), encoding="utf-8")
                done(extra, "print report")
    for e in data.get("exports", []):
        opts = {k: v for k, v in e.items() if k != "file"}
        target = at(e["file"])
        cv.export(crystal, target, force=True, **opts)
        done(target, f"exchange file ({Path(e['file']).suffix.lstrip('.')})")
    manifest = {
        "scene": name,
        "title": data["scene"].get("title"),
        "inputs": inputs,
        "crystal": repr(crystal),
        "versions": _versions(),
        "written": written,
        "seconds": round(time.perf_counter() - t0, 2),
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
    if caution or data["scene"].get("caution"):
        manifest["caution"] = cv.CAUTION
    _write_json(at("manifest.json"), manifest, True)
    staged.append((at("manifest.json"), out_dir / "manifest.json", "manifest"))
    _move_into_place(staged, force, stage, out_dir)
    for _p, final, what in staged:
        log(f"  wrote {final}  ({what})")
    if "caution" in manifest:
        log(f"  {cv.CAUTION}")
    return manifest


def _move_into_place(staged, force, stage, out_dir):
    """Move every staged file to its final name, all or nothing.

    Each place is checked again (see :func:`_place_problem`); a file already
    at a final name is refused without ``force`` and, with it, moved aside into
    the staging folder first.  Names are taken with exclusive links, so a file
    that appears meanwhile is never overwritten.  If any step fails, the new
    files are taken back out, the old ones put back and the folders made here
    removed: a failed run never changes or deletes earlier results.  SIGINT
    and SIGTERM wait until the move is done or undone."""
    import os
    import signal
    import tempfile
    import threading

    check_stop()
    aside = Path(tempfile.mkdtemp(prefix=".cv-old-", dir=stage))
    moved, saved, made = [], [], []
    final = None
    pending, previous = [], {}
    if threading.current_thread() is threading.main_thread():
        # SIGINT / SIGTERM wait until the move is done or undone, then take effect
        for sig in (signal.SIGINT, signal.SIGTERM):
            if signal.getsignal(sig) is not None:
                previous[sig] = signal.signal(sig, lambda signum, frame: pending.append(signum))
    try:
        try:
            for i, (p, final, _w) in enumerate(staged):
                final = Path(final)
                problem = _place_problem(final, out_dir)
                if problem:
                    raise UserError(problem)
                new = missing_folders(final.parent)
                for d in reversed(new):
                    os.mkdir(d)
                    made.append(d)
                if os.path.lexists(final):
                    if not force:
                        raise UserError(f"'{final}' appeared while the scene ran; pass --force to replace it, or run "
                                        f"the scene again")
                    keep = aside / str(i)
                    os.rename(final, keep)
                    saved.append((final, keep))
                try:
                    os.link(p, final)
                except FileExistsError:
                    raise UserError(f"'{final}' appeared while the scene ran; run the scene again") from None
                except OSError:
                    # a file system without hard links: an exclusive create of the name, then the rename
                    os.close(os.open(final, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644))
                    moved.append(final)
                    os.replace(p, final)
                    continue
                moved.append(final)
                os.unlink(p)
        except BaseException as exc:
            for f in reversed(moved):
                try:
                    os.unlink(f)
                except OSError:
                    pass
            for f, keep in reversed(saved):
                try:
                    os.rename(keep, f)
                except OSError:
                    pass
            for d in reversed(made):
                try:
                    os.rmdir(d)
                except OSError:
                    pass
            if isinstance(exc, UserError):
                raise UserError(f"{exc}; nothing was changed (earlier results are as they were)") from None
            if isinstance(exc, OSError):
                where = f"'{final}'" if final is not None else "the results"
                raise UserError(f"could not put {where} in place: {exc.strerror or exc}; nothing was changed "
                                f"(earlier results are as they were)") from None
            raise
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        if pending:
            signal.raise_signal(pending[0])


def _report_files(rep):
    out = []
    if isinstance(rep, dict):
        for k in ("report_path", "report_file", "parts_list", "report_json"):
            if rep.get(k):
                out.append(rep[k])
    else:
        for k in ("report_path", "report_file", "parts_list"):
            v = getattr(rep, k, None)
            if v:
                out.append(v)
    return out
