"""The tutorial notebook docs/tutorial.ipynb runs from top to bottom without an error
(executed by nbclient on an ipykernel, as Jupyter would), and shows what it promises: a
Frame as a PNG picture with a one-line text form, and a plotted probe table."""

from __future__ import annotations

import base64
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat", reason="the test extra installs nbformat")
nbclient = pytest.importorskip("nbclient", reason="the test extra installs nbclient")
pytest.importorskip("ipykernel", reason="the test extra installs ipykernel")

DOCS = Path(__file__).resolve().parents[1] / "docs"

# PNG signature (PNG specification, ISO/IEC 15948, section 5.2)
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def test_tutorial_notebook_runs(tmp_path):
    nb = nbformat.read(DOCS / "tutorial.ipynb", as_version=4)
    client = nbclient.NotebookClient(
        nb, timeout=300, kernel_name="python3", resources={"metadata": {"path": str(DOCS)}}
    )
    client.execute()  # raises CellExecutionError on the first failing cell
    outputs = [o for cell in nb.cells if cell.cell_type == "code" for o in cell.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    pictures = [
        base64.b64decode(o.data["image/png"])
        for o in outputs
        if o.output_type in ("execute_result", "display_data") and "image/png" in o.data
    ]
    # the frame, the comparison sheet and the probe plot
    assert len(pictures) >= 3 and all(p.startswith(PNG_SIGNATURE) for p in pictures)
    texts = [o.get("text", "") for o in outputs if o.output_type == "stream"]
    assert any(t.startswith("<Frame 160x90 of sphere-flyby.toml") for t in texts)
