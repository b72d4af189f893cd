"""Generate the invented hand-logged set: three direct shear stages read by hand with a proving ring and dials.

Everything here is INVENTED (Fernholt Materials Testing Laboratory's manual shear box 2, proving ring
PR-07, its certificate, borehole BH05, the readings). It shows Shearbook's manual form: readings in
gauge divisions converted by calibrations, and apparatus corrections.

The apparatus (invented)
------------------------
* Horizontal dial at the drive, 0.01 mm/div: it reads the drive's travel, which includes the proving
  ring's own compression (ring dial 0.002 mm/div), so the project says horizontal_measured_at = "drive".
* Proving ring PR-07: its certificate gives force against divisions (slightly non-linear), here
  ``F = 1.50 d + 0.00015 d^2`` N evaluated at the certificate's divisions.
* Vertical dial, 0.002 mm/div, reads DOWN when the specimen dilates.
* Box friction from an empty-box run: 2.0 N rising to 3.5 N over 8 mm of travel.
* Lid, loading pad and hanger: 650 g. Vertical compliance (steel dummy): 0.00004 mm/N.

The specimen model is the dense stage of ``../make_example.py`` in a simpler form:
``tau/sigma = tan(phi_cs) tanh(u/u_m) + dy/dx`` with ``dy/dx = tan(psi) g(u; u_p, 4)``. Readings are
taken by hand every 0.25 mm of drive travel to 8 mm (33 rows) and rounded to whole divisions.
Stage BH05-H1 also has the time of each reading; H2 and H3 have none (the rate check is then "not
possible"). Run from the repository root: ``python example_project/hand_logged/make_hand_logged.py``.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SIDE, HEIGHT, GS = 60.0, 20.0, 2.65
G_N = 9.80665
RING_DIVS = [0, 100, 200, 300, 400, 500, 600, 700, 800]  # the certificate's points (invented)
RING_N = [round(1.50 * d + 0.00015 * d * d, 1) for d in RING_DIVS]
RING_MM_PER_DIV, H_MM_PER_DIV, V_MM_PER_DIV = 0.002, 0.01, 0.002
FRICTION_MM, FRICTION_N = [0.0, 2.0, 4.0, 6.0, 8.0, 10.0], [2.0, 2.4, 2.8, 3.1, 3.5, 3.8]
LID_G = 650.0
COMPLIANCE_MM_PER_N = 0.00004
PHI_CS = math.radians(33.0)
STAGES = (  # id, hanger force on the specimen (N, without the lid), psi (deg), u_m, u_p (mm), dry mass (g)
    ("BH05-H1", 170.0, 10.0, 0.35, 1.5, 119.5),
    ("BH05-H2", 350.0, 8.5, 0.40, 1.8, 120.1),
    ("BH05-H3", 710.0, 7.0, 0.45, 2.1, 119.0),
)


def pulse(u: np.ndarray, a: float, n: float) -> np.ndarray:
    r = np.clip(u, 0, None) / a
    return r**n * np.exp(n * (1 - r))


def ring_force(div: np.ndarray) -> np.ndarray:
    return np.interp(div, RING_DIVS, RING_N)


def ring_divisions(force: np.ndarray) -> np.ndarray:
    return np.interp(force, RING_N, RING_DIVS)


def stage_sheet(sid: str, force_n: float, psi: float, um: float, up: float, timed: bool) -> list[list[str]]:
    normal = force_n + LID_G / 1000 * G_N
    drive = np.arange(0.0, 8.0 + 1e-9, 0.25)  # the operator reads at whole quarter millimetres of drive travel

    def model(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        u = np.clip(x - 0.1, 0, None)  # 0.1 mm of seating slack
        rate = math.tan(math.radians(psi)) * pulse(u, up, 4) - 0.04 * pulse(u, 0.3, 2)
        ratio = math.tan(PHI_CS) * np.tanh(u / um) + rate
        return ratio * normal + np.interp(x, FRICTION_MM, FRICTION_N) * (x > 0), rate

    # the ring's compression makes the box lag the drive: for each drive position the box travel x is the
    # first x (from the one before) where x + ring deflection(F(x)) reaches the drive; the box never goes back
    fine = np.linspace(0.0, 8.0, 16001)
    f_fine, _ = model(fine)
    reach = fine + ring_divisions(f_fine) * RING_MM_PER_DIV
    x, k = np.zeros_like(drive), 0
    for i, d in enumerate(drive):
        while k < len(fine) - 1 and reach[k] < d:
            k += 1
        x[i] = fine[k]
    force, _ = model(x)
    rate = model(fine)[1]
    fine_y = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(fine))])
    y = np.interp(x, fine, fine_y)
    ring = np.round(ring_divisions(force))
    hdial = np.round(drive / H_MM_PER_DIV)
    vdial = np.round(-y / V_MM_PER_DIV)  # reads down on dilation
    head = ["Reading", "Horizontal dial (div)", "Ring dial (div)", "Vertical dial (div)"] + (
        ["Time (min)"] if timed else [])
    rows = [[str(i + 1), f"{h:.0f}", f"{r:.0f}", f"{v:.0f}"] + ([f"{d / 0.25 * 2.5:.1f}"] if timed else [])
            for i, (h, r, v, d) in enumerate(zip(hdial, ring, vdial, drive, strict=True))]
    preamble = [[f"Hand-logged direct shear sheet (INVENTED), stage {sid}, manual box 2, ring PR-07"],
                [f"Hanger load {force_n:.0f} N on the lid; rate 0.1 mm/min; operator: J. Example (invented)"]]
    return [*preamble, head, *rows]


def write(path: Path, rows: list[list[str]]) -> None:
    with path.open("w", newline="", encoding="utf-8") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


def templates() -> None:
    """The blank sheet for hand logging, as CSV and as xlsx."""
    import openpyxl

    rows = [["Hand-logged direct shear sheet: stage ____, box ____, ring ____ (certificate ____)"],
            ["Hanger load ____ N; rate ____ mm/min; operator ____; date ____"],
            ["Reading", "Horizontal dial (div)", "Ring dial (div)", "Vertical dial (div)", "Time (min)"],
            *[[str(i + 1), "", "", "", ""] for i in range(60)]]
    out = HERE / "templates"
    out.mkdir(exist_ok=True)
    write(out / "hand_log_template.csv", rows)
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "readings"
    for r in rows:
        ws.append([int(v) if v.isdigit() else (v or None) for v in r])
    wb.properties.creator = "Shearbook (invented template)"
    wb.properties.created = wb.properties.modified = __import__("datetime").datetime(2026, 1, 1)
    wb.save(out / "hand_log_template.xlsx")


def main() -> None:
    (HERE / "readings").mkdir(exist_ok=True)
    for i, (sid, force, psi, um, up, _mass) in enumerate(STAGES):
        write(HERE / "readings" / f"{sid}.csv", stage_sheet(sid, force, psi, um, up, timed=i == 0))
    templates()
    print("ring certificate:", list(zip(RING_DIVS, RING_N, strict=True)))


if __name__ == "__main__":
    main()
