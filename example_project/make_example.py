"""Generate the invented Shearbook example project (six direct shear stages of one sand).

Everything written by this script is INVENTED: the site, client, laboratory, boreholes and
readings. The readings come from the simple stress-dilatancy model below plus synthetic noise.

Model (per stage, square box of side L, normal force N constant)
-----------------------------------------------------------------
Let ``u = max(x - s, 0)`` be the horizontal travel after the seating slack ``s`` (random per
stage, 0.1-0.3 mm, no shear load is carried while the slack is taken up).

* Dilation rate (Taylor's convention, lid up positive), with the pulse shape
  ``g(u; a, n) = (u/a)**n * exp(n * (1 - u/a))`` (zero at u = 0, maximum 1 at u = a, then
  decays to zero)::

      dense:  dy/dx = tan(psi_max) * g(u; u_p, 4) - c * g(u; 0.3 mm, 2)
      loose:  dy/dx = -c * g(u; u_c, 3)

  so a dense specimen compresses slightly first, dilates fastest near u_p and then stops
  changing volume; a loose specimen contracts and then its volume is steady.
* Stress ratio on the corrected area (Taylor's energy correction)::

      tau/sigma = tan(phi_cs) * tanh(u / u_m) + dy/dx

  i.e. a smooth (hyperbolic-tangent) mobilisation of the critical-state friction plus the
  dilatancy term; both go to the critical state ratio tan(phi_cs) at large travel.
* psi_max falls with stress as a Bolton-style logarithmic law,
  ``psi_max = 9.5 - 1.5 log2(sigma/100 kPa)`` deg (11.0, 9.5, 8.0 deg at 50, 100, 200 kPa).
  Taylor's correction then gives phi_peak - phi_cs of about 0.65-0.7 psi_max, of the same order
  as Bolton's (plane strain) 0.8 psi_max.
* y = integral of dy/dx over x (trapezoidal); stresses are on the corrected area
  A = L (L - x), so the shear force is tau * A = (tau/sigma) * N.

Noise: load cell 0.3 % of reading plus 0.5 N white noise; displacement transducers 0.002 mm.
The vertical gauge reads DOWN on dilation and is zeroed on its first reading.
Run from the repository root: ``python example_project/make_example.py``.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SEED = 20240311
SIDE_MM, HEIGHT_MM, GS = 60.0, 20.0, 2.65
E_MAX, E_MIN = 0.86, 0.53  # invented limiting void ratios of the example sand (for I_D)
AREA0_MM2 = SIDE_MM**2
PHI_CS_DEG = 32.5
RATE_MM_MIN, TRAVEL_MM, LOG_S = 0.1, 12.0, 2.0
LAB = "Fernholt Materials Testing Laboratory (invented)"


@dataclass(frozen=True)
class Stage:
    """Parameters of one invented stage (lengths in mm, stress in kPa)."""

    id: str
    test_set: str
    dense: bool
    sigma_kpa: float
    e0_target: float
    settlement_mm: float  # consolidation settlement before shearing
    u_m: float  # mobilisation length of tanh(u / u_m)
    u_peak: float  # dense: travel of fastest dilation; loose: of fastest contraction
    c: float  # dense: initial compression rate; loose: maximum contraction rate
    slack_mm: float
    depth: str
    use_stress: bool = False  # give the normal load as stress_kpa instead of force_n

    @property
    def psi_max_deg(self) -> float:
        """Model peak dilation angle (dense only) from the logarithmic stress law."""
        return 9.5 - 1.5 * math.log2(self.sigma_kpa / 100.0) if self.dense else 0.0

    @property
    def dry_mass_g(self) -> float:
        """Dry mass giving e0_target, rounded to 0.1 g as a balance would give it."""
        return round(GS * AREA0_MM2 * HEIGHT_MM / (1.0 + self.e0_target) / 1000.0, 1)

    @property
    def relative_density(self) -> float:
        """I_D = (e_max - e0)/(e_max - e_min) with the invented limits E_MAX, E_MIN of this sand."""
        return (E_MAX - self.e0) / (E_MAX - E_MIN)

    @property
    def e0(self) -> float:
        """Initial void ratio from the rounded dry mass: e = (H - H_s)/H_s."""
        h_s = self.dry_mass_g * 1000.0 / (GS * AREA0_MM2)
        return (HEIGHT_MM - h_s) / h_s


def stages() -> list[Stage]:
    """The six invented stages of stratum B, borehole BH03 (deterministic)."""
    slack = np.random.default_rng(SEED).uniform(0.1, 0.3, size=6).round(3)
    table = [  # id, dense, sigma, e0, settlement, u_m, u_peak, c, depth
        ("BH03-D1", True, 50.0, 0.58, 0.046, 0.40, 1.7, 0.05, "4.20-4.45"),
        ("BH03-D2", True, 100.0, 0.57, 0.071, 0.45, 2.0, 0.06, "4.45-4.70"),
        ("BH03-D3", True, 200.0, 0.59, 0.104, 0.50, 2.4, 0.07, "4.70-4.95"),
        ("BH03-L1", False, 50.0, 0.80, 0.162, 1.00, 1.2, 0.10, "4.20-4.45"),
        ("BH03-L2", False, 100.0, 0.79, 0.238, 1.10, 1.4, 0.12, "4.45-4.70"),
        ("BH03-L3", False, 200.0, 0.81, 0.347, 1.20, 1.6, 0.14, "4.70-4.95"),
    ]
    return [
        Stage(sid, "BH03 dense" if d else "BH03 loose", d, sig, e0, st, um, up, c, float(sl), dep,
              use_stress=(sid == "BH03-L2"))
        for (sid, d, sig, e0, st, um, up, c, dep), sl in zip(table, slack, strict=True)
    ]


def _pulse(u: np.ndarray, a: float, n: int) -> np.ndarray:
    """Pulse (u/a)^n exp(n(1 - u/a)): 0 at u = 0, maximum 1 at u = a, decaying to 0."""
    r = u / a
    return r**n * np.exp(n * (1.0 - r))


def model(stage: Stage, x_mm: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Noise-free model at horizontal displacements ``x_mm``.

    Parameters
    ----------
    stage : Stage
        Stage parameters.
    x_mm : numpy.ndarray
        Increasing horizontal displacements (mm), starting at 0.

    Returns
    -------
    ratio, dydx, y_mm : numpy.ndarray
        tau/sigma on the corrected area, dilation rate and vertical displacement (dilation +).
    """
    u = np.clip(x_mm - stage.slack_mm, 0.0, None)
    if stage.dense:
        dydx = math.tan(math.radians(stage.psi_max_deg)) * _pulse(u, stage.u_peak, 4)
        dydx = dydx - stage.c * _pulse(u, 0.3, 2)
    else:
        dydx = -stage.c * _pulse(u, stage.u_peak, 3)
    ratio = math.tan(math.radians(PHI_CS_DEG)) * np.tanh(u / stage.u_m) + dydx
    steps = np.diff(x_mm) * 0.5 * (dydx[1:] + dydx[:-1])
    return ratio, dydx, np.concatenate([[0.0], np.cumsum(steps)])


def model_truth(stage: Stage) -> dict[str, float | str]:
    """Exact (noise-free) answers of the model for one stage, for comparison with picks.

    Parameters
    ----------
    stage : Stage
        Stage parameters.

    Returns
    -------
    dict
        Peak and critical-state values. ``*_corrected`` stresses use A = L(L - x) at that
        displacement, ``*_nominal`` the initial area; the ratio is the same for both.
        Critical state is the model value averaged over the last 3 mm of travel. Loose
        stages have no distinct peak: their maximum is at the end of travel.
    """
    x = np.linspace(0.0, TRAVEL_MM, 240_001)
    ratio, dydx, y = model(stage, x)
    force = stage.sigma_kpa * AREA0_MM2 / 1000.0  # N
    sig_c = force * 1000.0 / (SIDE_MM * (SIDE_MM - x))  # kPa on the corrected area
    i = int(np.argmax(ratio))
    last = x >= TRAVEL_MM - 3.0
    r_cs = float(ratio[last].mean())
    return {
        "id": stage.id,
        "normal_force_n": force,
        "sigma_nominal_kpa": stage.sigma_kpa,
        "seating_slack_mm": stage.slack_mm,
        "distinct_peak": stage.dense,  # loose: the maximum is the critical state at the end
        "x_at_99pct_cs_ratio_mm": float(x[np.argmax(ratio >= 0.99 * r_cs)]),
        "peak_ratio": float(ratio[i]),
        "peak_phi_deg": math.degrees(math.atan(ratio[i])),
        "peak_x_mm": float(x[i]),
        "peak_tau_corrected_kpa": float(ratio[i] * sig_c[i]),
        "peak_sigma_corrected_kpa": float(sig_c[i]),
        "peak_tau_nominal_kpa": float(ratio[i] * stage.sigma_kpa),
        "psi_max_deg": math.degrees(math.atan(max(0.0, float(dydx.max())))),
        "cs_ratio": r_cs,
        "cs_phi_deg": math.degrees(math.atan(r_cs)),
        "cs_tau_corrected_end_kpa": r_cs * float(sig_c[-1]),
        "cs_sigma_corrected_end_kpa": float(sig_c[-1]),
        "cs_tau_nominal_kpa": r_cs * stage.sigma_kpa,
        "cs_dydx_max_abs_last_3mm": float(np.abs(dydx[last]).max()),
        "vertical_displacement_end_mm": float(y[-1]),
    }


def write_readings(stage: Stage, rng: np.random.Generator, path: Path, date: str) -> int:
    """Write one readings CSV (3 preamble lines, header, data); return the number of rows."""
    t_min = np.arange(0.0, TRAVEL_MM / RATE_MM_MIN * 60.0 + LOG_S / 2, LOG_S) / 60.0
    x = RATE_MM_MIN * t_min
    ratio, _, y = model(stage, x)
    force_n = ratio * stage.sigma_kpa * AREA0_MM2 / 1000.0
    force_n = force_n * (1.0 + 0.003 * rng.standard_normal(x.size)) + 0.5 * rng.standard_normal(x.size)
    x_meas = x + 0.002 * rng.standard_normal(x.size)
    gauge = -(y + 0.002 * rng.standard_normal(x.size))
    x_meas, gauge = x_meas - x_meas[0], gauge - gauge[0]
    lines = [f"{LAB} - small shear box - consolidated drained (invented example data)",
             f"Specimen {stage.id} - borehole BH03 {stage.depth} m - stratum B quartz sand - {stage.test_set}",
             f"Test date {date} - operator R. Tamsin (invented)",
             "Elapsed time (min),Horizontal displacement (mm),Vertical gauge (mm),Shear load (kN)"]
    lines += [f"{a:.4f},{b:.4f},{c:.4f},{d / 1000.0:.5f}"
              for a, b, c, d in zip(t_min, x_meas, gauge, force_n, strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return x.size


#: time to 50 % primary consolidation of each invented stage (s); BH03-D3 is slow on purpose, so
#: that the example shows the "too fast for drained conditions" flag
T50_S = {"BH03-D1": 10.0, "BH03-D2": 14.0, "BH03-D3": 40.0, "BH03-L1": 20.0, "BH03-L2": 25.0, "BH03-L3": 30.0}
CONSOLIDATION_END_S = 7200.0


def terzaghi_u(tf: np.ndarray) -> np.ndarray:
    """Terzaghi's exact series for the average degree of consolidation U(T) (200 terms)."""
    m = np.pi * (2 * np.arange(200) + 1) / 2.0
    return np.where(tf > 0, 1.0 - np.sum(2.0 / m[:, None] ** 2 * np.exp(-np.outer(m**2, tf)), axis=0), 0.0)


def write_consolidation(stage: Stage, rng: np.random.Generator, path: Path, date: str) -> dict[str, float]:
    """Write the consolidation stage's time-settlement readings; return the model's c_v and t_50.

    Settlement = immediate (20 % of the total, at loading) + primary (75 %, Terzaghi's exact series
    with H_dr = H/2) + secondary (5 %, linear in log time after t_90), plus 0.0002 mm gauge noise;
    the total is the stage's consolidation settlement. Times: 0, then 20 per log decade from 1 s.
    """
    t50 = T50_S[stage.id]
    cv = 0.197 * (HEIGHT_MM / 2) ** 2 / t50  # mm2/s, from T_50 = 0.197
    t90 = 0.848 * (HEIGHT_MM / 2) ** 2 / cv
    t = np.concatenate([[0.0], np.round(np.logspace(0.0, math.log10(CONSOLIDATION_END_S), 78), 2)])
    total = stage.settlement_mm
    u = terzaghi_u(cv * t / (HEIGHT_MM / 2) ** 2)
    sec = np.log10(1.0 + t / t90) / math.log10(1.0 + CONSOLIDATION_END_S / t90)
    d = np.where(t > 0, 0.20 * total, 0.0) + 0.75 * total * u / u[-1] + 0.05 * total * sec
    gauge = d + 0.0002 * rng.standard_normal(t.size)
    gauge[0] = 0.0  # zeroed before the load is applied
    lines = [f"{LAB} - consolidation stage before shear (invented example data)",
             f"Specimen {stage.id} - normal stress {stage.sigma_kpa:.0f} kPa - test date {date}",
             "Elapsed time (s),Vertical gauge (mm)"]
    lines += [f"{a:.2f},{b:.4f}" for a, b in zip(t, gauge, strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return {"consolidation_cv_mm2_s": cv, "consolidation_t50_s": t50, "consolidation_t90_s": t90}


def project_toml(all_stages: list[Stage]) -> str:
    """Text of project.toml following schema shearbook.project/1."""
    head = f'''schema = "shearbook.project/1"

[project]
name = "Port Wendle example - stratum B sand"
site = "Alder Quay extension, Port Wendle (invented)"
client = "Wendle Harbour Board (invented)"
laboratory = "{LAB}"
reference = "FMT-24-0317"
description = "Invented example: six direct shear stages (dense and loose) of one quartz sand, \
generated by make_example.py"
invented_data = true
test_method = "Direct shear box, 60 mm square, consolidated drained (invented example)"

[design]
normal_stress_range_kpa = [50.0, 250.0]

[stage_defaults.specimen]
shape = "square"
side_mm = {SIDE_MM}
height_mm = {HEIGHT_MM}
gs = {GS}

[stage_defaults.csv]
delimiter = ","
decimal = "."
header_row = 3

[stage_defaults.columns]
time = {{ column = "Elapsed time (min)", unit = "min" }}
horizontal_displacement = {{ column = "Horizontal displacement (mm)", unit = "mm" }}
vertical_displacement = {{ column = "Vertical gauge (mm)", unit = "mm", dilation = "negative" }}
shear_force = {{ column = "Shear load (kN)", unit = "kN" }}

[stage_defaults.consolidation_csv]
header_row = 2

[stage_defaults.consolidation_columns]
time = {{ column = "Elapsed time (s)", unit = "s" }}
vertical_displacement = {{ column = "Vertical gauge (mm)", unit = "mm", dilation = "negative" }}

[stage_defaults.sample]
location_id = "BH03"
sample_type = "B"
condition = "remoulded"
'''
    parts = [head]
    for s in all_stages:
        load = (f"stress_kpa = {s.sigma_kpa:.1f}" if s.use_stress
                else f"force_n = {s.sigma_kpa * AREA0_MM2 / 1000.0:.1f}")
        kind = "Dense" if s.dense else "Loose"
        top = s.depth.split("-")[0]  # invented bulk samples 12, 13, 14 at 4.20, 4.45, 4.70 m
        sample_ref = {"4.20": "12", "4.45": "13", "4.70": "14"}[top]
        parts.append(f'''
[[stage]]
id = "{s.id}"
file = "readings/{s.id}.csv"
consolidation_file = "readings/{s.id}-consolidation.csv"
test_set = "{s.test_set}"
stratum = "B"
test_type = "single-stage"
description = "{kind} sand, sigma'n {s.sigma_kpa:.0f} kPa, BH03 {s.depth} m"
[stage.specimen]
dry_mass_g = {s.dry_mass_g:.1f}
consolidation_settlement_mm = {s.settlement_mm:.3f}
relative_density = {s.relative_density:.2f}
[stage.normal_load]
{load}
[stage.sample]
sample_top_m = {top}
sample_ref = "{sample_ref}"
specimen_ref = "{s.id.split("-")[1]}"
specimen_depth_m = {top}
description = "{kind} recompacted light brown fine to medium quartz SAND (invented)"
''')
    return "".join(parts)


def main() -> None:
    """Write project.toml, readings/*.csv and model_truth.json next to this script."""
    rng = np.random.default_rng(SEED + 1)
    all_stages = stages()
    (HERE / "readings").mkdir(exist_ok=True)
    (HERE / "project.toml").write_text(project_toml(all_stages), encoding="utf-8")
    truths = []
    for k, s in enumerate(all_stages):
        rows = write_readings(s, rng, HERE / "readings" / f"{s.id}.csv", f"2024-03-{11 + k:02d}")
        truths.append(model_truth(s) | {"e0": s.e0, "dry_mass_g": s.dry_mass_g, "rows": rows})
        print(f"{s.id}: sigma {s.sigma_kpa:.0f} kPa, e0 {s.e0:.4f}, M_s {s.dry_mass_g:.1f} g, {rows} rows")
    rng_c = np.random.default_rng(SEED + 2)  # its own stream: the shear readings above stay byte-identical
    for k, (s, truth) in enumerate(zip(all_stages, truths, strict=True)):
        truth.update(write_consolidation(s, rng_c, HERE / "readings" / f"{s.id}-consolidation.csv",
                                         f"2024-03-{11 + k:02d}"))
    doc = {"note": "Invented demo data: exact noise-free answers of the make_example.py model, for "
                   "comparing with the tool's picks. Not test results.",
           "phi_cs_deg": PHI_CS_DEG, "seed": SEED, "stages": truths}
    (HERE / "model_truth.json").write_text(json.dumps(doc, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
