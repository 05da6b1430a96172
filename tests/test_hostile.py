"""Hostile and malformed input: code disguised as expressions, absurd sizes, unknown keys, and
unreadable or foreign files in the results folder. Each is refused with one line (exit 2, nothing
written) or skipped with a warning; none runs code or crashes a loader."""
import ast
import json
import math
import os
import sys
import warnings

import pytest
import sympy as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lapbench import cli
from lapbench.expr import FUNCTIONS, ExpressionError, X, Y, parse
from lapbench.records import RecordWarning, iter_records, load_records, read_record, to_frame
from lapbench.run import Case, run_case

CANARY = f"/tmp/lapbench-canary-{os.getpid()}"

# -- "never executes code": an audit hook watches everything the parser does -------------------
# PEP 578 audit events fire on every exec/eval of a code object and every process, file-write or
# network action, whoever triggers them. The hook cannot be removed, so it only records while
# `_WATCH` is on (around each parse() call).
_WATCH = {"on": False, "events": []}
_DANGEROUS = ("os.system", "os.exec", "os.posix_spawn", "os.spawn", "os.fork", "subprocess.Popen",
              "os.remove", "os.rename", "os.unlink", "shutil.", "socket.", "ctypes.", "builtins.input",
              "os.chmod", "os.kill", "webbrowser.", "pty.spawn")


_SYMPY_CODEGEN = (os.path.join("sympy", "polys", "monomials.py"),
                  # mpmath builds its hypergeometric series summators from fixed templates, keyed by
                  # parameter types (make_hyp_summator), the first time sympy evaluates e.g. erf of a
                  # complex constant: no user text reaches that code
                  os.path.join("mpmath", "libmp", "libhyper.py"))


def _importing() -> bool:
    """Whether a module import is under way on the current stack."""
    frame = sys._getframe(2)
    while frame is not None:
        if frame.f_code.co_filename.startswith("<frozen importlib._bootstrap"):
            return True
        frame = frame.f_back
    return False


def _audit(event, args):
    if not _WATCH["on"]:
        return
    if event == "exec":
        code = args[0]
        # Executing a module being imported has a real file; code made from a string does not.
        # Two sources of such code carry no user text and are allowed: sympy's polynomial rings
        # generate their monomial arithmetic from fixed templates (sympy/polys/monomials.py), and
        # sympy modules imported lazily (e.g. sympy.physics.units, on first simplify) sympify
        # their own constant strings at import time; mpmath generates its series kernels likewise.
        caller = sys._getframe(1).f_code.co_filename
        if getattr(code, "co_filename", "<?>").startswith("<") and not caller.endswith(_SYMPY_CODEGEN) \
                and not _importing():
            _WATCH["events"].append(f"exec of dynamic code {code!r} from {caller}")
    elif event.startswith(_DANGEROUS):
        _WATCH["events"].append(event)
    elif event == "open" and len(args) > 1 and isinstance(args[1], str) and set(args[1]) & set("wax+"):
        _WATCH["events"].append(f"open for writing {args[0]!r}")


sys.addaudithook(_audit)


def watched_parse(text):
    """parse(text) with the audit hook recording; (expression or None, error or None, events)."""
    _WATCH["events"] = []
    _WATCH["on"] = True
    try:
        return parse(text), None, list(_WATCH["events"])
    except ExpressionError as exc:
        return None, exc, list(_WATCH["events"])
    finally:
        _WATCH["on"] = False


# warm-up: sympy imports some modules lazily on first use of a function; do it outside the watch
for _name, _arity in ((n, 2 if n == "atan2" else 1) for n in FUNCTIONS):
    parse(f"{_name}({', '.join(['x + 0.5'] * _arity)})")

ALLOWED_NODES = (ast.Expression, ast.BinOp, ast.UnaryOp, ast.Call, ast.Name, ast.Constant, ast.Load,
                 ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow, ast.USub, ast.UAdd)
NAMES = {"x", "y", "pi", "e", *FUNCTIONS}


def assert_plain_mathematics(text):
    """An independent check of what an accepted string may contain (not the parser's own code)."""
    tree = ast.parse(text.strip(), mode="eval")
    for node in ast.walk(tree):
        assert isinstance(node, ALLOWED_NODES), f"accepted {text!r} containing {type(node).__name__}"
        if isinstance(node, ast.Name):
            assert node.id in NAMES, f"accepted {text!r} with the name {node.id!r}"
        if isinstance(node, ast.Call):
            assert isinstance(node.func, ast.Name) and not node.keywords
        if isinstance(node, ast.Constant):
            assert type(node.value) in (int, float)


def check_outcome(text):
    expr, err, events = watched_parse(text)
    assert events == [], f"parsing {text!r} did {events}"
    assert not os.path.exists(CANARY), f"{text!r} created the canary file"
    if err is not None:
        msg = str(err)
        assert "\n" not in msg and msg.startswith("`problem.u`"), msg
        assert len(msg) < 600, msg
        return None
    assert isinstance(expr, sp.Expr) and expr.free_symbols <= {X, Y}
    assert_plain_mathematics(text)
    return expr


# Python syntax fragments, dunder names and attribute chains, glued together at random
FRAGMENTS = ["x", "y", "pi", "e", "sin", "exp", "atan2", "log", "(", ")", ",", "+", "-", "*", "/", "**",
             "%", "//", "@", "~", "<<", "==", "<", "and", "or", "not", "if", "else", "lambda", ":", "for",
             "in", "[", "]", "{", "}", ".", "__class__", "__bases__", "__subclasses__", "__globals__",
             "__builtins__", "__import__", "__dict__", "'os'", '"sys"', "system", "eval", "exec", "open",
             "compile", "getattr", "globals", "vars", "import", ";", "\n", "=", ":=", "f'{x}'", "b'x'",
             "0x1F", "1e3", "1_000", "1j", "0.5", "3", "9", "...", "None", "True", "yield", "await", "#",
             "\\", "\t", " ", f"'touch {CANARY}'", "breakpoint", "help", "exit", "\x00", "\u00e9", "\uff58"]
ATTRS = ["__class__", "__bases__", "__subclasses__()", "__mro__", "__globals__", "__builtins__",
         "__dict__", "__init__", "real", "conjugate()", "system('true')", f"system('touch {CANARY}')"]
fragments = st.lists(st.sampled_from(FRAGMENTS), max_size=14).map("".join)
chains = st.tuples(st.sampled_from(["x", "()", "''", "sin", "(1)", "pi", "[]", "__import__('os')", "sin(x)"]),
                   st.lists(st.sampled_from(ATTRS), min_size=1, max_size=5)).map(
    lambda t: t[0] + "." + ".".join(t[1]))
calls = st.tuples(st.sampled_from(["__import__", "eval", "exec", "open", "getattr", "sin", "exp", "type"]),
                  st.sampled_from(["'os'", f"'touch {CANARY}'", "x", "x, '__class__'", "x, y=1", "*x", "**{}"])
                  ).map(lambda t: f"{t[0]}({t[1]})")


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(st.text(max_size=80), fragments, chains, calls))
def test_parser_never_runs_code_and_answers_cleanly(text):
    check_outcome(text)


# well-formed mathematics from a small grammar: accepted ones must mean what they say
_LEAVES = st.sampled_from(["x", "y", "pi", "e", "2", "0.5", "3", "1.25"])
_UNARY = ["sin", "cos", "tan", "exp", "log", "sqrt", "sinh", "cosh", "tanh", "asin", "acos", "atan",
          "abs", "erf"]


def _extend(inner):
    return st.one_of(
        st.tuples(inner, st.sampled_from(["+", "-", "*", "/"]), inner).map(lambda t: f"({t[0]} {t[1]} {t[2]})"),
        st.tuples(inner, st.sampled_from(["2", "3", "0.5", "-1"])).map(lambda t: f"({t[0]})**{t[1]}"),
        inner.map(lambda a: f"-({a})"),
        st.tuples(st.sampled_from(_UNARY), inner).map(lambda t: f"{t[0]}({t[1]})"),
        st.tuples(inner, inner).map(lambda t: f"atan2({t[0]}, {t[1]})"),
    )


grammar = st.recursive(_LEAVES, _extend, max_leaves=6)
MATH = {"pi": math.pi, "e": math.e, "abs": abs, **{n: getattr(math, n) for n in FUNCTIONS if n != "abs"}}


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(grammar)
def test_accepted_expressions_mean_what_they_say(text):
    expr = check_outcome(text)
    if expr is None:
        return  # refused for a mathematical reason (division by zero, complex constant, ...)
    # Oracle: the same string under Python's own arithmetic and the math module. Only strings
    # that passed assert_plain_mathematics above get here (numbers, x, y, pi, e, + - * / **,
    # whitelisted calls), and they are evaluated with no builtins at all.
    try:
        expected = eval(compile(ast.parse(text, mode="eval"), "<oracle>", "eval"),  # noqa: S307
                        {"__builtins__": {}}, {**MATH, "x": 0.3, "y": 0.7})
        got = complex(expr.subs({X: 0.3, Y: 0.7}).evalf())
    except (ValueError, ZeroDivisionError, OverflowError, TypeError):
        return  # outside the functions' real domain at this point
    if isinstance(expected, complex) or got.imag != 0 or not math.isfinite(expected) or abs(expected) > 1e8:
        return
    assert math.isclose(got.real, expected, rel_tol=1e-9, abs_tol=1e-9), (text, got, expected)


@pytest.mark.parametrize("text", [
    "__import__('os').system('touch %s')" % CANARY,
    "().__class__.__bases__[0].__subclasses__()",
    "sin.__globals__['__builtins__']['exec']('1')",
    "[x for x in ().__class__.__mro__]",
    "exp(x).__class__",
    "(lambda: __import__('os'))()",
    "getattr(x, '__class__')",
    "f'{__import__(\"os\").system(\"true\")}'",
    "x if __import__('os') else y",
    "sqrt(-1)",
])
def test_known_attacks_are_refused_without_running(text):
    assert check_outcome(text) is None


# -- absurd sizes and unknown keys: refused up front, exit 2, nothing written -------------------
def refused(capsys, tmp_path, *overrides):
    with pytest.raises(SystemExit) as exc:
        cli.main(["run", *overrides, f"results_dir={tmp_path}"])
    assert exc.value.code == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and err.startswith("lapbench: error: `"), err
    assert not (tmp_path / "runs").exists()
    return err


def test_terabyte_grid_is_refused_with_an_estimate(capsys, tmp_path):
    err = refused(capsys, tmp_path, "solver=fd5", "solver.n=30000")
    # (30000-1)^2 unknowns at the fitted ~1.7 kB per unknown of solvers/fd.py: about 1.5 TiB
    assert "`solver` fd5 with {'n': 30000} needs about 1.5 TiB of memory, above `budget.memory_limit_mb`" in err
    err = refused(capsys, tmp_path, "solver=fst9", "solver.n=30000")
    assert "needs about 73.8 GiB" in err  # 11 grid arrays of 30001^2 float64 (solvers/fast_poisson.py)


def test_the_memory_limit_decides_which_grids_are_admitted(tmp_path):
    from lapbench.config import ConfigError
    from lapbench.run import prepare

    case = Case(problem={"name": "sine"}, solver={"name": "fd5", "n": 2048})
    prepare(case, tmp_path)  # about 5.7 GiB: under the default 8192 MiB
    case.budget = {"memory_limit_mb": 1000}
    with pytest.raises(ConfigError, match=r"^`solver` fd5 with \{'n': 2048\} needs about 5\.[0-9] GiB"):
        prepare(case, tmp_path)
    assert not (tmp_path / "runs").exists()


@pytest.mark.parametrize("overrides,message", [
    (["+colour=red"], "`colour` is not a known field; known fields: "),
    (["solver.n=abc"], "`solver.n` must be an integer, got 'abc'"),
    (["solver.n=1.5"], "`solver.n` must be an integer, got 1.5"),
    (["solver.colour=1"], "`solver.colour` is not a known field"),
    (["budget.memory_limit_mb=-1"], "`budget.memory_limit_mb` must be positive"),
    (["threads=0"], "`threads` must be a positive integer"),
    (["problem=expr", "problem.u='__import__(\"os\").getcwd()'"], "`problem.u`: only the named functions"),
])
def test_malformed_config_is_one_line_exit_2(capsys, tmp_path, overrides, message):
    assert message in refused(capsys, tmp_path, *overrides)


# -- unreadable or foreign files in a results folder ----------------------------------------------
def _foreign_files(runs, good):
    deep = "[" * 100_000 + "]" * 100_000
    files = {
        "garbage.json": b"\x00\xff not json at all",
        "empty.json": b"",
        "list.json": b"[1, 2, 3]",
        "deep.json": deep.encode(),
        "bigint.json": ("{\"schema_version\": 1, \"x\": " + "9" * 5000 + "}").encode(),
        "latin1.json": "{\"caf\u00e9\": 1}".encode("latin-1"),
        "future.json": json.dumps({**good, "schema_version": 99}).encode(),
        "other_tool.json": json.dumps({"name": "something else", "results": [1, 2]}).encode(),
        "bad_metrics.json": json.dumps({**good, "metrics": [1, 2]}).encode(),
        "bad_status.json": json.dumps({**good, "status": "splendid"}).encode(),
        "bad_domain.json": json.dumps({**good, "problem": {**good["problem"], "domain": "square"}}).encode(),
        "truncated.json": json.dumps(good).encode()[:200],
    }
    for name, data in files.items():
        (runs / name).write_bytes(data)
    (runs / "folder.json").mkdir()
    os.mkfifo(runs / "pipe.json")  # open() on a fifo would block a loader forever
    (runs / ".tmp-half.json").write_bytes(json.dumps(good).encode()[:50])
    return len(files) + 2


def test_foreign_files_are_skipped_with_a_warning_and_never_crash_the_report(tmp_path):
    rec, _ = run_case(Case(problem={"name": "sine"}, solver={"name": "fd5", "n": 8}), tmp_path)
    runs = tmp_path / "runs"
    n_bad = _foreign_files(runs, rec)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        recs = load_records(tmp_path)
    assert [r["case_id"] for r in recs] == [rec["case_id"]]
    skipped = [w for w in caught if issubclass(w.category, RecordWarning)]
    assert len(skipped) == n_bad, [str(w.message) for w in skipped]
    assert all("skipping" in str(w.message) for w in skipped)
    assert len(to_frame(recs)) == 1

    from lapbench.report import FigureOptions, ReportConfig, write_report

    # figures off: they are drawn from the same loaded records, and cost seconds to render
    cfg = ReportConfig(name="hostile", results=[str(tmp_path)], figures=FigureOptions(kinds=[]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RecordWarning)
        out, table = write_report(cfg, out_root=tmp_path / "reports")
    assert len(table) == 1 and (out / "results.md").is_file()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(key=st.sampled_from(["status", "metrics", "timings", "cost", "problem", "solver", "history", "reason",
                            "budget", "environment", "suite", "info", "seed", "threads"]),
       value=st.recursive(st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=5),
                          lambda c: st.lists(c, max_size=3) | st.dictionaries(st.text(max_size=5), c, max_size=3),
                          max_leaves=6))
def test_any_field_of_a_record_replaced_by_junk_never_crashes_a_loader(tmp_path_factory, key, value):
    base = tmp_path_factory.getbasetemp() / "junk"
    if not (base / "runs").is_dir():
        run_case(Case(problem={"name": "sine"}, solver={"name": "fd5", "n": 8}), base)
    good = read_record(next((base / "runs").glob("sine__*.json")))
    path = base / "runs" / "zz_junk.json"
    path.write_text(json.dumps({**good, key: value}))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RecordWarning)
        recs = list(iter_records(base))
        frame = to_frame(recs)
        from lapbench.report import results_table

        results_table(frame)
    assert 1 <= len(recs) <= 2
