"""The pipeline's shape, checked from the source so a change cannot quietly undo it.

The import graph is built with `ast` from every module of the package, imports inside functions
included. Rules (see DEVELOPERS.md, "The pipeline and where each stage lives"):
- stages are layered and a module imports only from its own stage or a lower one;
- no import cycle between modules;
- no private name (leading underscore) is imported from another module;
- no function is longer than MAX_FUNCTION_LINES lines;
- at most MAX_TOP_MODULES modules sit directly in sheetfit/.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "sheetfit"
MAX_FUNCTION_LINES = 80
MAX_TOP_MODULES = 12

# Lower stages first. A top-level module or a folder (its first name under sheetfit) is one stage.
LAYERS: tuple[tuple[str, ...], ...] = (
    ("errors", "provenance", "memory"),
    ("settings", "job", "terms"),
    ("read",),
    ("model",),
    ("checks",),
    ("results",),
    ("prediction",),
    ("report",),
    ("pipeline",),
    ("api",),
    ("demo", "terminal"),
    ("cli",),
    ("__main__", "__init__"),
)
RANK = {stage: i for i, names in enumerate(LAYERS) for stage in names}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def modules() -> dict[str, Path]:
    return {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def stage_of(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _resolve(module: str, path: Path, node: ast.ImportFrom) -> str:
    if node.level == 0:
        return node.module or ""
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    base = package.split(".")
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports(known: dict[str, Path]) -> list[tuple[str, str, str, int]]:
    """(importer, imported module, imported name or '', line) for every import inside the package."""
    edges = []
    for module, path in known.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                edges += [(module, a.name, "", node.lineno) for a in node.names if a.name.startswith("sheetfit")]
            elif isinstance(node, ast.ImportFrom):
                target = _resolve(module, path, node)
                if not target.startswith("sheetfit"):
                    continue
                for alias in node.names:
                    sub = f"{target}.{alias.name}"
                    if sub in known:          # `from . import checks` imports a module
                        edges.append((module, sub, "", node.lineno))
                    else:
                        edges.append((module, target, alias.name, node.lineno))
    return edges


def test_every_module_belongs_to_a_stage():
    unknown = sorted({stage_of(m) for m in modules()} - set(RANK))
    assert not unknown, f"modules outside any stage (add them to LAYERS and DEVELOPERS.md): {unknown}"


def test_imports_flow_from_lower_stages_only():
    known = modules()
    wrong = []
    for importer, target, _name, line in imports(known):
        a, b = stage_of(importer), stage_of(target)
        if a != b and RANK[b] > RANK[a]:
            wrong.append(f"{importer}:{line} imports {target} (stage {b} is after {a})")
    assert not wrong, "\n".join(wrong)


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: list[list[str]] = []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
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

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def _package_init(module: str, known: dict[str, Path]) -> str | None:
    """The package whose __init__ runs before `module` is imported (its parent), if any inside sheetfit."""
    parent = module.rsplit(".", 1)[0]
    return parent if parent != module and parent in known and parent != "sheetfit" else None


def test_no_import_cycle_between_modules():
    known = modules()
    graph: dict[str, set[str]] = {m: set() for m in known}
    for importer, target, _name, _line in imports(known):
        if target in known and target != importer:
            graph[importer].add(target)
            # importing a submodule runs its package's __init__ first
            init = _package_init(target, known)
            if init and init != importer and not importer.startswith(init + "."):
                graph[importer].add(init)
    cycles = _cycles(graph)
    assert not cycles, f"import cycles: {cycles}"


def test_no_import_cycle_between_stages():
    known = modules()
    graph: dict[str, set[str]] = {}
    for importer, target, _name, _line in imports(known):
        a, b = stage_of(importer), stage_of(target)
        if a != b:
            graph.setdefault(a, set()).add(b)
    assert not _cycles(graph)


def test_no_private_name_crosses_modules():
    known = modules()
    crossing = [f"{importer}:{line} imports {name} from {target}"
                for importer, target, name, line in imports(known)
                if name.startswith("_") and not name.startswith("__") and target != importer]
    assert not crossing, "\n".join(crossing)


def _functions(tree: ast.AST):
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            yield node


def test_no_function_is_longer_than_the_limit():
    long = []
    for module, path in modules().items():
        for fn in _functions(ast.parse(path.read_text(encoding="utf-8"))):
            length = fn.end_lineno - fn.lineno + 1
            if length > MAX_FUNCTION_LINES:
                long.append(f"{module}.{fn.name}: {length} lines")
    assert not long, "\n".join(long)


def test_few_modules_sit_directly_in_the_package():
    top = sorted(p.name for p in PACKAGE.glob("*.py"))
    assert len(top) <= MAX_TOP_MODULES, top


def test_library_code_does_not_print():
    """Only the CLI talks to the terminal; the library reports through return values and callbacks."""
    offenders = []
    for module, path in modules().items():
        if stage_of(module) in ("cli", "terminal", "__main__"):
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Call):
                f = node.func
                name = f.id if isinstance(f, ast.Name) else (f"{ast.unparse(f)}" if isinstance(f, ast.Attribute) else "")
                if name == "print" or name.startswith(("sys.stderr.", "sys.stdout.")):
                    if stage_of(module) == "demo" and _in_main(tree, node):   # sheetfit.demo and its modules
                        continue
                    offenders.append(f"{module}:{node.lineno} {name}")
    assert not offenders, "\n".join(offenders)


def _in_main(tree: ast.AST, call: ast.Call) -> bool:
    """The call sits in a `_main` function (a module's own `python -m` entry)."""
    for fn in _functions(tree):
        if fn.name == "_main" and fn.lineno <= call.lineno <= fn.end_lineno:
            return True
    return False


def test_every_folder_is_a_stage():
    folders = {p.name for p in PACKAGE.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    assert folders <= set(RANK), f"a folder without a stage: {sorted(folders - set(RANK))}"
