"""Synthetic shear box stages from Taylor's stress-dilatancy relation, with known answers.

Model (Taylor 1948, energy correction for the shear box; REFERENCES sec. 5): on the shear plane
tau/sigma' = mu + dy/dx, with mu = tan(phi_cs) mobilised as mu(u) = tan(phi_cs) tanh(u / u_mob) and
the rate of dilation a pulse that rises to tan(psi_max) at u_peak and dies away (dense), or a
contraction that dies away (loose). u is the displacement after the seating slack. Stresses are on
the corrected area L (L - u) of a square box, as Shearbook computes them by default.

The answers (peak tau, critical-state ratio, residual) are evaluated from the same closed forms on a
fine grid without noise; the files carry noise. This is test data only, never demo or design data.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

SIDE = 60.0


def pulse(u: np.ndarray, at: float, n: float) -> np.ndarray:
    """0 at u = 0, 1 at u = ``at``, decaying to 0: (u/at)^n exp(n (1 - u/at))."""
    r = np.clip(u, 0.0, None) / at
    return r**n * np.exp(n * (1.0 - r))


@dataclass
class Model:
    phi_cs: float = 32.0
    psi_max: float = 10.0  # 0 for a loose specimen
    u_peak: float = 2.0
    u_mob: float = 0.4
    contraction: float = 0.0  # loose: maximum rate of contraction (positive number)
    normal_n: float = 360.0
    travel: float = 12.0
    slack: float = 0.2
    noise_n: float = 0.5
    stick_slip: float = 0.0  # amplitude of a sawtooth, as a fraction of the shear force
    seed: int = 1
    extra: dict = field(default_factory=dict)

    def rate(self, u: np.ndarray) -> np.ndarray:
        dense = math.tan(math.radians(self.psi_max)) * pulse(u, self.u_peak, 4.0)
        loose = -self.contraction * pulse(u, 1.2, 3.0)
        return dense + loose

    def ratio(self, u: np.ndarray) -> np.ndarray:
        return math.tan(math.radians(self.phi_cs)) * np.tanh(np.clip(u, 0, None) / self.u_mob) + self.rate(u)

    def tau(self, u: np.ndarray) -> np.ndarray:
        return self.ratio(u) * self.normal_n / (SIDE * (SIDE - np.clip(u, 0, None))) * 1000.0

    def true_peak(self) -> tuple[float, float]:
        u = np.linspace(0.0, self.travel - self.slack, 200_001)
        t = self.tau(u)
        i = int(np.argmax(t))
        return float(u[i]), float(t[i])

    @property
    def cs_ratio(self) -> float:
        return math.tan(math.radians(self.phi_cs))


def readings(m: Model, x: np.ndarray | None = None, force_scale: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Columns (time s, x mm, y mm, shear force N) of one forward stage with noise."""
    rng = np.random.default_rng(m.seed)
    if x is None:
        x = np.linspace(0.0, m.travel, 3001)
    u = np.clip(x - m.slack, 0.0, None)
    grid = np.linspace(0.0, float(u.max()) + 1e-9, 20001)
    y_grid = np.concatenate([[0.0], np.cumsum(0.5 * (m.rate(grid[1:]) + m.rate(grid[:-1])) * np.diff(grid))])
    y = np.interp(u, grid, y_grid)
    force = m.ratio(u) * m.normal_n * np.where(x > m.slack, 1.0, 0.0)
    if m.stick_slip:
        force = force * (1.0 + m.stick_slip * (((x / 0.15) % 1.0) - 0.5) * 2.0)
    if force_scale is not None:
        force = force * force_scale
    force = force + rng.normal(0.0, m.noise_n, len(x))
    return {"t": np.arange(len(x)) * 2.0, "x": x + rng.normal(0, 0.001, len(x)), "y": y + rng.normal(0, 0.001, len(x)),
            "f": force}


PROJECT = """schema = "shearbook.project/1"
[project]
name = "synthetic test project (not real data)"

[stage_defaults.specimen]
shape = "square"
side_mm = 60.0
height_mm = 20.0
gs = 2.65
dry_mass_g = 115.0

[stage_defaults.columns]
time = {{ column = "t", unit = "s" }}
horizontal_displacement = {{ column = "x", unit = "mm" }}
vertical_displacement = {{ column = "y", unit = "mm", dilation = "positive" }}
shear_force = {{ column = "f", unit = "N" }}
{extra_columns}
"""


def reversal_readings(ratios: list[float], normal_n: float, seed: int, *, taylor_first_pass: bool = True,
                      noise_n: float = 0.5, settlement_mm: float = 0.0) -> dict[str, np.ndarray]:
    """A reversal test: forward 8 mm, back to 0, forward again...; pass k settles on the ratio ``ratios[k]``.

    The first pass follows the Taylor model (peak, then critical state) unless ``taylor_first_pass``
    is False; later passes rise as tanh(u / 0.3 mm). The specimen settles by ``settlement_mm`` over
    the test (square-root law), with Gaussian noise of ``noise_n`` on the force.
    """
    xs, fs = [], []
    for k, r in enumerate(ratios):
        forward = k % 2 == 0
        x = np.linspace(0.0, 8.0, 401) if forward else np.linspace(8.0, 0.0, 401)
        u = x if forward else 8.0 - x
        ratio = Model().ratio(np.clip(u - 0.2, 0, None)) if k == 0 and taylor_first_pass else r * np.tanh(u / 0.3)
        f = (1.0 if forward else -1.0) * ratio * normal_n
        xs.append(x if k == 0 else x[1:])
        fs.append(f if k == 0 else f[1:])
    x = np.concatenate(xs)
    f = np.concatenate(fs) + np.random.default_rng(seed).normal(0.0, noise_n, len(x))
    y = -settlement_mm * np.sqrt(np.arange(len(x)) / len(x))
    return {"t": np.arange(len(x)) * 2.0, "x": x, "y": y, "f": f}


def write_project(folder: Path, stages: dict[str, tuple], normal_column: bool = False) -> Path:
    """A project with one stage per entry: id -> (columns, normal force N, test type[, test set])."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "readings").mkdir(exist_ok=True)
    extra = 'normal_force = { column = "n", unit = "N" }' if normal_column else ""
    text = PROJECT.format(extra_columns=extra)
    for sid, (cols, normal, test_type, *rest) in stages.items():
        test_set = rest[0] if rest else "synthetic"
        names = list(cols)
        rows = np.column_stack([cols[k] for k in names])
        np.savetxt(folder / "readings" / f"{sid}.csv", rows, delimiter=",", header=",".join(names), comments="",
                   fmt="%.6f")
        text += (f'\n[[stage]]\nid = "{sid}"\nfile = "readings/{sid}.csv"\ntest_set = "{test_set}"\n'
                 f'test_type = "{test_type}"\n[stage.normal_load]\nforce_n = {normal}\n')
    (folder / "project.toml").write_text(text, encoding="utf-8")
    return folder


UNSETTLED = [0.62, 0.55, 0.48, 0.45, 0.42]  # passes 1-5 (forward 1, 3, 5): still falling, residual not reached


def reversal_project(folder: Path) -> Path:
    """Two reversal stages whose forward passes have not settled (the rule says "residual not
    reached"), R1 and R2, and one single-stage test S1, in one test set."""
    return write_project(folder, {
        "R1": (reversal_readings(UNSETTLED, 360.0, 1), 360.0, "reversal"),
        "R2": (reversal_readings(UNSETTLED, 720.0, 2), 720.0, "reversal"),
        "S1": (readings(Model(normal_n=540.0, seed=3)), 540.0, "single-stage"),
    })


def benchmark_project(folder: Path, n_stages: int = 12, n_readings: int = 50_000) -> Path:
    """A project of ``n_stages`` dense stages in four test sets at four normal stresses, for benchmarks."""
    stages = {}
    for k in range(n_stages):
        m = Model(normal_n=180.0 * (1 + k % 4), psi_max=10 - k % 4, seed=k)
        stages[f"B{k + 1:02d}"] = (readings(m, x=np.linspace(0.0, 12.0, n_readings)), m.normal_n, "single-stage",
                                   f"set {k // 4 + 1}")
    return write_project(folder, stages)


# markup, quotes, a comment opener, a line separator and a non-ASCII letter: every escaping context at once
PAYLOAD = "\"'><i data-evil=\"1\">x</i><img src=x onerror=alert(1)></script><script>alert(2)</script><!--\u2028é"


def hostile_project(folder: Path) -> Path:
    """The example project with markup in every user text field: names, a stage id, a test set, notes."""
    import shutil

    from kernels_helpers import save_interpretation
    from kernels_helpers.interpretation import Interpretation, StageDecision

    project = folder / "hostile"
    shutil.copytree(Path(__file__).resolve().parent.parent / "example_project", project)
    (project / "interpretation.json").unlink()
    quoted = PAYLOAD.replace("\\", "\\\\").replace('"', '\\"').replace("\u2028", "\\u2028")
    toml = (project / "project.toml").read_text(encoding="utf-8")
    for old in ('name = "Port Wendle example - stratum B sand"',
                'site = "Alder Quay extension, Port Wendle (invented)"', 'client = "Wendle Harbour Board (invented)"'):
        toml = toml.replace(old, old[:-1] + " " + quoted + '"')
    toml = toml.replace('id = "BH03-D1"', f'id = "D1 {quoted}"')
    toml = toml.replace('test_set = "BH03 dense"', f'test_set = "dense {quoted}"')
    toml = toml.replace('description = "Dense sand', f'description = "{quoted} Dense sand', 1)
    (project / "project.toml").write_text(toml, encoding="utf-8")
    interp = Interpretation().with_decision("BH03-D2", StageDecision(note=PAYLOAD))
    interp = interp.with_decision("BH03-L1", StageDecision(included=False, exclusion_reason=PAYLOAD))
    interp = interp.with_signoff("checked", "A. Checker " + PAYLOAD, PAYLOAD)
    save_interpretation(interp, project / "interpretation.json")
    return project
