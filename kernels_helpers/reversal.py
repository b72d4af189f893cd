"""Passes of a reversal (multiple-reversal) shear box test, and the residual strength.

A reversal test shears to the end of travel, returns, and shears again until successive passes give
the same stress (BS 1377-7 clause 4.5.5; AS 1289.6.2.2). The passes are found from the horizontal
displacement alone: a pass is a run of readings moving one way over at least ``min_travel_mm``.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

__all__ = ["PassStress", "Residual", "end_of_pass_window", "label_passes", "pass_stresses", "residual_over_window",
           "residual_strength"]


def label_passes(x_mm: np.ndarray, min_travel_mm: float = 0.5, dead_band_mm: float = 0.02) -> np.ndarray:
    """Pass number (1, 2, ...) of every reading; odd passes forward, even passes back.

    The direction changes where the displacement has come back more than ``dead_band_mm`` from
    its running extreme (so gauge noise does not split a pass) and the previous pass travelled at
    least ``min_travel_mm``. A test that never reverses is all pass 1.
    """
    labels = np.ones(len(x_mm), dtype=np.int64)
    if len(x_mm) == 0:
        return labels
    direction, extreme, start_x, current = 1, float(x_mm[0]), float(x_mm[0]), 1
    turn_index = 0
    for i in range(1, len(x_mm)):
        xi = float(x_mm[i])
        if direction * (xi - extreme) > 0:
            extreme, turn_index = xi, i
        elif direction * (extreme - xi) > dead_band_mm and abs(extreme - start_x) >= min_travel_mm:
            current += 1
            labels[turn_index + 1 : i + 1] = current
            direction, start_x, extreme = -direction, extreme, xi
            turn_index = i
            continue
        labels[i] = current
    return labels


@dataclass(frozen=True)
class PassStress:
    """The steady stress at the end of one pass (magnitudes: reverse passes are negative in the file)."""

    pass_no: int
    forward: bool
    travel_mm: float
    tau_kpa: float  # mean |tau| over the last ``end_fraction`` of the pass travel
    sigma_kpa: float

    @property
    def ratio(self) -> float:
        return self.tau_kpa / self.sigma_kpa


@dataclass(frozen=True)
class Residual:
    """The residual strength: the later of the first two successive forward passes that agree."""

    reached: bool
    tau_kpa: float | None
    sigma_kpa: float | None
    passes: tuple[int, int] | None  # the two passes that agree
    message: str


def pass_stresses(x_mm: np.ndarray, tau_kpa: np.ndarray, sigma_kpa: np.ndarray, labels: np.ndarray,
                  end_fraction: float = 0.25) -> tuple[PassStress, ...]:
    """Stress at the end of every pass: mean over the last ``end_fraction`` of its travel."""
    out = []
    for p in np.unique(labels):
        sel = labels == p
        x, t, s = x_mm[sel], np.abs(tau_kpa[sel]), sigma_kpa[sel]
        if len(x) < 5:
            continue
        forward = bool(p % 2 == 1)
        travel, (lo, hi) = _end_bounds(x, forward, end_fraction)
        near_end = (x >= lo) & (x <= hi)
        out.append(PassStress(int(p), forward, travel, float(np.mean(t[near_end])), float(np.mean(s[near_end]))))
    return tuple(out)


def _end_bounds(x: np.ndarray, forward: bool, end_fraction: float) -> tuple[float, tuple[float, float]]:
    """Travel of one pass and the displacement range (lo, hi) of the last ``end_fraction`` of it."""
    start, end = float(x[0]), (float(np.max(x)) if forward else float(np.min(x)))
    travel = abs(end - start)
    return travel, ((end - end_fraction * travel, end) if forward else (end, end + end_fraction * travel))


def end_of_pass_window(x_mm: np.ndarray, labels: np.ndarray, pass_no: int,
                       end_fraction: float = 0.25) -> tuple[float, float] | None:
    """The window (lo, hi mm) :func:`pass_stresses` averages over on pass ``pass_no``; None for a short pass."""
    x = x_mm[labels == pass_no]
    if len(x) < 5:
        return None
    return _end_bounds(x, bool(pass_no % 2 == 1), end_fraction)[1]


def residual_strength(passes: tuple[PassStress, ...], tolerance: float = 0.03) -> Residual:
    """First two successive forward passes whose end stresses agree within ``tolerance`` (fraction)."""
    fwd = [p for p in passes if p.forward]
    for a, b in itertools.pairwise(fwd):
        if abs(b.tau_kpa - a.tau_kpa) <= tolerance * b.tau_kpa:
            return Residual(True, b.tau_kpa, b.sigma_kpa, (a.pass_no, b.pass_no),
                            f"residual reached: forward passes {a.pass_no} and {b.pass_no} agree within "
                            f"{tolerance * 100:g} % ({a.tau_kpa:.1f} and {b.tau_kpa:.1f} kPa)")
    if len(fwd) < 2:
        return Residual(False, None, None, None, f"residual not reached: {len(fwd)} forward pass(es); two must agree")
    last = fwd[-2:]
    change = (last[1].tau_kpa - last[0].tau_kpa) / last[1].tau_kpa
    return Residual(False, last[1].tau_kpa, last[1].sigma_kpa, None,
                    f"residual not reached: the last two forward passes ({last[0].pass_no}, {last[1].pass_no}) "
                    f"differ by {change * 100:+.1f} % (tolerance {tolerance * 100:g} %); "
                    "the last value is an upper bound")


def residual_over_window(x_mm: np.ndarray, tau_kpa: np.ndarray, sigma_kpa: np.ndarray, labels: np.ndarray,
                         pass_no: int, x_from_mm: float, x_to_mm: float, note: str = "") -> Residual:
    """A residual picked by the engineer: mean |tau| over a window of one pass."""
    lo, hi = sorted((x_from_mm, x_to_mm))
    sel = (labels == pass_no) & (x_mm >= lo) & (x_mm <= hi)
    n = int(np.count_nonzero(sel))
    if n < 5:
        raise ValueError(
            f"the residual window {lo:.2f}-{hi:.2f} mm on pass {pass_no} holds {n} readings; it needs at least 5"
        )
    tau, sigma = float(np.mean(np.abs(tau_kpa[sel]))), float(np.mean(sigma_kpa[sel]))
    return Residual(True, tau, sigma, None, f"residual picked by hand: pass {pass_no}, {lo:.2f}-{hi:.2f} mm, "
                                           f"mean |tau| of {n} readings" + (f" ({note})" if note else ""))
