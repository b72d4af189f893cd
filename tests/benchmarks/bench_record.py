"""Benchmark: record export, record size and verify time on a 12-stage project of 50,000 readings each.

Run: ``.venv/bin/python tests/benchmarks/bench_record.py [--runs N]``. Prints the figures; asserts
nothing. Targets, checked by reading them: ``shearbook record`` within 3x a bare
``jupyter nbconvert --execute`` of a one-cell notebook (the floor: interpreter, nbconvert and kernel
start), record under 5 MB. Both are timed as commands, the way a user runs them, alternating, and the
medians compared: timings on a shared machine move by tens of per cent between runs.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import nbformat

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from synthetic import benchmark_project

STAGES, ROWS = 12, 50_000
BIN = Path(sys.executable).parent


def _timed(cmd: list[str]) -> float:
    t = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True)
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=3)
    runs = ap.parse_args().runs
    with tempfile.TemporaryDirectory() as tmp:
        root = benchmark_project(Path(tmp) / "project", STAGES, ROWS)
        empty = Path(tmp) / "empty.ipynb"
        nbformat.write(nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell("1")]), empty)
        record = root / "records" / "bench.html"
        floors, exports = [], []
        for _ in range(runs):
            floors.append(_timed([str(BIN / "jupyter"), "nbconvert", "--to", "html", "--execute", str(empty)]))
            exports.append(_timed([str(BIN / "shearbook"), "record", str(root), "-o", str(record)]))
        verify = _timed([str(BIN / "shearbook"), "verify", str(record), "--project", str(root)])
        floor, export = statistics.median(floors), statistics.median(exports)
        print(f"project: {STAGES} stages x {ROWS:,} readings, {runs} runs (median; all runs in brackets)")
        print(f"jupyter nbconvert --execute, one-cell notebook (floor): {floor:6.2f} s  {_runs(floors)}")
        print(f"shearbook record:                                       {export:6.2f} s  {_runs(exports)}"
              f"  ({export / floor:.2f} x floor; target <= 3)")
        print(f"record size:                                            {record.stat().st_size / 1e6:6.2f} MB "
              "(target < 5)")
        print(f"shearbook verify (re-run and compare, match):           {verify:6.2f} s")


def _runs(values: list[float]) -> str:
    return "[" + ", ".join(f"{v:.2f}" for v in values) + "]"


if __name__ == "__main__":
    main()
