"""Contact areas, phase relations, the hanger normal stress and the area convention."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate

from kernels_helpers.envelope import fit_through_origin
from kernels_helpers.project import Specimen, load_project
from kernels_helpers.readings import read_stage
from kernels_helpers.reduce import (
    ReductionSettings,
    corrected_area_mm2,
    height_of_solids_mm,
    reduce_stage,
    void_ratio,
)

DATA = Path(__file__).parent / "data"


# --- areas ------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("side_mm", "d_mm", "expected_mm2"),
    [
        (60.0, 6.0, 3240.0),  # REFERENCES sec. 3: square box A_c = L (L - d), check value 3240 mm2
        (60.0, 0.0, 3600.0),  # computed from L (L - d): no displacement gives L^2
        (100.0, 10.0, 9000.0),  # computed from L (L - d)
    ],
)
def test_square_area(side_mm: float, d_mm: float, expected_mm2: float) -> None:
    assert float(corrected_area_mm2("square", side_mm, d_mm)) == pytest.approx(expected_mm2, rel=1e-12)


# REFERENCES sec. 3: A_c/A_0 table (university lab handout on shear area correction, 4 dp)
AREA_RATIO_TABLE = [
    (0.00, 1.0000),
    (0.02, 0.9745),
    (0.04, 0.9491),
    (0.06, 0.9237),
    (0.08, 0.8982),
    (0.10, 0.8729),
    (0.12, 0.8476),
    (0.14, 0.8223),
    (0.16, 0.7972),
    (0.18, 0.7721),
    (0.20, 0.7471),
]


@pytest.mark.parametrize(("d_over_d", "ratio"), AREA_RATIO_TABLE)
@pytest.mark.parametrize("diameter_mm", [50.0, 63.5, 100.0])
def test_circular_area_ratio_table(diameter_mm: float, d_over_d: float, ratio: float) -> None:
    a0 = math.pi * diameter_mm**2 / 4.0
    got = float(corrected_area_mm2("circular", diameter_mm, d_over_d * diameter_mm)) / a0
    assert got == pytest.approx(ratio, abs=5e-5)  # table printed to 4 dp


def test_circular_area_check_value() -> None:
    # REFERENCES sec. 3 [C]: D = 63.5 mm, d = 5 mm -> A_0 = 3166.92 mm2, A_c = 2849.75 mm2
    spec = Specimen(shape="circular", width_mm=63.5, height_mm=20.0, dry_mass_g=100.0, gs=2.65)
    assert spec.area0_mm2 == pytest.approx(3166.92, abs=0.005)
    assert float(corrected_area_mm2("circular", 63.5, 5.0)) == pytest.approx(2849.75, abs=0.005)


def test_unit_circle_lens() -> None:
    # REFERENCES sec. 3 [P]: two unit circles with centres one radius apart overlap in 1.22837
    # (Weisstein, MathWorld "Circle-Circle Intersection"): D = 2, d = 1
    assert float(corrected_area_mm2("circular", 2.0, 1.0)) == pytest.approx(1.22837, abs=5e-6)


def _lens_by_quadrature(diameter: float, d: float) -> float:
    """Overlap of two circles of radius R, centres d apart, by numerical integration.

    Independent reference: for x >= d/2 the binding circle is the one centred at 0, so the lens is
    four times the integral of sqrt(R^2 - x^2) from d/2 to R (symmetry about both axes).
    """
    r = diameter / 2.0
    value, _ = integrate.quad(lambda x: math.sqrt(max(r * r - x * x, 0.0)), d / 2.0, r, epsabs=1e-12)
    return 4.0 * value


@pytest.mark.parametrize("diameter_mm", [50.0, 63.5, 101.6])
@pytest.mark.parametrize("d_over_d", [0.0, 0.013, 0.05, 0.1, 0.2, 0.35, 0.6, 0.9])
def test_circular_area_against_quadrature(diameter_mm: float, d_over_d: float) -> None:
    d = d_over_d * diameter_mm
    expected = _lens_by_quadrature(diameter_mm, d)  # scipy.integrate.quad, independent of the formula
    assert float(corrected_area_mm2("circular", diameter_mm, d)) == pytest.approx(expected, rel=1e-9)


def test_area_is_vectorised_and_uses_the_magnitude_of_d() -> None:
    d = np.array([-6.0, 0.0, 6.0])
    got = corrected_area_mm2("square", 60.0, d)
    assert got.tolist() == pytest.approx([3240.0, 3600.0, 3240.0])  # REFERENCES sec. 3, L (L - |d|)


@pytest.mark.parametrize(
    ("shape", "width", "d"),
    [("square", 60.0, 60.0), ("square", 60.0, 61.0), ("circular", 63.5, 63.5), ("circular", 63.5, [1.0, 70.0])],
)
def test_area_at_or_beyond_the_width_raises(shape: str, width: float, d: float | list[float]) -> None:
    with pytest.raises(ValueError, match=re.escape(f"displacement reaches the box width ({width} mm)")):
        corrected_area_mm2(shape, width, np.asarray(d))


# --- phase relations --------------------------------------------------------------------------


def _circular_specimen(area_mm2: float, height_mm: float, dry_mass_g: float, gs: float) -> Specimen:
    return Specimen(
        shape="circular",
        width_mm=math.sqrt(4.0 * area_mm2 / math.pi),
        height_mm=height_mm,
        dry_mass_g=dry_mass_g,
        gs=gs,
    )


def test_height_of_solids_and_void_ratio() -> None:
    # REFERENCES sec. 4 [C]: H 19.000 mm, Gs 2.68, Ms 95.2 g, A 3167.7 mm2 -> Hs 11.214 mm, e0 0.6943
    spec = _circular_specimen(3167.7, 19.0, 95.2, 2.68)
    assert spec.area0_mm2 == pytest.approx(3167.7, rel=1e-12)
    hs = height_of_solids_mm(spec)
    assert hs == pytest.approx(11.214, abs=5e-4)
    assert float(void_ratio(19.0, hs)) == pytest.approx(0.6943, abs=5e-5)


@pytest.mark.parametrize("height_mm", [18.5, 19.0, 19.7])
def test_void_ratio_formula(height_mm: float) -> None:
    # REFERENCES sec. 4 [P]: e = (H - Hs)/Hs and rho_d = Gs rho_w/(1 + e); computed: rho_d from
    # mass over volume (g/cm3) must agree with the void ratio (both from the textbook relations)
    spec = _circular_specimen(3167.7, height_mm, 95.2, 2.68)
    e = float(void_ratio(height_mm, height_of_solids_mm(spec)))
    rho_d = spec.dry_mass_g / (spec.area0_mm2 * height_mm / 1000.0)
    assert 2.68 * 1.0 / (1.0 + e) == pytest.approx(rho_d, rel=1e-12)


# --- hanger normal stress ---------------------------------------------------------------------

HANGER_TOML = """\
schema = "shearbook.project/1"
[[stage]]
id = "H1"
file = "readings/H1.csv"
[stage.specimen]
shape = "square"
side_mm = 60.0
height_mm = 20.0
dry_mass_g = 120.0
gs = 2.65
[stage.normal_load]
hanger_mass_kg = {mass}
lever_ratio = {lever}
[stage.columns]
time = {{ column = "t", unit = "s" }}
horizontal_displacement = {{ column = "x", unit = "mm" }}
vertical_displacement = {{ column = "y", unit = "mm", dilation = "positive" }}
shear_force = {{ column = "F", unit = "N" }}
"""


@pytest.mark.parametrize(
    ("mass", "lever", "expected_kpa", "rel"),
    [
        # REFERENCES sec. 1: BS data-sheet form sigma_n = 9810 m / A [P]; check 10 kg on 3600 mm2 ->
        # 27.25 kPa [C]. The form rounds g to 9.81; Shearbook uses g_n = 9.80665 exactly, 0.035 % lower.
        (10.0, 1.0, 27.25, 5e-4),
        # computed: 10 kg x 9.80665 m/s2 / 3600 mm2 x 1000 (g_n exact by definition, CGPM 1901)
        (10.0, 1.0, 10.0 * 9.80665 / 3600.0 * 1000.0, 1e-12),
        # computed: a 1:10 lever multiplies the hanger's mass
        (1.0, 10.0, 10.0 * 9.80665 / 3600.0 * 1000.0, 1e-12),
    ],
)
def test_hanger_normal_stress(tmp_path: Path, mass: float, lever: float, expected_kpa: float, rel: float) -> None:
    (tmp_path / "project.toml").write_text(HANGER_TOML.format(mass=mass, lever=lever), encoding="utf-8")
    stage = load_project(tmp_path).stage("H1")
    sigma = stage.normal_load.force_n / stage.specimen.area0_mm2 * 1000.0
    assert sigma == pytest.approx(expected_kpa, rel=rel)
    assert "hanger_mass_kg" in stage.normal_load.given_as


# --- the area convention does not change tau/sigma --------------------------------------------


def test_ratio_independent_of_area_convention() -> None:
    # ASTM D3080 sec. 5.6 [P]: the shrinking area makes absolute stresses uncertain but not tau/sigma;
    # computed: tau and sigma are divided by the same area
    project = load_project(DATA / "comma_semicolon")
    stage = project.stage("C1")
    readings = read_stage(stage)
    corrected = reduce_stage(stage, readings, ReductionSettings(area_convention="corrected")).curve
    nominal = reduce_stage(stage, readings, ReductionSettings(area_convention="nominal")).curve
    np.testing.assert_allclose(corrected["ratio"], nominal["ratio"], rtol=1e-13, atol=0)
    # and the stresses themselves do differ once the halves have moved (the test is not vacuous)
    assert not np.allclose(corrected["tau_kpa"].iloc[-1], nominal["tau_kpa"].iloc[-1], rtol=1e-3)
    assert nominal["area_mm2"].tolist() == pytest.approx([3600.0] * len(nominal))  # L^2, REFERENCES sec. 3


@pytest.mark.parametrize("factor", [1.05, 1.2, 0.8])
def test_through_origin_phi_unchanged_by_common_area_factor(factor: float) -> None:
    # REFERENCES sec. 3 [P, D3080 sec. 5.6 plus C]: scaling tau and sigma by one factor leaves a
    # through-origin phi' where it was; computed, arbitrary test points
    sigma = np.array([48.0, 103.0, 197.0, 260.0])
    tau = np.array([31.0, 62.5, 121.0, 158.0])
    base = fit_through_origin(sigma, tau)
    scaled = fit_through_origin(sigma * factor, tau * factor)
    assert scaled.phi_deg == pytest.approx(base.phi_deg, rel=1e-12)
    assert scaled.r2 == pytest.approx(base.r2, rel=1e-12)
