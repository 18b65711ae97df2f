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
        "figures": {"type": "array", "items": {
            "type": "object", "additionalProperties": False, "required": ["file"],
            "properties": {"file": FILE, "view": INDEX, "up": INDEX,
                           "style": {"enum": ["ball-and-stick", "space-filling", "lattice", "cell-cut"]},
                           "size": {"type": "array", "items": {"type": "integer", "minimum": 16, "maximum": 8000}, "minItems": 2, "maxItems": 2},
                           "dpi": {"type": "integer", "minimum": 50, "maximum": 1200},
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
        "models": {"type": "array", "items": {
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
        "exports": {"type": "array", "items": {
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
        return f"{inst!r} has {len(inst)} items; it must have {'at least' if v == 'minItems' else 'at most'} {err.validator_value}"
    if v in ("minLength", "maxLength", "pattern"):
        return f"{inst!r} is not a valid value here ({err.message})"
    return err.message


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
    stays inside the output folder (a plain name or a sub-folder path)."""
    import os

    text = str(name)
    if not text.strip() or any(ord(ch) < 32 for ch in text):
        raise UserError(f"[{section}] file {text!r} is not a file name; give a plain name such as cu.png")
    pp = Path(text)
    if pp.is_absolute() or (os.sep != "/" and ":" in text) or ".." in pp.parts or text.startswith("~"):
        raise UserError(f"[{section}] file '{text}' would be written outside the scene's output folder; give a plain "
                        f"name or a sub-folder inside it, e.g. figures/cu.png")
    if any(len(part) > 200 for part in pp.parts):
        raise UserError(f"[{section}] file name '{text[:40]}...' is over 200 characters; give a shorter name")
    return out / pp


def plan_outputs(data, out_dir):
    """The files a scene will write (checked before any work starts): every
    name inside the output folder, none twice (case-insensitive, the print
    reports written beside models included).

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
    names = [str(f.relative_to(out)).lower() for f in files]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise UserError(f"the scene writes {', '.join(dup)} more than once (names compared without case; a model "
                        f"writes MODEL.report.txt beside it); give each output its own file name")
    return files


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
    found = []
    for path in paths:
        data = load(path)
        name = data["scene"]["name"]
        out_dir = (Path(out) / name if len(paths) > 1 else Path(out)) if out is not None else Path("exports") / name
        found += [str(f) for f in plan_outputs(data, out_dir) if f.exists()]
    return found


def run_scene(path, out=None, force=False, log=print):
    """Do everything a scene file asks; returns the manifest dict.

    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> p = os.path.join(d, "cu.toml")
    >>> _ = open(p, "w").write('[scene]\\nname = "cu"\\n[structure]\\nelement = "Cu"\\n')
    >>> manifest = run_scene(p, out=os.path.join(d, "out"), log=lambda *a: None)
    >>> sorted(os.listdir(os.path.join(d, "out")))
    ['info.json', 'manifest.json']
    """
    t0 = time.perf_counter()
    path = Path(path)
    data = load(path)
    name = data["scene"]["name"]
    out_dir = Path(out) if out is not None else Path("exports") / name
    files = plan_outputs(data, out_dir)
    if not force:
        existing = [str(f) for f in files if f.exists()]
        if existing:
            raise UserError(f"{path}: {existing[0]} already exists (and {len(existing) - 1} more); "
                            f"pass --force to overwrite or --out to write elsewhere")
    crystal = crystal_from_scene(data, path.parent)     # bad structure or defects: fail before writing
    make_folder(out_dir)
    # everything is written into a staging folder inside the output folder and moved into place only when the
    # whole scene has succeeded: a scene that fails half way leaves nothing behind, so the rerun works
    import shutil
    import tempfile

    stage = Path(tempfile.mkdtemp(prefix=".cv-stage-", dir=out_dir))
    try:
        manifest = _run_staged(data, path, name, out_dir, stage, files, crystal, force, log, t0)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    shutil.rmtree(stage, ignore_errors=True)
    return manifest


def _run_staged(data, path, name, out_dir, stage, files, crystal, force, log, t0):
    import crystalview as cv

    final_of = {}

    def at(rel):
        """The staging path of an output name (sub-folders made)."""
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
    _move_into_place(staged, force)
    for _p, final, what in staged:
        log(f"  wrote {final}  ({what})")
    if "caution" in manifest:
        log(f"  {cv.CAUTION}")
    return manifest


def _move_into_place(staged, force):
    """Move every staged file to its final name: all or nothing without
    force (refused up front if any name exists), exclusive links so a file
    that appeared meanwhile is never overwritten."""
    import os

    if not force:
        there = [str(f) for _p, f, _w in staged if Path(f).exists()]
        if there:
            raise UserError(f"{there[0]} already exists (and {len(there) - 1} more); pass --force to overwrite")
    moved = []
    try:
        for p, final, _w in staged:
            Path(final).parent.mkdir(parents=True, exist_ok=True)
            if force:
                os.replace(p, final)
            else:
                os.link(p, final)
                os.unlink(p)
            moved.append(final)
    except FileExistsError:
        for f in moved:
            Path(f).unlink(missing_ok=True)
        raise UserError(f"{final} appeared while the scene ran; nothing was kept; run it again") from None


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
