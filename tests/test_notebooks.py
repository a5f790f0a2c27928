"""The example notebooks run top to bottom (nbclient, python3 kernel) and are committed without outputs.

Each notebook checks its own physics in assert cells (with the sources named in its text); this
file only requires that every cell runs without error and that no outputs are stored.
"""

import glob
import os

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
NOTEBOOKS = sorted(glob.glob(os.path.join(ROOT, "notebooks", "*.ipynb")))

nbformat = pytest.importorskip("nbformat", reason="nbformat is needed to read the notebooks (pip install nbformat)")


def _kernel_missing() -> str | None:
    for mod in ("nbclient", "ipykernel", "matplotlib"):
        try:
            __import__(mod)
        except ImportError:
            return f"{mod} is not installed (pip install 'instantonkit[test]')"
    try:
        from jupyter_client.kernelspec import KernelSpecManager

        KernelSpecManager().get_kernel_spec("python3")
    except Exception as err:  # no python3 kernel registered
        return f"no python3 Jupyter kernel: {err}"
    return None


def test_there_are_five_example_notebooks():
    names = [os.path.basename(p) for p in NOTEBOOKS]
    assert names == [
        "01_handwritten_ansatz.ipynb",
        "02_charge3_adhm.ipynb",
        "03_lattice_start.ipynb",
        "04_zero_modes_and_finder.ipynb",
        "05_calorons.ipynb",
    ]


@pytest.mark.parametrize("path", NOTEBOOKS, ids=os.path.basename)
def test_notebook_is_committed_without_outputs(path):
    nb = nbformat.read(path, as_version=4)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert code and all(not c.outputs and c.execution_count is None for c in code)


# CI executes every notebook when it builds the documentation site (mkdocs-jupyter, execute: true,
# allow_errors: false, so an error fails the strict build); here they run with INSTANTONKIT_LONG=1.
@pytest.mark.long
@pytest.mark.parametrize("path", NOTEBOOKS, ids=os.path.basename)
def test_notebook_runs_top_to_bottom(path, monkeypatch, tmp_path):
    reason = _kernel_missing()
    if reason:
        pytest.skip(reason)
    from nbclient import NotebookClient

    monkeypatch.setenv("MPLBACKEND", "Agg")
    monkeypatch.delenv("INSTANTONKIT_GALLERY", raising=False)  # never write the gallery from the tests
    nb = nbformat.read(path, as_version=4)
    NotebookClient(nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}).execute()
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.get("output_type") == "error"]
    assert not errors
    assert list(tmp_path.iterdir()) == []  # the notebooks clean up after themselves
