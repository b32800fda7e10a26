"""Execute every notebook in notebooks/ with small settings, so the notebooks never rot.

Each notebook reads ``MARKETSIM_QUICK=1`` in its first cell and shrinks its replications and
horizons; a cell that raises fails the test. The kernel is this test's own interpreter
(``sys.executable``, through a kernelspec written to a temporary folder), never whatever
``python3`` kernel happens to be installed elsewhere on the machine.
"""

from __future__ import annotations

import sys
from pathlib import Path

import nbformat
import pytest
from ipykernel.kernelspec import write_kernel_spec
from jupyter_client.kernelspec import KernelSpecManager
from jupyter_client.manager import KernelManager
from nbclient import NotebookClient

NOTEBOOK_DIR = Path(__file__).resolve().parent.parent / "notebooks"
NOTEBOOKS = sorted(NOTEBOOK_DIR.glob("*.ipynb"))
EXPECTED = {
    "01_stress_test_an_experiment.ipynb",
    "02_sweep_balance.ipynb",
    "03_size_an_experiment.ipynb",
    "04_calibrate_from_logs.ipynb",
    "05_switchbacks_and_daily_demand.ipynb",
}
KERNEL_NAME = "marketsim-notebook-test"
CELL_TIMEOUT = 300  # seconds per cell


@pytest.fixture(scope="module")
def kernel_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A folder holding one kernelspec that starts ``sys.executable -m ipykernel_launcher``."""
    root = tmp_path_factory.mktemp("kernels")
    write_kernel_spec(root / KERNEL_NAME)
    return root


def test_the_notebooks_are_there() -> None:
    missing = EXPECTED - {path.name for path in NOTEBOOKS}
    assert not missing, f"notebooks missing from {NOTEBOOK_DIR}: {sorted(missing)}"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[path.stem for path in NOTEBOOKS])
def test_notebook_is_committed_without_outputs(path: Path) -> None:
    notebook = nbformat.read(path, as_version=4)
    nbformat.validate(notebook)
    for cell in notebook.cells:
        if cell.cell_type == "code":
            assert not cell.outputs, f"{path.name}: clear the outputs before committing"
            assert cell.execution_count is None, f"{path.name}: clear execution counts"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[path.stem for path in NOTEBOOKS])
def test_notebook_runs(path: Path, kernel_dir: Path, tmp_path: Path,
                       monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("MARKETSIM_QUICK", "1")  # small settings (read by the first cell)
    monkeypatch.setenv("MPLBACKEND", "Agg")     # draw off screen
    notebook = nbformat.read(path, as_version=4)
    specs = KernelSpecManager(kernel_dirs=[str(kernel_dir)])
    kernel = KernelManager(kernel_name=KERNEL_NAME, kernel_spec_manager=specs)
    assert kernel.kernel_spec.argv[0] == sys.executable
    client = NotebookClient(notebook, km=kernel, timeout=CELL_TIMEOUT,
                            resources={"metadata": {"path": str(tmp_path)}})
    client.execute()  # raises CellExecutionError, naming the cell, if any cell fails
