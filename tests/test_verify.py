"""Re-running a record: verify (single and batch), diff from a record, sign-off from the command line."""

from __future__ import annotations

import contextlib
import csv
import json
import re
import shutil
import socket
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from kernels_helpers.cli import main
from kernels_helpers.interpretation import load_interpretation
from kernels_helpers.record import write_record
from kernels_helpers.verify import REL_TOL, verify_record

if TYPE_CHECKING:
    from conftest import ExampleRecord

pytestmark = pytest.mark.notebook
EXAMPLE = Path(__file__).resolve().parent.parent / "example_project"


@pytest.fixture
def recorded(example_record: ExampleRecord) -> Path:
    """The example project's copy with its one record, records/r1.html (the suite's shared record: only read
    here, every test that changes the project or the record works on its own copy)."""
    assert example_record.path == example_record.project / "records" / "r1.html"
    return example_record.project


def _copy(recorded: Path, tmp_path: Path) -> Path:
    dst = tmp_path / "project"
    shutil.copytree(recorded, dst)
    return dst


def _edit_block(record: Path, block: str, change) -> None:
    """Change the record's embedded ``shearbook-{block}`` JSON in place with ``change(data)``."""
    text = record.read_text(encoding="utf-8")
    m = re.search(rf'(<script type="application/json" id="shearbook-{block}">)(.*?)(</script>)', text, re.S)
    data = json.loads(m.group(2))
    change(data)
    body = json.dumps(data).replace("<", "\\u003c")
    record.write_text(text[: m.start(2)] + body + text[m.end(2) :], encoding="utf-8")


def _edit_results(record: Path, change) -> None:
    _edit_block(record, "results", change)


def test_unchanged_project_matches_bit_for_bit(recorded: Path, capsys: pytest.CaptureFixture[str]) -> None:
    v = verify_record(recorded / "records" / "r1.html", recorded)
    assert v.ok and v.exact and v.compared > 1000
    assert main(["verify", str(recorded / "records" / "r1.html")]) == 0  # project found above the record
    assert "MATCH" in capsys.readouterr().out


def test_changed_raw_file_is_named_and_fails(recorded: Path, tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    root = _copy(recorded, tmp_path)
    raw = root / "readings" / "BH03-D3.csv"
    lines = raw.read_text(encoding="utf-8").split("\n")
    cols = lines[2000].split(",")
    cols[-1] = f"{float(cols[-1]) * 1.2:.5f}"  # one shear load reading changed
    lines[2000] = ",".join(cols)
    raw.write_text("\n".join(lines), encoding="utf-8")
    assert main(["verify", str(root / "records" / "r1.html")]) == 1
    out = capsys.readouterr().out
    assert "MISMATCH" in out and "raw file changed: readings/BH03-D3.csv (SHA-256 was " in out


def test_a_raw_file_that_no_longer_reads_is_named_and_the_rerun_error_given(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    raw = root / "readings" / "BH03-D1.csv"
    # cut short to its first readings: the file no longer holds a stage (an untidy row alone would be left out
    # with a flag, and the re-run would then report the values that moved)
    raw.write_text("\n".join(raw.read_text(encoding="utf-8").splitlines()[:12]) + "\n", encoding="utf-8")
    v = verify_record(root / "records" / "r1.html", root)
    assert not v.ok and v.compared == 0 and v.mode == "re-run failed"
    assert v.rerun_error is not None and "readings/BH03-D1.csv: only " in v.rerun_error
    text = v.to_text()
    assert "MISMATCH - the re-run failed, no values compared" in text and "versions differ" not in text
    assert "raw file changed: readings/BH03-D1.csv (SHA-256 was " in text
    assert f"  re-run failed: {v.rerun_error}" in text


def test_an_untidy_row_added_to_a_raw_file_is_named_and_its_flag_shows_as_moved(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    raw = root / "readings" / "BH03-D1.csv"
    raw.write_text(raw.read_text(encoding="utf-8") + "# edited\n", encoding="utf-8")
    v = verify_record(root / "records" / "r1.html", root)
    assert not v.ok and v.rerun_error is None
    assert v.changed_files[0].startswith("readings/BH03-D1.csv (SHA-256 was ")
    assert any(m.startswith("stages[0].flags") for m in v.mismatches), v.mismatches[:5]


def test_across_versions_numbers_compare_within_the_stated_tolerance(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"

    def older_and_nudged(data: dict, rel: float) -> None:
        data["provenance"]["versions"]["numpy"] = "0.0-older"
        env = data["envelopes"][0]["free"]
        env["phi_deg"] *= 1 + rel

    _edit_results(rec, lambda d: older_and_nudged(d, REL_TOL / 10))
    v = verify_record(rec, root)
    assert not v.exact and v.ok, v.to_text()
    _edit_results(rec, lambda d: older_and_nudged(d, REL_TOL * 100))
    v = verify_record(rec, root)
    assert not v.ok and any(m.startswith("envelopes[0].free.phi_deg: ") for m in v.mismatches)


def test_a_record_of_an_older_version_without_a_newer_result_is_verified_and_says_what_it_did_not_compare(
        recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"

    def older(data: dict) -> None:
        data["provenance"]["versions"]["numpy"] = "0.0-older"
        for s in data["stages"]:
            del s["void_ratio_chain"]  # a result this version adds

    _edit_results(rec, older)
    v = verify_record(rec, root)
    assert v.ok and not v.exact, v.to_text()
    assert any(n.startswith("42 value(s) this version gives and the record's did not, not compared: "
                            "stages[0].void_ratio_chain.e_initial") for n in v.notes), v.notes
    _edit_results(rec, lambda d: d["stages"][0].__setitem__("gone_from_this_version", 1.0))
    assert not verify_record(rec, root).ok  # what the record holds must still be given by the re-run


def test_batch_verifies_every_record_and_writes_a_summary(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    good = root / "records" / "r1.html"
    bad = root / "records" / "sub" / "r2.html"
    bad.parent.mkdir()
    shutil.copy(good, bad)
    _edit_results(bad, lambda d: d["stages"][0]["critical_state"]["chosen"].update(tau_kpa=1.0))
    summary = tmp_path / "summary.csv"
    assert main(["verify", str(root / "records"), "--jobs", "2", "--summary", str(summary)]) == 1
    rows = {Path(r["record"]).name: r for r in csv.DictReader(summary.open(encoding="utf-8"))}
    assert rows["r1.html"]["status"] == "match" and rows["r2.html"]["status"] == "mismatch"
    assert rows["r2.html"]["values_moved"] == "1"


def test_diff_from_a_record_shows_what_the_checker_changed(recorded: Path, tmp_path: Path,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    root = _copy(recorded, tmp_path)
    interp = load_interpretation(root / "interpretation.json")
    changed = interp.restored("BH03-L2", "C. Checker")
    from kernels_helpers import save_interpretation

    save_interpretation(changed, tmp_path / "checked.json")
    assert main(["diff", str(root), str(root / "records" / "r1.html"), str(tmp_path / "checked.json")]) == 0
    assert "BH03-L2: restored to the envelopes" in capsys.readouterr().out


def test_signoff_command(recorded: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = _copy(recorded, tmp_path)
    assert main(["signoff", str(root), "--state", "approved", "--who", "A. Approver"]) == 2
    assert "cannot go from draft to approved" in capsys.readouterr().err
    assert main(["signoff", str(root), "--state", "checked", "--who", "C. Checker", "--note", "picks reviewed"]) == 0
    interp = load_interpretation(root / "interpretation.json")
    assert interp.signoff.state == "checked" and interp.signoff.history[-1]["note"] == "picks reviewed"


@pytest.mark.slow
def test_a_new_record_shows_what_changed_since_the_last_one(recorded: Path, tmp_path: Path) -> None:
    from kernels_helpers import save_interpretation

    root = _copy(recorded, tmp_path)
    interp = load_interpretation(root / "interpretation.json")
    save_interpretation(interp.restored("BH03-L2", "C. Checker"), root / "interpretation.json")
    text = write_record(root, root / "records" / "r2.html").path.read_text(encoding="utf-8")
    assert "Changes from the record r1.html to this interpretation:" in text
    assert "BH03-L2: restored to the envelopes" in text


def _batch_of_three(recorded: Path, tmp_path: Path) -> Path:
    """records/ with the good record, a copy, and one whose embedded phi' was edited."""
    root = _copy(recorded, tmp_path)
    shutil.copy(root / "records" / "r1.html", root / "records" / "r3.html")
    bad = root / "records" / "sub" / "r2.html"
    bad.parent.mkdir()
    shutil.copy(root / "records" / "r1.html", bad)
    _edit_results(bad, lambda d: d["stages"][0]["critical_state"]["chosen"].update(tau_kpa=1.0))
    return root


@pytest.fixture(scope="module")
def dask_scheduler() -> Iterator[str]:
    """A running dask cluster for the tests that verify on an existing one, reached at its tcp:// address.

    Its scheduler and one worker run on threads of this test process (no interpreter to start and import the
    whole stack again), talking over TCP as a cluster elsewhere would: every task and result is still sent as
    bytes. Worker processes of their own are the local cluster's test (Runner(workers=2), next).
    """
    import logging

    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp", host="127.0.0.1",
                      dashboard_address="127.0.0.1:0", silence_logs=logging.ERROR) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        yield cluster.scheduler_address


@pytest.mark.slow
def test_batch_on_a_local_dask_cluster_gives_the_same_report_and_summary(recorded: Path, tmp_path: Path) -> None:
    from kernels_helpers.verify import Runner, verify_folder

    root = _batch_of_three(recorded, tmp_path)
    seen: list[tuple[int, int]] = []
    # against a pool of one local process (a pool of two is the batch command's test, --jobs 2)
    on_pool = verify_folder(root / "records", tmp_path / "pool.csv", runner=Runner(jobs=1))
    assert Runner(workers=2).describe() == "a local dask cluster of 2 worker(s)"
    with contextlib.closing(socket.socket()) as taken:  # dask's default HTTP port is taken (another cluster)
        with contextlib.suppress(OSError):  # already taken by someone else: the same case
            taken.bind(("127.0.0.1", 8787))
            taken.listen()
        on_dask = verify_folder(root / "records", tmp_path / "dask.csv", runner=Runner(workers=2),
                                progress=lambda done, total, record: seen.append((done, total)))
    assert seen == [(1, 3), (2, 3), (3, 3)]
    assert [(r, v.to_text() if v else e) for r, v, e in on_dask] == [(r, v.to_text() if v else e)
                                                                     for r, v, e in on_pool]
    assert (tmp_path / "dask.csv").read_text(encoding="utf-8") == (tmp_path / "pool.csv").read_text(encoding="utf-8")
    assert [v.ok for _, v, _ in on_dask] == [True, True, False]  # r1, r3, sub/r2


def test_a_broken_record_on_the_cluster_is_reported_and_the_others_still_verified(recorded: Path, tmp_path: Path,
                                                                                  dask_scheduler: str) -> None:
    from kernels_helpers.verify import Runner, verify_folder

    root = _copy(recorded, tmp_path)
    (root / "records" / "junk.html").write_text("<html>not a record</html>", encoding="utf-8")
    out = verify_folder(root / "records", tmp_path / "s.csv", runner=Runner(scheduler=dask_scheduler))
    by_name = {r.name: (v, e) for r, v, e in out}
    assert by_name["r1.html"][0].ok
    assert by_name["junk.html"][0] is None
    assert "not a Shearbook record (no shearbook-results block)" in by_name["junk.html"][1]


def test_verify_command_on_a_dask_cluster(recorded: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                          dask_scheduler: str) -> None:
    root = _batch_of_three(recorded, tmp_path)
    summary = tmp_path / "summary.csv"
    assert main(["verify", str(root / "records"), "--scheduler", dask_scheduler, "--summary", str(summary)]) == 1
    out, err = capsys.readouterr()
    assert err == f"Verifying the records under {root / 'records'} on the dask cluster at {dask_scheduler} ...\n"
    assert out.count(": MATCH - ") == 2 and out.count(": MISMATCH - ") == 1
    assert out.endswith(f"2 of 3 records match; summary table: {summary}\n")
    # -q: only the failure (the report is the runner's to gather, the printing the command's: one process will do)
    assert main(["verify", str(root / "records"), "--jobs", "1", "-q", "--summary", str(summary)]) == 1
    out, err = capsys.readouterr()
    assert err == "" and out.count("MISMATCH") == 1 and "MATCH -" not in out.replace("MISMATCH", "")


@pytest.mark.parametrize(("args", "message"), [
    (["--workers", "2", "--scheduler", "tcp://127.0.0.1:1"], "give either --scheduler ADDRESS"),
    (["--workers", "0"], "--workers 0: give a whole number of workers, 1 or more."),
    (["--jobs", "0"], "--jobs 0: give a whole number of processes, 1 or more."),
])
def test_verify_folder_options_that_cannot_work_are_refused(recorded: Path, args: list[str], message: str,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["verify", str(recorded / "records"), *args]) == 2
    assert message in capsys.readouterr().err


def test_a_scheduler_that_does_not_answer_is_a_clear_error(recorded: Path, tmp_path: Path) -> None:
    from kernels_helpers.errors import RecordError
    from kernels_helpers.verify import Runner, verify_folder

    with pytest.raises(RecordError, match=r"--scheduler tcp://127\.0\.0\.1:9: no dask scheduler answered .* Check "
                                          r"the address \(tcp://HOST:PORT\) and that the scheduler is running\."):
        verify_folder(recorded / "records", tmp_path / "s.csv",
                      runner=Runner(scheduler="tcp://127.0.0.1:9", connect_timeout_s=1))


# --- the visible record: what a reviewer reads is checked, not only the embedded data -----------------------------

def _edit_text(record: Path, old: str, new: str, count: int = 1) -> None:
    text = record.read_text(encoding="utf-8")
    assert text.count(old) >= count, f"{old!r} not in the record"
    record.write_text(text.replace(old, new, count), encoding="utf-8")


def test_a_phi_edited_in_a_visible_table_is_named_by_section_table_row_and_column(recorded: Path,
                                                                                   tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"
    results = json.loads(re.search(r'id="shearbook-results">(.*?)</script>', rec.read_text(encoding="utf-8"),
                                   re.S).group(1))
    env = results["envelopes"][0]
    shown = f"{env['free']['phi_deg']:.1f}"
    text = rec.read_text(encoding="utf-8")
    part = text.index('data-sb-section="envelopes"')
    cell = text.index(f"<td>{shown} [", part)  # "phi' (deg) [95 % CI]" of the first envelope row
    rec.write_text(text[:cell] + f"<td>{float(shown) + 3:.1f} [" + text[cell + len(shown) + 5:], encoding="utf-8")
    v = verify_record(rec, root)
    assert not v.ok and v.mismatches == () and v.changed_files == ()  # the embedded data was left alone
    assert len(v.shown) == 1, v.shown
    assert v.shown[0].startswith(f"section 'envelopes', part {len(set(e['group'] for e in results['envelopes'])) + 1}"
                                 f", table 1, row {env['group']!r}, column \"phi' (deg) [95 % CI]\": the record shows "
                                 f"'{float(shown) + 3:.1f} ["), v.shown
    assert "  shown: section 'envelopes'" in v.to_text() and "MISMATCH" in v.to_text()


def test_a_flag_replaced_by_no_flags_is_a_mismatch(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"
    text = rec.read_text(encoding="utf-8")
    start = text.index("<h3>Flags</h3>")
    end = text.index("</table>", start) + len("</table>")
    rec.write_text(text[:start] + "<h3>Flags</h3><p>No flags raised.</p>" + text[end:], encoding="utf-8")
    v = verify_record(rec, root)
    assert not v.ok, v.to_text()
    assert any(s.startswith("section 'picks', part 1") and "No flags raised." in s for s in v.shown), v.shown


def test_a_removed_section_and_a_removed_figure_are_named(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"
    _edit_text(rec, 'data-sb-section="design"', 'data-sb-gone="design"')
    _edit_text(rec, '"sb-part:stages:1"', '"sb-part:gone:1"')
    v = verify_record(rec, root)
    assert "section 'design': not in the record (removed?)" in v.shown
    assert "section 'stages', figure 2: not in the record (removed?)" in v.shown


def test_a_changed_plotted_point_is_named_by_figure_source_column_and_point(recorded: Path, tmp_path: Path) -> None:
    import base64
    import gzip

    import numpy as np

    from kernels_helpers.escaping import script_safe

    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"
    text = rec.read_text(encoding="utf-8")
    m = next(m for m in re.finditer(r"const docs_json = (\{.*?\});\n", text) if '"sb-part:stages:1"' in m.group(1))
    docs = json.loads(m.group(1))

    def float_arrays(value):
        if isinstance(value, dict):
            if value.get("type") == "ndarray" and value.get("dtype") in ("float32", "float64"):
                yield value
            for v in value.values():
                yield from float_arrays(v)
        elif isinstance(value, list):
            for v in value:
                yield from float_arrays(v)

    target = next(a for a in float_arrays(docs) if len(a["array"]["data"]) > 100)
    raw = base64.b64decode(target["array"]["data"])
    zipped = raw[:2] == b"\x1f\x8b"
    dtype = "<f8" if target["dtype"] == "float64" else "<f4"
    values = np.frombuffer(gzip.decompress(raw) if zipped else raw, dtype=dtype).copy()
    values[5] += 1.0  # one plotted point moved by 1 (mm or kPa)
    target["array"]["data"] = base64.b64encode(gzip.compress(values.tobytes()) if zipped else values.tobytes()).decode()
    doc_text = json.dumps(docs)
    rec.write_text(text[: m.start(1)] + script_safe(doc_text) + text[m.end(1):], encoding="utf-8")
    v = verify_record(rec, root)
    assert not v.ok and v.mismatches == ()
    assert len(v.shown) == 1 and v.shown[0].startswith("section 'stages', figure 2, source ") and ", point 6: the " \
        "record plots " in v.shown[0], v.shown


def test_a_record_without_marked_sections_says_only_its_data_was_compared(recorded: Path, tmp_path: Path) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"
    _edit_text(rec, '"schema": "shearbook.record/2"', '"schema": "shearbook.record/1"')
    v = verify_record(rec, root)
    assert v.ok and v.shown_compared == 0
    assert any("only its embedded data was compared" in n for n in v.notes)


WRAP = object()  # the whole data block wrapped in a list


@pytest.mark.parametrize(
    ("block", "change", "line"),
    [
        # a hostile or careless editor of the record's data: each is named key by key, never a fault inside
        # Shearbook and never a quieter comparison (removing the versions would have compared within a tolerance)
        ("results", lambda d: d.pop("provenance"), "results.provenance: this key is required"),
        ("results", WRAP, "results: Input should be an object (found a list)"),
        ("results", lambda d: d["provenance"].pop("versions"), "results.provenance.versions: this key is required"),
        ("results", lambda d: d["provenance"].__setitem__("raw_files", []),
         "results.provenance.raw_files: Input should be an object (found a list)"),
        ("results", lambda d: d["provenance"]["raw_files"]["readings/BH03-D1.csv"].__setitem__("sha256", 5),
         'results.provenance.raw_files["readings/BH03-D1.csv"].sha256: Input should be a valid string (found 5)'),
        ("results", lambda d: d["provenance"]["raw_files"].__setitem__("../../etc/passwd", {"sha256": "0" * 64,
                                                                                            "size_bytes": 1}),
         'results.provenance.raw_files["../../etc/passwd"]: a raw file is named by its path inside the project '
         "folder (e.g. readings/S1.csv), not '../../etc/passwd': a record naming a file outside the project is not "
         "verified"),
        ("results", lambda d: d.__setitem__("schema", "shearbook.results/9"),
         "results.schema: found \"shearbook.results/9\"; allowed: 'shearbook.results/1'"),
        ("interpretation", WRAP, "interpretation: Input should be an object (found a list)"),
        ("interpretation", lambda d: d["signoff"].__setitem__("history", [1]),
         "interpretation.signoff.history[0]: Input should be an object (found 1)"),
        ("interpretation", lambda d: d["stages"]["BH03-D2"]["peak"].__setitem__("x_to_mm", 9.0),
         'interpretation.stages["BH03-D2"].peak.x_to_mm: unknown key \'x_to_mm\'; known keys here: author, note, '
         "source, time_utc, x_mm"),
    ],
)
def test_a_damaged_or_edited_data_block_is_named_before_anything_is_compared(
        recorded: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str], block: str, change, line: str) -> None:
    root = _copy(recorded, tmp_path)
    rec = root / "records" / "r1.html"
    if change is WRAP:  # the whole block made a list: written as such
        text = rec.read_text(encoding="utf-8")
        m = re.search(rf'(<script type="application/json" id="shearbook-{block}">)(.*?)(</script>)', text, re.S)
        rec.write_text(text[: m.start(2)] + "[" + m.group(2) + "]" + text[m.end(2) :], encoding="utf-8")
    else:
        _edit_block(rec, block, change)
    before = rec.read_bytes()
    assert main(["verify", str(rec)]) == 2
    err = capsys.readouterr().err
    assert "the record's embedded data is damaged or was edited, 1 problem(s); the record cannot be verified" in err
    assert f"\n  {line}\n" in err + "\n", err
    assert "inside Shearbook" not in err and rec.read_bytes() == before  # named, and the record left as it was
