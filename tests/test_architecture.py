"""The house runs one way: no import circles in bench/ or solvers/, the command line imported by
nothing, and no module over ~500 lines without a reason written at its top (DEVELOPERS.md,
"Map of the house")."""
import ast
from pathlib import Path

from tests.conftest import ROOT

# folder -> import name: bench/ is the package `lapbench`, solvers/ is `lapbench.solvers` (pyproject.toml)
PACKAGES = {"bench": "lapbench", "solvers": "lapbench.solvers"}
LONG = 500          # lines; a longer module says why in its docstring ("long because ...")


def modules() -> dict[str, Path]:
    out = {}
    for folder, package in PACKAGES.items():
        for path in sorted((ROOT / folder).rglob("*.py")):
            parts = (package,) + path.relative_to(ROOT / folder).with_suffix("").parts
            name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
            out[name] = path
    return out


def imports(path: Path, name: str, known: set[str]) -> set[str]:
    """Project modules `path` imports, lazy (function-level) imports included."""
    tree = ast.parse(path.read_text())
    found = set()
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else []))
            targets = [base] + [f"{base}.{a.name}" for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name:
                found.add(t)
    return found


def graph() -> dict[str, set[str]]:
    mods = modules()
    known = set(mods)
    g = {m: imports(p, m, known) for m, p in mods.items()}
    # a package's __init__ that only re-exports its own modules is not an arrow back up: an
    # import of `lapbench.problems.base` from inside the package must not count as importing
    # `lapbench.problems` (the __init__) itself
    return {m: {t for t in ts if not (t != m and m.startswith(t + "."))} for m, ts in g.items()}


def cycles(g: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in g.get(v, ()):
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

    for v in sorted(g):
        if v not in index:
            visit(v)
    return out


def test_no_import_circles():
    found = cycles(graph())
    assert not found, "import circles: " + "; ".join(" <-> ".join(c) for c in found)


def test_cycle_finder_finds_a_planted_circle():
    """The checker itself: a -> b -> c -> a is one circle, d hanging off it is not in it."""
    assert cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]


def test_command_line_is_imported_by_nothing():
    g = graph()
    users = sorted(m for m, ts in g.items() if "lapbench.cli" in ts)
    assert users == [], users


def test_long_modules_say_why():
    too_long = []
    for name, path in modules().items():
        text = path.read_text()
        if text.count("\n") > LONG:
            doc = ast.get_docstring(ast.parse(text)) or ""
            if "long because" not in doc.lower():
                too_long.append(f"{name} ({text.count(chr(10))} lines)")
    assert not too_long, too_long


def test_solver_tags_dims_are_checked():
    """A solver refuses a domain whose dimension is not among its `Tags.dims` (a 3-D unit cube
    stand-in here: the rectangle with dim = 3 by construction)."""
    import dataclasses

    from lapbench.domains import Rectangle
    from lapbench.problems import make_problem
    from lapbench.solvers import SOLVERS

    @dataclasses.dataclass(frozen=True)
    class Cube(Rectangle):
        dim = 3

    problem = dataclasses.replace(make_problem({"name": "sine"}), domain=Cube())
    ok, reason = SOLVERS["fd9"](n=8).supports(problem)     # fd9: rectangles only (fst5 takes d-boxes)
    assert not ok and reason == "solver fd9 handles dimensions [2], not 3"
