"""The shipped notebook runs top to bottom (nbclient, the python3 kernel) and shows figures."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK = ROOT / "notebooks" / "assess_and_sweep.ipynb"


def test_notebook_executes(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    pytest.importorskip("ipykernel")

    nb = nbformat.read(NOTEBOOK, as_version=4)
    nbformat.validate(nb)
    # the kernel inherits the environment: a temporary cache and output folder
    monkeypatch.setenv("NOISELAB_NOTEBOOK_OUT", str(tmp_path))
    monkeypatch.setenv("NOISELAB_NOTEBOOK_CACHE", str(tmp_path / "cache.sqlite"))
    monkeypatch.setenv("MPLBACKEND", "Agg")
    client = nbclient.NotebookClient(
        nb, timeout=300, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}
    )
    client.execute()

    outputs = [o for cell in nb.cells if cell.cell_type == "code" for o in cell.get("outputs", [])]
    assert not [o for o in outputs if o.get("output_type") == "error"]
    text = "".join(o.get("text", "") for o in outputs if o.get("output_type") == "stream")
    assert "Verdict:" in text and "chemical accuracy" in text
    assert "two-qubit gate error (%)" in text  # the sweep table, printed as plain text
    assert "\x1b[" not in text  # no terminal escape codes inside a notebook
    images = [o for o in outputs if "image/png" in o.get("data", {})]
    svgs = [o for o in outputs if "image/svg+xml" in o.get("data", {})]
    assert images and svgs  # the figures are shown inline
    assert "two-qubit gate error (%)" in svgs[0]["data"]["image/svg+xml"]
    for name in ("assess-bias.png", "sweep-two_qubit_error.svg", "sweep-two_qubit_error.png"):
        assert (tmp_path / name).is_file()
