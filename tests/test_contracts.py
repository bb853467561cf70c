"""Architecture contracts, checked by running code or by reading the source's syntax trees.

- core never imports Qt, pyqtgraph or app (every core module imported with them blocked);
- no import cycle among phasewake modules (module-level and function-level imports alike);
- layering: model below readers below analyses below figures, and core below app;
- no module in core/ or app/ over 700 lines, no function in core/ over 80 lines.

The lists below are today's known exceptions. They may only shrink: an entry that is no longer needed
fails the test ("remove ... from the list"), and a listed module or function that grows fails too. One
entry per line, so whoever fixes one deletes that line alone.
"""

from __future__ import annotations

import ast
import functools
import subprocess
import sys
import textwrap
from collections.abc import Iterator
from pathlib import Path

import pytest

# Imports that close an import cycle today (importer -> imported); each is to go.
KNOWN_CYCLE_IMPORTS = ()

# Imports against the layering today (importer -> imported); each is to go.
KNOWN_LAYER_BREACHES = ()

# Modules over MAX_MODULE_LINES today: path -> lines (a ceiling: may only shrink).
KNOWN_LONG_MODULES: dict[str, int] = {}

# Functions in core/ over MAX_FUNCTION_LINES today: path::qualified name -> lines (a ceiling).
KNOWN_LONG_FUNCTIONS = {
}

MAX_MODULE_LINES = 700
MAX_FUNCTION_LINES = 80

# Layering: modules under the first prefix import nothing under the others (prefixes without "phasewake.").
# The store's primitives (atomic writes, the cache folder, the codec, JSON values) sit just above the
# foundation (errors, units, progress, interrupts, settings), so readers may write atomically and keep an
# index in the cache; only store.cached, which runs analysis requests through the cache, sits above them.
_ABOVE_PRIMITIVES = ("core.model", "core.readers", "core.analyses", "core.figures", "core.store.cached", "app")
LAYERS = (
    ("core.store.atomic", _ABOVE_PRIMITIVES),
    ("core.store.cache", _ABOVE_PRIMITIVES),
    ("core.store.codec", _ABOVE_PRIMITIVES),
    ("core.store.jsonable", _ABOVE_PRIMITIVES),
    ("core.model", ("core.analyses", "core.figures", "core.store.cached", "app")),
    ("core.readers", ("core.analyses", "core.figures", "core.store.cached", "app")),
    ("core.analyses", ("core.figures", "app")),
    ("core", ("app",)),
)

ROOT = Path(__file__).resolve().parents[1]


# ------------------------------------------------------------------------------ the source, read


def _module_name(path: Path) -> str:
    """Dotted name without the leading "phasewake." (app/api installs as the top-level package)."""
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[:2] == ["app", "api"]:
        parts = ["api", *parts[2:]]  # phasewake itself; "api" keeps it apart from the other names
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _sources() -> dict[str, Path]:
    return {_module_name(p): p for top in ("core", "app") for p in sorted((ROOT / top).rglob("*.py"))}


def _imported_names(tree: ast.AST, module: str, is_package: bool) -> Iterator[str]:
    """Every dotted name a module imports, wherever the import statement is (in a function too):
    ``from a.b import c`` gives ``a.b.c`` when that is a module of ours, else ``a.b`` (see _import_graph)."""
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                package = module.split(".") if is_package else module.split(".")[:-1]
                package = package[: len(package) - node.level + 1]
                base = ".".join(["phasewake", *package, *([base] if base else [])])
            yield from (f"{base}.{alias.name}" for alias in node.names)


@functools.lru_cache(maxsize=1)  # read once per session (three tests judge it; none changes it)
def _import_graph() -> dict[str, set[str]]:
    """Module -> the modules of ours it imports (names without the leading "phasewake.")."""
    sources = _sources()

    def ours(name: str) -> str | None:
        parts = name.split(".")
        if parts[0] != "phasewake":
            return None
        parts = parts[1:] if parts[1:2] in (["core"], ["app"]) else ["api", *parts[1:]]
        while parts and ".".join(parts) not in sources:
            parts.pop()  # a name defined in a module, not a submodule: the module it is in
        return ".".join(parts) or None

    graph: dict[str, set[str]] = {}
    for module, path in sources.items():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        targets = {ours(n) for n in _imported_names(tree, module, path.name == "__init__.py")}
        graph[module] = {t for t in targets if t is not None and t != module}
    return graph


def _cycle_through(graph: dict[str, set[str]], start: str) -> list[str] | None:
    """A shortest import cycle through ``start`` (as a list of modules, first = last), or None."""
    paths = {start: [start]}
    frontier = [start]
    while frontier:
        nxt = []
        for node in frontier:
            for child in sorted(graph.get(node, ())):
                if child == start:
                    return [*paths[node], start]
                if child not in paths:
                    paths[child] = [*paths[node], child]
                    nxt.append(child)
        frontier = nxt
    return None


def _reach(graph: dict[str, set[str]], start: str) -> set[str]:
    """Every module ``start`` imports, directly or through others."""
    seen: set[str] = set()
    todo = [start]
    while todo:
        for child in graph.get(todo.pop(), ()):
            if child not in seen:
                seen.add(child)
                todo.append(child)
    return seen


def _named(cycle: list[str]) -> str:
    """A cycle as text, started at its smallest name (so each cycle is named once)."""
    ring = cycle[:-1]
    i = ring.index(min(ring))
    return " -> ".join([*ring[i:], *ring[:i], ring[i]])


def _edges(listed: tuple[str, ...]) -> list[tuple[str, str]]:
    return [tuple(e.split(" -> ")) for e in listed]  # type: ignore[misc]


def _functions(tree: ast.AST, prefix: str = "") -> Iterator[tuple[str, int]]:
    """(qualified name, lines) of every function and method, nested ones too."""
    for node in ast.iter_child_nodes(tree):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            name = prefix + node.name
            yield name, node.end_lineno - node.lineno + 1  # type: ignore[operator]
            yield from _functions(node, name + ".")
        elif isinstance(node, ast.ClassDef):
            yield from _functions(node, prefix + node.name + ".")
        else:
            yield from _functions(node, prefix)


def _breaches(graph: dict[str, set[str]]) -> set[tuple[str, str]]:
    def under(module: str, prefix: str) -> bool:
        return module == prefix or module.startswith(prefix + ".")

    return {(m, t) for m, targets in graph.items() for t in targets
            for low, above in LAYERS if under(m, low) and any(under(t, a) for a in above)}


# ------------------------------------------------------------------------------ the contracts


def test_core_never_imports_qt():
    # Import every core module (each folder of core/ too) with Qt, pyqtgraph and app blocked: any import
    # of them fails loudly.
    code = textwrap.dedent(
        """
        import importlib, pkgutil, sys
        class Block:
            def find_spec(self, name, path=None, target=None):
                if name.split('.')[0] in ('PySide6', 'shiboken6', 'pyqtgraph', 'PyQt5', 'PyQt6'):
                    raise ImportError('core imported ' + name)
                if name.startswith('phasewake.app'):
                    raise ImportError('core imported ' + name)
        sys.meta_path.insert(0, Block())
        import phasewake.core as core
        for m in pkgutil.walk_packages(core.__path__, 'phasewake.core.'):
            importlib.import_module(m.name)
        print(' '.join(sorted(n for n in sys.modules if n.startswith('phasewake.core'))))
        print('ok')
        """
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    lines = out.stdout.strip().splitlines()
    assert lines[-1] == "ok"
    imported = set(lines[-2].split())
    missed = {f"phasewake.{m}" for m in _sources() if m.startswith("core")} - imported
    assert not missed, f"core modules the Qt-blocked import did not reach: {sorted(missed)}"


def test_cli_help_does_not_import_qt():
    code = "import sys; from phasewake.app import cli; cli.build_parser(); print('PySide6' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == "False"


def test_installed_as_namespaced_packages(tmp_path):
    # Run from an unrelated folder so the checkout itself is not on sys.path: the card's folders
    # must install as phasewake.core / phasewake.app, never as bare top-level core / app.
    code = (
        "import importlib.util as u; "
        "print(u.find_spec('phasewake.core') is not None, u.find_spec('core') is None, "
        "u.find_spec('app') is None)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["True", "True", "True"]


def test_import_graph_reads_every_kind_of_import():
    # The graph the next tests judge: module-level, function-level, relative and type-checking imports.
    code = textwrap.dedent(
        """
        import phasewake.core.errors
        from phasewake.core.model import run
        from . import sibling
        if TYPE_CHECKING:
            from phasewake.core.store.cache import Cache
        def f():
            from ..model.framepass import run_pass
        """
    )
    names = set(_imported_names(ast.parse(code), "core.readers.h5md", is_package=False))
    assert names == {"phasewake.core.errors", "phasewake.core.model.run", "phasewake.core.readers.sibling",
                     "phasewake.core.store.cache.Cache", "phasewake.core.model.framepass.run_pass"}
    graph = _import_graph()
    assert "core.model.run" in graph["core.readers"]  # "from ... import Run": the module it is in
    assert "core.readers.lammps_dump" in graph["core.readers"]  # in a function, "from package import module"
    assert {"core", "app", "api"} <= set(graph)  # app/api installs as the top-level phasewake package


def test_no_import_cycles():
    graph = _import_graph()
    known = _edges(KNOWN_CYCLE_IMPORTS)
    problems = []
    for importer, imported in known:
        if imported not in graph.get(importer, ()):
            problems.append(f"{importer} no longer imports {imported}: remove it from KNOWN_CYCLE_IMPORTS")
        elif importer not in _reach(graph, imported):
            problems.append(f"{importer} -> {imported} closes no cycle now: remove it from KNOWN_CYCLE_IMPORTS")
    pruned = {m: {t for t in targets if (m, t) not in known} for m, targets in graph.items()}
    cycles = {_named(c) for m in sorted(pruned) if (c := _cycle_through(pruned, m)) is not None}
    if cycles:
        problems.append("import cycles (module-level and function-level imports):\n" + "\n".join(sorted(cycles)))
    assert not problems, "\n".join(problems)


def test_layering():
    breaches = _breaches(_import_graph())
    known = set(_edges(KNOWN_LAYER_BREACHES))
    stale = sorted(f"{a} -> {b}" for a, b in known - breaches)
    assert not stale, f"no longer imported: remove {stale} from KNOWN_LAYER_BREACHES"
    new = sorted(f"{a} -> {b}" for a, b in breaches - known)
    assert not new, f"imports against the layering {LAYERS}:\n" + "\n".join(new)


def test_module_sizes():
    sizes = {str(p.relative_to(ROOT)): len(p.read_text(encoding="utf-8").splitlines())
             for p in _sources().values()}
    problems = _over_the_limit(sizes, KNOWN_LONG_MODULES, MAX_MODULE_LINES, "split it", "KNOWN_LONG_MODULES",
                               gone="is no longer over")
    assert not problems, "\n".join(problems)


def _over_the_limit(lengths: dict[str, int], known: dict[str, int], most: int, advice: str, known_name: str, *,
                    gone: str) -> list[str]:
    """What breaks the limit of ``most`` lines: a new piece over it, a known long one grown past its
    ceiling in ``known``, or a known one no longer over it (to be taken off the list)."""
    problems = []
    for name, lines in sorted(lengths.items()):
        ceiling = known.get(name)
        if ceiling is None and lines > most:
            problems.append(f"{name} has {lines} lines (at most {most}): {advice}")
        elif ceiling is not None and lines > ceiling:
            problems.append(f"{name} grew from {ceiling} to {lines} lines: {advice} instead")
    for name in sorted(known):
        if lengths.get(name, 0) <= most:
            problems.append(f"{name} {gone} {most} lines: remove it from {known_name}")
    return problems


def test_function_sizes():
    lengths = {}
    for path in _sources().values():
        if path.relative_to(ROOT).parts[0] != "core":
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for name, lines in _functions(tree):
            lengths[f"{path.relative_to(ROOT)}::{name}"] = lines
    problems = _over_the_limit(lengths, KNOWN_LONG_FUNCTIONS, MAX_FUNCTION_LINES, "cut it into named steps",
                               "KNOWN_LONG_FUNCTIONS", gone="is gone or no longer over")
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("graph, cycle", [
    ({"a": {"b"}, "b": {"c"}, "c": {"a"}}, ["a", "b", "c", "a"]),
    ({"a": {"b"}, "b": set()}, None),
])
def test_cycle_finder(graph, cycle):
    assert _cycle_through(graph, "a") == cycle
