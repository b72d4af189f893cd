"""A synthetic project of N stages x M readings (invented data from the example model), for benchmarks."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]


def _example_module():
    spec = importlib.util.spec_from_file_location("make_example", REPO / "example_project" / "make_example.py")
    mod = importlib.util.module_from_spec(spec)
    assert spec.loader is not None
    sys.modules["make_example"] = mod  # dataclasses look their module up
    spec.loader.exec_module(mod)
    return mod


def synthesise(root: Path, n_stages: int = 12, n_readings: int = 50_000, seed: int = 7) -> Path:
    """Write project.toml and readings for ``n_stages`` stages of ``n_readings`` rows into ``root``."""
    ex = _example_module()
    base = ex.stages()
    rng = np.random.default_rng(seed)
    (root / "readings").mkdir(parents=True, exist_ok=True)
    made = []
    for k in range(n_stages):
        b = base[k % len(base)]
        sigma = b.sigma_kpa * (1.0 + 0.5 * (k // len(base)))
        stage = ex.Stage(f"S-{k + 1:02d}", f"set {k % 4 + 1}", b.dense, sigma, b.e0_target, b.settlement_mm, b.u_m,
                         b.u_peak, b.c, b.slack_mm, b.depth)
        x = np.linspace(0.0, ex.TRAVEL_MM, n_readings)
        ratio, _, y = ex.model(stage, x)
        force = ratio * sigma * ex.AREA0_MM2 / 1000.0 * (1 + 0.003 * rng.standard_normal(x.size))
        t_min = x / ex.RATE_MM_MIN
        lines = ["synthetic benchmark data (invented)", "-", "-",
                 "Elapsed time (min),Horizontal displacement (mm),Vertical gauge (mm),Shear load (kN)"]
        lines += [f"{a:.5f},{b_:.5f},{c:.5f},{d / 1000.0:.6f}" for a, b_, c, d in zip(t_min, x, -y, force, strict=True)]
        (root / "readings" / f"{stage.id}.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
        made.append(stage)
    (root / "project.toml").write_text(_toml(ex, made), encoding="utf-8")
    return root


def _toml(ex, made) -> str:
    """A plain project file (schema shearbook.project/1): shear readings only, forces on the hanger."""
    parts = [f'''schema = "shearbook.project/1"

[project]
name = "Live refit benchmark (invented data)"
invented_data = true

[stage_defaults.specimen]
shape = "square"
side_mm = {ex.SIDE_MM}
height_mm = {ex.HEIGHT_MM}
gs = {ex.GS}

[stage_defaults.csv]
delimiter = ","
decimal = "."
header_row = 3

[stage_defaults.columns]
time = {{ column = "Elapsed time (min)", unit = "min" }}
horizontal_displacement = {{ column = "Horizontal displacement (mm)", unit = "mm" }}
vertical_displacement = {{ column = "Vertical gauge (mm)", unit = "mm", dilation = "negative" }}
shear_force = {{ column = "Shear load (kN)", unit = "kN" }}
''']
    for s in made:
        parts.append(f'''
[[stage]]
id = "{s.id}"
file = "readings/{s.id}.csv"
test_set = "{s.test_set}"
stratum = "B"
test_type = "single-stage"
[stage.specimen]
dry_mass_g = {s.dry_mass_g:.1f}
consolidation_settlement_mm = {s.settlement_mm:.3f}
[stage.normal_load]
force_n = {s.sigma_kpa * ex.AREA0_MM2 / 1000.0:.1f}
''')
    return "".join(parts)
