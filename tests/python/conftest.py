"""Shared fixtures: seeded random generators and the path of the built `spinfer` command."""
import os
import shutil
import sysconfig
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]


def find_cli():
    """The `spinfer` command: $SPINFER_CLI, else the build tree, else the Python scripts folder."""
    candidates = [os.environ.get("SPINFER_CLI"), ROOT / "build/dev/spinfer", ROOT / "build/pip/spinfer",
                  Path(sysconfig.get_path("scripts")) / "spinfer", shutil.which("spinfer")]
    for c in candidates:
        if c and Path(c).is_file() and os.access(c, os.X_OK):
            return str(Path(c).resolve())
    return None


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)


@pytest.fixture(scope="session")
def cli():
    path = find_cli()
    if path is None:
        pytest.skip("the spinfer command is not built (set SPINFER_CLI or build into build/dev)")
    return path
