"""The Python API: README's worked example runs as written, bad input is one ConfigError line, and
an installed lapbench puts one import name (`lapbench`) into an environment, no generic
top-level `bench`, `solvers` or `conf`."""
import os
import re
import subprocess
import sys
import venv

import pytest

from tests.conftest import ROOT


def readme_example() -> str:
    text = (ROOT / "README.md").read_text()
    section = text.split("### From Python (notebooks and scripts)", 1)[1].split("\n### ", 1)[0]
    blocks = re.findall(r"```python\n(.*?)```", section, flags=re.S)
    assert len(blocks) == 1, "README's API section must hold exactly one python example"
    return blocks[0]


def test_readme_api_example_runs(tmp_path):
    """The example as printed in README, in a fresh interpreter whose working folder is a temp dir
    (its `results` folder lands there)."""
    code = readme_example()
    p = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, timeout=600,
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert p.returncode == 0, p.stderr[-3000:]
    out = p.stdout
    # three fst9 rows and the PINN row, all ok
    assert out.count("fst9") >= 3 and "pinn_hard" in out and "failed" not in out
    assert (tmp_path / "results" / "reports" / "notebook" / "summary.md").is_file()
    assert (tmp_path / "results" / "claims").is_dir()
    # the claim line: best method, its resolution, its time, the ratio (printed, sanity-bounded only:
    # a 1e-3 error on sin(pi x) sin(pi y) needs a Chebyshev degree below 10 or fst9 below n = 10,
    # milliseconds on any machine; the ratio to 30 s is then above 100)
    last = out.strip().splitlines()[-1].split()
    assert last[0] in ("fst9", "cheb") and int(last[1]) < 10 and float(last[-1]) > 100, out


def test_api_bad_input_is_one_config_error(tmp_path):
    import lapbench

    with pytest.raises(lapbench.ConfigError, match=r"^`claim.error` must be a positive number, got -1"):
        lapbench.check_claim("sine", error=-1, time=3.0, results_dir=tmp_path)
    with pytest.raises(lapbench.ConfigError, match="problem"):
        lapbench.run_case("no_such_problem", "fst5", results_dir=tmp_path)
    assert not (tmp_path / "runs").exists() or not any((tmp_path / "runs").iterdir())


def test_installed_distribution_has_one_import_name(tmp_path):
    """`pip install .` into a fresh venv (no dependencies: only the names matter here): `lapbench`,
    `lapbench.solvers` and `lapbench.conf` are importable, `bench`, `solvers` and `conf` are not,
    and the console script is there."""
    env_dir = tmp_path / "venv"
    venv.create(env_dir, with_pip=False)
    py = env_dir / "bin" / "python"
    # the wheel is built by this environment's setuptools (the fresh venv has none), then installed
    # into the fresh venv as `pip install .` would install it
    wheels = tmp_path / "wheels"
    build = subprocess.run([sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "--no-build-isolation",
                            "--no-index", "-w", str(wheels), str(ROOT)], capture_output=True, text=True, timeout=300)
    assert build.returncode == 0, build.stderr[-2000:]
    (wheel,) = wheels.glob("lapbench-*.whl")
    pip = subprocess.run([sys.executable, "-m", "pip", "--python", str(py), "install", "-q", "--no-deps",
                          "--no-index", str(wheel)], capture_output=True, text=True, timeout=300)
    assert pip.returncode == 0, pip.stderr[-2000:]
    code = ("import importlib.util as u, json\n"
            "names = ['lapbench', 'lapbench.solvers', 'lapbench.conf', 'bench', 'solvers', 'conf']\n"
            "print(json.dumps({n: u.find_spec(n) is not None for n in names}))\n")
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    p = subprocess.run([str(py), "-c", code], cwd=tmp_path, capture_output=True, text=True, env=env, timeout=60)
    assert p.returncode == 0, p.stderr
    import json

    assert json.loads(p.stdout) == {"lapbench": True, "lapbench.solvers": True, "lapbench.conf": True,
                                    "bench": False, "solvers": False, "conf": False}
    site = next((env_dir / "lib").glob("python3*/site-packages"))
    top = sorted(p.name for p in site.iterdir() if not p.name.endswith((".dist-info", ".pth")) and
                 p.name != "__pycache__" and not p.name.startswith("_"))
    assert top == ["lapbench"], top
    assert (env_dir / "bin" / "lapbench").is_file()
    assert (site / "lapbench" / "conf" / "solver" / "fd5.yaml").is_file()
