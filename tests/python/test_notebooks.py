"""The example notebooks (examples/*.ipynb) run from top to bottom without an error.

Each notebook is executed with nbclient in the Jupyter kernel "python3" (jupyter_client starts a
spec whose command is plain "python" with this very interpreter), from examples/ so that the
notebooks' relative paths to data/ work, and with this process's environment (PYTHONPATH made
absolute), so the kernel imports the same spinfer as the tests. A first cell, added only to the
in-memory copy, reports the kernel's interpreter and spinfer to prove it.
"""
import os
import sys
from pathlib import Path

import pytest

import spinfer

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "examples"
NOTEBOOKS = ["neuron_walkthrough.ipynb", "gene_scoring.ipynb"]
CELL_TIMEOUT_S = 300

PROBE = "import sys, spinfer\nprint(sys.executable)\nprint(spinfer.__file__)"


def kernel_environment() -> dict:
    env = dict(os.environ)
    paths = [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p]
    if paths:  # the kernel runs in examples/, where relative entries would point elsewhere
        env["PYTHONPATH"] = os.pathsep.join(str(Path(p).resolve()) for p in paths)
    env.setdefault("MPLBACKEND", "Agg")
    return env


@pytest.mark.parametrize("name", NOTEBOOKS)
def test_stored_notebook_has_no_outputs(name):
    nb = nbformat.read(EXAMPLES / name, as_version=4)
    nbformat.validate(nb)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert code, f"{name}: no code cells"
    assert all(not c.outputs and c.execution_count is None for c in code), \
        f"{name}: stored with outputs; clear them before committing"
    assert nb.metadata["kernelspec"]["name"] == "python3"


@pytest.mark.filterwarnings("ignore::DeprecationWarning")
@pytest.mark.parametrize("name", NOTEBOOKS)
def test_notebook_runs_without_errors(name):
    from jupyter_client.kernelspec import KernelSpecManager, NoSuchKernel

    try:
        KernelSpecManager().get_kernel_spec("python3")
    except NoSuchKernel:
        pytest.fail("no Jupyter kernel named python3: run `python3 -m ipykernel install --user` "
                    "(.ci/setup does)")
    nb = nbformat.read(EXAMPLES / name, as_version=4)
    nb.cells.insert(0, nbformat.v4.new_code_cell(PROBE))
    client = nbclient.NotebookClient(nb, timeout=CELL_TIMEOUT_S, kernel_name="python3",
                                     allow_errors=False,
                                     resources={"metadata": {"path": str(EXAMPLES)}})
    client.execute(env=kernel_environment())  # raises CellExecutionError on the first failing cell

    lines = "".join(o.get("text", "") for o in nb.cells[0].outputs).split()
    assert os.path.realpath(lines[0]) == os.path.realpath(sys.executable)
    assert os.path.realpath(lines[1]) == os.path.realpath(spinfer.__file__)
    for cell in nb.cells:
        for out in cell.get("outputs", []):
            assert out.output_type != "error", f"{name}: {out.get('ename')}: {out.get('evalue')}"
