"""Writes ``shear_interpretation.ipynb``, the template workbook (run after changing a cell here).

The template stays thin: a parameters cell, then calls into ``kernels_helpers``. Keeping its
source in this script means the notebook's JSON never needs hand editing.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

CELLS = [
    new_markdown_cell(
        "# Direct shear interpretation\n\n"
        "Readings are reduced, peak and critical-state strengths picked and Mohr-Coulomb envelopes fitted by\n"
        "`kernels_helpers`; every decision lives in the project's interpretation file. Run all cells."
    ),
    new_code_cell(
        "# Parameters: the project folder (relative to this notebook) and the interpretation file\n"
        "# (None: the project's own interpretation.json; all suggestions when it does not exist yet).\n"
        'project_dir = "../example_project"\n'
        "interpretation_file = None",
        metadata={"tags": ["parameters"]},
    ),
    new_code_cell(
        "from pathlib import Path\n\n"
        "from kernels_helpers import interpret, load_project, views\n"
        "from kernels_helpers.interpretation import INTERPRETATION_FILE\n\n"
        "views.setup_notebook()"
    ),
    new_code_cell(
        "project = load_project(project_dir)\n"
        "interpretation_path = Path(interpretation_file or project.root / INTERPRETATION_FILE)\n"
        "results = interpret(project, interpretation_path)\n"
        "views.show_header(results, project)"
    ),
    new_markdown_cell("## Stages\nShear stress, vertical displacement and void ratio against horizontal displacement."),
    new_code_cell("views.show_stages(results)"),
    new_code_cell("views.show_tables(results)"),
    new_markdown_cell("## Envelopes"),
    new_code_cell("views.show_envelopes(results)"),
    new_markdown_cell("## Provenance"),
    new_code_cell("views.show_provenance(results, str(interpretation_path))"),
]


def build() -> nbformat.NotebookNode:
    nb = new_notebook(cells=CELLS)
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb.metadata["language_info"] = {"name": "python"}
    for i, cell in enumerate(nb.cells):
        cell["id"] = f"sb-{i:02d}"
    return nb


if __name__ == "__main__":
    out = Path(__file__).with_name("shear_interpretation.ipynb")
    nbformat.write(build(), out)
    print(out)
