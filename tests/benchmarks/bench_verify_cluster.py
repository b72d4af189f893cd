"""Benchmark: archive verify throughput (records per minute) on the local pool and on dask clusters.

Run: ``.venv/bin/python tests/benchmarks/bench_verify_cluster.py [--records N] [--rows R]``. Builds
one project (``tests/synthetic.py``), writes one record and copies it N times (an archive of N
records of one project), then times ``verify_folder`` on: the local process pool (1 and 2
processes) and a local dask.distributed cluster of 1 and 2 workers. Cluster start-up is timed apart
from the verification, as a long-lived cluster would not pay it per archive. Prints the figures;
asserts nothing.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from synthetic import benchmark_project

from kernels_helpers.record import write_record
from kernels_helpers.verify import Runner, verify_folder


def _rate(archive: Path, runner: Runner, tmp: Path) -> tuple[float, float]:
    """(records per minute, seconds) of verifying every record under ``archive`` with ``runner``."""
    t = time.perf_counter()
    out = verify_folder(archive, tmp / "summary.csv", runner=runner)
    seconds = time.perf_counter() - t
    assert all(v is not None and v.ok for _, v, _ in out), "the benchmark archive must verify"
    return 60 * len(out) / seconds, seconds


def _dask_rate(archive: Path, workers: int, tmp: Path) -> tuple[float, float, float]:
    """As :func:`_rate`, on a local dask cluster started first: (records/min, seconds, start-up seconds)."""
    import logging

    from distributed import Client, LocalCluster

    t = time.perf_counter()
    with LocalCluster(n_workers=workers, threads_per_worker=1, dashboard_address=None,
                      silence_logs=logging.ERROR) as cluster, Client(cluster):
        startup = time.perf_counter() - t
        rate, seconds = _rate(archive, Runner(scheduler=cluster.scheduler_address), tmp)
    return rate, seconds, startup


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--records", type=int, default=40)
    ap.add_argument("--rows", type=int, default=5_000, help="readings per stage")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        root = benchmark_project(tmp / "project", 6, args.rows)
        archive = root / "records"
        first = write_record(root, archive / "r0000.html").path
        for i in range(1, args.records):
            (archive / f"r{i:04d}.html").write_bytes(first.read_bytes())
        print(f"archive: {args.records} records of one project, 6 stages x {args.rows:,} readings")
        for jobs in (1, 2):
            rate, seconds = _rate(archive, Runner(jobs=jobs), tmp)
            print(f"  local pool, {jobs} process(es): {rate:6.1f} records/min ({seconds:.1f} s)")
        for workers in (1, 2):
            rate, seconds, startup = _dask_rate(archive, workers, tmp)
            print(f"  dask cluster, {workers} worker(s): {rate:6.1f} records/min ({seconds:.1f} s; "
                  f"cluster start-up {startup:.1f} s, not counted)")


if __name__ == "__main__":
    main()
