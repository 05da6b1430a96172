import os
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
LAPBENCH = str(Path(sys.executable).with_name("lapbench"))

# One thread per test process: the suite runs on 2 cores and must not over-commit the cores.
os.environ.setdefault("OMP_NUM_THREADS", "1")


@pytest.fixture
def lapbench_cmd():
    return [LAPBENCH]
