"""The tutorials in notebooks/ run from top to bottom, as a reader would run them.

Every ``notebooks/*.ipynb`` is executed with nbclient in a fresh ``python3`` kernel (the
kernelspec that ipykernel installs into the virtual environment), in a temporary working
folder so that the files a tutorial writes land there and not in the repository. A cell that
raises fails the test with that cell's source and traceback. The kernel imports the same smle
as this process (its folder is put first on ``PYTHONPATH``), so a worktree is tested as it is.
"""

import os
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient
from nbclient.exceptions import CellExecutionError

import smle
from smle.results import CAUTION

NOTEBOOKS = Path(__file__).resolve().parents[1] / "notebooks"
TUTORIALS = sorted(NOTEBOOKS.glob("*.ipynb"))
CELL_TIMEOUT = 600  # seconds per cell: generous, so a slow shared machine does not fail a correct cell


def _kernel_environment() -> dict:
    env = dict(os.environ)
    package_root = str(Path(smle.__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join([package_root] + [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p])
    return env


def execute(notebook: nbformat.NotebookNode, folder: Path, name: str) -> nbformat.NotebookNode:
    """Run every cell of ``notebook`` with ``folder`` as working directory; fail naming the cell."""
    client = NotebookClient(notebook, timeout=CELL_TIMEOUT, kernel_name="python3",
                            resources={"metadata": {"path": str(folder)}})
    try:
        client.execute(env=_kernel_environment())
    except CellExecutionError as error:
        failing = next((i for i, cell in enumerate(notebook.cells) if cell.cell_type == "code"
                        and any(o.get("output_type") == "error" for o in cell.get("outputs", []))), None)
        where = f"cell {failing}:\n{notebook.cells[failing].source}" if failing is not None else "a cell"
        pytest.fail(f"{name}: {where}\n\n{error}", pytrace=False)
    return notebook


def test_there_are_tutorials():
    assert [p.name for p in TUTORIALS][:1] == ["01_prices_to_fit.ipynb"], TUTORIALS
    assert len(TUTORIALS) >= 2


@pytest.mark.parametrize("path", TUTORIALS, ids=[p.stem for p in TUTORIALS])
def test_tutorial_is_stored_clean_and_states_the_caution(path):
    notebook = nbformat.read(path, as_version=4)
    nbformat.validate(notebook)
    for i, cell in enumerate(notebook.cells):
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None, f"{path.name}: cell {i} has outputs; clear them"
    markdown = " ".join(" ".join(c.source.split()) for c in notebook.cells if c.cell_type == "markdown")
    assert markdown.count(CAUTION) == 1, f"{path.name} must state smle.results.CAUTION once in its text"


@pytest.mark.parametrize("path", TUTORIALS, ids=[p.stem for p in TUTORIALS])
def test_tutorial_runs(path, tmp_path):
    before = sorted(NOTEBOOKS.iterdir())
    notebook = execute(nbformat.read(path, as_version=4), tmp_path, path.name)
    assert all(c.execution_count is not None for c in notebook.cells if c.cell_type == "code")
    assert sorted(NOTEBOOKS.iterdir()) == before, "the tutorial wrote into notebooks/, not its working folder"
    assert any(tmp_path.iterdir()), "the tutorial wrote nothing to its working folder"


def test_a_failing_cell_fails_with_its_own_error(tmp_path):
    # The harness itself: a notebook whose second cell raises must fail, naming that cell and the error.
    notebook = nbformat.v4.new_notebook(cells=[
        nbformat.v4.new_code_cell("import smle\nvalue = 1"),
        nbformat.v4.new_code_cell("smle.fit('sv', [0.0] * 5)"),
        nbformat.v4.new_code_cell("value = 2"),
    ])
    with pytest.raises(pytest.fail.Exception) as failure:
        execute(notebook, tmp_path, "broken.ipynb")
    text = str(failure.value)
    assert "broken.ipynb: cell 1:" in text and "smle.fit('sv', [0.0] * 5)" in text
    assert "SmleInputError" in text
    assert notebook.cells[2].execution_count is None  # execution stopped at the failing cell
