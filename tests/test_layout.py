"""The package's shape: no import circles, each step imports only the steps below it, and
no module reaches into another's private names.

Read from the source with :mod:`ast` (nothing is imported), so a failure lists every
offender at once. The layers are the data's path; DEVELOPERS.md shows the same map.
"""

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "massfit"

#: Each folder (or top-level module) and its step on the data's path. A module may import
#: from its own step or a lower one, never from a higher one.
LAYERS = {
    "errors": 0, "lazy": 0, "constants": 0, "quantities": 0, "version": 0, "priors": 0,
    "read": 1,
    "orbits": 2,
    "model": 3,
    "start": 4,
    "sample": 5,
    "summarise": 6,
    "plot": 7, "write": 7,
    "result": 8,
    "run": 9, "modechains": 9, "linearised_fit": 9, "compare": 10,
    "config": 10, "plan": 10, "scenarios": 10, "batch": 10,
    "cli": 11, "__main__": 12, "__init__": 12,
}
#: Modules of Python's own whose documented underscore names may be used (os._exit).
STANDARD_LIBRARY = ("os", "sys")


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        yield name, path, ast.parse(path.read_text(), filename=str(path))


def _imported(name, path, tree):
    """(module imported, names taken, line) for every import of massfit code, lazy ones too."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")
                anchor = anchor[:len(anchor) - node.level + 1]
                base = ".".join(anchor + ([base] if base else []))
            if base.split(".")[0] != "massfit":
                continue
            for alias in node.names:
                yield base, alias.name, node.lineno
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] == "massfit":
                    yield alias.name, None, node.lineno


def _layer(module):
    parts = module.split(".")
    key = parts[1] if len(parts) > 1 else "__init__"
    return LAYERS.get(key)


def _graph():
    names = {}
    trees = list(_modules())
    known = {name for name, _, _ in trees}
    for name, path, tree in trees:
        edges = set()
        for base, taken, line in _imported(name, path, tree):
            target = f"{base}.{taken}" if taken and f"{base}.{taken}" in known else base
            if target in known and target != name:
                edges.add((target, taken, line))
        names[name] = (path, tree, edges)
    return names


def test_every_folder_has_a_step():
    missing = sorted({name.split(".")[1] for name in _graph() if "." in name
                      and _layer(name) is None})
    assert not missing, f"folders or modules with no step in LAYERS: {missing}"


def test_no_import_circle():
    graph = {name: {target for target, _, _ in edges} for name, (_, _, edges) in _graph().items()}
    index, low, stack, on_stack, circles = {}, {}, [], set(), []

    def visit(node):  # Tarjan's strongly connected components
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for nxt in graph.get(node, ()):
            if nxt not in index:
                visit(nxt)
                low[node] = min(low[node], low[nxt])
            elif nxt in on_stack:
                low[node] = min(low[node], index[nxt])
        if low[node] == index[node]:
            component = []
            while True:
                top = stack.pop()
                on_stack.discard(top)
                component.append(top)
                if top == node:
                    break
            if len(component) > 1:
                circles.append(sorted(component))

    for node in sorted(graph):
        if node not in index:
            visit(node)
    assert not circles, f"import circles: {circles}"


def test_each_step_imports_only_lower_steps():
    upward = []
    for name, (path, _, edges) in _graph().items():
        own = _layer(name)
        for target, taken, line in edges:
            if target == "massfit" and name.count(".") == 0:
                continue
            theirs = _layer(target)
            if own is not None and theirs is not None and theirs > own:
                upward.append(f"{path.relative_to(PACKAGE.parent)}:{line} imports {target}")
    assert not upward, "imports that run up the data's path:\n" + "\n".join(sorted(upward))


def test_no_private_name_taken_from_another_module():
    offenders = []
    for name, (path, tree, edges) in _graph().items():
        folder = name.rpartition(".")[0]
        for target, taken, line in edges:
            private_module = target.rpartition(".")[2].startswith("_")
            same_folder = target.rpartition(".")[0] == folder
            if taken and taken.startswith("_") and not taken.startswith("__") \
                    and not (private_module and same_folder) \
                    and not (same_folder and f"{target}" .endswith(taken)):
                offenders.append(f"{path.relative_to(PACKAGE.parent)}:{line} takes {taken} "
                                 f"from {target}")
        for node in ast.walk(tree):
            if (isinstance(node, ast.Attribute) and node.attr.startswith("_")
                    and not node.attr.startswith("__")
                    and not (isinstance(node.value, ast.Name)
                             and node.value.id in ("self", "cls", *STANDARD_LIBRARY))):
                offenders.append(f"{path.relative_to(PACKAGE.parent)}:{node.lineno} reads "
                                 f".{node.attr} of another object")
    assert not offenders, "private names used across modules:\n" + "\n".join(sorted(offenders))
