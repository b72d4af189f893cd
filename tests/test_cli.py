"""The command line: results as JSON, the record's path, clear errors with exit code 2."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from kernels_helpers import interpret
from kernels_helpers.cli import main, workbook_in_project

if TYPE_CHECKING:
    from conftest import ExampleRecord


def test_results_prints_the_same_numbers_as_interpret(example_copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["results", str(example_copy)]) == 0
    assert json.loads(capsys.readouterr().out) == json.loads(interpret(example_copy).to_json())


def test_results_of_a_folder_without_project_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["results", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err == (f"shearbook: error: {tmp_path / 'project.toml'}: no project file here. "
                   "Point Shearbook at a project folder holding project.toml.\n")


@pytest.mark.notebook
@pytest.mark.slow
def test_record_command_writes_the_files_it_prints(example_record: ExampleRecord) -> None:
    """The suite's record is made by the command in a process of its own (conftest.example_record): what it
    printed is the record's path, then the PDF's, on stdout, and only Shearbook's own lines on stderr."""
    out, pdf = example_record.path, example_record.pdf
    assert example_record.stdout == f"{out.resolve()}\n" + (f"{pdf.resolve()}\n" if pdf else "")
    assert out.stat().st_size > 100_000 and (pdf is None or pdf.read_bytes()[:5] == b"%PDF-")
    # what it does, then the flags; no library's log line or warning
    lines = example_record.stderr.splitlines()
    assert lines[0] == f"Running the workbook on {example_record.project.resolve()} and exporting the record ..."
    said = ["Printing it to PDF (a4) with headless Chromium ..."] if pdf else []
    assert [line for line in lines[1:] if not re.fullmatch(r"  flag: .+|\d+ flag\(s\) on included stages:", line)
            ] == said
    for noise in ("[IPKernelApp]", "WARNING", "Warning:", "Traceback", "[I ", "[W "):
        assert noise not in example_record.stdout + example_record.stderr


def test_workbook_copy_points_at_its_own_project(example_copy: Path) -> None:
    nb_path = workbook_in_project(example_copy)
    text = nb_path.read_text(encoding="utf-8")
    assert "project_dir = '.'" in text
    nb_path.write_text(text + " ", encoding="utf-8")
    assert workbook_in_project(example_copy).read_text(encoding="utf-8").endswith(" ")  # never overwritten


def test_the_project_workbook_has_one_parameters_cell_set_to_its_project(example_copy: Path) -> None:
    import nbformat

    from kernels_helpers.record import RecordError, set_parameters

    nb = nbformat.read(workbook_in_project(example_copy), as_version=4)
    tagged = [c for c in nb.cells if set(c.metadata.get("tags", [])) & {"parameters", "injected-parameters"}]
    assert len(tagged) == 1 and "parameters" in tagged[0].metadata["tags"]
    source = tagged[0].source
    assert "project_dir = '.'" in source and "interpretation_file = None" in source
    assert "../example_project" not in source and "display_units = None" in source  # the rest as shipped
    with pytest.raises(RecordError, match="does not set 'no_such_parameter'"):
        set_parameters(nb, {"no_such_parameter": 1})


def test_shearbook_open_gives_its_server_a_kernel_that_imports_shearbook_as_it_starts() -> None:
    import json
    import shutil
    import sys

    from kernels_helpers.cli import _warm_kernel_spec

    folder = _warm_kernel_spec()
    try:
        spec = json.loads((folder / "kernels" / "python3" / "kernel.json").read_text(encoding="utf-8"))
        assert spec["argv"][:3] == [sys.executable, "-m", "ipykernel_launcher"] and "{connection_file}" in spec["argv"]
        warm = next(a for a in spec["argv"] if a.startswith("--IPKernelApp.exec_lines="))
        names = [n.strip() for n in warm.split("=", 1)[1].removeprefix("import ").split(",")]
        assert "kernels_helpers.views.widgets" in names
        for name in names:  # every name it imports exists
            __import__(name)
    finally:
        shutil.rmtree(folder)


def test_a_normal_run_prints_the_result_and_the_flags_and_q_only_errors(example_copy: Path,
                                                                       capsys: pytest.CaptureFixture[str]) -> None:
    results = interpret(example_copy)
    raised = [f"  flag: {s.stage_id}: {f}" for s in results.stages if s.included for f in s.flags]
    assert raised  # the example project raises flags: the test would prove nothing otherwise
    assert main(["results", str(example_copy)]) == 0
    out, err = capsys.readouterr()
    assert json.loads(out) == json.loads(results.to_json())
    assert err.splitlines() == [f"{len(raised)} flag(s) on included stages:", *raised]
    assert main(["results", str(example_copy), "-q"]) == 0  # the JSON is what the command exists to print
    out, err = capsys.readouterr()
    assert json.loads(out) == json.loads(results.to_json()) and err == ""
    assert main(["signoff", str(example_copy), "--state", "draft", "--who", "A. Engineer", "-q"]) == 0
    assert capsys.readouterr() == ("", "")
    assert main(["results", str(example_copy / "nowhere"), "-q"]) == 2  # errors still print with -q
    assert capsys.readouterr().err.startswith("shearbook: error: ")


def test_open_refuses_a_port_in_use(example_copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import socket

    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        assert main(["open", str(example_copy), "--no-browser", "--port", str(port)]) == 2
    assert capsys.readouterr().err == (f"shearbook: error: port {port} on 127.0.0.1 is already in use "
                                       "(another JupyterLab?); choose a free one with --port.\n")
    assert not (example_copy / "shear_interpretation.ipynb").exists()  # nothing written before the refusal


def test_the_command_does_without_the_iri_grammars_and_still_reads_notebooks(example_copy: Path) -> None:
    """A command blocks rfc3987_syntax (built at import by jsonschema, over a second), and notebooks still
    validate: nbformat's schema has no "iri" format (the figure is in DEVELOPERS.md, Record size and speed)."""
    probe = ("import sys\n"
             "from kernels_helpers.cli import main\n"
             "from kernels_helpers.resources import workbook_template\n"
             f"assert main(['check', {str(example_copy)!r}, '-q']) == 0\n"
             "import nbformat\n"
             "nbformat.validate(nbformat.read(workbook_template(), as_version=4))\n"
             "print(sys.modules.get('rfc3987_syntax', 'absent'))\n")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "None"
