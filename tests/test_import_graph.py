"""The package's import graph has no cycle (imports inside functions count too).

Like the kernel import test in ``tests/test_kernels.py`` this reads the source with ``ast``;
nothing is imported. Every ``import x`` / ``from x import y`` anywhere in a module (module
level, inside functions, inside ``if`` blocks) is an edge, and so are
``importlib.import_module("...")`` and ``__import__("...")`` calls. A dynamic name built by an
f-string counts as an import of every module whose name starts with the string's constant
prefix (conservative).

One pattern is allowed: a package whose ``__init__`` defines a name and only *then* imports
its own submodules, which take that name from it (the command registration in
``lapbalance.cli``: ``main`` is defined first, the command modules import it and register
themselves). Python initialises a parent package before its children, so the child always
finds the name. The exception is checked, not assumed: every name the child takes from the
parent must be defined above the parent's first import of a submodule.
"""

from __future__ import annotations

import ast
from pathlib import Path

PKG_DIR = Path(__file__).resolve().parents[1] / "src" / "lapbalance"


def _modules(root: Path = PKG_DIR) -> dict[str, Path]:
    out = {}
    for p in sorted(root.rglob("*.py")):
        parts = list(p.relative_to(root.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = p
    return out


def _const_prefix(node: ast.AST) -> str | None:
    """Constant leading text of a str constant or an f-string, else None."""
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return node.value
    if isinstance(node, ast.JoinedStr) and node.values and \
            isinstance(node.values[0], ast.Constant):
        return str(node.values[0].value) + "\x00"  # marks "prefix only"
    return None


def import_graph(root: Path = PKG_DIR):
    """(edges, taken, first_sub_import, defined) of the package under ``root``.

    ``edges[m]``: modules m imports; ``taken[(child, parent)]``: names child imports from
    parent; ``first_sub_import[pkg]``: line of the package's first import of its own
    submodule; ``defined[pkg]``: {top-level name: line of definition}.
    """
    mods = _modules(root)
    edges: dict[str, set[str]] = {m: set() for m in mods}
    taken: dict[tuple[str, str], set[str]] = {}
    first_sub: dict[str, int] = {}
    defined: dict[str, dict[str, int]] = {}

    def add(m, target, lineno, names=()):
        edges[m].add(target)
        if names:
            taken.setdefault((m, target), set()).update(names)
        if target.startswith(m + ".") and mods[m].name == "__init__.py":
            first_sub[m] = min(first_sub.get(m, lineno), lineno)

    for m, path in mods.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        pkg = m if path.name == "__init__.py" else m.rsplit(".", 1)[0]
        defined[m] = {}
        for node in tree.body:
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef | ast.ClassDef):
                defined[m].setdefault(node.name, node.lineno)
            elif isinstance(node, ast.Assign):
                for t in node.targets:
                    if isinstance(t, ast.Name):
                        defined[m].setdefault(t.id, node.lineno)
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                for a in node.names:
                    name = a.name
                    while name and name not in mods:
                        name = name.rpartition(".")[0]
                    if name:
                        add(m, name, node.lineno)
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    up = pkg.split(".")
                    up = up[: len(up) - (node.level - 1)]
                    base = ".".join(up + ([node.module] if node.module else []))
                for a in node.names:
                    full = f"{base}.{a.name}"
                    if full in mods:
                        add(m, full, node.lineno)
                    elif base in mods:
                        add(m, base, node.lineno, (a.name,))
            elif isinstance(node, ast.Call):
                f = node.func
                fname = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", "")
                if fname in ("import_module", "__import__") and node.args:
                    text = _const_prefix(node.args[0])
                    if text is None:
                        continue
                    if text.endswith("\x00"):
                        prefix = text[:-1]
                        for other in mods:
                            if other.startswith(prefix) and other != m:
                                add(m, other, node.lineno)
                    elif text in mods:
                        add(m, text, node.lineno)
    return edges, taken, first_sub, defined


def counted_edges(root: Path = PKG_DIR) -> dict[str, set[str]]:
    """Import edges with the checked registration exception removed (see module doc)."""
    edges, taken, first_sub, defined = import_graph(root)
    out = {m: set(t) for m, t in edges.items()}
    for m, targets in edges.items():
        for t in targets:
            parent = m.rpartition(".")[0]
            if t != parent or m not in edges.get(parent, ()):
                continue
            names = taken.get((m, t), set())
            line = first_sub.get(t)
            if line is not None and names and \
                    all(defined[t].get(n, 10**9) < line for n in names):
                out[m].discard(t)
    return out


def find_cycle(edges: dict[str, set[str]]) -> list[str] | None:
    """One cycle of the directed graph as a list of nodes (first == last), or None."""
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n):
        state[n] = 1
        stack.append(n)
        for t in sorted(edges.get(n, ())):
            if state.get(t) == 1:
                return stack[stack.index(t):] + [t]
            if t not in state:
                found = visit(t)
                if found:
                    return found
        stack.pop()
        state[n] = 2
        return None

    for n in sorted(edges):
        if n not in state:
            found = visit(n)
            if found:
                return found
    return None


def test_package_import_graph_has_no_cycle():
    # Source: the package's own source files (ast); every import counts, in functions too.
    cycle = find_cycle(counted_edges())
    assert cycle is None, "import cycle: " + " -> ".join(cycle)


def test_graph_sees_imports_inside_functions():
    # The lap solver imports the lift-off module; the old reverse import sat inside a
    # function, so the graph must see function-level imports for the test above to mean
    # anything.
    edges = counted_edges()
    assert "lapbalance.liftoff" in edges["lapbalance.lap"]
    assert "lapbalance.lap" not in edges["lapbalance.liftoff"]
    assert "lapbalance.compare" in edges["lapbalance"]  # importlib.import_module, lazily
    assert "lapbalance.aeromap" in edges["lapbalance.car"]  # import inside _build_aero


def test_cycle_finder_catches_a_function_level_cycle(tmp_path):
    # A made-up two-module package: b imports a inside a function, a imports b at the top.
    pkg = tmp_path / "demo_pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "a.py").write_text("from demo_pkg import b\n")
    (pkg / "b.py").write_text("def f():\n    from demo_pkg.a import x\n    return x\n")
    cycle = find_cycle(counted_edges(pkg))
    assert cycle is not None and set(cycle) == {"demo_pkg.a", "demo_pkg.b"}


def test_registration_exception_needs_the_name_defined_first(tmp_path):
    # The parent imports its child before defining the name the child takes: a real cycle.
    pkg = tmp_path / "reg_pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("from reg_pkg import cmd\n\ndef main():\n    pass\n")
    (pkg / "cmd.py").write_text("from reg_pkg import main\n")
    assert find_cycle(counted_edges(pkg)) is not None
    (pkg / "__init__.py").write_text("def main():\n    pass\n\nfrom reg_pkg import cmd\n")
    assert find_cycle(counted_edges(pkg)) is None
