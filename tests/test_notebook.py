"""The worked-example notebook runs top to bottom (nbclient) with this interpreter."""

from __future__ import annotations

import json
import os
import sys

import pytest

NOTEBOOK = os.path.join(os.path.dirname(__file__), os.pardir, "notebooks",
                        "worked_example.ipynb")


@pytest.fixture
def this_python_kernel(tmp_path, monkeypatch):
    """A kernel spec that starts ipykernel with the interpreter running the tests."""
    spec = tmp_path / "kernels" / "starlines-test"
    spec.mkdir(parents=True)
    (spec / "kernel.json").write_text(json.dumps({
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "starlines test", "language": "python",
    }))
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path))
    return "starlines-test"


@pytest.mark.slow
def test_worked_example_runs(this_python_kernel, tmp_path):
    nbformat = pytest.importorskip("nbformat")
    from nbclient import NotebookClient

    nb = nbformat.read(NOTEBOOK, as_version=4)
    client = NotebookClient(nb, kernel_name=this_python_kernel, timeout=300,
                            resources={"metadata": {"path": str(tmp_path)}})
    client.execute()
    outputs = [o for cell in nb.cells if cell.cell_type == "code" for o in cell.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    text = "".join(o.get("text", "") for o in outputs if o.output_type == "stream")
    # the Of-like star is typed as an O star and its figure was drawn
    assert "H7-03" in text and "of-emission" in text
    assert any("image/png" in o.get("data", {}) for o in outputs)
