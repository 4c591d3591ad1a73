"""The package's modules import each other without circles (counting imports inside functions):
each stage hands the next a value, so none needs to reach back. Reference: the module graph read
from the source with Python's own ``ast`` and strongly connected components (Tarjan, 1972)."""
import ast
import pathlib

PACKAGE = pathlib.Path(__file__).resolve().parents[2] / "overlap_assist"


def _module_name(path):
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def import_graph():
    """{module: {modules it imports}} for every module of the package."""
    modules = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    graph = {m: set() for m in modules}
    for name, path in modules.items():
        package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level:
                base = package.split(".")[:len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
                for alias in node.names:
                    sub = f"{target}.{alias.name}"
                    graph[name].add(sub if sub in modules else target)
            elif isinstance(node, ast.Import):
                graph[name].update(a.name for a in node.names if a.name in modules)
            elif isinstance(node, ast.ImportFrom) and node.module in modules:
                graph[name].add(node.module)
        graph[name] = {t for t in graph[name] if t in modules and t != name}
    return graph


def cycles(graph):
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph[v]):
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


def test_the_cycle_finder_finds_a_circle():
    assert cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]


def test_no_module_of_the_package_imports_itself_in_a_circle():
    graph = import_graph()
    assert "overlap_assist.blender.chain_sim" in graph and graph["overlap_assist.cli"]
    assert cycles(graph) == []
