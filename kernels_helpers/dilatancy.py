"""Stress-dilatancy aids: Taylor's interlocking-free ratio, Bolton's index, Davis/Jewell relation.

Interpretation aids, not corrections applied to the results:

* **Taylor (1948)**, energy balance of the shear box: tau/sigma' = mu + dy/dx (dilation
  positive), so ``tau/sigma' - dy/dx`` is the ratio with the work of dilation against the normal
  stress taken out. It should stay near the critical-state ratio along a curve.
* **Bolton (1986)**, Geotechnique 36(1): I_R = I_D (Q - ln p') - R with Q = 10, R = 1, p' in kPa;
  the expected phi'_max - phi'_crit is 5 I_R degrees in plane strain and 3 I_R in triaxial
  compression, for 0 <= I_R <= 4. In the shear box p' is not measured: the normal stress on the
  shear plane stands in for it (stated wherever it is used), and I_R is clipped to 0..4.
* **Davis (1968); Jewell & Wroth (1987); Jewell (1989)**: tan phi_ds = sin phi_ps cos psi /
  (1 - sin phi_ps sin psi) relates the direct-shear angle to the plane-strain angle, assuming the
  horizontal plane in the box is a plane of zero extension, coaxial stress and strain increments
  and tan psi = dy/dx. At critical state (psi = 0) tan phi_ds = sin phi_ps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
import pandas as pd

__all__ = [
    "BOLTON_Q",
    "BOLTON_R",
    "DAVIS_JEWELL_ASSUMPTIONS",
    "BoltonIndex",
    "StageDilatancy",
    "bolton_index",
    "interlocking_free_ratio",
    "max_rate_of_dilation",
    "phi_direct_shear_deg",
    "phi_plane_strain_deg",
    "stage_dilatancy",
]

BOLTON_Q: Final = 10.0
BOLTON_R: Final = 1.0
DAVIS_JEWELL_ASSUMPTIONS: Final = (
    "interpretation aid (Davis 1968; Jewell & Wroth 1987; Jewell 1989): assumes the horizontal plane in the box "
    "is a plane of zero linear extension, coaxial principal stress and strain increments, and tan psi = dy/dx; "
    "the stresses in the box are not uniform (ASTM D3080 sec. 1.2), so the plane-strain angles are estimates"
)


def interlocking_free_ratio(curve: pd.DataFrame) -> pd.Series:
    """Taylor's tau/sigma' - dy/dx along a reduced curve (columns ``ratio`` and ``dydx``)."""
    return (curve["ratio"] - curve["dydx"]).rename("interlocking_free_ratio")


@dataclass(frozen=True)
class BoltonIndex:
    """Bolton's relative dilatancy index and the angle difference it predicts (deg)."""

    relative_density: float  # I_D as a fraction
    p_kpa: float
    i_r_raw: float
    i_r: float  # clipped to 0..4
    dphi_plane_strain_deg: float  # 5 I_R
    dphi_triaxial_deg: float  # 3 I_R
    note: str


def bolton_index(relative_density: float, p_kpa: float, q: float = BOLTON_Q, r: float = BOLTON_R) -> BoltonIndex:
    """I_R = I_D (Q - ln p') - R; phi'_max - phi'_crit = 5 I_R (plane strain), 3 I_R (triaxial), deg."""
    if not 0.0 <= relative_density <= 1.0:
        raise ValueError(f"relative density I_D must be a fraction between 0 and 1, not {relative_density!r}")
    if not p_kpa > 0:
        raise ValueError(f"p' must be positive, not {p_kpa!r} kPa")
    raw = relative_density * (q - math.log(p_kpa)) - r
    i_r = min(max(raw, 0.0), 4.0)
    note = "" if raw == i_r else f"I_R = {raw:.2f} lies outside Bolton's range 0-4: {i_r:g} used"
    return BoltonIndex(relative_density, p_kpa, raw, i_r, 5.0 * i_r, 3.0 * i_r, note)


def phi_direct_shear_deg(phi_ps_deg: float, psi_deg: float) -> float:
    """Direct-shear angle from the plane-strain one: tan phi_ds = sin phi cos psi / (1 - sin phi sin psi)."""
    s, p = math.sin(math.radians(phi_ps_deg)), math.radians(psi_deg)
    return math.degrees(math.atan(s * math.cos(p) / (1.0 - s * math.sin(p))))


def phi_plane_strain_deg(phi_ds_deg: float, psi_deg: float) -> float:
    """Inverse of :func:`phi_direct_shear_deg`: sin phi_ps = T / (cos psi + T sin psi), T = tan phi_ds."""
    t, p = math.tan(math.radians(phi_ds_deg)), math.radians(psi_deg)
    s = t / (math.cos(p) + t * math.sin(p))
    if not 0 < s < 1:
        raise ValueError(f"no plane-strain angle for phi_ds {phi_ds_deg!r} deg with psi {psi_deg!r} deg")
    return math.degrees(math.asin(s))


@dataclass(frozen=True)
class StageDilatancy:
    """Stress-dilatancy view of one stage: measured angles and the aids' estimates (deg)."""

    stage_id: str
    phi_peak_ds_deg: float | None  # secant, direct shear
    psi_peak_deg: float | None  # atan(dy/dx) at the peak pick
    taylor_peak_deg: float | None  # atan(tau/sigma - dy/dx) at the peak pick
    phi_cs_ds_deg: float
    taylor_cs_deg: float
    phi_peak_ps_deg: float | None  # Davis/Jewell estimate from the peak angle and psi
    phi_cs_ps_deg: float | None  # Davis/Jewell with psi = 0: sin phi_ps = tan phi_ds
    measured_dphi_ds_deg: float | None  # peak minus critical state, direct-shear angles
    measured_dphi_ps_deg: float | None  # the same on the plane-strain estimates
    bolton: BoltonIndex | None
    note: str


def _deg(v: float) -> float:
    return math.degrees(math.atan(v))


def _ps(phi_ds: float, psi: float) -> float | None:
    try:
        return phi_plane_strain_deg(phi_ds, psi)
    except ValueError:
        return None


def stage_dilatancy(stage_id: str, peak: tuple[float, float, float] | None, cs: tuple[float, float, float],
                    relative_density: float | None) -> StageDilatancy:
    """Angles of one stage. ``peak`` and ``cs`` are (tau/sigma', dy/dx, sigma' in kPa); peak None when not distinct."""
    cs_ratio, cs_rate, _ = cs
    phi_cs = _deg(cs_ratio)
    phi_cs_ps = _ps(phi_cs, 0.0)
    notes = []
    if peak is None:
        phi_pk = psi = taylor_pk = phi_pk_ps = d_ds = d_ps = None
        notes.append("no distinct peak")
        sigma_ref = cs[2]
    else:
        ratio, rate, sigma_ref = peak
        phi_pk, psi, taylor_pk = _deg(ratio), _deg(rate), _deg(ratio - rate)
        phi_pk_ps = _ps(phi_pk, psi)
        d_ds = phi_pk - phi_cs
        d_ps = None if phi_pk_ps is None or phi_cs_ps is None else phi_pk_ps - phi_cs_ps
    bolton = None
    if relative_density is not None:
        bolton = bolton_index(relative_density, sigma_ref)
        notes.append(f"Bolton: sigma'n {sigma_ref:.0f} kPa used in place of p' (not measured in the box)")
        if bolton.note:
            notes.append(bolton.note)
    else:
        notes.append("no relative density given: no Bolton index")
    return StageDilatancy(
        stage_id=stage_id, phi_peak_ds_deg=phi_pk, psi_peak_deg=psi, taylor_peak_deg=taylor_pk, phi_cs_ds_deg=phi_cs,
        taylor_cs_deg=_deg(cs_ratio - cs_rate), phi_peak_ps_deg=phi_pk_ps, phi_cs_ps_deg=phi_cs_ps,
        measured_dphi_ds_deg=d_ds, measured_dphi_ps_deg=d_ps, bolton=bolton, note="; ".join(notes),
    )


def max_rate_of_dilation(curve: pd.DataFrame) -> float:
    """Largest dy/dx during shear (the rate the peak should coincide with, common practice)."""
    rates = curve.loc[curve["in_shear"], "dydx"].to_numpy()
    return float(np.nanmax(rates)) if len(rates) else math.nan
