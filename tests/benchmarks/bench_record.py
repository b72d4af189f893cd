"""Benchmark: record export, record size and verify time on a 12-stage project of 50,000 readings each.

Run: ``.venv/bin/python tests/benchmarks/bench_record.py``. Prints the figures; asserts nothing
(targets are checked by reading them: export within 3x a bare ``jupyter nbconvert --execute`` of an
empty notebook, whose kernel start is the floor; record under 5 MB).
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import nbformat

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from synthetic import benchmark_project  # noqa: E402

from kernels_helpers.record import write_record  # noqa: E402
from kernels_helpers.verify import verify_record  # noqa: E402

STAGES, ROWS = 12, 50_000


def empty_notebook_floor(folder: Path) -> float:
    nb = folder / "empty.ipynb"
    nbformat.write(nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell("1")]), nb)
    t = time.perf_counter()
    subprocess.run([sys.executable, "-m", "jupyter", "nbconvert", "--to", "html", "--execute", str(nb)],
                   check=True, capture_output=True)
    return time.perf_counter() - t


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        root = benchmark_project(Path(tmp) / "project", STAGES, ROWS)
        floor = empty_notebook_floor(Path(tmp))
        t = time.perf_counter()
        rec = write_record(root, root / "records" / "bench.html")
        export = time.perf_counter() - t
        t = time.perf_counter()
        v = verify_record(rec.path, root)
        verify = time.perf_counter() - t
        print(f"project: {STAGES} stages x {ROWS:,} readings")
        print(f"empty notebook nbconvert --execute (floor): {floor:6.2f} s")
        print(f"record export:                             {export:6.2f} s  ({export / floor:.2f} x floor; target <= 3)")
        print(f"record size:                               {rec.size_bytes / 1e6:6.2f} MB (target < 5)")
        print(f"verify (re-run and compare):               {verify:6.2f} s  ({'match' if v.ok else 'MISMATCH'})")


if __name__ == "__main__":
    main()
