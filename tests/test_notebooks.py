"""Executed notebooks show every figure they draw (nbval runs the cells but does not notice a missing figure).

Each notebook under ``notebooks/`` is executed in a fresh kernel (nbclient); every
code cell that draws a matplotlib figure (a ``plots.plot_*`` call or a plain
``plt.subplots``/``plt.figure``) must carry exactly one PNG image output, and no
other cell may carry one.  A synthetic notebook checks the case the inline
backend used to break: a ptcheck figure first, then a plain ``plt.subplots()``.
Expected counts come from the cells' source, not from ptcheck (common practice,
no source).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

DRAWS = re.compile(r"(?m)^[^#\n]*\b(plots\.plot_\w+|plt\.subplots|plt\.figure)\(")


def _draws(path: Path) -> bool:
    nb = nbformat.read(path, as_version=4)
    return any(c.cell_type == "code" and DRAWS.search(c.source) for c in nb.cells)


# notebooks without a drawing cell (e.g. the dashboard: widgets only) are left to nbval
NOTEBOOKS = [p for p in sorted((Path(__file__).resolve().parents[1] / "notebooks").glob("*.ipynb")) if _draws(p)]

pytestmark = pytest.mark.timeout(240)


def _execute(nb, folder: Path):
    client = nbclient.NotebookClient(nb, timeout=180, kernel_name="python3", resources={"metadata": {"path": str(folder)}})
    client.execute()
    return nb


def _images(cell) -> int:
    return sum("image/png" in out.get("data", {}) for out in cell.get("outputs", []))


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_every_drawing_cell_shows_its_figure(path, tmp_path):
    nb = _execute(nbformat.read(path, as_version=4), tmp_path)
    code = [(i, c) for i, c in enumerate(nb.cells) if c.cell_type == "code"]
    drawing = [i for i, c in code if DRAWS.search(c.source)]
    shown = {i: _images(c) for i, c in code}
    assert {i: shown[i] for i in drawing} == {i: 1 for i in drawing}, "a drawing cell shows no figure (or several)"
    assert {i: n for i, n in shown.items() if i not in drawing and n} == {}, "a cell that draws nothing shows an image"


def test_plain_pyplot_figure_after_a_ptcheck_figure_is_shown(tmp_path):
    cells = [
        "import numpy as np\nimport matplotlib.pyplot as plt\nfrom ptcheck import plots\n"
        "from ptcheck.compare import compare\nfrom ptcheck.models import two_level",
        "r = compare(two_level(), [0], [2], np.linspace(0, 1, 11))\nart = plots.plot_levels(r)",
        "fig, ax = plt.subplots()\nax.plot([0, 1], [0, 1]);",
        "art2 = plots.plot_errors(r)",
    ]
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(s) for s in cells])
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb = _execute(nb, tmp_path)
    assert [_images(c) for c in nb.cells] == [0, 1, 1, 1]
