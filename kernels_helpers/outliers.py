"""Outlier stages: a strength far from the envelope of the other stages of its set.

For each stage on an envelope, the envelope is fitted without it (the reported form: c' free or
through the origin) and its strength is compared with the prediction interval of that fit at its
normal stress. Outside the interval is the same test as an externally studentised residual
t_i = e_i / (s_(i) sqrt(1 - h_ii)) beyond Student's t at (1 + level)/2 with n - p - 1 degrees of
freedom (Cook & Weisberg 1982; statsmodels' ``OLSInfluence.resid_studentized_external`` is the
reference in the tests). A flagged stage is never excluded automatically: the engineer decides.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .decisions import Cohesion
from .envelope import fit_line, fit_through_origin, t_quantile
from .results import EnvelopeResult

__all__ = ["Outlier", "envelope_outliers", "studentised_external"]


@dataclass(frozen=True)
class Outlier:
    """One stage lying outside the prediction interval of its envelope fitted without it (kPa, degrees)."""

    stage_id: str
    group: str
    kind: str
    tau_kpa: float
    predicted_kpa: float
    lower_kpa: float
    upper_kpa: float
    t_external: float
    limit: float
    phi_with_deg: float
    c_with_kpa: float
    phi_without_deg: float
    c_without_kpa: float

    @property
    def flag(self) -> str:
        return (f"outlier on the {self.kind.replace('_', '-')} envelope of {self.group}: tau {self.tau_kpa:.1f} kPa "
                f"lies outside the prediction interval of the envelope fitted without this stage, "
                f"{self.lower_kpa:.1f} to {self.upper_kpa:.1f} kPa (predicted {self.predicted_kpa:.1f} kPa; "
                f"externally studentised residual {self.t_external:+.2f}, limit {self.limit:.2f}); with it phi' "
                f"{self.phi_with_deg:.1f} deg, c' {self.c_with_kpa:.1f} kPa, without it phi' "
                f"{self.phi_without_deg:.1f} deg, c' {self.c_without_kpa:.1f} kPa. Not excluded: check the stage "
                "and decide")


def _design(x: np.ndarray, origin: bool) -> np.ndarray:
    return x[:, None] if origin else np.column_stack([np.ones_like(x), x])


def studentised_external(sigma: np.ndarray, tau: np.ndarray, origin: bool) -> np.ndarray:
    """Externally studentised residuals of the least-squares line (through the origin when ``origin``)."""
    x, y = np.asarray(sigma, dtype=float), np.asarray(tau, dtype=float)
    a = _design(x, origin)
    n, p = a.shape
    inv = np.linalg.inv(a.T @ a)
    h = np.einsum("ij,jk,ik->i", a, inv, a)
    e = y - a @ (inv @ a.T @ y)
    sse = float(e @ e)
    s2_deleted = (sse - e**2 / (1 - h)) / (n - p - 1)
    return np.asarray(e / np.sqrt(np.clip(s2_deleted, 1e-300, None) * (1 - h)))


def envelope_outliers(env: EnvelopeResult, level: float) -> list[Outlier]:
    """The stages of ``env`` outside the ``level`` prediction interval of the envelope fitted without them."""
    fit = env.chosen
    origin = env.reported == Cohesion.ORIGIN
    x, y = np.asarray(env.sigma_kpa, dtype=float), np.asarray(env.tau_kpa, dtype=float)
    p = 1 if origin else 2
    n = len(x)
    if fit is None or n - p - 1 < 1 or (not origin and len(set(env.sigma_kpa)) < 3):
        return []  # without the stage the rest must still give a line with a scatter
    t_ext = studentised_external(x, y, origin)
    limit = t_quantile((1 + level) / 2, n - p - 1)
    out = []
    for i in np.flatnonzero(np.abs(t_ext) > limit):
        keep = np.arange(n) != i
        without = (fit_through_origin if origin else fit_line)(tuple(x[keep]), tuple(y[keep]), level)
        a = _design(x[keep], origin)
        row = _design(x[i : i + 1], origin)[0]
        pred = float(row @ np.linalg.lstsq(a, y[keep], rcond=None)[0])
        resid = y[keep] - a @ np.linalg.lstsq(a, y[keep], rcond=None)[0]
        s = math.sqrt(float(resid @ resid) / (n - 1 - p))
        half = limit * s * math.sqrt(1 + float(row @ np.linalg.inv(a.T @ a) @ row))
        out.append(Outlier(env.stage_ids[i], env.group, env.kind, float(y[i]), pred, pred - half, pred + half,
                           float(t_ext[i]), limit, fit.phi_deg, fit.intercept, without.phi_deg, without.intercept))
    return out
