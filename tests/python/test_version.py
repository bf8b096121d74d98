"""The command and the Python package report the same version and build information."""
import re
import subprocess
from pathlib import Path

import spinfer


def test_cli_and_package_versions_agree(cli):
    out = subprocess.run([cli, "--version"], capture_output=True, text=True, timeout=30).stdout
    assert out.splitlines()[0] == f"spinfer {spinfer.__version__}"
    for key in ("compiler:", "BLAS:", "OpenMP:", "Eigen:"):
        assert key in out and key in spinfer.build_info()


def test_version_has_one_source():
    root = Path(__file__).resolve().parents[2]
    text = (root / "bindings/python/spinfer/_version.py").read_text()
    assert re.search(r'__version__ = "(\d+\.\d+\.\d+)"', text).group(1) == spinfer.__version__
    assert spinfer._core.__version__ == spinfer.__version__


def test_usage_errors_exit_2(cli):
    assert subprocess.run([cli], capture_output=True, timeout=30).returncode == 2
    assert subprocess.run([cli, "frobnicate"], capture_output=True, timeout=30).returncode == 2
    r = subprocess.run([cli, "fit", "--help"], capture_output=True, text=True, timeout=30)
    assert r.returncode == 0 and "Example:" in r.stdout
