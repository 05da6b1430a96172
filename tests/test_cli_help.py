"""The command line talks to a new user: --help per command, --version, hints for typical typos."""
import pytest

from tests.test_cli import records, run

COMMANDS = ("run", "list", "report", "check", "baseline", "conform", "tones")


@pytest.mark.parametrize("cmd", COMMANDS)
def test_every_command_has_its_own_help(cmd, tmp_path):
    p = run([cmd, "--help"], tmp_path, check=0)
    assert f"lapbench {cmd} " in p.stdout, p.stdout   # its own usage, not the general one
    assert "commands:" not in p.stdout


def test_version(tmp_path):
    from importlib import metadata

    p = run(["--version"], tmp_path, check=0)
    assert p.stdout.strip() == f"lapbench {metadata.version('lapbench')}"


@pytest.mark.parametrize("args, message", [
    (["rnu"], "unknown command 'rnu'; did you mean 'run'?"),
    (["run", "problem=sin"], "got 'sin'; did you mean 'sine'?"),
    (["run", "solver.nn=3"], "`solver.nn` is not a known field; did you mean `solver.n`?"),
    (["run", "+seeds=3"], "`seeds` is not a known field; did you mean `seed`?"),
    (["run", "problem=expr", "problem.u=exp(x)*sin(3*y)"],
     "`problem.u`: the value 'exp(x)*sin(3*y)' must be quoted for the command line, "
     "e.g. 'problem.u=\"exp(x)*sin(3*y)\"'"),
])
def test_hints_for_typos_are_one_line_exit_2_and_write_nothing(args, message, tmp_path):
    p = run([*args, f"results_dir={tmp_path}"], tmp_path, check=2)
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], p.stderr
    assert records(tmp_path) == []


def test_internal_keys_are_not_offered(tmp_path):
    p = run(["run", "+seeds=3", f"results_dir={tmp_path}"], tmp_path, check=2)
    known = p.stderr.split("known fields: ", 1)[1]
    assert "seed" in known and "hydra" not in known and "case_index" not in known


def test_single_unsupported_case_says_so_and_keeps_its_record(tmp_path):
    p = run(["run", "problem=expr", "solver=cheb", "problem.domain={kind: disk}", f"results_dir={tmp_path}"],
            tmp_path, check=0)
    assert "does not support problem expr" in p.stderr and "(recorded as unsupported)" in p.stderr
    assert len(records(tmp_path)) == 1


def test_list_fits_100_columns_and_lists_suites(tmp_path):
    p = run(["list"], tmp_path, check=0)
    assert max(len(line) for line in p.stdout.splitlines()) <= 100
    assert "suites (" in p.stdout and "nightly-ci" in p.stdout
    assert "options:" not in p.stdout
    assert "options:" in run(["list", "--verbose"], tmp_path, check=0).stdout
