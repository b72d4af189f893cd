"""Writes ``shear_interpretation.ipynb``, the template workbook (run after changing a cell here).

The template stays thin: a parameters cell, then calls into ``kernels_helpers``. Keeping its
source in this script means the notebook's JSON never needs hand editing.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

LIVE = {"tags": ["interactive"]}  # the live screen: executed headless too, dropped from the exported record
INTERACTIVE_CELLS = [
    new_code_cell(
        "# The live screen: type your name, choose a stage, drag its picks; every decision is saved at once.\n"
        "from kernels_helpers.views.widgets import live_workbook\n\n"
        "live = live_workbook(project_dir, interpretation_file, units=display_units)\n"
        "live.screen",
        metadata=LIVE,
    ),
]
READY = new_code_cell("live.ready()  # the live screen says it is ready and comes into view", metadata=LIVE)

CELLS = [
    new_markdown_cell(
        "## Live interpretation\n"
        "Type your name first: every decision records who made it and when, and is saved at once to the\n"
        "interpretation file. Drag the peak (amber diamond) or the ends of the critical-state window (teal\n"
        "squares) on a shear stress plot, or type the displacements; exclude a stage in the table (a reason is\n"
        "required). The envelopes and parameters below follow every change. Reopening restores every decision.",
        metadata=LIVE,
    ),
    new_code_cell(
        "from kernels_helpers.views.widgets import live_workbook\n\n"
        "live = live_workbook(project_dir, interpretation_file, units=display_units)\n"
        "live.top",
        metadata=LIVE,
    ),
    new_markdown_cell("### Stages\nShear stress, vertical displacement, stress ratio and rate of dilation; "
                      "the four plots share the horizontal axis.", metadata=LIVE),
    new_code_cell("live.stages", metadata=LIVE),
    new_markdown_cell("### Stage table", metadata=LIVE),
    new_code_cell("live.table", metadata=LIVE),
    new_markdown_cell("### Envelopes", metadata=LIVE),
    new_code_cell("live.envelopes", metadata=LIVE),
    new_markdown_cell("### Summary", metadata=LIVE),
    new_code_cell("live.summary", metadata=LIVE),
    new_markdown_cell("### Sign-off\nThe state and every step so far; record the next one here (your name and the time "
                      "are kept), or sign it with your key from the command line.", metadata=LIVE),
    new_code_cell("live.signoff.widget", metadata=LIVE),
]

CELLS = [
    new_markdown_cell(
        "# Direct shear interpretation\n"
        "Run all cells (Run > Run All Cells). The live screen below shows one stage at a time beside its envelope:\n"
        "type your name, choose a stage, drag its peak or critical-state window and watch the envelope refit.\n"
        "Every decision is saved at once to the project's interpretation file; reopening restores them all.",
        metadata=LIVE,  # words for the notebook: the record opens with its summary instead
    ),
    new_code_cell(
        "# Parameters: the project folder (relative to this notebook) and the interpretation file\n"
        "# (None: the project's own interpretation.json; all suggestions when it does not exist yet).\n"
        'project_dir = "../example_project"\n'
        "interpretation_file = None\n"
        '# display units: "SI" (kPa, mm, N) or "US" (psf, in, lbf); None: the project\'s [display] units.\n'
        "# Only what is shown changes: the interpretation file and the results stay SI.\n"
        "display_units = None\n"
        "# normal stresses (kPa) at which to give the power-law secant and tangent angles; None: the ends and the\n"
        "# middle of the design range\n"
        "angles_at_kpa = None",
        metadata={"tags": ["parameters"]},
    ),
    new_code_cell(
        "from pathlib import Path\n\n"
        "from kernels_helpers import interpret, load_project, views\n"
        "from kernels_helpers.interpretation import INTERPRETATION_FILE\n\n"
        "views.setup_notebook()"
    ),
    *INTERACTIVE_CELLS,
    new_markdown_cell("# The record\nWhat the exported record shows. With the live screen open it is computed on "
                      "request (the button on the live screen, which also says which revision of the interpretation "
                      "file it shows and when it is out of date); `shearbook record` exports it.",
                      metadata=LIVE),
    new_code_cell(
        "project = load_project(project_dir)\n"
        "interpretation_path = Path(interpretation_file or project.root / INTERPRETATION_FILE)\n"
        "views.use_units(display_units or project.display_units)\n"
        "results = interpret(project, interpretation_path)\n"
        "views.show_summary(results, interpretation_path)"
    ),
    new_markdown_cell("## Project, inputs and specimens"),
    new_code_cell("views.show_header(results, project)"),
    new_markdown_cell("## Stages\nShear stress, vertical displacement and void ratio against horizontal displacement."),
    new_code_cell("views.show_stages(results)"),
    new_code_cell("views.show_tables(results)"),
    new_markdown_cell(
        "## Consolidation and rate of shearing\nEach consolidation stage on log time (Casagrande: d_0, d_100 "
        "from the tangent and the secondary branch, t_50) and root time (Taylor: the 1.15 line, t_90), then the "
        "required time to failure (by default the largest of 50 t_50, 11.6 t_90 and 12.7 t_100; the interpretation "
        "file's settings.rate may name one rule) against the test."
    ),
    new_code_cell("views.show_consolidation(results)"),
    new_markdown_cell(
        "## Envelopes\n"
        "Per pick type: the stages used (excluded ones grey), the reported straight line, its 95 % confidence band\n"
        "of the mean line (shaded) and 95 % prediction band for one new specimen (dashed), the power law\n"
        "tau = a sigma'^b fitted on tau (dot-dash), and, for the envelope the design values come from, the lower\n"
        "bound and the characteristic line. Click a legend entry to hide or show its curves."
    ),
    new_code_cell("views.show_envelopes(results)"),
    new_markdown_cell(
        "## Envelope statistics and curvature\n"
        "The numbers behind the bands and the power law drawn above, and the secant angle of every stage."
    ),
    new_code_cell("views.show_envelope_statistics(results, angles_at_kpa=angles_at_kpa)"),
    new_markdown_cell("## Test sets within a stratum\n"
                      "Each set's envelope beside the pooled one, and whether they belong together."),
    new_code_cell("views.show_set_comparison(results)"),
    new_markdown_cell("## Critical-state line\n"
                      "Void ratio at critical state against ln sigma', dense and loose together."),
    new_code_cell("views.show_critical_state_line(results)"),
    new_markdown_cell("## Stress-dilatancy (interpretation aids)"),
    new_code_cell("views.show_dilatancy(results)"),
    new_markdown_cell(
        "## Characteristic and design values\n"
        "The choices (limit state, peak or critical state, partial factors, c'_k = 0) live in the interpretation\n"
        "file's `design` entry; the method and the cautions are written out below."
    ),
    new_code_cell("views.show_design(results)"),
    new_markdown_cell("## Changes since the last record\n"
                      "What this interpretation changes against the one the newest record "
                      "in the project's records/ folder was made with."),
    new_code_cell("views.show_changes_since_record(project, interpretation_path)"),
    new_markdown_cell("## Sign-off and provenance"),
    new_code_cell("views.show_provenance(results, str(interpretation_path))"),
    READY,
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
