"""The package imports one way: no import cycle inside irpipe, function-level imports
included, and no module imports a higher layer (DEVELOPERS.md, "Layers").

Imports are read from the source with the ``ast`` module, so an import hidden inside a
function counts like one at the top. ``from . import x`` counts as an import of the
submodule ``x`` when that is a module, else of the package's ``__init__``."""
import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent / "irpipe"

#: layer of each module (lower number = lower layer); a module may import its own layer
#: or lower ones. Packages are named by their dotted prefix.
LAYERS = [
    ("base", ["irpipe", "irpipe.constants", "irpipe.errors", "irpipe.defaults", "irpipe.buffers", "irpipe.io",
              "irpipe.config"]),
    ("physics", ["irpipe.radiometry", "irpipe.calibration", "irpipe.atmosphere", "irpipe.humidity",
                 "irpipe.emissivity", "irpipe.correction", "irpipe.modeltables", "irpipe.regions", "irpipe.findings",
                 "irpipe.uncertainty", "irpipe.fieldmethods", "irpipe.kernel", "irpipe.heatflow",
                 "irpipe.alignment", "irpipe.compare", "irpipe.timeseries", "irpipe.colourtable"]),
    ("prepare", ["irpipe.prepare", "irpipe.context", "irpipe.manifest", "irpipe.fingerprint", "irpipe.heatprep"]),
    ("stages", ["irpipe.stages"]),
    ("runner", ["irpipe.runner", "irpipe.parallel"]),
    ("report", ["irpipe.report"]),
    ("pipeline", ["irpipe.pipeline", "irpipe.demo"]),
    ("cli", ["irpipe.cli", "irpipe.cli_field", "irpipe.inspect", "irpipe.__main__"]),
]


def _modules():
    mods = {}
    for p in ROOT.rglob("*.py"):
        rel = p.relative_to(ROOT.parent).with_suffix("")
        parts = list(rel.parts)
        is_pkg = parts[-1] == "__init__"
        if is_pkg:
            parts = parts[:-1]
        mods[".".join(parts)] = (p, is_pkg)
    return mods


def _imports(name, path, is_pkg, mods):
    """irpipe modules imported anywhere in a module (top level or inside functions)."""
    tree = ast.parse(path.read_text(), str(path))
    pkg = name if is_pkg else name.rsplit(".", 1)[0]
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("irpipe"):
                    out.add(a.name)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg.split(".")
                base = base[:len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if not target.startswith("irpipe"):
                continue
            for a in node.names:
                sub = f"{target}.{a.name}"
                out.add(sub if sub in mods else target)
    return {m for m in out if m in mods and m != name}


def _graph():
    mods = _modules()
    return {n: _imports(n, p, pkg, mods) for n, (p, pkg) in mods.items()}


def _layer(mod):
    best = None
    for rank, (_, prefixes) in enumerate(LAYERS):
        for pre in prefixes:
            if mod == pre or mod.startswith(pre + "."):
                if best is None or len(pre) > best[1]:
                    best = (rank, len(pre))
    return None if best is None else best[0]


def test_no_import_cycle():
    graph = _graph()
    state, stack, cycles = {}, [], []

    def visit(n):
        state[n] = 1
        stack.append(n)
        for m in sorted(graph[n]):
            if state.get(m) == 1:
                cycles.append(stack[stack.index(m):] + [m])
            elif m not in state:
                visit(m)
        stack.pop()
        state[n] = 2

    for n in sorted(graph):
        if n not in state:
            visit(n)
    assert not cycles, "import cycles: " + "; ".join(" -> ".join(c) for c in cycles)


def test_every_module_has_a_layer():
    missing = [m for m in _graph() if _layer(m) is None]
    assert not missing, f"add these modules to LAYERS in tests/test_layers.py: {missing}"


def test_no_module_imports_a_higher_layer():
    bad = []
    for mod, deps in _graph().items():
        for d in deps:
            if _layer(d) is not None and _layer(mod) is not None and _layer(d) > _layer(mod):
                bad.append(f"{mod} ({LAYERS[_layer(mod)][0]}) imports {d} ({LAYERS[_layer(d)][0]})")
    assert not bad, "\n".join(sorted(bad))


def test_stage_modules_never_import_their_package_init():
    graph = _graph()
    bad = [m for m in graph if m.startswith("irpipe.stages.") and "irpipe.stages" in graph[m]]
    assert not bad, bad


def test_the_checker_sees_a_cycle_hidden_in_a_function(tmp_path, monkeypatch):
    """The walk must find an import inside a function (a test that can fail)."""
    pkg = tmp_path / "irpipe"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "a.py").write_text("from . import b\n")
    (pkg / "b.py").write_text("def f():\n    from .a import g\n")
    monkeypatch.setattr(__import__(__name__), "ROOT", pkg)
    g = _graph()
    assert "irpipe.a" in g["irpipe.b"] and "irpipe.b" in g["irpipe.a"]
    with pytest.raises(AssertionError, match="import cycles"):
        test_no_import_cycle()
