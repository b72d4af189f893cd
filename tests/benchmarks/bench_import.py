"""Benchmark: import + reduction of a 1,000,000-row readings file beside a bare ``pandas.read_csv``.

Not collected by pytest (the name does not start with ``test_``). Run from the repository root::

    .venv/bin/python tests/benchmarks/bench_import.py            # 1,000,000 rows
    .venv/bin/python tests/benchmarks/bench_import.py --rows 200000

Each measurement runs in a fresh interpreter, so that its peak memory is its own: the figure is
the peak resident set (VmHWM) minus the resident set after the libraries were imported. Phases:

* ``bare``: ``pandas.read_csv`` of the file (header row given, default float parsing);
* ``read+reduce``: ``read_stage`` (column map, units, hash, time check) and ``reduce_stage``
  (seating slack, areas, stresses, void ratio, Hampel spikes, smoothing, dy/dx);
* ``import``: ``import_folder`` (sniffing, copy byte for byte, hash check, full read back).

Targets (issue 3): read+reduce within 2x the bare read; peak memory under 5x the file size.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SPEC = "file,id,shape,side_mm,height_mm,dry_mass_g,gs,force_n,dilation\nS1.csv,S1,square,60,20,120,2.65,360,negative\n"


def write_file(path: Path, rows: int) -> None:
    """An invented readings file: 3 preamble lines, a header, ``rows`` rows of four numbers."""
    rng = np.random.default_rng(1)
    t = np.arange(rows) * 0.1
    x = t * 12.0 / t[-1]
    y = -0.3 * np.tanh(x) + 0.002 * rng.standard_normal(rows)
    f = 0.36 * np.tanh(x / 0.5) + 0.0005 * rng.standard_normal(rows)
    head = ("Invented benchmark readings\nshear box 1\n\n"
            "Elapsed time (s),Horizontal displacement (mm),Vertical gauge (mm),Shear load (kN)\n")
    body = np.column_stack([t, x, y, f])
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(head)
        np.savetxt(fh, body, fmt=["%.1f", "%.5f", "%.5f", "%.5f"], delimiter=",")


def _rss_kib(field: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    return 0


def child(phase: str, folder: Path, repeat: int) -> None:
    import pandas as pd

    from kernels_helpers.importer import ImportOptions, import_folder
    from kernels_helpers.project import load_project
    from kernels_helpers.readings import read_stage
    from kernels_helpers.reduce import ReductionSettings, reduce_stage

    lab, project = folder / "lab", folder / "project"
    base = _rss_kib("VmRSS")
    times = []
    for _ in range(repeat):  # best of ``repeat``: the machine may be busy; peak memory is the largest run's
        start = time.perf_counter()
        if phase == "bare":
            n = len(pd.read_csv(lab / "S1.csv", skiprows=3))
        elif phase == "read+reduce":
            stage = load_project(project).stage("S1")
            n = len(reduce_stage(stage, read_stage(stage), ReductionSettings()).curve)
        else:
            import_folder(lab, folder / "specimens.csv", folder / f"imported-{time.time_ns()}", ImportOptions())
            n = -1
        times.append(time.perf_counter() - start)
    seconds = min(times)
    print(json.dumps({"phase": phase, "seconds": seconds, "peak_mib": (_rss_kib("VmHWM") - base) / 1024, "rows": n}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3, help="runs per phase; the best time is reported")
    parser.add_argument("--child", nargs=2, metavar=("PHASE", "FOLDER"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], Path(args.child[1]), args.repeat)
        return
    from kernels_helpers.importer import import_folder

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "lab").mkdir()
        write_file(folder / "lab" / "S1.csv", args.rows)
        (folder / "specimens.csv").write_text(SPEC, encoding="utf-8")
        import_folder(folder / "lab", folder / "specimens.csv", folder / "project")
        size_mib = (folder / "lab" / "S1.csv").stat().st_size / 2**20
        print(f"file: {args.rows:,} rows, {size_mib:.1f} MiB")
        results = {}
        for phase in ("bare", "read+reduce", "import"):
            out = subprocess.run([sys.executable, __file__, "--child", phase, str(folder),
                                  "--repeat", str(args.repeat)], check=True,
                                 capture_output=True, text=True).stdout
            results[phase] = json.loads(out.strip().splitlines()[-1])
        bare = results["bare"]["seconds"]
        for phase, r in results.items():
            print(f"{phase:12s} {r['seconds']:7.2f} s ({r['seconds'] / bare:4.2f} x bare)   "
                  f"peak +{r['peak_mib']:6.1f} MiB "
                  f"({r['peak_mib'] / size_mib:4.2f} x file)")


if __name__ == "__main__":
    main()
