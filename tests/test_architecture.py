"""The architecture stays as docs/ARCHITECTURE.md draws it.

- imports go only downstream: every module of the package imports modules of its own
  stage or of an earlier one (the stage table below is the pipeline of the page), and
  there is no import cycle;
- nothing outside the command-line package prints or ends the process;
- no file of the repository refers to documents outside it.
"""

from __future__ import annotations

import ast
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGE = ROOT / "shellmodes"

#: pipeline stages, upstream first; a module belongs to the first stage whose prefix matches it
STAGES = [
    ("foundations", ["_version", "errors", "limits", "harmonics", "case.units", "case.expression", "io.progress"]),
    ("case", ["case.schema", "case.keys", "case"]),
    ("geometry", ["shapes", "meshfiles"]),
    ("model", ["case.model"]),
    ("fem", ["fem.surface", "fem.forms", "fem.curvature", "fem.shellmesh", "fem.tetrahedra", "fem.assemble",
             "fem.prisms", "fem.orientation", "fem", "meshfiles.volume"]),
    ("discretisation", ["fem.discretisation"]),
    ("eigen", ["eigen.backends", "eigen.block", "eigen.solve", "eigen.separable", "eigen.slicing", "eigen"]),
    ("planner", ["eigen.planner"]),
    ("spectrum", ["spectrum.levelstats", "spectrum"]),
    ("pipeline", ["pipeline"]),
    ("outputs", ["io.pictures", "io.outputs", "io"]),
    ("studies", ["studies"]),
    ("report", ["io.report", "io.report_folders"]),
    ("cli", ["cli", "__main__"]),
]


def _modules() -> dict[str, Path]:
    out = {}
    for path in PACKAGE.rglob("*.py"):
        parts = list(path.relative_to(PACKAGE).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def _stage(module: str) -> int:
    if module == "":
        return 0  # the package root: a lazy facade importing only _version at load time
    best = None
    for rank, (_, prefixes) in enumerate(STAGES):
        for prefix in prefixes:
            if module == prefix or module.startswith(prefix + "."):
                if best is None or len(prefix) > best[1]:
                    best = (rank, len(prefix))
    assert best is not None, f"module shellmodes.{module} has no stage: add it to STAGES"
    return best[0]


def _imports(module: str, path: Path, modules) -> set[str]:
    """Package modules imported anywhere in the file (top level and inside functions)."""
    package = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)] if node.level > 1 else package
                target = [*base, *(node.module.split(".") if node.module else [])]
            elif node.module and node.module.startswith("shellmodes"):
                target = node.module.split(".")[1:]
            else:
                continue
            for alias in node.names:
                name = ".".join([*target, alias.name])
                found.add(name if name in modules else ".".join(target))
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("shellmodes."):
                    found.add(alias.name.split(".", 1)[1])
    return {m for m in found if m in modules and m != module}


def _graph():
    modules = _modules()
    return modules, {m: _imports(m, p, modules) for m, p in modules.items()}


def test_every_import_goes_downstream():
    modules, graph = _graph()
    assert len(modules) > 40  # the walk found the package
    upstream = [(m, t) for m, targets in graph.items() for t in targets if _stage(t) > _stage(m)]
    assert upstream == [], "imports against the pipeline's direction: " + ", ".join(
        f"{m} ({STAGES[_stage(m)][0]}) -> {t} ({STAGES[_stage(t)][0]})" for m, t in upstream)


def test_no_import_cycle():
    _, graph = _graph()
    state, stack = {}, []

    def visit(node):
        state[node] = "open"
        stack.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == "open":
                cycle = stack[stack.index(nxt):] + [nxt]
                pytest.fail("import cycle: " + " -> ".join(cycle))
            if nxt not in state:
                visit(nxt)
        stack.pop()
        state[node] = "done"

    for node in sorted(graph):
        if node not in state:
            visit(node)


#: (module, function) allowed to end a process: a sweep worker whose parent died ends itself (in the
#: worker process, never the user's)
EXIT_ALLOWED = {("studies.sweep", "_die_with_parent")}


def test_only_the_command_line_prints_or_exits():
    offenders = []
    for module, path in _modules().items():
        if module == "cli" or module.startswith("cli.") or module == "__main__":
            continue
        tree = ast.parse(path.read_text())
        allowed = {id(n) for f in ast.walk(tree) if isinstance(f, ast.FunctionDef) and (module, f.name) in EXIT_ALLOWED
                   for n in ast.walk(f)}
        for node in ast.walk(tree):
            if id(node) in allowed:
                continue
            if isinstance(node, ast.Call):
                f = node.func
                name = f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else ""
                owner = f.value.id if isinstance(f, ast.Attribute) and isinstance(f.value, ast.Name) else ""
                if name in ("print", "exit", "quit") and owner in ("", "sys", "os") or (owner, name) == ("os", "_exit"):
                    offenders.append(f"{path.relative_to(ROOT)}:{node.lineno} {owner + '.' if owner else ''}{name}")
    assert offenders == []


def test_the_guard_sees_a_print():
    # the check above must be able to fail: a print in a library module is found
    tree = ast.parse("def f():\n    print('x')\n")
    calls = [n for n in ast.walk(tree) if isinstance(n, ast.Call) and getattr(n.func, "id", "") == "print"]
    assert len(calls) == 1
    assert _stage("eigen.planner") > _stage("fem.discretisation") > _stage("case.model")


def test_nothing_refers_to_documents_outside_the_repository():
    files = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True).stdout.split()
    hits = []
    for name in files:
        path = ROOT / name
        if path.suffix not in (".py", ".md", ".toml", ".txt", ".cfg", "") or not path.is_file():
            continue
        text = path.read_text(errors="ignore")
        for word in ("../" + "shared", "DESIGN" + ".md", "STYLE" + ".md"):  # split: this file is checked too
            if word in text:
                hits.append(f"{name}: {word}")
    assert hits == []
