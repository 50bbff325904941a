"""The example notebook shipped with the package runs from top to bottom in a fresh
kernel (nbclient), and what it shows is the soliton it relaxed: charge 1 kept, as the
Hopf map's charge requires (docs/references.md [R5, R6]).  Mechanics otherwise
(common practice)."""

from importlib import resources

import nbformat
from nbclient import NotebookClient


def test_quickstart_notebook_runs(tmp_path):
    path = resources.files("solitons").joinpath("examples/quickstart.ipynb")
    notebook = nbformat.reads(path.read_text(), as_version=4)
    NotebookClient(notebook, timeout=600, kernel_name="python3",
                   resources={"metadata": {"path": str(tmp_path)}}).execute()
    outputs = [o for cell in notebook.cells if cell.cell_type == "code" for o in cell.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    text = "\n".join(o.get("text", "") + str(o.get("data", {}).get("text/plain", "")) for o in outputs)
    assert "Result(E = " in text and "Q = 1.0" in text  # the charge-1 soliton, charge kept
    assert "xarray.Dataset" in text and "x: 45" in text and "energy_density" in text  # the labelled Dataset
    assert any("image/png" in o.get("data", {}) for o in outputs)  # figures rendered
    assert list(tmp_path.iterdir()) == []  # nothing written
