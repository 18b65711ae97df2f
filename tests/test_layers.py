"""The package's import graph: no circles, and nothing upstream imports
anything downstream (DESIGN.md, "Data flows one way").  Read statically from
the source (every import, also the ones inside functions), so a circle that
only bites on some call path is caught too."""
import ast
import pathlib

import crystalview

ROOT = pathlib.Path(crystalview.__file__).parent


def _graph():
    mods = {}
    for f in ROOT.rglob("*.py"):
        parts = ["crystalview", *f.relative_to(ROOT).with_suffix("").parts]
        if parts[-1] == "__init__":
            parts = parts[:-1]
        mods[".".join(parts)] = f
    graph = {}
    for m, f in mods.items():
        pkg = m.split(".") if f.name == "__init__.py" else m.split(".")[:-1]
        deps = set()
        for node in ast.walk(ast.parse(f.read_text())):
            names = []
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    base = ".".join(pkg[:len(pkg) - node.level + 1] + ([node.module] if node.module else []))
                else:
                    base = node.module or ""
                names = [f"{base}.{a.name}" for a in node.names] + [base]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            for n in names:
                if n in mods and n != m:
                    deps.add(n)
                    break
        # the package itself only maps its public names lazily; it is not a dependency
        graph[m] = deps - {"crystalview"}
    return graph


def _cycles(graph):
    index, low, stack, on, out, n = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = n[0]
        n[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in graph:
        if v not in index:
            visit(v)
    return out


def test_no_import_circles():
    g = _graph()
    g.pop("crystalview", None)
    assert _cycles(g) == []


def test_upstream_never_imports_downstream():
    g = _graph()
    upstream = ("crystalview.crystal", "crystalview.lattice", "crystalview.prototypes", "crystalview.elements",
                "crystalview.build", "crystalview.occupancy", "crystalview.recognise", "crystalview.alloy",
                "crystalview.defects", "crystalview.analysis")
    downstream = ("crystalview.render", "crystalview.mesh", "crystalview.cli", "crystalview.scene")
    bad = [(m, d) for m, deps in g.items() if m.startswith(upstream) for d in deps if d.startswith(downstream)]
    assert bad == []
    # the geometry of print models never writes files itself: that is the exchange layer's job
    bad = [(m, d) for m, deps in g.items() if m.startswith("crystalview.mesh") for d in deps
           if d.startswith(("crystalview.exchange", "crystalview.cli", "crystalview.scene"))]
    assert bad == []
