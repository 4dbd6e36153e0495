"""The package's import structure: no circles, no reaching into private names, light imports.

These are the structural rules of the code base (docs: README, Development):
a module uses only the public names of another; no two modules import each
other, directly or through others; importing one part does not load
the heavy pitch-angle engine; and no module is over 700 lines.
"""

import ast
import subprocess
import sys
from pathlib import Path

import beltkit

PACKAGE = Path(beltkit.__file__).resolve().parent


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        yield ".".join(parts), path


def _imports(name, path):
    """Yield (imported module, imported names) of every beltkit import in one module."""
    tree = ast.parse(path.read_text())
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] == "beltkit":
                yield target, [a.name for a in node.names]
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "beltkit":
                    yield a.name, []


def test_no_module_imports_another_modules_private_names():
    leaks = []
    modules = dict(_modules())
    for name, path in modules.items():
        for target, names in _imports(name, path):
            for n in names:
                submodule = f"{target}.{n}"
                private = n.startswith("_") and not n.startswith("__")
                if private and submodule not in modules:  # a name, not a module
                    leaks.append(f"{name} imports {target}.{n}")
    assert leaks == []


def test_no_module_is_over_700_lines_and_each_names_its_concept():
    """One concept per module: at most 700 lines, and a first docstring line naming it."""
    for name, path in _modules():
        lines = path.read_text().splitlines()
        assert len(lines) <= 700, f"{name}: {len(lines)} lines"
        doc = ast.get_docstring(ast.parse(path.read_text()))
        assert doc and doc.splitlines()[0].strip(), f"{name}: no first docstring line"


def test_the_import_graph_has_no_circle():
    modules = dict(_modules())
    graph = {}
    for name, path in modules.items():
        deps = set()
        for target, names in _imports(name, path):
            for n in names or [None]:
                sub = f"{target}.{n}" if n else target
                deps.add(sub if sub in modules else target)
        # a package's __init__ importing its own submodules lazily is not an edge back
        graph[name] = {d for d in deps if d in modules and d != name
                       and not name.startswith(d + ".")}
    seen, stack, cycles = {}, [], []

    def visit(node):
        seen[node] = "open"
        stack.append(node)
        for dep in sorted(graph[node]):
            if seen.get(dep) == "open":
                cycles.append(stack[stack.index(dep):] + [dep])
            elif dep not in seen:
                visit(dep)
        stack.pop()
        seen[node] = "done"

    for node in sorted(graph):
        if node not in seen:
            visit(node)
    assert cycles == []


def test_importing_the_field_package_does_not_load_the_pitch_angle_engine():
    code = ("import sys, beltkit.field.igrf, beltkit.field.losscone, beltkit.dipole; "
            "print(sorted(m for m in sys.modules if m.startswith('beltkit.pad') "
            "or m in ('beltkit.io', 'beltkit.batch')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"


def test_tests_import_no_private_names_and_no_other_test_module():
    # the tests use the package as its users do: through public names only
    import ast

    bad = []
    for path in sorted((PACKAGE.parent / "tests").rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("beltkit"):
                bad += [f"{path.name}: {node.module}.{a.name}" for a in node.names
                        if a.name.startswith("_")]
            # shared test data live in tests/_*.py helpers; test modules never import each other
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("test_"):
                bad.append(f"{path.name}: imports the test module {node.module}")
            if isinstance(node, ast.Import):
                bad += [f"{path.name}: imports the test module {a.name}" for a in node.names
                        if a.name.startswith("test_")]
    assert bad == []
