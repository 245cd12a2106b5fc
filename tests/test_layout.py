"""The engine's folders follow the pipeline, and imports only point down it.

circuit text -> circuits -> network -> planning -> execution -> analysis; ``errors`` and
``defaults`` sit below everything. Every import is checked, including those inside functions, so
a circle cannot hide behind a late import. ``contraction`` never imports ``service`` or FastAPI.
(Common practice: a layered package; checked by reading the source, not by importing it.)
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent / "contraction"
LAYERS = {"errors": 0, "defaults": 0, "circuits": 1, "network": 2, "planning": 3, "execution": 4, "analysis": 5}


def _module_name(path: Path) -> str:
    rel = path.relative_to(ROOT.parent).with_suffix("")
    return ".".join(rel.parts).removesuffix(".__init__")


def _imports(path: Path) -> list[tuple[str, int]]:
    """(imported module, line) for every import in the file, resolving relative imports."""
    tree = ast.parse(path.read_text(), filename=str(path))
    here = _module_name(path).split(".")
    if path.name != "__init__.py":
        here = here[:-1]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(here[: len(here) - node.level + 1] + ([base] if base else []))
            out.append((base, node.lineno))
            # ``from contraction.circuits import gates`` imports a module of that package
            out += [(f"{base}.{a.name}", node.lineno) for a in node.names if (ROOT.parent / base.replace(".", "/")
                                                                               / f"{a.name}.py").exists()]
    return out


def _layer(module: str) -> int | None:
    parts = module.split(".")
    if parts[0] != "contraction" or len(parts) < 2:
        return None
    return LAYERS.get(parts[1])


FILES = sorted(ROOT.rglob("*.py"))


def test_every_engine_module_sits_in_a_known_layer():
    for f in FILES:
        name = _module_name(f)
        if name != "contraction":
            assert _layer(name) is not None, f"{name} is outside the pipeline's folders {sorted(LAYERS)}"


@pytest.mark.parametrize("path", FILES, ids=lambda p: _module_name(p))
def test_imports_point_down_the_pipeline(path):
    name = _module_name(path)
    mine = _layer(name)
    for target, line in _imports(path):
        top = target.split(".")[0]
        assert top not in ("service", "fastapi", "starlette", "uvicorn"), f"{name}:{line} imports {target}"
        theirs = _layer(target)
        if mine is None or theirs is None:
            continue
        assert theirs <= mine, f"{name}:{line} imports {target}, a later stage of the pipeline"


def test_no_import_circle_inside_a_layer():
    graph = {_module_name(f): {t for t, _ in _imports(f) if t.startswith("contraction.")} for f in FILES}
    graph = {k: {t for t in v if t in graph and t != k} for k, v in graph.items()}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> None:
        state[m] = 1
        stack.append(m)
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                pytest.fail("import circle: " + " -> ".join(stack[stack.index(n):] + [n]))
            if n not in state:
                visit(n)
        stack.pop()
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m)


PUBLIC_FILES = sorted(list(ROOT.rglob("*.py")) + list((ROOT.parent / "service").rglob("*.py")))


def _public_definitions(path: Path):
    tree = ast.parse(path.read_text())
    for node in tree.body:
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)) and not node.name.startswith("_"):
            yield node.name, node
            if isinstance(node, ast.ClassDef):
                for sub in node.body:
                    if isinstance(sub, (ast.FunctionDef, ast.AsyncFunctionDef)) and not sub.name.startswith("_"):
                        yield f"{node.name}.{sub.name}", sub


def test_every_public_function_and_class_says_what_it_does():
    missing = [f"{p.relative_to(ROOT.parent)}:{n.lineno} {name}" for p in PUBLIC_FILES
               for name, n in _public_definitions(p) if not ast.get_docstring(n)]
    assert not missing, "no docstring:\n" + "\n".join(missing)


def test_every_package_lists_its_public_names():
    for init in sorted(list(ROOT.rglob("__init__.py")) + list((ROOT.parent / "service").rglob("__init__.py"))):
        tree = ast.parse(init.read_text())
        names = [t.id for node in tree.body if isinstance(node, ast.Assign) for t in node.targets
                 if isinstance(t, ast.Name)]
        assert "__all__" in names, f"{init} has no __all__"
        assert ast.get_docstring(tree), f"{init} has no docstring"


def test_example_scripts_import_what_exists():
    """The examples are read by newcomers first: every name they import from the project exists."""
    import importlib
    import importlib.util

    for script in sorted((ROOT.parent / "examples").glob("*.py")):
        for node in ast.walk(ast.parse(script.read_text())):
            if isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] in ("contraction", "service"):
                module = importlib.import_module(node.module)
                for alias in node.names:
                    assert hasattr(module, alias.name) or importlib.util.find_spec(f"{node.module}.{alias.name}"), \
                        f"{script.name}:{node.lineno} imports {alias.name} from {node.module}, which has no such name"
