"""The package's layers, read from the source: no import circles, a numerical core that
imports no I/O, plotting, signal or process state, and a fixed list of the modules that
may touch the disk (DEVELOPERS.md, "Layers").  Common practice (layered architecture);
the expectations are the project's own rules, checked on the import statements and calls
as written, independently of running any of the code."""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).parents[1] / "solitons"

# The numerical core: arrays in, arrays out.
CORE = ("solitons.lattice", "solitons.model", "solitons.relaxation", "solitons.measure", "solitons.judge",
        "solitons.axial.model")
# What the core may not import: files, plotting, terminal progress, signals, processes,
# and every module above it.
CORE_FORBIDDEN = ("h5py", "sqlite3", "matplotlib", "plotly", "tqdm", "signal", "dask", "distributed", "subprocess",
                  "shutil", "solitons.io", "solitons.views", "solitons.interrupts", "solitons.campaigns",
                  "solitons.run", "solitons.assemble", "solitons.reporting", "solitons.cli", "solitons.api",
                  "solitons.config", "solitons.axial.run")
# Core modules that touch the disk for a stated reason (and no other).
CORE_DISK_EXCEPTIONS = {
    "solitons.model.userterms": "imports the user's Python file",
    "solitons.model.routes.pointwise": "the compile cache of generated code, keyed by its source hash",
}
# The modules that may read or write files.
DISK = ("solitons.io", "solitons.views", "solitons.campaigns", "solitons.run", "solitons.axial.run", "solitons.assemble",
        "solitons.config", "solitons.cli", "solitons.api") + tuple(CORE_DISK_EXCEPTIONS)
DISK_IMPORTS = ("h5py", "sqlite3", "tempfile", "shutil")
DISK_CALLS = ("open", "read_text", "write_text", "read_bytes", "write_bytes", "unlink", "mkdir", "savefig",
              "replace", "rename")


def modules() -> dict[str, ast.Module]:
    found = {}
    for path in PACKAGE.rglob("*.py"):
        parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        found[name] = ast.parse(path.read_text(), str(path))
    return found


def imported(tree: ast.Module, name: str, is_package: bool, known: set[str]) -> set[str]:
    """Every module named by an import in ``tree`` (lazy ones inside functions too)."""
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                package = name if is_package else name.rpartition(".")[0]
                parts = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join(parts + ([base] if base else []))
            names.add(base)
            names.update(f"{base}.{alias.name}" for alias in node.names if f"{base}.{alias.name}" in known)
    return names


def within(name: str, prefixes) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def graph() -> dict[str, set[str]]:
    trees = modules()
    known = set(trees)
    edges = {}
    for name, tree in trees.items():
        is_package = (PACKAGE.parent / name.replace(".", "/") / "__init__.py").exists()
        edges[name] = {m for m in imported(tree, name, is_package, known) if m in known and m != name
                       and m != "solitons"}
    return edges


def test_no_import_circles():
    """A depth-first search finds no cycle in the module graph (lazy imports included)."""
    edges = graph()
    state: dict[str, int] = {}
    cycles = []

    def visit(node, path):
        state[node] = 1
        for nxt in sorted(edges[node]):
            if state.get(nxt) == 1:
                cycles.append(path[path.index(nxt):] + [nxt] if nxt in path else [node, nxt])
            elif nxt not in state:
                visit(nxt, path + [nxt])
        state[node] = 2

    for node in sorted(edges):
        if node not in state:
            visit(node, [node])
    assert not cycles, f"import circles: {cycles}"


def test_core_imports_no_io_plotting_or_signals():
    trees = modules()
    offences = []
    for name, tree in trees.items():
        if not within(name, CORE):
            continue
        is_package = (PACKAGE.parent / name.replace(".", "/") / "__init__.py").exists()
        for target in imported(tree, name, is_package, set(trees)):
            if within(target, CORE_FORBIDDEN):
                offences.append(f"{name} imports {target}")
    assert not offences, offences


def test_only_the_listed_modules_touch_the_disk():
    """A module that imports a file library or calls a file method must be in DISK; the
    core's two exceptions carry their reason."""
    trees = modules()
    offences = []
    for name, tree in trees.items():
        if within(name, DISK):
            continue
        is_package = (PACKAGE.parent / name.replace(".", "/") / "__init__.py").exists()
        for target in imported(tree, name, is_package, set(trees)):
            if within(target, DISK_IMPORTS):
                offences.append(f"{name} imports {target}")
        for node in ast.walk(tree):
            if isinstance(node, ast.Call):
                func = node.func
                called = func.id if isinstance(func, ast.Name) else func.attr if isinstance(func, ast.Attribute) else ""
                if called in DISK_CALLS and not (called == "replace" and isinstance(func, ast.Attribute)
                                                 and _is_string_or_dataclass_replace(func)):
                    offences.append(f"{name} calls {called} (line {node.lineno})")
    assert not offences, offences


def _is_string_or_dataclass_replace(func: ast.Attribute) -> bool:
    """str.replace and dataclasses.replace are not file operations: only Path.replace is.
    A receiver that is a string constant, a name other than a path, or the dataclasses
    module is taken as not a file."""
    receiver = func.value
    if isinstance(receiver, ast.Constant):
        return True
    text = ast.unparse(receiver)
    return "path" not in text.lower() and "tmp" not in text.lower()


def test_the_rule_sees_a_violation(tmp_path):
    """The checks are not vacuous: a core module that imported h5py and wrote a file would
    be caught by both (the same functions on a synthetic source)."""
    tree = ast.parse("import h5py\nfrom solitons.io.results import write_json\n"
                     "def f(path):\n    path.write_text('x')\n")
    targets = imported(tree, "solitons.measure.fake", False, {"solitons.io.results"})
    assert any(within(t, CORE_FORBIDDEN) for t in targets)
    calls = [n.func.attr for n in ast.walk(tree) if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute)]
    assert "write_text" in calls
