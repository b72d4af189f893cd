"""Stress-dilatancy aids against REFERENCES sec. 5 (Taylor, Bolton, Davis/Jewell)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from kernels_helpers.dilatancy import (
    bolton_index,
    interlocking_free_ratio,
    phi_direct_shear_deg,
    phi_plane_strain_deg,
    stage_dilatancy,
)


def test_taylor_interlocking_free_ratio_removes_the_dilation_term() -> None:
    # Taylor (1948): tau/sigma' = mu + dy/dx (REFERENCES sec. 5 [M formula]); build a curve from it
    x = np.linspace(0, 10, 201)
    dydx = 0.2 * np.exp(-((x - 2.0) ** 2))
    curve = pd.DataFrame({"x_mm": x, "dydx": dydx, "ratio": 0.62 + dydx})
    assert interlocking_free_ratio(curve).to_numpy() == pytest.approx(np.full_like(x, 0.62))


@pytest.mark.parametrize(
    ("i_d", "p", "i_r", "ps", "tx"),
    [  # REFERENCES sec. 5 [C], Bolton (1986) Q = 10, R = 1 [P, secondary]
        (0.8, 100.0, 3.3159, 16.579, 9.948),
        (0.6, 50.0, 2.6528, 13.264, None),
        (1.0, 1000.0, 2.0922, 10.461, None),
    ],
)
def test_bolton_check_values(i_d: float, p: float, i_r: float, ps: float, tx: float | None) -> None:
    b = bolton_index(i_d, p)
    assert b.i_r == pytest.approx(i_r, abs=5e-5)
    assert b.dphi_plane_strain_deg == pytest.approx(ps, abs=5e-4)  # 5 I_R
    if tx is not None:
        assert b.dphi_triaxial_deg == pytest.approx(tx, abs=5e-4)  # 3 I_R
    assert b.note == ""


def test_bolton_index_is_clipped_to_its_range_and_says_so() -> None:
    # Bolton (1986): valid 0 < I_R < 4 (REFERENCES sec. 5); I_D 0.1 at 100 kPa gives 0.1 (10 - 4.605) - 1 < 0
    b = bolton_index(0.1, 100.0)
    assert b.i_r_raw == pytest.approx(0.1 * (10 - math.log(100.0)) - 1)
    assert b.i_r == 0.0 and b.dphi_plane_strain_deg == 0.0
    assert "outside Bolton's range 0-4" in b.note
    with pytest.raises(ValueError, match="fraction between 0 and 1, not 65"):
        bolton_index(65, 100.0)


DAVIS = [(30, 0, 26.57), (33, 0, 28.57), (40, 0, 32.73), (35, 5, 31.03), (40, 10, 35.47), (33, 33, 33.00)]


@pytest.mark.parametrize(("phi_ps", "psi", "phi_ds"), DAVIS)  # REFERENCES sec. 5 [C]; relation [M formula]
def test_davis_jewell_check_values_and_inverse(phi_ps: float, psi: float, phi_ds: float) -> None:
    assert phi_direct_shear_deg(phi_ps, psi) == pytest.approx(phi_ds, abs=5e-3)
    assert phi_plane_strain_deg(phi_direct_shear_deg(phi_ps, psi), psi) == pytest.approx(phi_ps, abs=1e-9)


def test_critical_state_relation_is_tan_ds_equals_sin_ps() -> None:
    # at psi = 0: tan phi_ds = sin phi_ps (REFERENCES sec. 5 [M formula]); tan 30 = 0.57735 -> asin = 35.26 deg
    assert phi_plane_strain_deg(30.0, 0.0) == pytest.approx(math.degrees(math.asin(math.tan(math.radians(30.0)))))
    assert phi_plane_strain_deg(30.0, 0.0) == pytest.approx(35.26, abs=5e-3)


def test_stage_dilatancy_angles_and_bolton_only_with_relative_density() -> None:
    peak = (0.80, 0.15, 100.0)  # tau/sigma, dy/dx, sigma'
    cs = (0.62, 0.0, 110.0)
    s = stage_dilatancy("S1", peak, cs, None)
    assert s.phi_peak_ds_deg == pytest.approx(math.degrees(math.atan(0.80)))
    assert s.taylor_peak_deg == pytest.approx(math.degrees(math.atan(0.65)))  # Taylor: ratio - dy/dx
    assert s.psi_peak_deg == pytest.approx(math.degrees(math.atan(0.15)))
    assert s.measured_dphi_ds_deg == pytest.approx(s.phi_peak_ds_deg - s.phi_cs_ds_deg)
    assert s.bolton is None and "no relative density given" in s.note
    with_id = stage_dilatancy("S1", peak, cs, 0.8)
    assert with_id.bolton is not None and with_id.bolton.i_r == pytest.approx(3.3159, abs=5e-5)  # sec. 5 [C]
    assert "in place of p'" in with_id.note
    none = stage_dilatancy("S2", None, cs, 0.8)
    assert none.phi_peak_ds_deg is None and none.measured_dphi_ds_deg is None and "no distinct peak" in none.note
